"""Reading plate-reader exports: shapes, detection, tokens, and one clear error for each kind of bad input.

Expected values here are the numbers written in the small invented files of tests/data/readers (see its
README), so each check compares the reader with the file's own text.
"""

from __future__ import annotations

import io
import random
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from vzero.errors import InputFileError, VzeroError
from vzero.plugins.importers.readers import Block, ReadOptions, read_table

DATA = Path(__file__).parents[2] / "data" / "readers"


def _read(text: str | bytes, **kw: object) -> list[Block]:
    data = text.encode() if isinstance(text, str) else text
    return read_table(data, source="demo.csv", options=ReadOptions(**kw))  # type: ignore[arg-type]


def _xlsx(rows: list[list[object]], sheet: str = "Data", extra: str | None = None) -> bytes:
    import openpyxl

    wb = openpyxl.Workbook(write_only=True)
    ws = wb.create_sheet(sheet)
    for r in rows:
        ws.append(r)
    if extra:
        wb.create_sheet(extra).append(["x"])
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


def test_two_titled_wide_blocks() -> None:
    blocks = read_table((DATA / "two_blocks_wide.csv").read_bytes(), source="two_blocks_wide.csv")
    assert [b.name for b in blocks] == ["Kinetic 340 nm", "Kinetic 405 nm"]
    b = blocks[0]
    assert b.wells == ["A1", "A2", "B1", "B2"]
    assert_array_equal(b.time_s, [0, 30, 60, 90])
    assert_allclose(b.signal[0], [0.101, 0.152, 0.203, 0.254])
    assert np.isnan(b.signal[1, 1]) and not b.saturated[1, 1]  # empty cell: missing, not saturated
    assert_array_equal(b.saturated[3], [True, True, True, False])  # OVER, OVER, >3.5, 3.9
    assert np.isnan(b.signal[3, :3]).all() and b.signal[3, 3] == 3.9
    assert b.temperature is not None
    assert_allclose(b.temperature, [25.0, 25.1, 25.1, 25.2])
    assert b.assumptions == []  # time unit given in the header, utf-8, comma: nothing assumed
    assert_allclose(blocks[1].signal[:, 0], [1.0, 2.0, 3.0, 4.0])


def test_ceiling_marks_but_keeps_value() -> None:
    b = read_table((DATA / "two_blocks_wide.csv").read_bytes(), source="f", options=ReadOptions(ceiling=3.9))[0]
    assert b.saturated[3, 3] and b.signal[3, 3] == 3.9
    assert not b.saturated[:3].any()


def test_semicolon_decimal_comma_latin1_minutes() -> None:
    b = read_table((DATA / "semicolon_comma_latin1.txt").read_bytes(), source="s.txt")[0]
    assert b.wells == ["A1", "A2", "A3"]
    assert_allclose(b.time_s, [0.0, 30.0, 60.0, 90.0])  # 0,5 min = 30 s
    assert_allclose(b.signal[2], [0.030, 0.038, 0.046, 0.054])
    assert b.temperature is not None
    assert_allclose(b.temperature, [30.0, 30.0, 30.1, 30.1])
    joined = " ".join(b.assumptions)
    assert "latin-1" in joined and "decimal comma" in joined


def test_long_tsv_hms_times() -> None:
    b = read_table((DATA / "long_hms.tsv").read_bytes(), source="l.tsv")[0]
    assert b.wells == ["A1", "B1"]
    assert_array_equal(b.time_s, [0.0, 20.0, 40.0])
    assert_allclose(b.signal[0], [100, 110, 120])
    assert b.saturated[1, 2] and np.isnan(b.signal[1, 2])
    assert b.temperature is not None
    assert_allclose(b.temperature, [37.0, 37.1, 37.1])


def test_long_explicit_columns_and_shape_option() -> None:
    text = "pos,elapsed min,OD340\nA1,0,0.1\nA1,1,0.2\nA2,0,0.3\nA2,1,0.4\n"
    b = _read(text, shape="long", long_columns=("pos", "elapsed min", "OD340"), time_unit="min")[0]
    assert b.wells == ["A1", "A2"]
    assert_array_equal(b.time_s, [0, 60])
    assert_allclose(b.signal, [[0.1, 0.2], [0.3, 0.4]])
    with pytest.raises(InputFileError, match="no header row"):
        _read("Time,A1\n0,1\n", shape="long")


def test_repeated_header_without_blank_line() -> None:
    text = "Time,A1\n0,1\n1,2\nTime,A1\n0,5\n1,6\n"
    blocks = _read(text)
    assert [b.name for b in blocks] == ["block1", "block2"]
    assert_allclose(blocks[1].signal, [[5, 6]])
    assert any("assumed seconds" in a for a in blocks[0].assumptions)


def test_title_line_directly_above_next_header() -> None:
    blocks = _read("Time (s),A1\n0,1\n1,2\nsecond read\nTime (s),A1\n0,5\n1,6\n")
    assert [b.name for b in blocks] == ["block1", "second read"]


def test_skip_rows_and_mm_ss_text() -> None:
    b = _read("junk\nmore junk\nTime,A1\n00:30,1\n01:30,2\n", skip_rows=2)[0]
    assert_array_equal(b.time_s, [30, 90])
    assert any("mm:ss" in a for a in b.assumptions)
    with pytest.raises(InputFileError, match="skip_rows"):
        _read("junk\nTime,A1\n0,1\n", skip_rows=0)


