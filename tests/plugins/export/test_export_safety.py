"""Exports keep data as data: no live spreadsheet formulas from layout text; temperatures in any unit."""

from __future__ import annotations

from pathlib import Path

import openpyxl
import pytest
from vzero.plugins.export.enzymeml import _celsius
from vzero.plugins.export.tables import write_xlsx
from vzero.run.runner import run

from tests.conftest import linear_plate


def test_text_that_looks_like_a_formula_stays_text(tmp_path: Path):
    recipe = linear_plate(tmp_path / "in")
    layout = tmp_path / "in" / "layout.csv"
    layout.write_text(layout.read_text("utf-8").replace(",gA", ",=1+41"), "utf-8")
    result = run(recipe, tmp_path / "out")
    write_xlsx(result.audit_path, tmp_path / "x.xlsx")
    book = openpyxl.load_workbook(tmp_path / "x.xlsx")
    cells = [c for ws in book.worksheets for row in ws.iter_rows() for c in row]
    assert not [c.coordinate for c in cells if c.data_type == "f"]
    assert any(c.value == "'=1+41" for c in cells)  # kept as text, with the prefix that keeps it inert


@pytest.mark.parametrize(("text", "celsius"), [("30 degC", 30.0), ("303.15 K", 30.0), (None, None)])
def test_assay_temperature_in_celsius_whatever_its_unit(text, celsius):
    if celsius is None:
        assert _celsius(text) is None
    else:
        assert _celsius(text) == pytest.approx(celsius, rel=1e-12)
