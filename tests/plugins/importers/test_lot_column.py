"""The optional enzyme-lot column of a plate layout: kept as text in every layout form, absent when not
given (layouts without it read as before)."""

from __future__ import annotations

import pytest
from vzero.errors import LayoutError
from vzero.plugins.importers.layouts import expand_declared_layout, read_layout


def test_long_layout_keeps_numeric_lots_as_text() -> None:
    text = b"well,role,substrate (uM),enzyme (nM),lot\nA1,sample,10,5,17\nA2,sample,20,5,018\nA3,blank,0,0,\n"
    df = read_layout(text, source="lots.csv", plate_size=96)
    assert list(df["lot"]) == ["17", "018", ""]  # "018" keeps its leading zero: a label, not a number


def test_layout_without_lots_has_no_lot_column() -> None:
    df = read_layout(b"well,role,substrate (uM)\nA1,sample,10\n", source="plain.csv", plate_size=96)
    assert "lot" not in df.columns


def test_declared_layout_takes_a_lot_per_entry() -> None:
    spec = {"units": {"substrate": "uM", "enzyme": "nM"},
            "series": [{"variable": "substrate", "start": 100, "factor": 0.5, "steps": "1-4", "lines": ["A"],
                        "set": {"enzyme": 5}, "lot": 2}],
            "wells": [{"wells": "B1:B2", "set": {"substrate": 50, "enzyme": 5}, "lot": "B"}]}
    df = expand_declared_layout(spec, 96).set_index("well")
    assert df.loc["A1", "lot"] == "2" and df.loc["B2", "lot"] == "B" and df.loc["C1", "lot"] == ""


def test_lot_is_not_a_quantity_to_set() -> None:
    spec = {"wells": [{"wells": "A1", "set": {"lot": "A"}}]}
    with pytest.raises(LayoutError, match="own key"):
        expand_declared_layout(spec, 96)