def test_xlsx_wide_with_time_cells() -> None:
    import datetime as dt

    rows: list[list[object]] = [
        ["demo"],
        [],
        ["Time", "A1", "B12"],
        [dt.time(0, 0, 0), 0.5, 1.25],
        [dt.time(0, 0, 30), 0.75, "OVER"],
    ]
    b = read_table(_xlsx(rows), source="p.xlsx", options=ReadOptions())[0]
    assert b.wells == ["A1", "B12"]
    assert_array_equal(b.time_s, [0, 30])
    assert_allclose(b.signal[0], [0.5, 0.75])
    assert b.saturated[1, 1]
    b2 = read_table(_xlsx(rows, extra="Other"), source="p.xlsx", options=ReadOptions(sheet="Data"))[0]
    assert_array_equal(b2.signal, b.signal)


# --- one clear error per kind of bad input -----------------------------------------------------------------


def _err(data: bytes | str, **kw: object) -> InputFileError:
    with pytest.raises(InputFileError) as info:
        _read(data, **kw)
    assert info.value.path == "demo.csv"
    return info.value


def test_error_ragged_row() -> None:
    e = _err("Time,A1,A2\n0,1,2\n1,2,3,4\n")
    assert e.row == 3 and "ragged" in str(e)
    assert _err("Time,A1,A2\n0,1\n").row == 2


def test_error_token_names_token_row_column_well() -> None:
    e = _err("Time,A1,A2\n0,1,2\n1,2,abc\n")
    assert (e.row, e.column, e.well) == (3, "A2", "A2")
    assert "'abc'" in str(e)


def test_error_duplicated_well_columns() -> None:
    e = _err("Time,A1,A01\n0,1,2\n")
    assert e.well == "A1" and "two columns" in str(e)


@pytest.mark.parametrize(("text", "word"), [("Time,A1\n0,1\n5,2\n3,4\n", "back"), ("Time,A1\n0,1\n0,2\n", "repeats")])
def test_error_time_order(text: str, word: str) -> None:
    e = _err(text)
    assert word in str(e) and e.row == (4 if word == "back" else 3)


def test_error_long_duplicate_and_backwards() -> None:
    e = _err("well,time,signal\nA1,0,1\nA1,0,2\n")
    assert e.well == "A1" and "rows 2 and 3" in str(e)
    e = _err("well,time,signal\nA1,5,1\nA1,0,2\n")
    assert e.well == "A1" and "back" in str(e)
    e = _err("well,time,signal\nZ99,0,1\n")
    assert e.row == 2


@pytest.mark.parametrize(
    ("data", "word"),
    [
        (b"", "empty"),
        (b"  \n\n", "empty"),
        (b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR\x00\x00", "not a text table"),
        (b"Dear colleague, here are the results of yesterday.\nBest wishes.\n", "no header row"),
        (b"Time,A1\n", "without data rows"),
        (b"Time,A1\n0,1\n\n1,2\n", "follows a blank line"),
    ],
)
def test_error_not_a_table(data: bytes, word: str) -> None:
    assert word in str(_err(data))


def test_error_xlsx_missing_sheet_lists_sheets() -> None:
    data = _xlsx([["Time", "A1"], [0, 1]], extra="Notes")
    with pytest.raises(InputFileError, match="'Data', 'Notes'"):
        read_table(data, source="p.xlsx", options=ReadOptions(sheet="Plate 9"))
    with pytest.raises(InputFileError, match="cannot open"):
        read_table(data[:200], source="p.xlsx", options=ReadOptions())


# --- fuzz: damaged files raise only the project's errors ---------------------------------------------------


def _mutate(data: bytes, rng: random.Random) -> bytes:
    kind = rng.randrange(4)
    if kind == 0:  # flip bytes
        b = bytearray(data)
        for _ in range(rng.randint(1, 4)):
            b[rng.randrange(len(b))] = rng.randrange(256)
        return bytes(b)
    if kind == 3 and not data.startswith(b"PK"):  # change a cell
        lines = data.split(b"\n")
        i = rng.randrange(len(lines))
        cells = lines[i].split(b",")
        cells[rng.randrange(len(cells))] = rng.choice([b"", b"x", b"-1e999", b"1e5", b"A1", b"Time", b'"', b"0:1"])
        lines[i] = b",".join(cells)
        return b"\n".join(lines)
    lines = data.split(b"\n")
    i = rng.randrange(len(lines))
    if kind == 1:  # drop a line
        del lines[i]
    else:  # duplicate a line
        lines.insert(i, lines[i])
    return b"\n".join(lines)


def test_fuzz_only_project_errors_escape() -> None:
    seeds = [
        (DATA / "two_blocks_wide.csv").read_bytes(),
        (DATA / "semicolon_comma_latin1.txt").read_bytes(),
        (DATA / "long_hms.tsv").read_bytes(),
    ]
    xlsx = _xlsx([["Time (s)", "A1", "A2"], [0, 0.1, 0.2], [30, 0.3, "OVER"]])
    rng = random.Random(20240611)
    n_ok = n_err = 0
    for k in range(600):
        base = xlsx if k % 20 == 0 else seeds[k % 3]
        data = _mutate(base, rng)
        try:
            blocks = read_table(data, source="fuzz", options=ReadOptions())
        except VzeroError:
            n_err += 1
            continue
        n_ok += 1
        for b in blocks:
            assert b.signal.shape == b.saturated.shape == (len(b.wells), b.time_s.size)
            assert (np.diff(b.time_s) > 0).all()
    assert n_ok > 50 and n_err > 50  # the mutations both break and spare files
