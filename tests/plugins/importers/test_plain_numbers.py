"""The fast routes (plain numbers in one numpy call; unquoted text split with str.split) give the very same
result as the careful routes."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from vzero.plugins.importers import readers
from vzero.plugins.importers.readers import ReadOptions, load_grid, read_table


def _plate_text(cells: list[list[str]]) -> bytes:
    head = "time (s),temp (C),A1,A2,B1\n"
    return (head + "".join(",".join(r) + "\n" for r in cells)).encode()


CASES = {
    "plain": [["0", "25.0", "0.1", "0.2", "0.3"], ["30", "25.1", "0.11", "0.21", "0.31"]],
    "spellings": [["0", "25", " 1e-05", "+2.5", "-0"], ["30", "25", "1E+3", ".5", "7."]],
    "nan text": [["0", "25", "nan", "0.2", "0.3"], ["30", "25", "0.1", "NaN", "0.3"]],
    "overflow token": [["0", "25", "OVER", "0.2", "0.3"], ["30", "25", "0.1", "0.2", ">3.5"]],
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_fast_and_careful_routes_agree(name: str, monkeypatch: pytest.MonkeyPatch):
    data = _plate_text(CASES[name])
    (fast,) = read_table(data, source="p.csv")
    monkeypatch.setattr(readers, "_plain_numbers", lambda rows, columns: None)
    (careful,) = read_table(data, source="p.csv")
    assert fast.wells == careful.wells == ["A1", "A2", "B1"]
    for a, b in [(fast.time_s, careful.time_s), (fast.signal, careful.signal), (fast.saturated, careful.saturated),
                 (fast.temperature, careful.temperature)]:
        np.testing.assert_array_equal(a, b)
        assert a.dtype == b.dtype and a.shape == b.shape
    assert fast.assumptions == careful.assumptions


def test_values_are_pythons_float_of_the_text():
    """Reference: Python's float() of each cell (correctly rounded decimal to binary, IEEE 754)."""
    texts = ["0.1", "0.30000000000000004", "1e-300", "123456789.123456789", "2.5e-7"]
    data = _plate_text([["0", "25", texts[0], texts[1], texts[2]], ["30", "25", texts[3], texts[4], "1"]])
    (block,) = read_table(data, source="p.csv")
    assert block.signal[0].tolist() == [float(texts[0]), float(texts[3])]
    assert block.signal[1].tolist() == [float(texts[1]), float(texts[4])]


def test_infinite_read_still_named(monkeypatch: pytest.MonkeyPatch):
    data = _plate_text([["0", "25", "0.1", "inf", "0.3"], ["30", "25", "0.1", "0.2", "0.3"]])
    with pytest.raises(readers.InputFileError, match="'inf' is not a number"):
        read_table(data, source="p.csv")


@settings(max_examples=80, deadline=None)
@given(st.lists(st.lists(st.text(alphabet="ab1 .;-é", max_size=4), max_size=5), max_size=6))
def test_unquoted_text_splits_like_the_csv_module(rows: list[list[str]]):
    """Text without quotes or carriage returns is split with str.split; the same text with CRLF line ends
    goes through the csv module (the reference): same cells, same line numbers."""
    body = [",".join(r) for r in rows]
    lf = ("\n".join(["h,t", *body]) + "\n").encode()
    opts = ReadOptions(delimiter=",", decimal=".", encoding="utf-8")
    fast = load_grid(lf, source="p.csv", options=opts)
    careful = load_grid(lf.replace(b"\n", b"\r\n"), source="p.csv", options=opts)
    assert fast.rows == careful.rows and fast.lines == careful.lines
