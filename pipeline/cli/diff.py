"""``vzero diff A.h5 B.h5``: what a recipe change changed.

Shows the unified diff of the two recipe texts, then the wells whose rate, flags or window changed and the
fitted parameters whose estimate or interval changed, each sorted by the size of the change (relative
change of the rate or estimate; a value that appears or disappears counts as infinitely large). ``--csv``
writes the same comparison as one table (column ``kind`` is ``well`` or ``parameter``).

A relative change is only computed when both runs give the quantity in the same unit; otherwise the row
says the unit changed. Two numbers count as the same when ``|b - a| <= atol + rtol * |a|`` (``--rtol``,
default 1e-9, and ``--atol``, default 0, as in :func:`numpy.isclose`): a rerun on another machine or library
version differs in the last digits, and that rounding noise is not a change.
"""

from __future__ import annotations

import argparse
import difflib
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # numpy and pandas are imported when used, to keep `vzero --help` quick
    import numpy as np
    import pandas as pd

HELP = "Compare two audit files: recipe differences and what they changed, per well and per parameter."
EXAMPLE = "vzero diff runs/old/run.h5 runs/new/run.h5 --csv changes.csv"

WELL_KEY = ["plate", "well"]
RTOL = 1e-9
"""Default relative tolerance: differences below it are rounding noise, not changes."""
PARAM_KEY = ["group", "model", "parameter"]


def recipe_diff(text_a: str, text_b: str, name_a: str = "A", name_b: str = "B") -> str:
    """Unified diff of two recipe texts ('' when they are the same)."""
    return "".join(difflib.unified_diff(text_a.splitlines(keepends=True), text_b.splitlines(keepends=True),
                                        fromfile=name_a, tofile=name_b))


