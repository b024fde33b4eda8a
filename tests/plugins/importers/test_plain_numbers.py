"""The fast route for plates of plain numbers gives the very same block as the careful cell-by-cell route."""

from __future__ import annotations

import numpy as np
import pytest

from plugins.importers import readers
from plugins.importers.readers import read_table


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
