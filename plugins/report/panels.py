"""One well at a time: what a scientist needs to judge a flagged well, for the report's well panels and the
review page (``vzero review``).

:func:`well_records` gathers, per sample well, its reads, the line whose slope is its rate and the window it
came from, its rate with standard error, its flags in words with the measured values behind them, the blank
step used and why it is (or is not) in the fit. :func:`sparkline_svg` draws one record as a small inline SVG
on the well's own signal scale (the scale is printed on it). Only sample wells are reviewed: blanks,
standards and empty wells are not wells a fit uses.
"""

from __future__ import annotations

import html
import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from vzero.data import Traces
from vzero.plugins.kinetics import flags as flag_vocab
from vzero.plugins.report import content, marks

FLAG_SHORT = flag_vocab.short_by_name()


def anchor(plate: str, well: str) -> str:
    """The HTML id of one well's panel (``well-<plate>-<well>``, file-name-safe)."""
    from vzero.plugins.report.figures import slug

    return f"well-{slug(plate)}-{slug(well)}"


def _f(x: Any) -> float:
    try:
        return float(x)
    except (TypeError, ValueError):
        return math.nan


def measured(row: Mapping[str, Any], rate_unit: str) -> list[str]:
    """The measured values behind a well's flags, in words: rate and its signal-to-noise, the r² of the line
    over the window, the reads used and the window, any lag found."""
    out = []
    v, se = _f(row.get("rate")), _f(row.get("rate_stderr"))
    if math.isfinite(v):
        text = content.estimate_text(v, se)["value"]
        out.append(f"v0 = {text} {rate_unit}".rstrip())
        if math.isfinite(se) and se > 0:
            out.append(f"signal-to-noise |v0|/SE = {content.plain(abs(v) / se, 2)} (NOISY below 10)")
    else:
        out.append("no rate")
    r2 = _f(row.get("r_squared"))
    if math.isfinite(r2):
        out.append(f"r² of the line over the window = {content.plain(r2, 3)}")
    n, ts, te = _f(row.get("n_points")), _f(row.get("window_start_s")), _f(row.get("window_end_s"))
    if math.isfinite(n):
        window = (f" from {content.plain(ts, 4)} s to {content.plain(te, 4)} s" if math.isfinite(ts)
                  and math.isfinite(te) else "")
        out.append(f"{int(n)} reads used{window}")
    lag = _f(row.get("lag_s"))
    if math.isfinite(lag):
        out.append(f"lag ≈ {content.plain(lag, 2)} s")
    return out


def blank_used(recipe: Mapping[str, Any]) -> str:
    """The recipe's blank step in words ('none' when the recipe has no blank step)."""
    s = content.step_settings(recipe, "blank")
    if not s:
        return "none (no blank step in the recipe)"
    extra = ", ".join(f"{k} {v}" for k, v in s.items() if k != "method")
    return f"{s.get('method', '?')}" + (f" ({extra})" if extra else "")


