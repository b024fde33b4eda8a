"""Plate layouts: what is in each well (role, substrate, enzyme, inhibitor, group, replicate).

Three sources give the same table (one row per well):

* a **long** file (CSV/TSV/xlsx): a header naming ``well`` and any of ``role``, ``substrate``, ``enzyme``,
  ``inhibitor``, ``group``, ``replicate`` and further columns; units in the header, ``substrate (uM)`` or
  ``substrate [µM]``;
* a **grid** file: one block per variable shaped like the plate (8 x 12, 16 x 24, 32 x 48), a title line
  naming the variable and unit above it (or in the corner cell), column numbers across, row letters down;
* a layout **declared in the recipe** (:func:`expand_declared_layout`): dilution series, groups, blank and
  standard wells. The dict schema is documented in docs/inputs.md.

Units found in headers or titles go to ``df.attrs["units"]`` (column -> unit text); conventions taken
without being told go to ``df.attrs["assumptions"]``.
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np
import pandas as pd
from vzero.errors import LayoutError
from vzero.plugins.importers.readers import ReadOptions, TextGrid, load_grid, split_label
from vzero.plugins.kinetics.wells import (
    PLATE_SHAPES,
    ROW_LABELS,
    all_wells,
    infer_plate_size,
    normalise_well,
    well_index,
)

ROLES: tuple[str, ...] = ("sample", "blank", "standard", "empty")
NUMERIC_COLUMNS: tuple[str, ...] = ("substrate", "enzyme", "inhibitor")
TEXT_COLUMNS: tuple[str, ...] = ("role", "group", "replicate", "lot")
"""Layout columns kept as text even when their entries look like numbers (``lot``: the enzyme lot of each
well, optional; the curve fit can give each lot an activity factor of its own)."""
BASE_COLUMNS: tuple[str, ...] = ("well", "role", *NUMERIC_COLUMNS, "group", "replicate")
_GRID_COLS = {cols: rows for rows, cols in PLATE_SHAPES.values()}


#: The header forms a layout column with a unit may take (shown when a needed column is not found).
HEADER_FORMS: tuple[str, ...] = ("substrate (uM)", "substrate [uM]", "substrate_uM")


def _column_name(label: str) -> tuple[str, str | None]:
    """Header text -> (column name, unit): ``"Substrate (µM)"``, ``"substrate [µM]"`` and ``"substrate_uM"``
    all give ("substrate", "µM"). The underscore form is taken only when what follows it is a concentration
    unit (``replicate_id`` stays one name)."""
    name, unit = split_label(label)
    raw_unit = None
    if unit is not None:  # keep the unit as written (split_label lower-cases it)
        m = re.search(r"[\(\[]\s*([^\)\]]*?)\s*[\)\]]\s*$|/\s*([^/]+?)\s*$", label.strip())
        raw_unit = (m.group(1) or m.group(2)) if m else unit
    else:
        m = re.fullmatch(r"\s*(.*?[^_\s])_([A-Za-zµμ]{1,3})\s*", label)
        if m and _is_concentration_unit(m.group(2)):
            name, raw_unit = m.group(1).lower(), m.group(2)
    return re.sub(r"\s+", "_", name.strip()), raw_unit


def _is_concentration_unit(text: str) -> bool:
    """Whether ``text`` is a molar concentration unit (``uM``, ``nM``, ``mM``, ``M``, ``µM``)."""
    from vzero import units
    from vzero.errors import UnitError

    try:
        units.unit(text, like="M")
    except UnitError:
        return False
    return True


def _finish(df: pd.DataFrame, units: dict[str, str], notes: list[str], source: str | None,
            lines: list[int] | None = None) -> pd.DataFrame:
    """Add missing base columns, check roles, order columns, attach units and assumptions. ``lines`` gives
    the file line of each row, for messages."""
    for col in NUMERIC_COLUMNS:
        if col not in df:
            df[col] = np.nan
    for col in ("group", "replicate"):
        if col not in df:
            df[col] = ""
    df["role"] = df["role"].astype(str).str.strip().str.lower()
    bad = ~df["role"].isin(ROLES)
    if bad.any():
        i = int(np.flatnonzero(bad.to_numpy())[0])
        raise LayoutError(
            f"unknown role {df['role'].iloc[i]!r} for well {df['well'].iloc[i]}",
            path=source if source is not None else "recipe layout",
            row=lines[i] if lines else None,
            well=str(df["well"].iloc[i]),
            column="role",
            hint=f"Use one of {', '.join(ROLES)}.",
        )
    _check_amounts(df, units, source)
    extras = [c for c in df.columns if c not in BASE_COLUMNS]
    out = df[list(BASE_COLUMNS) + extras].reset_index(drop=True)
    out.attrs["units"] = dict(units)
    out.attrs["assumptions"] = list(notes)
    out.attrs["lines"] = list(lines) if lines else []
    return out


#: The largest amount a layout may give, in the column's own unit: far above any real assay, low enough that
#: the arithmetic downstream (rates per enzyme, fits) stays finite.
MAX_AMOUNT = 1e12


def _check_amounts(df: pd.DataFrame, units: dict[str, str], source: str | None) -> None:
    """Substrate, enzyme and inhibitor amounts must be finite, not negative and at most ``MAX_AMOUNT``
    (an empty cell is fine); a sample well needs some enzyme (a no-enzyme control is role blank). The error
    names the well and the allowed range."""
    for col in NUMERIC_COLUMNS:
        values = pd.to_numeric(df[col], errors="coerce").to_numpy(dtype=float)
        given = ~np.isnan(values)
        wrong = given & ~(np.isfinite(values) & (values >= 0) & (values <= MAX_AMOUNT))
        if col == "enzyme":
            wrong |= given & (values == 0) & (df["role"].to_numpy() == "sample")
        if wrong.any():
            i = int(np.flatnonzero(wrong)[0])
            unit = units.get(col, "")
            zero = " (a sample needs enzyme; mark no-enzyme controls as role blank)" if values[i] == 0 else ""
            raise LayoutError(
                f"{col} {float(values[i]):g} {unit}".rstrip() + f" is not an amount an assay can have{zero}",
                path=source, column=col, well=str(df["well"].iloc[i]),
                hint=f"Give a number from 0 to {MAX_AMOUNT:g}{' ' + unit if unit else ''} (empty if not used).")


def _to_float(values: list[str], decimal: str) -> np.ndarray | None:
    """Parse text cells as floats (empty -> NaN); None if any non-empty cell is not a number."""
    out = np.full(len(values), np.nan)
    for i, v in enumerate(values):
        v = v.strip()
        if v:
            try:
                out[i] = float(v.replace(",", ".") if decimal == "," else v)
            except ValueError:
                return None
    return out


def _check_plate(wells: list[str], plate_size: int | None, source: str, rows: list[int] | None) -> int:
    size = plate_size if plate_size is not None else infer_plate_size(wells)
    for k, w in enumerate(wells):
        try:
            well_index(w, size)
        except ValueError as exc:
            raise LayoutError(str(exc), path=source, row=rows[k] if rows else None, well=w) from None
    return size


# ---------------------------------------------------------------------------------------------------------
# files


def read_layout(data: bytes, *, source: str, plate_size: int | None = None) -> pd.DataFrame:
    """Read a layout file (long or grid form; CSV, TSV, semicolon or xlsx) into one row per well.

    A batch often gives every plate the same layout file: the last few layouts read are kept (by content,
    name and plate size) and a copy is returned, so each is parsed once per process."""
    key = (data, source, plate_size)
    cached = _LAYOUTS.get(key)
    if cached is None:
        cached = _read_layout(data, source=source, plate_size=plate_size)
        if len(_LAYOUTS) >= _LAYOUTS_KEPT:
            _LAYOUTS.pop(next(iter(_LAYOUTS)))
        _LAYOUTS[key] = cached
    return cached.copy()


_LAYOUTS: dict[tuple[bytes, str, int | None], pd.DataFrame] = {}
_LAYOUTS_KEPT = 8


def _read_layout(data: bytes, *, source: str, plate_size: int | None = None) -> pd.DataFrame:
    grid = load_grid(data, source=source, options=ReadOptions())
    for i, row in enumerate(grid.rows):
        if any(_column_name(c)[0] == "well" for c in row if c.strip()):
            return _read_long_layout(grid, i, source, plate_size)
    return _read_grid_layout(grid, source, plate_size)


def _read_long_layout(grid: TextGrid, h: int, source: str, plate_size: int | None) -> pd.DataFrame:
    header = [c.strip() for c in grid.rows[h]]
    while header and not header[-1]:
        header.pop()
    names, units = [], {}
    for j, label in enumerate(header):
        name, unit = _column_name(label) if label else (f"column{j + 1}", None)
        if name in names:
            raise LayoutError(f"two columns are called {name!r}", path=source, row=grid.lines[h], column=label)
        names.append(name)
        if unit:
            units[name] = unit
    body, lines = [], []
    for i in range(h + 1, len(grid.rows)):
        row = [c.strip() for c in grid.rows[i]]
        if not any(row):
            continue
        if len(row) > len(header) and any(row[len(header) :]):
            raise LayoutError(
                f"ragged row: {len(row)} cells, but the header has {len(header)}", path=source, row=grid.lines[i]
            )
        body.append((row + [""] * len(header))[: len(header)])
        lines.append(grid.lines[i])
    if not body:
        raise LayoutError("the layout has a header but no wells", path=source, row=grid.lines[h])
    cols = {name: [r[j] for r in body] for j, name in enumerate(names)}
    wells, first_row = [], {}
    for k, raw in enumerate(cols["well"]):
        try:
            w = normalise_well(raw)
        except ValueError as exc:
            raise LayoutError(str(exc), path=source, row=lines[k], column="well") from None
        if w in first_row:
            raise LayoutError(
                f"well {w} is named twice (rows {first_row[w]} and {lines[k]})",
                path=source,
                row=lines[k],
                well=w,
                hint="Each well may appear once in a layout.",
            )
        first_row[w] = lines[k]
        wells.append(w)
    _check_plate(wells, plate_size, source, lines)
    notes = []
    df = pd.DataFrame({"well": wells})
    if "role" in cols:
        df["role"] = [r or "sample" for r in cols["role"]]
    else:
        df["role"] = "sample"
        notes.append(f"{source}: no role column; every listed well taken as a sample")
    for name, values in cols.items():
        if name in ("well", "role"):
            continue
        nums = _to_float(values, grid.decimal)
        if name in NUMERIC_COLUMNS and nums is None:
            k = next(i for i, v in enumerate(values) if _to_float([v], grid.decimal) is None)
            raise LayoutError(f"{values[k]!r} is not a number", path=source, row=lines[k], column=name, well=wells[k])
        keep_text = name not in NUMERIC_COLUMNS and (name in TEXT_COLUMNS or nums is None or not any(values))
        df[name] = values if keep_text else nums
    out = _finish(df, units, notes, source, lines)
    out.attrs["header"] = [h for h in header if h]
    return out


def _grid_header(row: list[str]) -> int | None:
    """Number of plate columns if ``row`` is a grid header (1, 2, ..., 12/24/48 after a corner cell)."""
    cells = [c.strip() for c in row[1:]]
    while cells and not cells[-1]:
        cells.pop()
    if len(cells) not in _GRID_COLS:
        return None
    try:
        nums = [int(c) for c in cells]
    except ValueError:
        return None
    return len(cells) if nums == list(range(1, len(cells) + 1)) else None


def _read_grid_layout(grid: TextGrid, source: str, plate_size: int | None) -> pd.DataFrame:
    rows = grid.rows
    blocks: dict[str, tuple[str | None, list[str]]] = {}
    size: int | None = None
    i = 0
    last_end = 0
    while i < len(rows):
        n_cols = _grid_header(rows[i])
        if n_cols is None:
            i += 1
            continue
        n_rows = _GRID_COLS[n_cols]
        corner = rows[i][0].strip()
        title = corner
        if not title:
            above = [r for r in rows[last_end:i] if any(c.strip() for c in r)]
            filled = [c.strip() for c in above[-1] if c.strip()] if above else []
            title = filled[0] if len(filled) == 1 else ""
        if not title:
            raise LayoutError(
                "a plate-shaped block has no title naming its variable",
                path=source,
                row=grid.lines[i],
                hint="Put a line like 'substrate (uM)' above the block, or the name in its corner cell.",
            )
        name, unit = _column_name(title)
        if name in blocks:
            raise LayoutError(f"two blocks are titled {name!r}", path=source, row=grid.lines[i])
        this_size = n_rows * n_cols
        if size is not None and this_size != size:
            raise LayoutError(f"block {title!r} has another plate size", path=source, row=grid.lines[i])
        size = this_size
        if plate_size is not None and this_size != plate_size:
            raise LayoutError(
                f"block {title!r} is shaped for {this_size} wells, the plate has {plate_size}",
                path=source,
                row=grid.lines[i],
            )
        values: list[str] = []
        for r in range(n_rows):
            k = i + 1 + r
            row = rows[k] if k < len(rows) else []
            label = row[0].strip().upper() if row else ""
            if label != ROW_LABELS[r]:
                raise LayoutError(
                    f"block {title!r}: expected row {ROW_LABELS[r]} here, found {label or 'nothing'!r}",
                    path=source,
                    row=grid.lines[k] if k < len(rows) else grid.lines[-1],
                    hint=f"A {this_size}-well block has rows A-{ROW_LABELS[n_rows - 1]} in order.",
                )
            cells = [c.strip() for c in row[1:]]
            if len(cells) > n_cols and any(cells[n_cols:]):
                raise LayoutError(f"ragged row in block {title!r}", path=source, row=grid.lines[k])
            values.extend((cells + [""] * n_cols)[:n_cols])
        blocks[name] = (unit, values)
        i += 1 + n_rows
        last_end = i
    if size is None:
        raise LayoutError(
            "no layout found: expected a header with a 'well' column, or plate-shaped blocks with titles",
            path=source,
            hint="See docs/inputs.md for the two layout forms.",
        )
    wells = all_wells(size)
    df = pd.DataFrame({"well": wells})
    units = {name: unit for name, (unit, _) in blocks.items() if unit}
    notes = []
    filled = np.zeros(size, dtype=bool)
    for name, (_, values) in blocks.items():
        filled |= np.array([bool(v) for v in values])
        nums = _to_float(values, grid.decimal)
        if name in NUMERIC_COLUMNS and nums is None:
            k = next(j for j, v in enumerate(values) if _to_float([v], grid.decimal) is None)
            raise LayoutError(f"{values[k]!r} is not a number", path=source, column=name, well=wells[k])
        keep_text = name not in NUMERIC_COLUMNS and (name in TEXT_COLUMNS or nums is None or not any(values))
        df[name] = values if keep_text else nums
    if "role" in blocks:
        df["role"] = [v or "empty" for v in blocks["role"][1]]
    else:
        df["role"] = np.where(filled, "sample", "empty")
        notes.append(f"{source}: no role block; wells with any entry taken as samples, the rest as empty")
    return _finish(df, units, notes, source)


# ---------------------------------------------------------------------------------------------------------
# declared in the recipe

_SERIES_KEYS = {"variable", "start", "factor", "direction", "steps", "lines", "group", "role", "set", "zero_last",
                "lot"}
_WELLS_KEYS = {"wells", "role", "group", "replicate", "set", "lot"}


def _fail(where: str, what: str) -> LayoutError:
    return LayoutError(f"layout.{where}: {what}", hint="See docs/inputs.md, 'Layouts declared in the recipe'.")


def _positions(value: Any, axis: str, n: int, where: str) -> list[int]:
    """Rows (axis 'rows': letters) or columns (axis 'columns': numbers) as 0-based indices.

    Accepts a list (``[A, B]``, ``[1, 2]``) or a range text (``"A-C"``, ``"1-8"``).
    """
    items: list[Any]
    if isinstance(value, str) and "-" in value:
        a, b = (p.strip() for p in value.split("-", 1))
        lo, hi = _positions([a], axis, n, where)[0], _positions([b], axis, n, where)[0]
        if hi < lo:
            raise _fail(where, f"range {value!r} runs backwards")
        return list(range(lo, hi + 1))
    items = value if isinstance(value, list) else [value]
    out = []
    for it in items:
        if axis == "rows":
            text = str(it).strip().upper()
            idx = ROW_LABELS.index(text) if text in ROW_LABELS else -1
        else:
            idx = int(it) - 1 if isinstance(it, int) or (isinstance(it, str) and it.strip().isdigit()) else -1
        if not 0 <= idx < n:
            label = "row letter" if axis == "rows" else "column number"
            raise _fail(where, f"{it!r} is not a {label} of this plate")
        out.append(idx)
    return out


def _well_list(value: Any, plate_size: int, where: str) -> list[str]:
    """``"A1:B3"`` (a rectangle, row-major), a single well, or a list of either."""
    items = value if isinstance(value, list) else [value]
    out: list[str] = []
    for it in items:
        try:
            if isinstance(it, str) and ":" in it:
                a, b = (well_index(p, plate_size) for p in it.split(":", 1))
                out += [
                    f"{ROW_LABELS[r]}{c + 1}"
                    for r in range(min(a[0], b[0]), max(a[0], b[0]) + 1)
                    for c in range(min(a[1], b[1]), max(a[1], b[1]) + 1)
                ]
            else:
                well_index(str(it), plate_size)
                out.append(normalise_well(str(it)))
        except ValueError as exc:
            raise _fail(where, str(exc)) from None
    return out


def _number(spec: dict, key: str, where: str, positive: bool = True) -> float:
    v = spec.get(key)
    if isinstance(v, bool) or not isinstance(v, int | float) or not np.isfinite(v) or (positive and v <= 0):
        raise _fail(f"{where}.{key}", f"expected a {'positive ' if positive else ''}number, got {v!r}")
    return float(v)


def _check_keys(entry: Any, where: str, allowed: set[str]) -> None:
    if not isinstance(entry, dict):
        raise _fail(where, "expected a mapping")
    unknown = sorted(set(entry) - allowed)
    if unknown:
        raise _fail(f"{where}.{unknown[0]}", f"unknown key (allowed: {', '.join(sorted(allowed))})")


def _set_values(spec: dict, where: str) -> dict[str, Any]:
    values = spec.get("set", {})
    if not isinstance(values, dict):
        raise _fail(f"{where}.set", "expected a mapping like {enzyme: 5}")
    for k in values:
        if k in ("well", *TEXT_COLUMNS):
            raise _fail(f"{where}.set", f"{k!r} has its own key; set only quantities here")
    return dict(values)


def expand_declared_layout(spec: dict, plate_size: int) -> pd.DataFrame:
    """Build the layout table from a recipe's ``layout`` mapping (schema in docs/inputs.md).

    Wells not declared get role ``empty``. A well declared twice is a :class:`LayoutError` naming both
    entries.
    """
    if not isinstance(spec, dict):
        raise _fail("", "expected a mapping with keys units, series, wells")
    unknown = set(spec) - {"units", "series", "wells"}
    if unknown:
        raise _fail(sorted(unknown)[0], "unknown key (allowed: units, series, wells)")
    try:
        n_rows, n_cols = PLATE_SHAPES[plate_size]
    except KeyError:
        raise _fail("", f"unsupported plate size {plate_size}") from None
    records: dict[str, dict[str, Any]] = {}
    owner: dict[str, str] = {}

    def put(well: str, where: str, rec: dict[str, Any]) -> None:
        if well in owner:
            raise LayoutError(
                f"layout: well {well} is declared twice ({owner[well]} and {where})",
                well=well,
                hint="Give each well to one entry only.",
            )
        owner[well] = where
        records[well] = rec

    for s_i, s in enumerate(spec.get("series") or []):
        where = f"series[{s_i}]"
        _check_keys(s, where, _SERIES_KEYS)
        variable = s.get("variable")
        if not isinstance(variable, str) or not variable or variable in ("well", *TEXT_COLUMNS):
            raise _fail(f"{where}.variable", f"expected a quantity name like substrate, got {variable!r}")
        start, factor = _number(s, "start", where), _number(s, "factor", where)
        direction = s.get("direction", "columns")
        if direction not in ("columns", "rows"):
            raise _fail(f"{where}.direction", f"expected columns or rows, got {direction!r}")
        step_axis, line_axis = ("columns", "rows") if direction == "columns" else ("rows", "columns")
        n_of = {"rows": n_rows, "columns": n_cols}
        for key in ("steps", "lines"):
            if key not in s:
                raise _fail(f"{where}.{key}", "missing")
        steps = _positions(s["steps"], step_axis, n_of[step_axis], f"{where}.steps")
        lines = _positions(s["lines"], line_axis, n_of[line_axis], f"{where}.lines")
        role = s.get("role", "sample")
        if role not in ("sample", "standard"):
            raise _fail(f"{where}.role", f"a series holds samples or standards, got {role!r}")
        amounts = start * factor ** np.arange(len(steps), dtype=float)
        if s.get("zero_last", False):
            amounts[-1] = 0.0
        const = _set_values(s, where)
        group = str(s.get("group", f"series{s_i + 1}"))
        for rep, line in enumerate(lines, start=1):
            for step, amount in zip(steps, amounts, strict=True):
                r, c = (line, step) if direction == "columns" else (step, line)
                rec = {"role": role, "group": group, "replicate": str(rep), **const, variable: float(amount)}
                if "lot" in s:
                    rec["lot"] = str(s["lot"])
                put(f"{ROW_LABELS[r]}{c + 1}", where, rec)
    for w_i, e in enumerate(spec.get("wells") or []):
        where = f"wells[{w_i}]"
        _check_keys(e, where, _WELLS_KEYS)
        if "wells" not in e:
            raise _fail(f"{where}.wells", "missing")
        role = e.get("role", "sample")
        if role not in ROLES:
            raise _fail(f"{where}.role", f"expected one of {', '.join(ROLES)}, got {role!r}")
        rec = {"role": role, "group": str(e.get("group", role)), "replicate": str(e.get("replicate", ""))}
        if "lot" in e:
            rec["lot"] = str(e["lot"])
        rec.update(_set_values(e, where))
        for w in _well_list(e["wells"], plate_size, f"{where}.wells"):
            put(w, where, dict(rec))
    units = spec.get("units") or {}
    if not isinstance(units, dict) or not all(isinstance(v, str) for v in units.values()):
        raise _fail("units", "expected a mapping like {substrate: uM}")
    rows = [
        {"well": w, **records.get(w, {"role": "empty", "group": "", "replicate": ""})} for w in all_wells(plate_size)
    ]
    df = pd.DataFrame(rows)
    for col in df.columns:
        if col not in ("well", *TEXT_COLUMNS):
            df[col] = pd.to_numeric(df[col], errors="coerce")
    df["group"] = df["group"].fillna("").astype(str)
    df["replicate"] = df["replicate"].fillna("").astype(str)
    if "lot" in df.columns:
        df["lot"] = df["lot"].fillna("").astype(str)
    return _finish(df, dict(units), [], None)


# ---------------------------------------------------------------------------------------------------------


def check_match(data_wells: list[str], layout_wells: list[str], source: str) -> None:
    """Raise :class:`LayoutError` naming wells read but not in the layout, and layout wells not read.

    Pass as ``layout_wells`` the wells the layout uses (role other than ``empty``).
    """
    data_set = {normalise_well(w) for w in data_wells}
    layout_set = {normalise_well(w) for w in layout_wells}
    extra, missing = data_set - layout_set, layout_set - data_set
    if not extra and not missing:
        return

    def listed(wells: set[str]) -> str:
        size = infer_plate_size(wells)
        ordered = sorted(wells, key=lambda w: well_index(w, size))
        more = f" and {len(ordered) - 24} more" if len(ordered) > 24 else ""
        return ", ".join(ordered[:24]) + more

    parts = []
    if extra:
        parts.append(f"wells in the data but not in the layout: {listed(extra)}")
    if missing:
        parts.append(f"wells in the layout but not in the data: {listed(missing)}")
    raise LayoutError("; ".join(parts), path=source, hint="Fix the layout, or mark wells not read as role 'empty'.")
