"""CSV and xlsx exports of an audit file.

* CSV: one results table (default ``rates``), each row carrying the run it came from (``run_id``,
  ``recipe_sha256``) and the assay conditions from the recipe's ``assay`` block (columns ``assay_...``), so a
  row read on its own still says where and under what conditions it was measured.
* xlsx: a sheet ``about`` (provenance, assay, exclusions and overrides, the research-use note), one sheet per
  results table, a sheet ``time courses`` with the reads as imported (long form; masked reads marked) and,
  per plate, a sheet ``wide <plate>`` with the same reads as a spreadsheet user plots them (time down, one
  column per well). Every sheet has its header row frozen, units in the header (``rate (uM/min)``),
  columns wide enough for their contents and number formats that show the significant digits.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

import pandas as pd
from vzero.errors import VzeroError
from vzero.spreadsheet import inert, inert_frame

RESEARCH_NOTE = ("Results are for research use only; check them against your laboratory's validated "
                 "procedures before relying on them.")
EXCEL_ROWS = 1_048_575  # rows below the header in one sheet (the format's limit)


def flatten(mapping: Mapping[str, Any], prefix: str = "") -> dict[str, Any]:
    """``{"enzyme": {"name": "x"}}`` -> ``{"enzyme_name": "x"}``; lists become text."""
    out: dict[str, Any] = {}
    for key, value in mapping.items():
        name = f"{prefix}{key}"
        if isinstance(value, Mapping):
            out.update(flatten(value, f"{name}_"))
        elif isinstance(value, list):
            out[name] = "; ".join(str(v) for v in value)
        else:
            out[name] = value
    return out


def _load(audit: str | Path) -> tuple[dict[str, Any], dict[str, Any], dict[str, Any]]:
    from vzero.audit import reader

    with reader.open_audit(audit) as f:
        return reader.header(f), reader.read_results(f), reader.read_step_traces(f)


def table_with_context(head: Mapping[str, Any], table: pd.DataFrame) -> pd.DataFrame:
    """The table plus ``run_id``, ``recipe_sha256`` and the flattened assay block as constant columns."""
    out = table.copy()
    out["run_id"] = head.get("run_id", "")
    out["recipe_sha256"] = head.get("recipe_sha256", "")
    for key, value in flatten(head.get("assay") or {}, "assay_").items():
        out[key] = value
    return out


def write_csv(audit: str | Path, target: str | Path, table: str = "rates") -> None:
    head, results, _ = _load(audit)
    if table not in results:
        raise VzeroError(f"{audit} has no results table {table!r}; it has {', '.join(results) or 'none'}",
                         hint="Choose one with --table.")
    inert_frame(table_with_context(head, results[table].frame)).to_csv(target, index=False)


def about_rows(head: Mapping[str, Any]) -> pd.DataFrame:
    """Key/value rows for the ``about`` sheet."""
    rows: list[tuple[str, Any]] = [("note", RESEARCH_NOTE)]
    for key in ("recipe_name", "run_id", "created", "vzero_version", "format", "format_version", "recipe_sha256"):
        rows.append((key, head.get(key, "")))
    rows += [(f"version {k}", v) for k, v in (head.get("versions") or {}).items()]
    if head.get("derived_from"):
        rows += [(f"rerun of: {k}", str(v)) for k, v in head["derived_from"].items()]
    rows += [(f"assay {k}", v) for k, v in flatten(head.get("assay") or {}).items()]
    for key in ("exclusions", "overrides"):
        for item in head.get(key) or []:
            rows.append((key[:-1], ", ".join(f"{k}={v}" for k, v in item.items())))
    rows.append(("recipe", head.get("recipe_text", "")))
    return pd.DataFrame(rows, columns=["item", "value"])


def time_courses(traces: Mapping[str, Any]) -> pd.DataFrame:
    """Long table plate, well, time_s, signal, usable (one row per read), from per-plate traces."""
    import numpy as np

    parts = []
    for plate, t in traces.items():
        n_w, n_t = t.signal.shape
        parts.append(pd.DataFrame({
            "plate": plate,
            "well": np.repeat(np.asarray(t.well_names, dtype=object), n_t),
            "time_s": np.tile(t.time, n_w),
            "signal": t.signal.ravel(),
            "signal_unit": t.signal_unit,
            "usable": t.mask.ravel(),
        }))
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame()


def with_units(frame: pd.DataFrame, units: Mapping[str, str]) -> pd.DataFrame:
    """The table with each column that has a unit renamed ``name (unit)``."""
    return frame.rename(columns={c: f"{c} ({units[c]})" for c in frame.columns if units.get(c)})


def wide_courses(t: Any) -> pd.DataFrame:
    """One plate's reads as a wide table: ``time (s)`` down, one column per well (``A1 (RFU)``) across."""
    cols = {"time (s)": t.time}
    unit = f" ({t.signal_unit})" if t.signal_unit else ""
    for i, well in enumerate(t.well_names):
        cols[f"{well}{unit}"] = t.signal[i]
    return pd.DataFrame(cols)


