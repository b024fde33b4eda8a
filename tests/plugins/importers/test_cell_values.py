"""Spreadsheet cell values and time cells turned into text and seconds, each checked against the value
worked out by hand (1 h = 3600 s; spreadsheet day serials count from 1899-12-30)."""

from __future__ import annotations

import datetime as dt

import pytest
from vzero.errors import InputFileError
from vzero.plugins.importers.readers import ReadOptions, _cell_text, _detect_decimal, _seconds_text, read_table


def test_time_of_day_and_duration_cells_to_h_mm_ss() -> None:
    assert _seconds_text(3723.25) == "1:02:3.25"
    assert _cell_text(dt.time(1, 2, 3, 250000)) == "1:02:3.25"
    assert _cell_text(dt.timedelta(hours=25, seconds=1.5)) == "25:00:1.5"
    # a date-time cell holding a duration: 1899-12-31 01:00 is one day and one hour after the day-0 serial
    assert _cell_text(dt.datetime(1899, 12, 31, 1, 0, 0)) == "25:00:0.0"
    assert _cell_text(None) == "" and _cell_text(2) == "2" and _cell_text(0.1) == "0.1"


def _read(text: str, **kw: object):
    return read_table(text.encode(), source="t.csv", options=ReadOptions(**kw))[0]  # type: ignore[arg-type]


def test_mm_ss_note_only_when_the_unit_is_not_given() -> None:
    block = _read("Time,A1\n1:30,1\n2:05,2\n")
    assert any("read as mm:ss" in n for n in block.assumptions)
    block = _read("Time,A1\n1:30,1\n2:05,2\n", time_unit="min")
    assert not any("read as mm:ss" in n for n in block.assumptions)


def test_the_first_bad_time_cell_is_named_with_its_row() -> None:
    with pytest.raises(InputFileError, match=r"row 3, column 'Time': time 'x' is not a number"):
        _read("Time,A1\n0,1\nx,2\ny,3\n")


def test_decimal_comma_only_when_comma_numbers_outnumber_dot_numbers() -> None:
    assert _detect_decimal("Time;A1\n0;1,5\n10;2,5\n", ";")[0] == ","
    assert _detect_decimal("Time;A1;A2\n0;1,5;1.5\n10;7;8\n", ";") == (".", None)  # a tie: the dot
    assert _detect_decimal("Time,A1\n0,1.5\n", ",") == (".", None)