def well_records(rates: pd.DataFrame, traces: Mapping[str, Traces], used: np.ndarray | None,
                 reasons: Sequence[str] | None, recipe: Mapping[str, Any], rate_unit: str,
                 rate_units: Mapping[str, str] | None = None, only_flagged: bool = True) -> list[dict[str, Any]]:
    """One record per sample well (flagged ones only by default), in table order. Reads are those the rate
    step saw (after blanking); ``line`` holds the window's start and end time and signal. ``rate_unit`` is
    the rate's unit as printed; ``rate_units`` the rates table's units by column (to tell whether ``rate`` is
    in signal per second when there is no ``signal_rate`` column)."""
    from vzero.plugins.report.figures import signal_slope, window_lines

    if rates.empty or "well" not in rates:
        return []
    n = len(rates)
    sample = (rates["role"].astype(str) == "sample").to_numpy() if "role" in rates else np.ones(n, bool)
    flag_text = rates["flags"].tolist() if "flags" in rates else [""] * n
    plates = rates["plate"].astype(str).to_numpy() if "plate" in rates else np.full(n, next(iter(traces), ""))
    blank = blank_used(recipe)
    out: list[dict[str, Any]] = []
    lines: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    for plate in dict.fromkeys(plates):
        tr = traces.get(plate)
        sel = plates == plate
        pr = rates[sel]
        if tr is not None and {"window_start_s", "window_end_s"} <= set(pr.columns):
            slope = signal_slope(pr, rate_units or {"rate": "?"}, tr.signal_unit)
            if slope is not None:
                lines[plate] = window_lines(tr, pr, slope)
    position = {p: np.flatnonzero(plates == p) for p in dict.fromkeys(plates)}
    names_of: dict[str, dict[str, int]] = {}
    for i in range(n):
        names = content.flag_list(flag_text[i])
        if not sample[i] or (only_flagged and not names):
            continue
        r = rates.iloc[i]
        plate, well = str(plates[i]), str(r["well"])
        tr = traces.get(plate)
        t: list[float] = []
        y: list[float | None] = []
        unit = ""
        index = names_of.setdefault(plate, {w: k for k, w in enumerate(tr.well_names)} if tr is not None else {})
        if tr is not None and well in index:
            t = [round(float(v), 3) for v in tr.time]
            y = [None if not np.isfinite(v) else float(f"{v:.6g}") for v in tr.masked_signal()[index[well]]]
            unit = tr.signal_unit
        line = None
        if plate in lines:
            j = int(np.searchsorted(position[plate], i))
            ya, yb = lines[plate][0][j], lines[plate][1][j]
            ts, te = _f(r.get("window_start_s")), _f(r.get("window_end_s"))
            if all(math.isfinite(v) for v in (ya, yb, ts, te)):
                line = [ts, float(f"{ya:.6g}"), te, float(f"{yb:.6g}")]
        conc = {c: _f(r.get(c)) for c in ("substrate", "inhibitor") if c in rates}
        out.append({
            "id": anchor(plate, well), "plate": plate, "well": well, "group": str(r.get("group", "")),
            "conc": {k: (f"{content.plain(v, 3)} {content.pretty_unit(str(r.get(f'{k}_unit', '') or ''))}".rstrip())
                     for k, v in conc.items() if math.isfinite(v)},
            "flags": names, "short": [FLAG_SHORT.get(f, f) for f in names],
            "words": [content.FLAG_TEXT.get(f, f) for f in names],
            "measured": measured(r, rate_unit), "blank": blank,
            "fit": "in the fit" if used is not None and used[i] else (
                (reasons[i] if reasons is not None and reasons[i] else "not in the fit") if used is not None
                else "no fit step"),
            "rate": _f(r.get("rate")),
            "rate_text": f"{content.estimate_text(r.get('rate'), r.get('rate_stderr'))['value']} {rate_unit}".rstrip(),
            "note": str(r.get("note", "") or "") if "note" in rates and isinstance(r.get("note"), str) else "",
            "t": t, "y": y, "signal_unit": unit, "line": line,
        })
    return out


def figure_links(areas: Sequence[Sequence[Any]], plate: str,
                 records: Sequence[Mapping[str, Any]]) -> list[dict[str, Any]]:
    """Links to draw over a plate figure: one per flagged sample well that has a panel, placed on its cell
    (``areas`` from :func:`vzero.plugins.report.figures.cell_areas`), in percent of the image, with a title
    naming the well and its flags in words (a tooltip, and the link's accessible name)."""
    by_well = {str(r["well"]): r for r in records if str(r["plate"]) == plate}
    out = []
    for well, x0, y0, x1, y1 in areas:
        rec = by_well.get(str(well))
        if rec is None:
            continue
        flags = ", ".join(f"{marks.code(f)} {f.replace('_', ' ')}" for f in rec["flags"])
        out.append({"id": rec["id"], "title": f"{plate} {well}: {flags} (open its panel)",
                    "x": round(100 * float(x0), 3), "y": round(100 * float(y0), 3),
                    "w": round(100 * (float(x1) - float(x0)), 3), "h": round(100 * (float(y1) - float(y0)), 3)})
    return out