def relative_change(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """|b - a| / |a|; inf where exactly one side is missing or a == 0 != b; 0 where both are missing."""
    import numpy as np

    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.abs(b - a) / np.abs(a)
    rel = np.where((a == 0) & (b == 0), 0.0, rel)
    rel = np.where((a == 0) & (b != 0) & np.isfinite(b), np.inf, rel)
    one_missing = np.isnan(a) ^ np.isnan(b)
    rel = np.where(one_missing, np.inf, rel)
    return np.where(np.isnan(a) & np.isnan(b), 0.0, rel)


def same(a: np.ndarray, b: np.ndarray, rtol: float = RTOL, atol: float = 0.0) -> np.ndarray:
    """Whether each pair is equal within ``atol + rtol * |a|`` (both missing counts as equal)."""
    import numpy as np

    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    return np.asarray(np.isclose(b, a, rtol=rtol, atol=atol, equal_nan=True), dtype=bool)


def _col(frame: pd.DataFrame, name: str, default: Any) -> pd.Series:
    import pandas as pd

    return frame[name] if name in frame.columns else pd.Series([default] * len(frame), index=frame.index)


def compare_wells(a: pd.DataFrame, b: pd.DataFrame, rtol: float = RTOL, atol: float = 0.0) -> pd.DataFrame:
    """Per well: rate, flags and window in A and B, and the relative rate change; changed wells only, sorted.

    Rates and windows equal within ``rtol``/``atol`` (see :func:`same`) do not count as changed."""
    import numpy as np

    cols = ["rate", "rate_unit", "flags", "window_start_s", "window_end_s", "note"]

    def prep(t: pd.DataFrame) -> pd.DataFrame:
        t = t.copy()
        if "plate" not in t.columns:
            t["plate"] = ""
        out = t[WELL_KEY].astype(str)
        for c in cols:
            default: Any = np.nan if c in ("rate", "window_start_s", "window_end_s") else ""
            series = _col(t, c, default)
            out[c] = series.astype(float) if c in ("rate", "window_start_s", "window_end_s") else \
                series.fillna("").astype(str)
        return out

    m = prep(a).merge(prep(b), on=WELL_KEY, how="outer", suffixes=("_a", "_b"), indicator=True)
    for c in ("flags", "note", "rate_unit"):
        m[f"{c}_a"] = m[f"{c}_a"].fillna("").astype(str)
        m[f"{c}_b"] = m[f"{c}_b"].fillna("").astype(str)
    same_unit = (m["rate_unit_a"] == m["rate_unit_b"]).to_numpy()
    rel = relative_change(m["rate_a"].to_numpy(), m["rate_b"].to_numpy())
    m["relative_change"] = np.where(same_unit, rel, np.nan)
    m["change"] = np.where(same_unit, m["rate_b"] - m["rate_a"], np.nan)
    win_a = m[["window_start_s_a", "window_end_s_a"]].to_numpy()
    win_b = m[["window_start_s_b", "window_end_s_b"]].to_numpy()
    window_changed = np.asarray(~same(win_a, win_b, rtol, atol).all(axis=1), dtype=bool)
    rate_same = same(m["rate_a"].to_numpy(), m["rate_b"].to_numpy(), rtol, atol)
    what = []
    for i in range(len(m)):
        parts = []
        if m["_merge"].iat[i] != "both":
            parts.append("only in " + ("A" if m["_merge"].iat[i] == "left_only" else "B"))
        if not same_unit[i]:
            parts.append(f"unit {m['rate_unit_a'].iat[i]} -> {m['rate_unit_b'].iat[i]}")
        elif not rate_same[i]:
            parts.append("rate")
        if m["flags_a"].iat[i] != m["flags_b"].iat[i]:
            parts.append("flags")
        if window_changed[i]:
            parts.append("window")
        if m["note_a"].iat[i] != m["note_b"].iat[i]:
            parts.append("note")
        what.append(", ".join(parts))
    m["changed"] = what
    m = m[m["changed"] != ""].drop(columns="_merge")
    return _sort(m)


def compare_parameters(a: pd.DataFrame, b: pd.DataFrame, rtol: float = RTOL, atol: float = 0.0) -> pd.DataFrame:
    """Per fitted parameter: estimate and interval in A and B and the relative change; changed ones, sorted.

    Values equal within ``rtol``/``atol`` (see :func:`same`) do not count as changed."""
    import numpy as np
    import pandas as pd
    from vzero.data import steps_apart

    cols = ["estimate", "stderr", "ci_low", "ci_high"]

    def prep(t: pd.DataFrame) -> pd.DataFrame:
        if t.empty or not set(PARAM_KEY) <= set(t.columns):
            return pd.DataFrame({c: pd.Series(dtype=object) for c in [*PARAM_KEY, *cols, "unit", "route"]})
        t = steps_apart(t)  # a group fitted by several fit steps: its models per step
        out = t[PARAM_KEY].astype(str)
        for c in cols:
            out[c] = _col(t, c, np.nan).astype(float)
        out["unit"] = _col(t, "unit", "").fillna("").astype(str)
        out["route"] = _col(t, "route", "rates").fillna("rates").astype(str)  # fit route: rates or curves
        return out

    pa, pb = prep(a), prep(b)
    # one fit route per run: the same parameter of the two runs side by side, whichever route each used (a
    # rates run against a curves run compares the routes); a run with both routes is matched route by route
    key = [*PARAM_KEY, "route"] if max(pa["route"].nunique(), pb["route"].nunique()) > 1 else PARAM_KEY
    m = pa.merge(pb, on=key, how="outer", suffixes=("_a", "_b"), indicator=True)
    if "route" in m.columns:
        m["route_a"] = m["route_b"] = m.pop("route")
    for c in cols:
        m[f"{c}_a"] = m[f"{c}_a"].astype(float)
        m[f"{c}_b"] = m[f"{c}_b"].astype(float)
    m["unit_a"] = m["unit_a"].fillna("").astype(str)
    m["unit_b"] = m["unit_b"].fillna("").astype(str)
    same_unit = (m["unit_a"] == m["unit_b"]).to_numpy()
    rel = relative_change(m["estimate_a"].to_numpy(), m["estimate_b"].to_numpy())
    m["relative_change"] = np.where(same_unit, rel, np.nan)
    m["change"] = np.where(same_unit, m["estimate_b"] - m["estimate_a"], np.nan)
    changed = np.zeros(len(m), dtype=bool)
    for c in cols:
        x, y = m[f"{c}_a"].to_numpy(), m[f"{c}_b"].to_numpy()
        changed |= ~same(x, y, rtol, atol)
    changed |= ~same_unit | (m["_merge"] != "both").to_numpy()
    m["changed"] = np.where(m["_merge"] == "left_only", "only in A",
                            np.where(m["_merge"] == "right_only", "only in B",
                                     np.where(~same_unit, "unit", "estimate or interval")))
    m = m[changed].drop(columns="_merge")
    return _sort(m)


def _sort(m: pd.DataFrame) -> pd.DataFrame:
    import numpy as np

    key = m["relative_change"].fillna(np.inf)
    return m.assign(_k=key).sort_values("_k", ascending=False, kind="stable").drop(columns="_k").reset_index(drop=True)


def compare(path_a: str | Path, path_b: str | Path, rtol: float = RTOL, atol: float = 0.0) -> dict[str, Any]:
    """Read two audit files and compare them: ``recipe_diff`` (text), ``wells`` and ``parameters`` (tables),
    with changes within ``rtol``/``atol`` left out, and ``counts`` of what changed."""
    import pandas as pd
    from vzero.audit import reader

    found: list[dict[str, Any]] = []
    for p in (path_a, path_b):
        with reader.open_audit(p) as f:
            head = reader.header(f)
            results = reader.read_results(f)
        found.append({"head": head, "results": results})
    a, b = found

    def frame(side: dict[str, Any], name: str) -> pd.DataFrame:
        t = side["results"].get(name)
        return t.frame if t is not None else pd.DataFrame()

    ra, rb = frame(a, "rates"), frame(b, "rates")
    wells = compare_wells(ra, rb, rtol, atol) if not ra.empty or not rb.empty else pd.DataFrame()
    parameters = compare_parameters(frame(a, "fits"), frame(b, "fits"), rtol, atol)
    return {
        "recipe_diff": recipe_diff(a["head"].get("recipe_text", ""), b["head"].get("recipe_text", ""),
                                   f"{path_a} (recipe)", f"{path_b} (recipe)"),
        "wells": wells,
        "parameters": parameters,
        "n_wells": max(len(ra), len(rb)),
        "n_parameters": max(len(frame(a, "fits")), len(frame(b, "fits"))),
        "counts": counts(wells, parameters),
        "rtol": rtol,
        "atol": atol,
    }


def counts(wells: pd.DataFrame, parameters: pd.DataFrame) -> dict[str, int]:
    """How many wells changed (any way), whose rate changed, whose flags changed, and parameters changed."""
    changed = wells["changed"].astype(str) if "changed" in wells.columns else None
    return {
        "wells": len(wells),
        "rates": 0 if changed is None else int(changed.str.contains(r"\brate\b|unit|only in").sum()),
        "flags": 0 if changed is None else int(changed.str.contains("flags").sum()),
        "parameters": len(parameters),
    }


def to_csv_frame(result: dict[str, Any]) -> pd.DataFrame:
    """One table of every change: ``kind`` (well/parameter), identity, A and B values, change."""
    import pandas as pd

    rows = []
    w = result["wells"]
    for _, r in w.iterrows():
        rows.append({"kind": "well", "plate": r["plate"], "well": r["well"], "quantity": "rate",
                     "a": r["rate_a"], "b": r["rate_b"], "change": r["change"],
                     "relative_change": r["relative_change"], "unit_a": r["rate_unit_a"], "unit_b": r["rate_unit_b"],
                     "flags_a": r["flags_a"], "flags_b": r["flags_b"],
                     "window_a": _window(r, "a"), "window_b": _window(r, "b"), "changed": r["changed"]})
    for _, r in result["parameters"].iterrows():
        rows.append({"kind": "parameter", "group": r["group"], "model": r["model"], "quantity": r["parameter"],
                     "a": r["estimate_a"], "b": r["estimate_b"], "change": r["change"],
                     "relative_change": r["relative_change"], "unit_a": r["unit_a"], "unit_b": r["unit_b"],
                     "interval_a": _interval(r, "a"), "interval_b": _interval(r, "b"), "changed": r["changed"]})
    columns = ["kind", "plate", "well", "group", "model", "quantity", "a", "b", "change", "relative_change",
               "unit_a", "unit_b", "flags_a", "flags_b", "window_a", "window_b", "interval_a", "interval_b",
               "changed"]
    return pd.DataFrame(rows, columns=columns)


def _window(r: Any, side: str) -> str:
    import numpy as np

    lo, hi = r[f"window_start_s_{side}"], r[f"window_end_s_{side}"]
    return "" if np.isnan(lo) else f"{lo:g}-{hi:g} s"


def _interval(r: Any, side: str) -> str:
    import numpy as np

    lo, hi = r[f"ci_low_{side}"], r[f"ci_high_{side}"]
    return "" if np.isnan(lo) and np.isnan(hi) else f"[{lo:.4g}, {hi:.4g}]"


def _pct(x: float) -> str:
    import numpy as np

    if np.isnan(x):
        return "n/a"
    return "new/lost" if np.isinf(x) else f"{100 * x:.3g} %"


def to_text(result: dict[str, Any], limit: int = 30) -> str:
    lines = ["recipe changes:"]
    lines.append(result["recipe_diff"].rstrip("\n") if result["recipe_diff"] else "  (same recipe)")
    w = result["wells"]
    n = result.get("counts") or counts(w, result["parameters"])
    lines.append(f"summary: {n['wells']} of {result['n_wells']} wells changed ({n['rates']} in rate, "
                 f"{n['flags']} in flags), {n['parameters']} parameters changed; differences within "
                 f"rtol {result.get('rtol', RTOL):g} and atol {result.get('atol', 0.0):g} are not counted.")
    lines.append(f"wells changed: {len(w)} of {result['n_wells']}")
    for _, r in w.head(limit).iterrows():
        text = f"  {r['plate']} {r['well']}: rate {r['rate_a']:.6g} -> {r['rate_b']:.6g} {r['rate_unit_b'] or ''}"
        text += f" ({_pct(r['relative_change'])})"
        if r["flags_a"] != r["flags_b"]:
            text += f"; flags '{r['flags_a']}' -> '{r['flags_b']}'"
        if "window" in r["changed"]:
            text += f"; window {_window(r, 'a') or 'none'} -> {_window(r, 'b') or 'none'}"
        lines.append(text)
    if len(w) > limit:
        lines.append(f"  ... {len(w) - limit} more (use --csv FILE for all)")
    p = result["parameters"]
    lines.append(f"parameters changed: {len(p)}")
    for _, r in p.head(limit).iterrows():
        routes = f" [{r['route_a']}]" if r["route_a"] == r["route_b"] else f" [{r['route_a']} -> {r['route_b']}]"
        lines.append(f"  {r['group']} {r['model']}{routes if routes != ' [rates]' else ''} {r['parameter']}: "
                     f"{r['estimate_a']:.6g} -> {r['estimate_b']:.6g} "
                     f"{r['unit_b']} ({_pct(r['relative_change'])}); interval {_interval(r, 'a') or 'none'} -> "
                     f"{_interval(r, 'b') or 'none'}")
    if len(p) > limit:
        lines.append(f"  ... {len(p) - limit} more (use --csv FILE for all)")
    return "\n".join(lines)


def configure(p: argparse.ArgumentParser) -> None:
    p.add_argument("a", help="the first audit file (run.h5), e.g. the old run")
    p.add_argument("b", help="the second audit file, e.g. the rerun")
    p.add_argument("--csv", help="also write every change as a CSV table to this file")
    p.add_argument("--limit", type=int, default=30, help="rows of each list to print (default 30)")
    p.add_argument("--rtol", type=_tolerance, default=RTOL,
                   help=f"relative tolerance: smaller changes are rounding noise, not counted (default {RTOL:g})")
    p.add_argument("--atol", type=_tolerance, default=0.0,
                   help="absolute tolerance, in each quantity's own unit (default 0)")
    p.add_argument("--no-verify", action="store_true",
                   help="compare without checking the two files' digests first (the output says so)")


def _tolerance(text: str) -> float:
    try:
        x = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number like 1e-9, got {text!r}.") from None
    if not x >= 0:
        raise argparse.ArgumentTypeError(f"expected a tolerance of 0 or more, got {text}.")
    return x


def run(args: argparse.Namespace) -> int:
    import sys

    from vzero.audit.verify import check_intact

    for path in (args.a, args.b):  # a received file is checked before any number of it is compared
        check_intact(path, check=not args.no_verify, say=lambda text: print(text, file=sys.stderr))
    result = compare(args.a, args.b, rtol=args.rtol, atol=args.atol)
    if not args.quiet:
        print(to_text(result, args.limit))
    if args.csv:
        from vzero.spreadsheet import inert_frame

        inert_frame(to_csv_frame(result)).to_csv(args.csv, index=False)
    return 0
