"""Exclusions and overrides from the recipe: wells or reads left out, and rate windows fixed by hand.

Recipe form (top-level keys ``exclusions`` and ``overrides``; every item needs a ``reason``)::

    exclusions:
      - {plate: plate-1, well: B7, reason: "bubble seen after mixing"}              # the whole well
      - {plate: plate-1, well: C3, time: "40 s", reason: "door opened"}             # one read
      - {plate: plate-1, well: C4, time: ["100 s", "160 s"], reason: "lamp flicker"}  # reads in a range
    overrides:
      - {plate: plate-1, well: D2, start: "30 s", end: "150 s", reason: "lag; window after the lag"}

What they do:

* an excluded read is masked (kept in the audit file, never used); an excluded well has every read masked,
  gets the flag ``EXCLUDED`` and no rate. :func:`apply_exclusions` does this on a plate's traces right after
  import and writes the reasons into the well table (column ``note``).
* an overridden well has its rate recomputed as the least-squares slope over the given window
  (:func:`vzero.plugins.rates.window.window_slopes`) whatever the rates method was, and gets the flag
  ``OVERRIDDEN``. :func:`apply_overrides` does this on the rates table, and also carries the ``EXCLUDED``
  flags and every note into the table's ``note`` column, so the reasons travel into every output.

Times are measured on the plate's time axis (seconds from the first read as imported). A time given as one
value excludes the reads within half a second of it (common practice for readers that log to 0.1 s).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np
from vzero.data import Table, Traces
from vzero.errors import LayoutError, RecipeError
from vzero.plugins.kinetics.flags import Flag, names_array

EXCLUSION_KEYS = {"plate", "well", "time", "reason"}
OVERRIDE_KEYS = {"plate", "well", "start", "end", "reason"}
REVIEW_KEYS = {"plate", "well", "decision", "reason"}
DECISIONS = ("keep", "exclude")
"""What a reviewer may decide about a flagged well: keep it as the run left it, or exclude it."""
READ_TOLERANCE_S = 0.5


def _seconds(value: Any) -> float:
    from vzero import units

    return float(units.quantity(value, like="s").m_as("s"))


def check_items(data: Mapping[str, Any], where: Callable[[tuple[Any, ...]], str] | None = None,
                plates: Sequence[str] | None = None) -> list[str]:
    """Validate the ``exclusions`` and ``overrides`` of a recipe mapping; one message per problem.

    ``where(path)`` turns a key path into ``file:line key.path`` (``Recipe.where``); without it the key path
    alone is used. ``plates`` are the run's plate names: an item naming another plate would silently do
    nothing, so it is a problem (with the closest name). Meant to be called from ``recipe.check`` so problems
    are reported before anything runs.
    """
    from vzero.params import closest
    from vzero.plugins.kinetics.wells import is_well, normalise_well
    from vzero.recipe import format_path

    place = where or format_path
    problems: list[str] = []
    for top, keys, times in (("exclusions", EXCLUSION_KEYS, ("time",)), ("overrides", OVERRIDE_KEYS, ("start", "end")),
                             ("review", REVIEW_KEYS, ())):
        items = data.get(top) or []
        if not isinstance(items, list):
            problems.append(f"{place((top,))}: expected a list of items like {{plate, well, reason}}")
            continue
        seen: dict[tuple[str, str], int] = {}
        for i, item in enumerate(items):
            path: tuple[Any, ...] = (top, i)
            if not isinstance(item, dict):
                problems.append(f"{place(path)}: expected a mapping with {', '.join(sorted(keys))}")
                continue
            for key in item:
                if key not in keys:
                    problems.append(f"{place((*path, key))}: unknown key; valid keys: {', '.join(sorted(keys))}")
            required = ["plate", "well", "reason", *([t for t in times] if top == "overrides" else []),
                        *(["decision"] if top == "review" else [])]
            for key in required:
                if key not in item:
                    problems.append(f"{place(path)}: missing {key!r}" + (" (say why; it is kept with the results)"
                                                                         if key == "reason" else ""))
            if "reason" in item and (not isinstance(item["reason"], str) or not item["reason"].strip()):
                problems.append(f"{place((*path, 'reason'))}: expected a non-empty text, got {item['reason']!r}")
            if "plate" in item and not isinstance(item["plate"], str):
                problems.append(f"{place((*path, 'plate'))}: expected a plate name, got {item['plate']!r}")
            elif "plate" in item and plates is not None and item["plate"] not in plates:
                hit = closest(item["plate"], plates)
                near = f" (did you mean {hit!r}?)" if hit else ""
                problems.append(f"{place((*path, 'plate'))}: no plate {item['plate']!r} in this run{near}; "
                                f"plates: {', '.join(plates)}")
            if "well" in item and not (isinstance(item["well"], str) and is_well(item["well"])):
                problems.append(f"{place((*path, 'well'))}: expected a well name like 'B7', got {item['well']!r}")
            if top == "review" and "decision" in item and item["decision"] not in DECISIONS:
                problems.append(f"{place((*path, 'decision'))}: expected keep or exclude, got {item['decision']!r}")
            if top != "review":
                problems += _check_times(item, top, path, place)
            if top in ("overrides", "review") and isinstance(item.get("well"), str) and isinstance(
                    item.get("plate"), str):
                k = (item["plate"], normalise_well(item["well"]) if is_well(item["well"]) else item["well"])
                if k in seen:
                    twice = "overridden" if top == "overrides" else "decided"
                    problems.append(f"{place(path)}: well {k[1]} of plate {k[0]} is {twice} twice "
                                    f"(also item {seen[k]}); keep one")
                seen[k] = i
    problems += _kept_but_excluded(data, place)
    return problems


def _kept_but_excluded(data: Mapping[str, Any], place: Callable[[tuple[Any, ...]], str]) -> list[str]:
    """A well that a review decided to keep while ``exclusions`` leaves it out whole: a contradiction."""
    from vzero.plugins.kinetics.wells import is_well, normalise_well

    def key(item: Any) -> tuple[str, str] | None:
        if not isinstance(item, dict) or not isinstance(item.get("plate"), str) or not isinstance(
                item.get("well"), str) or not is_well(item["well"]):
            return None
        return item["plate"], normalise_well(item["well"])

    excluded = {key(e): i for i, e in enumerate(data.get("exclusions") or [] if isinstance(
        data.get("exclusions"), list) else []) if key(e) and "time" not in e}
    out = []
    for i, item in enumerate(data.get("review") or [] if isinstance(data.get("review"), list) else []):
        k = key(item)
        if k in excluded and item.get("decision") == "keep":
            out.append(f"{place(('review', i))}: well {k[1]} of plate {k[0]} is kept on review but excluded by "
                       f"{place(('exclusions', excluded[k]))}; remove one of the two")
    return out


def review_items(recipe: Mapping[str, Any]) -> tuple[list[Mapping[str, Any]], list[Mapping[str, Any]]]:
    """The recipe's review decisions as (exclusions, kept wells): each ``exclude`` decision acts as an
    exclusion of the whole well; each ``keep`` decision only records its reason with the well."""
    items = [r for r in recipe.get("review") or [] if isinstance(r, Mapping)]
    return ([r for r in items if r.get("decision") == "exclude"], [r for r in items if r.get("decision") == "keep"])


def _check_times(item: Mapping[str, Any], top: str, path: tuple[Any, ...], place: Callable[..., str]) -> list[str]:
    from vzero.errors import UnitError

    out: list[str] = []
    names = ("time",) if top == "exclusions" else ("start", "end")
    values: dict[str, list[float]] = {}
    for name in names:
        if name not in item:
            continue
        raw = item[name]
        parts = raw if (name == "time" and isinstance(raw, list)) else [raw]
        if name == "time" and isinstance(raw, list) and len(raw) != 2:
            out.append(f"{place((*path, name))}: expected one time like \"40 s\" or a range like [\"100 s\", "
                       f"\"160 s\"], got {raw!r}")
            continue
        try:
            values[name] = [_seconds(p) for p in parts]
        except UnitError as exc:
            out.append(f"{place((*path, name))}: {exc.message}")
    t = values.get("time")
    if t and len(t) == 2 and t[1] < t[0]:
        out.append(f"{place((*path, 'time'))}: the range ends before it starts; write [start, end]")
    if "start" in values and "end" in values and values["end"][0] <= values["start"][0]:
        out.append(f"{place((*path, 'end'))}: the window ends before it starts; end must be after start")
    return out


def _raise_if_bad(recipe: Mapping[str, Any]) -> None:
    problems = check_items(recipe)
    if problems:
        raise RecipeError(problems, hint="Fix the exclusions/overrides in the recipe; nothing was run.")


def _rows(traces: Traces, items: Sequence[Mapping[str, Any]], what: str) -> list[tuple[int, Mapping[str, Any]]]:
    """(row of the well in ``traces``, item) for the items naming this plate; an unknown well is an error."""
    from vzero.plugins.kinetics.wells import normalise_well

    mine = [item for item in items if str(item.get("plate")) == traces.plate]
    if not mine:
        return []
    index = {normalise_well(w): i for i, w in enumerate(traces.well_names)}
    out = []
    for item in mine:
        well = normalise_well(str(item["well"]))
        if well not in index:
            raise LayoutError(f"the recipe's {what} name well {well}, which plate {traces.plate} does not have",
                              well=well, hint=f"Check the plate and well of that {what} item.")
        out.append((index[well], item))
    return out


def apply_exclusions(traces: Traces, recipe: Mapping[str, Any]) -> Traces:
    """Mask the reads and wells the recipe excludes for this plate; returns new traces (or the same object
    when nothing applies). Whole wells get ``excluded=True`` and every note goes to the well column ``note``.
    """
    _raise_if_bad(recipe)
    items = _rows(traces, recipe.get("exclusions") or [], "exclusions")
    notes = _rows(traces, recipe.get("overrides") or [], "overrides")
    review_out, review_kept = review_items(recipe)
    dropped = _rows(traces, review_out, "review decisions")
    kept = _rows(traces, review_kept, "review decisions")
    if not items and not notes and not dropped and not kept:
        return traces
    n = len(traces.wells)
    mask = traces.mask.copy()
    excluded = np.zeros(n, dtype=bool)
    note = [[] for _ in range(n)]  # type: list[list[str]]
    for row, item in items:
        reason = str(item["reason"]).strip()
        if "time" not in item:
            excluded[row] = True
            mask[row, :] = False
            note[row].append(f"excluded: {reason}")
            continue
        raw = item["time"]
        if isinstance(raw, list):
            lo, hi = _seconds(raw[0]), _seconds(raw[1])
            label = f"{lo:g}-{hi:g} s"
        else:
            t0 = _seconds(raw)
            lo, hi, label = t0 - READ_TOLERANCE_S, t0 + READ_TOLERANCE_S, f"{t0:g} s"
        hit = (traces.time >= lo) & (traces.time <= hi)
        mask[row, hit] = False
        note[row].append(f"reads at {label} excluded ({int(hit.sum())}): {reason}")
    for row, item in dropped:
        excluded[row] = True
        mask[row, :] = False
        note[row].append(f"excluded on review: {str(item['reason']).strip()}")
    for row, item in kept:
        note[row].append(f"kept on review: {str(item['reason']).strip()}")
    for row, item in notes:
        note[row].append(f"window fixed to {_seconds(item['start']):g}-{_seconds(item['end']):g} s: "
                         f"{str(item['reason']).strip()}")
    wells = traces.wells.copy()
    wells["excluded"] = excluded
    wells["note"] = np.array(["; ".join(x) for x in note], dtype=object)
    return traces.evolve(mask=mask, wells=wells)


def apply_overrides(traces: Traces, rates_table: Table, overrides: Sequence[Mapping[str, Any]]) -> Table:
    """Recompute the overridden wells of this plate over their fixed windows and mark them ``OVERRIDDEN``;
    mark wholly excluded wells ``EXCLUDED`` (no rate); copy the notes into a ``note`` column.

    ``rates_table`` is the plate's table from a rates method (one row per well, same order as ``traces``,
    rates in signal units per second). Returns a new table; the given one is not changed.
    """
    from vzero.plugins.kinetics.flags import from_names
    from vzero.plugins.kinetics.rates_table import saturation_flags
    from vzero.plugins.rates.window import window_slopes

    _raise_if_bad({"overrides": list(overrides)})
    wells = traces.wells
    n = len(rates_table.frame)
    if rates_table.frame["well"].astype(str).tolist() != traces.well_names:
        raise ValueError("apply_overrides: the rates table rows must match the traces' wells, in order")
    excluded = wells["excluded"].to_numpy(dtype=bool) if "excluded" in wells.columns else np.zeros(n, bool)
    items = _rows(traces, overrides, "overrides")
    if not items and not excluded.any() and "note" not in wells.columns:
        return rates_table
    frame = rates_table.frame.copy()
    flags = np.array([from_names(x) for x in frame["flags"].astype(str)], dtype=np.int64)
    notes = (wells["note"].astype(str).to_numpy(dtype=object) if "note" in wells.columns
             else np.full(n, "", dtype=object))
    measured = [c for c in frame.columns if c not in ("well", "flags", "note", "method") and
                frame[c].dtype.kind == "f" and c not in wells.columns and not c.endswith("_unit")]
    signal = traces.masked_signal()
    by_window: dict[tuple[float, float], list[int]] = {}
    for row, item in items:
        by_window.setdefault((_seconds(item["start"]), _seconds(item["end"])), []).append(row)
    sat = saturation_flags(traces)
    for (start, end), rows in by_window.items():
        r = np.asarray(rows)
        res = window_slopes(traces.time, signal[r], start, end)
        frame.loc[r, measured] = np.nan  # method-specific columns do not describe the new slope
        frame.loc[r, "rate"] = res.v0
        frame.loc[r, "rate_stderr"] = res.stderr
        frame.loc[r, "window_start_s"] = res.window_start_s
        frame.loc[r, "window_end_s"] = res.window_end_s
        if "n_points" in frame.columns:
            frame.loc[r, "n_points"] = res.n_points
        if "r_squared" in frame.columns:
            frame.loc[r, "r_squared"] = res.goodness
        flags[r] = res.flags | sat[r] | int(Flag.OVERRIDDEN)
        frame.loc[r, "method"] = "window (override)"
    frame.loc[excluded, [c for c in ("rate", "rate_stderr") if c in frame.columns]] = np.nan
    flags = np.where(excluded, int(Flag.EXCLUDED), flags)
    frame["flags"] = names_array(flags)
    frame["note"] = notes
    return rates_table.with_frame(frame)