def flag_groups(records: Sequence[Mapping[str, Any]]) -> list[dict[str, Any]]:
    """The flagged sample wells grouped by flag, most frequent first: flag, its words, count and wells."""
    by: dict[str, list[Mapping[str, Any]]] = {}
    for rec in records:
        for f in rec["flags"]:
            by.setdefault(f, []).append(rec)
    rows = [{"flag": f.replace("_", " "), "short": FLAG_SHORT.get(f, f), "code": marks.code(f),
             "meaning": content.FLAG_TEXT.get(f, f),
             "count": len(recs), "wells": [{"id": r["id"], "label": f"{r['well']}" if len({x['plate'] for x in
                                                                                       records}) == 1
                                            else f"{r['plate']} {r['well']}"} for r in recs]}
            for f, recs in by.items()]
    return sorted(rows, key=lambda r: -int(r["count"]))


def sparkline_svg(rec: Mapping[str, Any], width: int = 220, height: int = 96) -> str:
    """One well's reads (grey dots), its rate line (orange, over its window) on the well's own signal scale,
    with the scale's ends printed at the left: a small self-contained SVG (no script, no external file)."""
    from vzero.plugins.report import palette

    t = np.asarray(rec["t"], float)
    y = np.asarray([np.nan if v is None else v for v in rec["y"]], float)
    ok = np.isfinite(t) & np.isfinite(y)
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" '
             f'viewBox="0 0 {width} {height}" role="img" aria-label="reads of well {html.escape(rec["well"])}">',
             f'<rect x="0" y="0" width="{width}" height="{height}" fill="{palette.PAPER}" stroke="#d9d6cc"/>']
    if ok.sum() >= 2:
        scale = max(1.0, height / 96)
        left, right, top, bottom = round(46 * scale), 6, round(8 * scale), round(16 * scale)
        vals = list(y[ok])
        if rec.get("line"):
            vals += [rec["line"][1], rec["line"][3]]
        lo, hi = float(np.min(vals)), float(np.max(vals))
        if hi <= lo:
            hi = lo + 1.0
        t0, t1 = float(t[ok].min()), float(t[ok].max())
        t1 = t1 if t1 > t0 else t0 + 1.0

        def px(tt: float) -> float:
            return left + (tt - t0) / (t1 - t0) * (width - left - right)

        def py(yy: float) -> float:
            return top + (hi - yy) / (hi - lo) * (height - top - bottom)

        r = 1.6 * scale
        dots = "".join(f'<circle cx="{px(a):.1f}" cy="{py(b):.1f}" r="{r:.1f}"/>'
                       for a, b in zip(t[ok], y[ok], strict=True))
        parts.append(f'<g fill="{palette.MUTED}">{dots}</g>')
        if rec.get("line"):
            ts, ya, te, yb = rec["line"]
            parts.append(f'<line x1="{px(ts):.1f}" y1="{py(ya):.1f}" x2="{px(te):.1f}" y2="{py(yb):.1f}" '
                         f'stroke="{palette.WINDOW}" stroke-width="2.2"/>')
        unit = html.escape(str(rec.get("signal_unit", "")))
        font = max(8, round(height / 22))
        parts.append(f'<g font-size="{font}" fill="{palette.INK}" font-family="sans-serif">'
                     f'<text x="2" y="{top + font}">{hi:.3g}</text>'
                     f'<text x="2" y="{height - bottom}">{lo:.3g}</text>'
                     f'<text x="2" y="{(height - bottom + top) / 2 + 3:.0f}">{unit}</text>'
                     f'<text x="{left}" y="{height - 4}">{t0:g} s</text>'
                     f'<text x="{width - right}" y="{height - 4}" text-anchor="end">{t1:g} s</text></g>')
    else:
        parts.append(f'<text x="8" y="{height / 2:.0f}" font-size="11" fill="{palette.INK}">no usable reads</text>')
    parts.append("</svg>")
    return "".join(parts)
