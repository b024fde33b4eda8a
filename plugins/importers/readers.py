"""Read plate-reader kinetic exports (delimited text or .xlsx) into plain numpy blocks.

One file may hold several kinetic blocks (one per wavelength or plate), each a table of reads:

* **wide**: one row per read, a time column, optionally a temperature column, and one column per well
  (header cells like ``A1`` or ``A01``);
* **long**: one row per (well, read) with a well column, a time column and a signal column.

A block starts at a header row (a row naming a time column) and ends at a blank row, the next header row or
the end of the file. The single-cell line just above a header, if any, names the block; otherwise blocks are
called ``block1``, ``block2``, ... Lines before the first header (instrument settings) and lines after a
blank row that do not look like data are skipped.

Everything a recipe leaves open (delimiter, decimal mark, encoding, header row, time unit) is detected; every
convention taken without being told lands in :attr:`Block.assumptions` so the run can show it as a warning.
Anything that cannot be read raises :class:`vzero.errors.InputFileError` naming file, row, column and
well; no other exception type leaves :func:`read_table`.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import operator
import re
from collections import Counter
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
from vzero.errors import InputFileError
from vzero.plugins.kinetics.wells import is_well, normalise_well

#: Cell texts (case-insensitive) that mean "the detector was over its range" (our own generic list).
#: Any cell starting with ``>`` (``>4.0``) means the same.
DEFAULT_OVERFLOW_TOKENS: tuple[str, ...] = (
    "over",
    "overflow",
    "overrange",
    "over range",
    "out of range",
    "sat",
    "saturated",
    "high",
)
#: Cell texts (case-insensitive) that mean "no read here" and become NaN.
DEFAULT_MISSING_TOKENS: tuple[str, ...] = ("", "na", "n/a", "nan", "-", "--", "none", "missing")

_TIME_UNITS = {
    "ms": 1e-3,
    "s": 1.0,
    "sec": 1.0,
    "secs": 1.0,
    "second": 1.0,
    "seconds": 1.0,
    "min": 60.0,
    "mins": 60.0,
    "minute": 60.0,
    "minutes": 60.0,
    "h": 3600.0,
    "hr": 3600.0,
    "hrs": 3600.0,
    "hour": 3600.0,
    "hours": 3600.0,
}
_TEMP_UNITS = {"°c", "ºc", "c", "degc", "deg c", "celsius", "k", "kelvin"}
_TIME_NAMES = {"time", "t", "elapsed", "elapsed time", "time elapsed", "kinetic time", "read time"}
_WELL_NAMES = {"well", "well id", "wellid", "well name", "position", "well position"}
_SIGNAL_NAMES = {
    "signal",
    "value",
    "read",
    "reading",
    "absorbance",
    "abs",
    "od",
    "fluorescence",
    "fl",
    "rfu",
    "intensity",
    "luminescence",
    "counts",
}
_LABEL_RE = re.compile(
    r"^(?P<name>.*?)\s*(?:[\(\[](?P<u1>[^\)\]]*)[\)\]]|/\s*(?P<u2>[^/]+)|_(?P<u3>ms|s|sec|min|h|hr))\s*$"
)
_HEADER_HINTS = ("time", "elapsed")
_XLSX_MAGIC = b"PK\x03\x04"
_EXCEL_EPOCH = dt.datetime(1899, 12, 30)


@dataclass(frozen=True)
class ReadOptions:
    """How to read a file; every ``None`` means "detect it" (and note what was assumed).

    Attributes
    ----------
    shape : "wide", "long" or "auto" (either, decided per header row).
    delimiter : field separator; None sniffs among ``,`` ``;`` and tab.
    decimal : "." or ","; None detects it from the numbers in the file.
    encoding : text encoding; None tries utf-8 (with or without BOM), then latin-1.
    sheet : worksheet name or 0-based index for .xlsx; None takes the first sheet.
    skip_rows : lines to skip before the first header; None finds the header row.
    time_column, temperature_column : header text of those columns; None recognises common labels.
    time_unit : "s", "min", "h" for numeric times; None reads it from the header (``Time (min)``) or assumes
        seconds. Text times ``h:mm:ss`` and ``mm:ss`` are recognised by themselves.
    overflow_tokens : cell texts meaning an over-range read (NaN, saturated).
    missing_tokens : cell texts meaning no read (NaN).
    ceiling : a numeric read at or above this is marked saturated (value kept).
    long_columns : (well, time, signal) header texts of a long table; None recognises common labels.
    """

    shape: Literal["wide", "long", "auto"] = "auto"
    delimiter: str | None = None
    decimal: str | None = None
    encoding: str | None = None
    sheet: str | int | None = None
    skip_rows: int | None = None
    time_column: str | None = None
    time_unit: Literal["s", "min", "h"] | None = None
    temperature_column: str | None = None
    overflow_tokens: tuple[str, ...] = DEFAULT_OVERFLOW_TOKENS
    missing_tokens: tuple[str, ...] = DEFAULT_MISSING_TOKENS
    ceiling: float | None = None
    long_columns: tuple[str, str, str] | None = None


@dataclass
class Block:
    """One kinetic table: reads of ``wells`` at times ``time_s`` (seconds, strictly increasing).

    ``signal`` is ``[n_wells, n_time]`` in the instrument's units (NaN for no read or an overflow token);
    ``saturated`` marks overflow tokens and reads at/above the ceiling; ``temperature`` is per read (the
    unit of the file, usually °C) or None.
    """

    name: str
    time_s: np.ndarray
    wells: list[str]
    signal: np.ndarray
    saturated: np.ndarray
    temperature: np.ndarray | None = None
    assumptions: list[str] = field(default_factory=list)
    lines: list[int] | None = None
    """The file line (or spreadsheet row) of each time point, where each time has one row (wide tables)."""


@dataclass
class TextGrid:
    """Rows of cell texts with the 1-based line (or spreadsheet row) each came from."""

    rows: list[list[str]]
    lines: list[int]
    decimal: str
    assumptions: list[str]


# ---------------------------------------------------------------------------------------------------------
# entry point


def read_table(data: bytes, *, source: str, options: ReadOptions | None = None) -> list[Block]:
    """Read every kinetic block in ``data`` (the raw bytes of file ``source``; the name is for messages)."""
    opts = options or ReadOptions()
    if opts.shape not in ("wide", "long", "auto"):
        raise InputFileError(f"unknown table shape {opts.shape!r}", path=source, hint="Use wide, long or auto.")
    grid = load_grid(data, source=source, options=opts)
    headers = _find_headers(grid, source, opts)
    blocks: list[Block] = []
    used: set[str] = set()
    for k, (h, kind, end) in enumerate(headers, start=1):
        title = _title_above(grid, h, headers[k - 2][2] if k > 1 else None)
        name = title or f"block{k}"
        base, n = name, 2
        while name in used:
            name, n = f"{base}-{n}", n + 1
        used.add(name)
        if kind == "wide":
            block = _read_wide(grid, h, end, name, source, opts)
        else:
            block = _read_long(grid, h, end, name, source, opts)
        block.assumptions[:0] = grid.assumptions
        blocks.append(block)
    return blocks


#: The longest cell text read (a number, a well name, a group name: a few dozen characters). A longer cell
#: is a damaged or crafted file, and would cost memory out of all proportion downstream.
MAX_CELL_CHARS = 10_000


def load_grid(data: bytes, *, source: str, options: ReadOptions) -> TextGrid:
    """Decode ``data`` (delimited text or .xlsx) into rows of cell texts, detecting what options leave open.

    Shared with the layout reader. Raises :class:`InputFileError` for empty, binary or damaged files, and
    for a cell longer than ``MAX_CELL_CHARS``.
    """
    grid = _load_grid(data, source=source, options=options)
    for k, row in enumerate(grid.rows):
        if row and max(map(len, row)) > MAX_CELL_CHARS:
            j = max(range(len(row)), key=lambda i: len(row[i]))
            raise InputFileError(f"a cell of {len(row[j])} characters; cells over {MAX_CELL_CHARS} are refused",
                                 path=source, row=grid.lines[k] if grid.lines else k + 1, column=str(j + 1),
                                 hint="Check the file: it looks damaged or is not a plate export.")
    return grid


def _load_grid(data: bytes, *, source: str, options: ReadOptions) -> TextGrid:
    """:func:`load_grid` without the cell-size check."""
    if not data or not data.strip():
        raise InputFileError("the file is empty", path=source, hint="Check that the export finished.")
    if data[:4] == _XLSX_MAGIC:
        rows = _xlsx_rows(data, source, options.sheet)
        width = max(map(len, rows), default=0)  # a sheet stores no trailing empty cells: pad them back
        rows = [r + [""] * (width - len(r)) for r in rows]
        assumptions: list[str] = []
        decimal = options.decimal or "."
        if decimal == ",":
            rows = [[c.replace(",", ".") for c in r] for r in rows]
        return TextGrid(rows, list(range(1, len(rows) + 1)), ".", assumptions)
    text, enc_note = _decode(data, source, options.encoding)
    assumptions = [enc_note] if enc_note else []
    delimiter = options.delimiter or _sniff_delimiter(text)
    if len(delimiter) != 1:
        raise InputFileError(f"delimiter must be one character, got {delimiter!r}", path=source)
    decimal = options.decimal
    if decimal is None:
        decimal, note = _detect_decimal(text, delimiter)
        if note:
            assumptions.append(note)
    if decimal not in (".", ","):
        raise InputFileError(f"decimal mark must be '.' or ',', got {decimal!r}", path=source)
    if '"' not in text and "\r" not in text:
        # nothing quoted, one line per row: str.split gives exactly the csv module's cells, twice as fast
        split = text.split("\n")
        if split and split[-1] == "":
            split.pop()  # the final line break ends the last row; it starts no new one
        rows = [line.split(delimiter) if line else [] for line in split]
        return TextGrid(rows, list(range(1, len(rows) + 1)), decimal, assumptions)
    rows, lines = [], []
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    start = 1
    try:
        for row in reader:
            rows.append(row)
            lines.append(start)
            start = reader.line_num + 1
    except csv.Error as exc:
        raise InputFileError(
            f"cannot split the line into cells ({exc})",
            path=source,
            row=reader.line_num,
            hint="Look for a stray quote character.",
        ) from None
    return TextGrid(rows, lines, decimal, assumptions)


# ---------------------------------------------------------------------------------------------------------
# decoding and sniffing


#: Unicode category Cc (C0 and C1 control characters) except tab, carriage return and line feed.
_CONTROL = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f]")


def _decode(data: bytes, source: str, encoding: str | None) -> tuple[str, str | None]:
    if b"\x00" in data[:65536] or data[:8] == b"\x89PNG\r\n\x1a\n":
        raise InputFileError(
            "this is not a text table (binary content)",
            path=source,
            hint="Export the plate as .csv, .tsv/.txt or .xlsx.",
        )
    note = None
    if encoding is not None:
        try:
            text = data.decode(encoding)
        except (UnicodeDecodeError, LookupError) as exc:
            raise InputFileError(f"cannot decode as {encoding}: {exc}", path=source) from None
    else:
        try:
            text = data.decode("utf-8-sig")
        except UnicodeDecodeError:
            text = data.decode("latin-1")
            note = "the file is not UTF-8; read it as latin-1 (set encoding if that is wrong)"
    sample = text[:65536]
    bad = len(_CONTROL.findall(sample))
    if bad > max(3, len(sample) // 100):
        raise InputFileError(
            "this is not a text table (too many control characters)",
            path=source,
            hint="Export the plate as .csv, .tsv/.txt or .xlsx.",
        )
    return text, note


def _sniff_delimiter(text: str) -> str:
    """The candidate whose count per line is most consistent (ties: tab, then ``;``, then ``,``)."""
    sample = [ln for ln in text[:200000].splitlines()[:200] if ln.strip()]
    best, best_score = ",", (0.0, 0)
    for d in ("\t", ";", ","):
        counts = [ln.count(d) for ln in sample]
        nonzero = [c for c in counts if c > 0]
        if not nonzero:
            continue
        mode = Counter(nonzero).most_common(1)[0][0]
        score = (sum(c == mode for c in counts) / len(counts), mode)
        if score > best_score:
            best, best_score = d, score
    return best


def _detect_decimal(text: str, delimiter: str) -> tuple[str, str | None]:
    if delimiter == ",":
        return ".", None
    d = re.escape(delimiter)
    sample = text[:500000]
    n_comma = len(re.findall(rf"(?:^|{d})\s*[+-]?\d+,\d+(?:[eE][+-]?\d+)?\s*(?={d}|$)", sample, re.M))
    n_dot = len(re.findall(rf"(?:^|{d})\s*[+-]?\d*\.\d+(?:[eE][+-]?\d+)?\s*(?={d}|$)", sample, re.M))
    if n_comma > n_dot:
        return ",", "numbers use a decimal comma (detected); set decimal if that is wrong"
    return ".", None


#: Bounds on an .xlsx workbook, checked before it is unpacked: the sizes its zip directory declares, unpacked
#: (a plate export is a few MB; a "zip bomb" of a few KB can unpack to GBs), and the rows read from a sheet.
#: Environment variables ``VZERO_XLSX_MAX_BYTES`` and ``VZERO_XLSX_MAX_ROWS`` raise them.
XLSX_MAX_BYTES = 200_000_000
XLSX_MAX_ROWS = 200_000
#: The most cells read from a sheet (rows times their width), whatever its rows look like.
XLSX_MAX_CELLS = 20_000_000


def _limit(name: str, default: int) -> int:
    import os

    text = os.environ.get(name, "")
    return int(text) if text.isdigit() else default


def _check_xlsx_size(data: bytes, source: str) -> None:
    """Refuse a workbook whose parts declare more than ``XLSX_MAX_BYTES`` unpacked, or that is compressed
    (the sizes its zip directory declares; Python's zipfile, which openpyxl reads through, stops unpacking a
    part at its declared size, so a directory that understates them does not get past this)."""
    import zipfile

    limit = _limit("VZERO_XLSX_MAX_BYTES", XLSX_MAX_BYTES)
    try:
        with zipfile.ZipFile(io.BytesIO(data)) as z:
            unpacked = sum(info.file_size for info in z.infolist())
    except (zipfile.BadZipFile, OSError, ValueError) as exc:
        raise InputFileError(f"cannot open the .xlsx workbook ({exc})", path=source,
                             hint="Open and re-save it in a spreadsheet program, or export it as .csv.") from None
    if unpacked > limit:
        raise InputFileError(
            f"the .xlsx workbook unpacks to {unpacked / 1e6:.0f} MB, more than the {limit / 1e6:.0f} MB allowed "
            f"({len(data) / 1e6:.1f} MB packed)", path=source,
            hint="Export the plate alone as .csv, or set VZERO_XLSX_MAX_BYTES (bytes) if the workbook is real.")


def _xlsx_rows(data: bytes, source: str, sheet: str | int | None) -> list[list[str]]:
    try:
        import openpyxl
    except ImportError:  # pragma: no cover - openpyxl is a dependency
        raise InputFileError("reading .xlsx needs openpyxl", path=source, hint="pip install openpyxl") from None
    _check_xlsx_size(data, source)
    try:
        wb = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except Exception as exc:  # zipfile, XML and openpyxl errors of many types on a damaged workbook
        raise InputFileError(
            f"cannot open the .xlsx workbook ({type(exc).__name__}: {exc})",
            path=source,
            hint="Open and re-save it in a spreadsheet program, or export it as .csv.",
        ) from None
    try:
        names = list(wb.sheetnames)
        if sheet is None:
            chosen = names[0] if names else None
        elif isinstance(sheet, int):
            chosen = names[sheet] if 0 <= sheet < len(names) else None
        else:
            chosen = sheet if sheet in names else None
        if chosen is None:
            raise InputFileError(
                f"the workbook has no sheet {sheet!r}",
                path=source,
                hint=f"Its sheets are: {', '.join(map(repr, names)) or '(none)'}.",
            )
        max_rows = _limit("VZERO_XLSX_MAX_ROWS", XLSX_MAX_ROWS)
        rows: list[list[str]] = []
        cells = 0
        try:
            for row in wb[chosen].iter_rows(values_only=True):
                cells += len(row)
                if len(rows) >= max_rows or cells > XLSX_MAX_CELLS:
                    raise InputFileError(
                        f"sheet {chosen!r} has more than {max_rows} rows or {XLSX_MAX_CELLS} cells; a plate "
                        "export has far fewer",
                        path=source, row=len(rows) + 1,
                        hint="Export the plate alone, or set VZERO_XLSX_MAX_ROWS if the sheet is real.")
                rows.append([_cell_text(v) for v in row])
            return rows
        except InputFileError:
            raise
        except Exception as exc:  # damaged sheet XML surfaces only while iterating
            raise InputFileError(f"sheet {chosen!r} is damaged ({type(exc).__name__}: {exc})", path=source) from None
    finally:
        wb.close()


def _cell_text(v: object) -> str:
    """Spreadsheet cell -> text that parses back to the same value (repr of floats is exact)."""
    if v is None:
        return ""
    if isinstance(v, bool):
        return str(v)
    if isinstance(v, float | int):
        return repr(float(v)) if isinstance(v, float) else str(v)
    if isinstance(v, dt.datetime):
        return _seconds_text((v - _EXCEL_EPOCH).total_seconds())
    if isinstance(v, dt.time):
        return _seconds_text(v.hour * 3600 + v.minute * 60 + v.second + v.microsecond / 1e6)
    if isinstance(v, dt.timedelta):
        return _seconds_text(v.total_seconds())
    return str(v)


def _seconds_text(s: float) -> str:
    h, rem = divmod(s, 3600.0)
    m, sec = divmod(rem, 60.0)
    return f"{int(h)}:{int(m):02d}:{sec!r}"


# ---------------------------------------------------------------------------------------------------------
# header rows and block extents


def split_label(label: str) -> tuple[str, str | None]:
    """``"Time (min)"`` -> ("time", "min"); ``"Temp [°C]"`` -> ("temp", "°c"); lower-cased, stripped."""
    text = label.strip()
    m = _LABEL_RE.match(text)
    if m and m.group("name"):
        unit = m.group("u1") or m.group("u2") or m.group("u3")
        return m.group("name").strip().lower(), unit.strip().lower() if unit else None
    return text.lower(), None


def _is_time_label(label: str, opts: ReadOptions) -> bool:
    low = label.strip().lower()
    for wanted in (opts.time_column, opts.long_columns[1] if opts.long_columns else None):
        if wanted is not None:
            return low == wanted.strip().lower()
    name, unit = split_label(label)
    if unit in _TEMP_UNITS:
        return False
    return name in _TIME_NAMES or name.startswith("time ")


def _is_temp_label(label: str, opts: ReadOptions) -> bool:
    if opts.temperature_column is not None:
        return label.strip().lower() == opts.temperature_column.strip().lower()
    name, unit = split_label(label)
    return bool(name) and (name.startswith("temp") or unit in _TEMP_UNITS)


def _is_number(text: str) -> bool:
    try:
        float(text.replace(",", "."))
    except ValueError:
        return False
    return True


def _header_kind(row: list[str], opts: ReadOptions) -> str | None:
    """ "wide" or "long" if ``row`` is a header row of that shape, else None."""
    lead = next((c for c in row if c and not c.isspace()), "")
    if lead and _is_number(lead.strip()):
        return None  # a header row holds no numbers; most rows are data rows starting with a time
    cells = [c.strip() for c in row]
    joined = "\x1f".join(cells).lower()
    wanted = [w.strip().lower() for w in (opts.time_column, *(opts.long_columns or ())) if w]
    if not (any(h in joined for h in (*_HEADER_HINTS, *wanted)) or "t" in cells or "T" in cells):
        return None
    if not any(_is_time_label(c, opts) for c in cells if c):
        return None
    if any(_is_number(c) for c in cells if c):
        return None
    n_wells = sum(1 for c in cells if c and is_well(c))
    if opts.shape in ("wide", "auto") and n_wells >= 1:
        return "wide"
    if opts.shape in ("long", "auto") and n_wells == 0 and _long_columns(cells, opts) is not None:
        return "long"
    return None


def _long_columns(cells: list[str], opts: ReadOptions) -> tuple[int, int, int] | None:
    """Indices of the (well, time, signal) columns of a long header, or None."""
    low = [c.strip().lower() for c in cells]
    if opts.long_columns is not None:
        names = [n.strip().lower() for n in opts.long_columns]
        if all(n in low for n in names):
            return low.index(names[0]), low.index(names[1]), low.index(names[2])
        return None
    well = next((j for j, c in enumerate(low) if split_label(c)[0] in _WELL_NAMES), None)
    time = next((j for j, c in enumerate(cells) if c and _is_time_label(c, opts)), None)
    if well is None or time is None:
        return None
    temp = {j for j, c in enumerate(cells) if c and _is_temp_label(c, opts)}
    others = [j for j, c in enumerate(low) if c and j not in (well, time) and j not in temp]
    named = [j for j in others if split_label(low[j])[0] in _SIGNAL_NAMES]
    if len(named) == 1:
        return well, time, named[0]
    if len(others) == 1:
        return well, time, others[0]
    return None


def _is_blank(row: list[str]) -> bool:
    return all(not c.strip() for c in row)


def _looks_like_data(row: list[str]) -> bool:
    filled = [c for c in row if c.strip()]
    return len(filled) >= 2 and sum(_is_number(c.strip()) for c in filled) * 2 > len(filled)


def _single_label(row: list[str]) -> str | None:
    filled = [c.strip() for c in row if c.strip()]
    if len(filled) == 1 and not _is_number(filled[0]) and ":" not in filled[0][:3]:
        return filled[0]
    return None


def _find_headers(grid: TextGrid, source: str, opts: ReadOptions) -> list[tuple[int, str, int]]:
    """(header index, kind, end index exclusive) of every block."""
    rows = grid.rows
    first = 0
    if opts.skip_rows is not None:
        first = int(opts.skip_rows)
        if not 0 <= first < len(rows) or _header_kind(rows[first], opts) is None:
            raise InputFileError(
                f"skip_rows={opts.skip_rows} should leave a header row (naming a time column) on top, "
                "but that line is not one",
                path=source,
                row=grid.lines[first] if 0 <= first < len(rows) else None,
                hint="Fix skip_rows or leave it unset to find the header row.",
            )
    heads = [(i, k) for i in range(first, len(rows)) if (k := _header_kind(rows[i], opts)) is not None]
    if not heads:
        shape = {"wide": "a time column and well columns (A1, A2, ...)", "long": "well, time and signal columns"}
        want = shape.get(opts.shape, f"{shape['wide']}, or {shape['long']}")
        raise InputFileError(
            f"no header row found: expected a row naming {want}",
            path=source,
            hint="Is this a plate-reader table? Set time_column (or long_columns) if the labels differ.",
        )
    out = []
    for n, (h, kind) in enumerate(heads):
        stop = heads[n + 1][0] if n + 1 < len(heads) else len(rows)
        end = h + 1
        while end < stop and not _is_blank(rows[end]):
            if end == stop - 1 and stop < len(rows) and _single_label(rows[end]) is not None:
                break  # the title line of the next block
            end += 1
        for j in range(end, stop):
            if _looks_like_data(rows[j]) and not (j == stop - 1 and _single_label(rows[j])):
                raise InputFileError(
                    "this line looks like data but follows a blank line, without a header row above it",
                    path=source,
                    row=grid.lines[j],
                    hint="Remove the blank line, or repeat the header row above this block.",
                )
        out.append((h, kind, end))
    return out


def _title_above(grid: TextGrid, h: int, prev_end: int | None) -> str | None:
    if h == 0 or (prev_end is not None and h - 1 < prev_end):
        return None
    return _single_label(grid.rows[h - 1])


# ---------------------------------------------------------------------------------------------------------
# cell parsing


def _cells(grid: TextGrid, h: int, end: int, source: str) -> tuple[list[str], np.ndarray]:
    """Header cells (trailing empties dropped) and the data rows as a 2-D text array of that width."""
    header, body = _cell_rows(grid, h, end, source)
    return header, np.array(body, dtype=str).reshape(len(body), len(header))


def _cell_rows(grid: TextGrid, h: int, end: int, source: str) -> tuple[list[str], list[list[str]]]:
    """Header cells (trailing empties dropped) and the data rows, each cut to that width."""
    header = list(grid.rows[h])
    while header and not header[-1].strip():
        header.pop()
    width = len(header)
    body = []
    for i in range(h + 1, end):
        row = grid.rows[i]
        n = len(row)
        if n != width:
            filled = n
            while filled and not row[filled - 1].strip():
                filled -= 1
            if filled > width or n < width:
                raise InputFileError(
                    f"ragged row: {filled if filled > width else n} cells, but the header has {width}",
                    path=source,
                    row=grid.lines[i],
                    hint="Every row of a block needs one cell per header column (empty cells are allowed).",
                )
            row = row[:width]
        body.append(row)
    if not body:
        raise InputFileError(
            "header row without data rows below it", path=source, row=grid.lines[h], hint="Is the export cut?"
        )
    return header, body


def _plain_numbers(rows: list[list[str]], columns: list[int]) -> np.ndarray | None:
    """The cells of ``columns`` as a float array [n_rows, n_columns] when every one is a finite number, else
    None (then the careful path reads tokens and names the bad cell).

    numpy turns each text into a float exactly as ``astype(float64)`` of a text array does (both use
    Python's float parsing) in one call instead of one per cell: a plate of plain numbers is the common case.
    """
    if not columns:
        return None
    pick = operator.itemgetter(*columns)
    try:
        values = np.array([pick(r) for r in rows], dtype=np.float64).reshape(len(rows), len(columns))
    except (ValueError, TypeError):
        return None
    return None if np.isinf(values).any() else values


def _numbers(
    cells: np.ndarray, decimal: str, opts: ReadOptions, allow_overflow: bool = True
) -> tuple[np.ndarray, np.ndarray, tuple[int, ...] | None]:
    """Parse a text array: (values with NaN for missing/overflow, overflow mask, index of first bad cell)."""
    s = np.char.replace(cells, ",", ".") if decimal == "," else cells
    shape = cells.shape
    try:
        values = s.astype(np.float64)
        over = np.zeros(shape, dtype=bool)
    except ValueError:
        stripped = np.char.strip(s)
        low = np.char.lower(stripped)
        missing = np.isin(low, [t.lower() for t in opts.missing_tokens]) | (stripped == "")
        over = np.zeros(shape, dtype=bool)
        if allow_overflow:
            over = np.isin(low, [t.lower() for t in opts.overflow_tokens]) | np.char.startswith(stripped, ">")
        rest = ~(missing | over)
        values = np.full(shape, np.nan)
        try:
            values[rest] = stripped[rest].astype(np.float64)
        except ValueError:
            for flat in np.flatnonzero(rest.ravel()):
                try:
                    float(stripped.flat[flat])
                except ValueError:
                    return values, over, tuple(int(i) for i in np.unravel_index(flat, shape))
            raise AssertionError("unreachable: numpy and float() disagree") from None
    inf = np.isinf(values)
    if inf.any():
        return values, over, tuple(int(i) for i in np.unravel_index(int(np.flatnonzero(inf)[0]), shape))
    return values, over, None


def _times(
    cells: np.ndarray, label: str, decimal: str, opts: ReadOptions, source: str, lines: list[int]
) -> tuple[np.ndarray, list[str]]:
    """Time cells -> seconds. Text ``h:mm:ss``/``mm:ss`` or numbers in the header's or options' unit."""
    notes: list[str] = []
    stripped = np.char.strip(cells)

    def bad_time(text: str, row: int) -> InputFileError:
        return InputFileError(f"time {text!r} is not a number or h:mm:ss / mm:ss", path=source, row=row,
                              column=label, hint="Every cell of the time column needs a time.")

    colon = np.char.find(stripped, ":") >= 0
    if colon.any():
        uniq, inverse = np.unique(stripped, return_inverse=True)
        secs = np.empty(len(uniq))
        two_part = False
        bad_k: list[int] = []
        for k, text in enumerate(uniq):
            parts = str(text).split(":")
            try:
                nums = [float(p.replace(",", ".") if decimal == "," else p) for p in parts]
            except ValueError:
                nums = []
            if len(parts) not in (2, 3) or len(nums) != len(parts) or any(x < 0 for x in nums):
                bad_k.append(k)
                continue
            if len(nums) == 3:
                secs[k] = nums[0] * 3600 + nums[1] * 60 + nums[2]
            else:
                two_part = True
                scale = 3600.0 if opts.time_unit == "h" else 60.0
                secs[k] = nums[0] * scale + nums[1] * scale / 60.0
        if bad_k:  # the first bad cell in file order (the unique texts are sorted)
            i = int(np.flatnonzero(np.isin(inverse, bad_k))[0])
            raise bad_time(str(stripped.flat[i]), lines[i])
        if two_part and opts.time_unit is None:
            notes.append(f"times like '{uniq[0]}' in column {label!r} read as mm:ss (set time_unit h for h:mm)")
        return secs[inverse].reshape(cells.shape), notes
    values, _, bad = _numbers(cells, decimal, opts, allow_overflow=False)
    if bad is None and np.isnan(values).any():
        bad = (int(np.flatnonzero(np.isnan(values))[0]),)
    if bad is not None:
        raise bad_time(str(cells[bad]).strip(), lines[bad[0]])
    unit = opts.time_unit
    if unit is None:
        unit = split_label(label)[1]
        if unit not in _TIME_UNITS:
            notes.append(f"time column {label!r} states no unit; assumed seconds (set time_unit if not)")
            unit = "s"
    if unit not in _TIME_UNITS:
        raise InputFileError(f"unknown time unit {unit!r}", path=source, column=label, hint="Use s, min or h.")
    return values * _TIME_UNITS[unit], notes


def _check_increasing(t: np.ndarray, label: str, source: str, lines: list[int], well: str | None = None) -> None:
    d = np.diff(t)
    bad = np.flatnonzero(d <= 0)
    if bad.size:
        i = int(bad[0]) + 1
        what = "repeats the previous time" if d[i - 1] == 0 else "goes back in time"
        raise InputFileError(
            f"time {t[i]:g} s {what} ({t[i - 1]:g} s)",
            path=source,
            row=lines[i],
            column=label,
            well=well,
            hint="Reads must be in time order, each time once; check for pasted or duplicated rows.",
        )


def _bad_cell(message: str, source: str, row: int, column: str, well: str | None, token: str) -> InputFileError:
    return InputFileError(
        f"{message} {token!r} is not a number",
        path=source,
        row=row,
        column=column,
        well=well,
        hint="Fix the cell, or add the token to overflow_tokens / missing_tokens.",
    )


def _temperature(
    body: np.ndarray,
    header: list[str],
    j: int | None,
    decimal: str,
    opts: ReadOptions,
    source: str,
    lines: list[int],
) -> np.ndarray | None:
    """Column ``j`` as numbers (NaN where empty), or None when there is no temperature column."""
    if j is None:
        return None
    values, _, bad = _numbers(body[:, j], decimal, opts, allow_overflow=False)
    if bad is not None:
        raise _bad_cell("temperature", source, lines[bad[0]], header[j].strip(), None, str(body[bad[0], j]))
    return values


# ---------------------------------------------------------------------------------------------------------
# wide and long blocks


def _read_wide(grid: TextGrid, h: int, end: int, name: str, source: str, opts: ReadOptions) -> Block:
    header, rows = _cell_rows(grid, h, end, source)
    lines = grid.lines[h + 1 : end]
    notes: list[str] = []
    time_j = next(j for j, c in enumerate(header) if c.strip() and _is_time_label(c, opts))
    temp_j = next((j for j, c in enumerate(header) if j != time_j and c.strip() and _is_temp_label(c, opts)), None)
    well_j: list[int] = []
    wells: list[str] = []
    seen: dict[str, int] = {}
    ignored = []
    for j, c in enumerate(header):
        if j in (time_j, temp_j) or not c.strip():
            continue
        if is_well(c):
            w = normalise_well(c)
            if w in seen:
                raise InputFileError(
                    f"well {w} has two columns ({header[seen[w]].strip()!r} is column {seen[w] + 1}, "
                    f"{c.strip()!r} is column {j + 1})",
                    path=source,
                    row=grid.lines[h],
                    column=c.strip(),
                    well=w,
                    hint="Each well may appear once per block.",
                )
            seen[w] = j
            well_j.append(j)
            wells.append(w)
        else:
            ignored.append(c.strip())
    if ignored:
        notes.append(f"block {name!r}: ignored columns {', '.join(map(repr, ignored))}")
    plain = _plain_numbers(rows, well_j) if grid.decimal == "." else None
    if plain is None:  # the careful path: every cell as text
        keep = list(range(len(header)))
        body = np.array(rows, dtype=str).reshape(len(rows), len(header))
    else:  # reads already parsed: only the time and temperature columns are needed as text
        keep = [time_j] if temp_j is None else [time_j, temp_j]
        body = np.array([[r[j] for j in keep] for r in rows], dtype=str).reshape(len(rows), len(keep))
    at = {j: k for k, j in enumerate(keep)}
    time_s, tnotes = _times(body[:, at[time_j]], header[time_j].strip(), grid.decimal, opts, source, lines)
    _check_increasing(time_s, header[time_j].strip(), source, lines)
    if plain is None:
        signal, over, bad = _numbers(body[:, well_j].T, grid.decimal, opts)
        if bad is not None:
            w, t = bad
            raise _bad_cell("read", source, lines[t], header[well_j[w]].strip(), wells[w], str(body[t, well_j[w]]))
    else:
        signal, over = np.ascontiguousarray(plain.T), np.zeros(plain.T.shape, dtype=bool)
    temperature = _temperature(body, [header[j] for j in keep], None if temp_j is None else at[temp_j],
                               grid.decimal, opts, source, lines)
    saturated = over if opts.ceiling is None else over | (signal >= opts.ceiling)
    return Block(name, time_s, wells, signal, saturated, temperature, notes + tnotes, list(lines))


def _align_cycles(times: np.ndarray, t_code: np.ndarray, t_row: np.ndarray, well_code: np.ndarray, n_wells: int,
                  notes: list[str]) -> tuple[np.ndarray, np.ndarray]:
    """One shared time axis for wells read at staggered times within each read cycle.

    Readers that list each read with its own time stamp (long tables) often stamp wells a few seconds apart
    within one pass over the plate. Taken literally, no two wells share a time and every read sits alone in
    its column, so blank subtraction finds no blank at any sample's time. When every well has the same number
    of reads and the stagger is under half the spacing of the cycles, reads are aligned by cycle on the median
    time of each cycle, and a note (a run warning) says by how much the wells were apart.
    """
    counts = np.bincount(well_code, minlength=n_wells)
    n = int(counts.max()) if counts.size else 0
    if n < 2 or times.size <= n or not (counts == n).all():
        return times, t_code
    by_well = np.lexsort((t_row, well_code))  # rows grouped by well, each well's reads in time order
    cycle = np.empty(t_row.size, dtype=np.int64)
    cycle[by_well] = np.tile(np.arange(n), n_wells)
    stamp = np.empty((n_wells, n))
    stamp[well_code, cycle] = t_row
    axis = np.median(stamp, axis=0)
    spacing = np.diff(axis)
    stagger = float((stamp.max(axis=0) - stamp.min(axis=0)).max())  # widest spread of one cycle
    if (spacing <= 0).any() or stagger >= 0.5 * float(spacing.min()):
        notes.append("wells were read at different times and could not be aligned into read cycles; each time "
                     "is kept as read, so some reads have no blank at the same time")
        return times, t_code
    notes.append(f"wells were stamped up to {stagger:.3g} s apart within each read cycle; reads were aligned "
                 "by cycle on the median time of each cycle")
    return axis, cycle


def _read_long(grid: TextGrid, h: int, end: int, name: str, source: str, opts: ReadOptions) -> Block:
    header, body = _cells(grid, h, end, source)
    lines = grid.lines[h + 1 : end]
    cols = _long_columns(header, opts)
    assert cols is not None  # _header_kind checked it
    wj, tj, sj = cols
    temp_j = next((j for j, c in enumerate(header) if j not in cols and c.strip() and _is_temp_label(c, opts)), None)
    raw_wells, inverse = np.unique(np.char.strip(body[:, wj]), return_inverse=True)
    norm = []
    for k, raw in enumerate(raw_wells):
        try:
            norm.append(normalise_well(str(raw)))
        except ValueError as exc:
            i = int(np.flatnonzero(inverse == k)[0])
            raise InputFileError(
                str(exc), path=source, row=lines[i], column=header[wj].strip(), hint="Name wells like A1 or A01."
            ) from None
    # codes by first appearance, so wells keep the file's order
    norm_arr = np.array(norm, dtype=str)[inverse]
    wells_u, first, well_code = np.unique(norm_arr, return_index=True, return_inverse=True)
    order = np.argsort(first, kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    well_code = rank[well_code]
    wells = [str(w) for w in wells_u[order]]
    t_row, notes = _times(body[:, tj], header[tj].strip(), grid.decimal, opts, source, lines)
    times, t_code = np.unique(t_row, return_inverse=True)
    key = well_code * times.size + t_code
    _, first_key, counts = np.unique(key, return_index=True, return_counts=True)
    if (counts > 1).any():
        k = int(np.flatnonzero(counts > 1)[0])
        rows_dup = np.flatnonzero(key == key[first_key[k]])
        i0, i1 = int(rows_dup[0]), int(rows_dup[1])
        raise InputFileError(
            f"well {wells[well_code[i0]]} has two reads at time {t_row[i0]:g} s (rows {lines[i0]} and {lines[i1]})",
            path=source,
            row=lines[i1],
            column=header[tj].strip(),
            well=wells[well_code[i0]],
            hint="Remove the duplicated row.",
        )
    by_well = np.lexsort((np.arange(key.size), well_code))
    same = well_code[by_well][1:] == well_code[by_well][:-1]
    back = np.flatnonzero(same & (np.diff(t_row[by_well]) < 0))
    if back.size:
        i = int(by_well[back[0] + 1])
        raise InputFileError(
            f"time {t_row[i]:g} s goes back in time for well {wells[well_code[i]]}",
            path=source,
            row=lines[i],
            column=header[tj].strip(),
            well=wells[well_code[i]],
            hint="Each well's reads must be in time order.",
        )
    times, t_code = _align_cycles(times, t_code, t_row, well_code, len(wells), notes)
    values, over, bad = _numbers(body[:, sj], grid.decimal, opts)
    if bad is not None:
        i = bad[0]
        raise _bad_cell("read", source, lines[i], header[sj].strip(), wells[well_code[i]], str(body[i, sj]))
    signal = np.full((len(wells), times.size), np.nan)
    saturated = np.zeros(signal.shape, dtype=bool)
    signal[well_code, t_code] = values
    saturated[well_code, t_code] = over
    temperature = _temperature(body, header, temp_j, grid.decimal, opts, source, lines)
    if temperature is not None:
        _, first_t = np.unique(t_code, return_index=True)
        temperature = temperature[first_t]  # one value per read time: the first row at that time
    if opts.ceiling is not None:
        saturated |= signal >= opts.ceiling
    return Block(name, times, wells, signal, saturated, temperature, notes)
