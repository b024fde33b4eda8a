"""One plate's data joined with its layout, checked the way a run needs it (shared by the import stage's
preflight and its run, so ``vzero check`` rejects exactly what ``vzero run`` would).

Partial plates are everyday practice: an export cut to the wells that were read, or a layout that describes
only the wells in use. So wells in the data that the layout does not name are left out with a warning naming
them; wells the layout names (other than ``empty``) that the data lacks are kept as rows without reads, with
the reason; single missing reads are named with their well and file row. What a run cannot work around (a
needed column missing, a quantity without a unit) is an error naming the file, the line and the fix.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from vzero.errors import InputFileError, LayoutError
from vzero.stage import StageInput

LAYOUT_QUANTITIES = ("substrate", "enzyme", "inhibitor")
SHOWN = 12
"""How many wells a message lists before it says how many more there are."""


@dataclass(frozen=True)
class PlateRead:
    """A plate read and checked: the chosen ``block``, the ``rows`` of it that are analysed (indices into
    ``block.wells``), the layout rows of those wells followed by the ``not_read`` wells (``wells``), the
    layout's ``units``, the layout's name (``source``) and the ``notes`` a run shows as warnings."""

    block: Any
    rows: np.ndarray
    wells: pd.DataFrame
    not_read: list[str]
    units: dict[str, str]
    source: str
    notes: list[str]


def read_plate(data: StageInput, settings: Mapping[str, Any]) -> PlateRead:
    """Read and check the plate's data and layout (the last few results are kept, so the run after its
    preflight does not read the same bytes twice)."""
    raw = data.inputs.get("data")
    if raw is None:
        raise InputFileError("the plate has no 'data' file in the recipe", hint="Add data: FILE to the plate.")
    layout_raw = data.inputs.get("layout")
    key = (raw.sha256, layout_raw.sha256 if layout_raw is not None else "", repr(sorted(settings.items())),
           repr(_needs(data.recipe)), repr(_used_columns(data.recipe)))
    hit = _KEPT.get(key)
    if hit is None:
        hit = _read_plate(data, settings)
        if len(_KEPT) >= 4:
            _KEPT.pop(next(iter(_KEPT)))
        _KEPT[key] = hit
    return hit


_KEPT: dict[tuple[str, ...], PlateRead] = {}


def _read_plate(data: StageInput, s: Mapping[str, Any]) -> PlateRead:
    from vzero.plugins.importers import readers
    from vzero.plugins.kinetics.wells import infer_plate_size, well_index

    raw = data.inputs["data"]
    options = readers.ReadOptions(
        shape=s["shape"], delimiter=s["delimiter"], decimal=s["decimal"], encoding=s["encoding"],
        sheet=s["sheet"], skip_rows=s["skip_rows"], time_column=s["time_column"], time_unit=s["time_unit"],
        temperature_column=s["temperature_column"], ceiling=s["ceiling"],
        **({"overflow_tokens": tuple(s["overflow_tokens"])} if s["overflow_tokens"] else {}),
    )
    blocks = readers.read_table(raw.data, source=raw.name, options=options)
    block = _pick_block(blocks, s["block"], raw.name)
    notes = list(block.assumptions)
    layout, source = _layout(data, s, block.wells)
    notes.extend(f"{source}: {note}" for note in layout.attrs.get("assumptions", []))
    roles = dict(zip(layout["well"], layout["role"].astype(str), strict=True))
    size = infer_plate_size(list(block.wells) + list(roles))

    def listed(wells: list[str]) -> str:
        ordered = sorted(wells, key=lambda w: well_index(w, size))
        more = f" and {len(ordered) - SHOWN} more" if len(ordered) > SHOWN else ""
        return ", ".join(ordered[:SHOWN]) + more

    unlisted = [w for w in block.wells if w not in roles]
    if unlisted:
        notes.append(f"{len(unlisted)} well(s) in {raw.name} are not in the layout {source} and are not analysed: "
                     f"{listed(unlisted)}. Add them to the layout to analyse them.")
    read = set(block.wells)
    not_read = [w for w in layout["well"] if roles[w] != "empty" and w not in read]
    if not_read:
        notes.append(f"{len(not_read)} well(s) of the layout {source} have no reads in {raw.name}: "
                     f"{listed(not_read)}. They are listed in the rates table without a rate.")
    rows = np.array([i for i, w in enumerate(block.wells) if w in roles], dtype=np.int64)
    units = _units(layout, s, source, notes)
    _check_columns(layout, source, data.recipe, notes)
    notes.extend(_missing_reads(block, rows, raw.name))
    by_well = layout.set_index("well")
    kept = [block.wells[i] for i in rows]
    wells = by_well.loc[kept + not_read].reset_index()
    wells.attrs = {}
    return PlateRead(block, rows, wells, not_read, units, source, notes)


def _units(layout: pd.DataFrame, s: Mapping[str, Any], source: str, notes: list[str]) -> dict[str, str]:
    units = dict(layout.attrs.get("units", {}))
    for q in LAYOUT_QUANTITIES:
        given = s[f"{q}_unit"]
        if q in layout.columns and layout[q].notna().any():
            if given and units.get(q) and units[q] != given:
                notes.append(f"the layout header gives {q} in {units[q]} and the recipe says {given}; "
                             "the header wins")
            units.setdefault(q, given or "")
            if not units[q]:
                raise LayoutError(
                    f"the {q} column has no unit", path=source, column=q,
                    hint=f'Write the unit in the header, like "{q} (uM)", or set {q}_unit in the import step.',
                )
    return units


def _check_columns(layout: pd.DataFrame, source: str, recipe: Mapping[str, Any], notes: list[str]) -> None:
    """A layout the fit cannot use is an error (naming the columns found and the header forms accepted);
    a sample well without a substrate is named with its line; columns no step uses are listed."""
    from vzero.plugins.importers.layouts import BASE_COLUMNS, HEADER_FORMS

    header = [str(c) for c in layout.attrs.get("header", [])]
    samples = (layout["role"].astype(str) == "sample").to_numpy()
    lines = layout.attrs.get("lines") or []
    for column in _needs(recipe):
        values = layout[column] if column in layout.columns else pd.Series(np.nan, index=layout.index)
        given = values.notna().to_numpy() if values.dtype.kind == "f" else values.astype(str).str.strip().ne("")
        if samples.any() and not np.asarray(given)[samples].any():
            found = ", ".join(repr(h) for h in header) if header else ", ".join(map(repr, layout.columns))
            forms = (", ".join(f.replace("substrate", column) for f in HEADER_FORMS) if column in LAYOUT_QUANTITIES
                     else repr(column))
            raise LayoutError(
                f"the layout has no {column} column (or no {column} values for its sample wells), which the fit "
                f"step needs; its columns are {found}", path=source, column=column,
                hint=f"Name the column like {forms}.",
            )
        empty = [i for i in np.flatnonzero(samples & ~np.asarray(given))]
        for i in empty[:SHOWN]:
            at = f"line {lines[i]}, " if i < len(lines) else ""
            notes.append(f"{source} {at}well {layout['well'].iloc[i]}: a sample well without a {column} value; "
                         "it gets a rate but is left out of the fit.")
        if len(empty) > SHOWN:
            notes.append(f"{source}: {len(empty) - SHOWN} more sample wells have no {column} value.")
    used = set(BASE_COLUMNS) | {"note", "excluded"} | _used_columns(recipe) | set(_needs(recipe))
    unknown = [c for c in layout.columns if c not in used]
    if unknown:
        notes.append(f"{source}: no step uses the layout column(s) {', '.join(map(repr, unknown))}; they are kept "
                     f"in the audit file's layout record. Known columns: {', '.join(BASE_COLUMNS)} (units like "
                     f"{', '.join(HEADER_FORMS)}).")


def _steps(recipe: Mapping[str, Any]) -> list[tuple[str, Mapping[str, Any]]]:
    out = []
    for step in recipe.get("steps") or []:
        if isinstance(step, Mapping):
            for kind, body in step.items():
                out.append((str(kind), body if isinstance(body, Mapping) else {}))
    return out


def _needs(recipe: Mapping[str, Any]) -> tuple[str, ...]:
    """Layout columns the recipe's steps cannot do without: the fit's x column (``substrate`` unless set)."""
    need = []
    for kind, body in _steps(recipe):
        if kind == "fit" and body.get("method", "nls") == "nls":
            x = body.get("x", "substrate")
            if isinstance(x, str) and x in LAYOUT_QUANTITIES:
                need.append(x)
        if kind == "fit" and body.get("method") == "curves" and body.get("lots") is True:
            need.append("lot")  # one activity factor per enzyme lot: the lot of every sample well
    return tuple(dict.fromkeys(need))


def _used_columns(recipe: Mapping[str, Any]) -> set[str]:
    """Layout columns a step names in its settings (a standard curve's ``column``, a fit's ``group_by``)."""
    used: set[str] = set()
    for kind, body in _steps(recipe):
        for key, value in body.items():
            if isinstance(value, str) and key != "method":
                used.add(value)
        if kind == "convert" and body.get("method") == "standard-curve":
            used.add(str(body.get("column", "product")))
    return used


def _missing_reads(block: Any, rows: np.ndarray, name: str) -> list[str]:
    """Name the single reads missing from otherwise read wells (well, file row and time)."""
    signal = np.asarray(block.signal, dtype=float)[rows]
    saturated = np.asarray(block.saturated, dtype=bool)[rows]
    gap = ~np.isfinite(signal) & ~saturated
    partly = gap.any(axis=1) & ~gap.all(axis=1)
    if not partly.any():
        return []
    lines = block.lines
    found = []
    for r, t in zip(*np.nonzero(gap & partly[:, None]), strict=True):
        well = block.wells[int(rows[r])]
        where = f"row {lines[t]}, " if lines is not None and t < len(lines) else ""
        found.append(f"{well} ({where}{block.time_s[t]:g} s)")
    more = f" and {len(found) - SHOWN} more" if len(found) > SHOWN else ""
    return [f"{name}: {len(found)} read(s) are missing and left out: {', '.join(found[:SHOWN])}{more}."]


def _layout(data: StageInput, settings: Mapping[str, Any], wells: list[str]) -> tuple[pd.DataFrame, str]:
    """The plate layout: from the plate's layout file, or declared in the import step (``layout:``)."""
    from vzero.plugins.importers import layouts
    from vzero.plugins.kinetics.wells import infer_plate_size

    raw = data.inputs.get("layout")
    declared = settings.get("layout")
    if raw is not None and declared:
        raise LayoutError("the plate has a layout file and the import step declares a layout; keep one")
    if raw is not None:
        return layouts.read_layout(raw.data, source=raw.name, plate_size=None), raw.name
    if declared:
        return layouts.expand_declared_layout(declared, infer_plate_size(wells)), "recipe layout"
    raise InputFileError(
        "the plate has no layout", hint="Add layout: FILE to the plate, or declare one with layout: in the import step."
    )


def _pick_block(blocks: list[Any], which: Any, source: str) -> Any:
    names = [b.name for b in blocks]
    if which is None:
        if len(blocks) > 1:
            raise InputFileError(
                f"the file holds {len(blocks)} blocks ({', '.join(names)})", path=source,
                hint="Choose one with block: NAME in the import step, or give each block its own plate entry.",
            )
        return blocks[0]
    if isinstance(which, int) and 0 <= which < len(blocks):
        return blocks[which]
    if which in names:
        return blocks[names.index(which)]
    raise InputFileError(f"no block {which!r}; the file holds {', '.join(map(str, names))}", path=source)