#: Plates beyond this many get no wide sheet of their own (the long sheet holds every plate).
WIDE_SHEETS = 20


def write_xlsx(audit: str | Path, target: str | Path) -> None:
    head, results, traces = _load(audit)
    courses = time_courses(traces)
    with pd.ExcelWriter(target, engine="openpyxl") as xw:
        about_rows(head).to_excel(xw, sheet_name="about", index=False)
        for name, table in results.items():
            with_units(table.frame, table.units).to_excel(xw, sheet_name=name[:31], index=False)
        if len(courses) <= EXCEL_ROWS:
            courses.rename(columns={"time_s": "time (s)"}).to_excel(xw, sheet_name="time courses", index=False)
        else:
            pd.DataFrame({"note": [f"{len(courses)} reads do not fit one sheet; use the audit file or the "
                                   "EnzymeML export for the time courses"]}).to_excel(
                xw, sheet_name="time courses", index=False)
        for i, (plate, t) in enumerate(traces.items()):
            if i >= WIDE_SHEETS:
                break
            wide_courses(t).to_excel(xw, sheet_name=_sheet_name(f"wide {plate}", xw.book), index=False)
        _no_formulas(xw.book)
        for sheet in xw.book.worksheets:
            _dress(sheet, wide=sheet.title.startswith("wide "))


def _sheet_name(name: str, book: Any) -> str:
    """A sheet name Excel accepts (31 characters, none of []:*?/\\), unique in ``book``."""
    clean = "".join("_" if c in "[]:*?/\\" else c for c in name)[:31]
    taken = set(book.sheetnames)
    out, n = clean, 1
    while out in taken:
        n += 1
        out = f"{clean[:27]} ({n})"
    return out


def _dress(sheet: Any, wide: bool = False) -> None:
    """Freeze the header row (and the time column of a wide sheet), size the columns to their contents
    (sampled from the first rows, at most 60 characters) and give number columns a format that shows about
    five significant digits (scientific where the numbers are very small or large)."""
    from openpyxl.utils import get_column_letter

    sheet.freeze_panes = "B2" if wide else "A2"
    rows = list(sheet.iter_rows(min_row=1, max_row=min(sheet.max_row, 200)))
    if not rows:
        return
    for j in range(len(rows[0])):
        cells = [r[j] for r in rows if j < len(r)]
        width = max((len(str(c.value)) for c in cells if c.value is not None), default=8)
        numbers = [abs(c.value) for c in cells[1:] if isinstance(c.value, float)]
        sheet.column_dimensions[get_column_letter(j + 1)].width = min(max(width, 8) + 2, 60)
        if not numbers:
            continue
        big = max(numbers)
        small = min((x for x in numbers if x > 0), default=1.0)
        fmt = "0.0000E+00" if big >= 1e6 or small < 1e-3 else "0.0000" if big < 10 else "0.00"
        for row in sheet.iter_rows(min_row=2, min_col=j + 1, max_col=j + 1):
            for cell in row:
                if isinstance(cell.value, float):
                    cell.number_format = fmt


def _no_formulas(book: Any) -> None:
    """Keep every cell as the value it is: text starting with ``=`` (a group named "=1+41", say) would
    otherwise be stored as a live spreadsheet formula. vzero never writes formulas. Text cells that a
    spreadsheet would evaluate once edited get the same leading ``'`` as in CSV (:mod:`vzero.spreadsheet`)."""
    for sheet in book.worksheets:
        for row in sheet.iter_rows():
            for cell in row:
                if cell.data_type in ("f", "s") and isinstance(cell.value, str):
                    text = inert(cell.value)
                    if text != cell.value:
                        cell.value = text
                    cell.data_type = "s"
