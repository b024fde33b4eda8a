"""Plate layouts from long files, grid files and recipe declarations; expected values are the invented
numbers written in tests/data/readers/layout_*.csv or in the declarations below."""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from vzero.errors import InputFileError, LayoutError
from vzero.plugins.importers.layouts import BASE_COLUMNS, check_match, expand_declared_layout, read_layout

DATA = Path(__file__).parents[2] / "data" / "readers"


def test_long_layout_units_and_columns() -> None:
    df = read_layout((DATA / "layout_long.csv").read_bytes(), source="layout_long.csv", plate_size=96)
    assert list(df.columns[: len(BASE_COLUMNS)]) == list(BASE_COLUMNS)
    assert "note" in df.columns
    assert list(df["well"]) == ["A1", "A2", "B1", "B2", "H12"]
    assert_allclose(df["substrate"], [200, 100, 200, 100, 200])
    assert np.isnan(df["inhibitor"].iloc[4])
    assert list(df["role"]) == ["sample"] * 4 + ["blank"]
    assert list(df["replicate"]) == ["1", "1", "2", "2", ""]
    assert df.attrs["units"] == {"substrate": "uM", "enzyme": "nM", "inhibitor": "uM"}
    assert df["note"].iloc[2] == "fresh stock"


def test_long_layout_semicolon_micro_sign_and_no_role() -> None:
    text = "well;substrate [µM]\nA1;1,5\nA2;3\n".encode("latin-1")
    df = read_layout(text, source="l.txt", plate_size=None)
    assert df.attrs["units"] == {"substrate": "µM"}
    assert_allclose(df["substrate"], [1.5, 3.0])
    assert (df["role"] == "sample").all() and df.attrs["assumptions"]


def test_grid_layout() -> None:
    df = read_layout((DATA / "layout_grid.csv").read_bytes(), source="layout_grid.csv", plate_size=96)
    assert len(df) == 96 and df["well"].iloc[13] == "B2"
    # row A of the substrate block: 400 halved along columns 1-8
    assert_allclose(df["substrate"].iloc[:8], 400 / 2 ** np.arange(8))
    assert np.isnan(df["substrate"].iloc[8])
    assert df.attrs["units"] == {"substrate": "uM"}
    assert (df["role"] == "sample").sum() == 24 and (df["role"] == "blank").sum() == 3
    assert df.set_index("well").loc["H1", "role"] == "blank" and df.set_index("well").loc["H4", "role"] == "empty"
    assert (df["group"] == "wt").sum() == 24
    with pytest.raises(LayoutError, match="shaped for 96 wells"):
        read_layout((DATA / "layout_grid.csv").read_bytes(), source="g", plate_size=384)


def test_grid_layout_xlsx_corner_title() -> None:
    import openpyxl

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["enzyme (nM)", *range(1, 13)])
    for r in "ABCDEFGH":
        ws.append([r, *([2.5] * 12)])
    buf = io.BytesIO()
    wb.save(buf)
    df = read_layout(buf.getvalue(), source="g.xlsx", plate_size=96)
    assert_allclose(df["enzyme"], 2.5)
    assert df.attrs["units"] == {"enzyme": "nM"}


def test_layout_errors() -> None:
    with pytest.raises(LayoutError) as info:
        read_layout(b"well,role\nA1,sample\nB1,blank\nA01,sample\n", source="l.csv")
    assert info.value.well == "A1" and "rows 2 and 4" in str(info.value)
    with pytest.raises(LayoutError, match="unknown role 'control'"):
        read_layout(b"well,role\nA1,control\n", source="l.csv")
    with pytest.raises(LayoutError, match="not a number"):
        read_layout(b"well,substrate\nA1,lots\n", source="l.csv")
    with pytest.raises(LayoutError, match="not on a 96-well plate"):
        read_layout(b"well\nA13\n", source="l.csv", plate_size=96)
    bad_rows = b"s\n,1,2,3,4,5,6,7,8,9,10,11,12\nA,1\nC,1\n"
    with pytest.raises(LayoutError, match="expected row B"):
        read_layout(bad_rows, source="g.csv")
    with pytest.raises(InputFileError, match="no layout found"):
        read_layout(b"just some words\nand more\n", source="g.csv")


SPEC = {
    "units": {"substrate": "uM", "enzyme": "nM"},
    "series": [
        {
            "variable": "substrate",
            "start": 400,
            "factor": 0.5,
            "direction": "columns",
            "steps": "1-8",
            "lines": ["A", "B", "C"],
            "group": "wt",
            "zero_last": True,
            "set": {"enzyme": 5},
        },
        {
            "variable": "product",
            "start": 50,
            "factor": 0.5,
            "direction": "rows",
            "steps": "A-F",
            "lines": [12],
            "role": "standard",
            "group": "std",
        },
    ],
    "wells": [{"wells": "H1:H3", "role": "blank", "set": {"substrate": 400, "enzyme": 0}}],
}


def test_declared_layout() -> None:
    df = expand_declared_layout(SPEC, 96).set_index("well")
    # two-fold series 400, 200, ..., 6.25 then 0 in column 8 (zero_last), three replicate rows
    assert_allclose(df.loc[["A1", "A2", "A7", "A8"], "substrate"], [400, 200, 6.25, 0])
    assert list(df.loc[["A1", "B1", "C1"], "replicate"]) == ["1", "2", "3"]
    assert (df.loc[["A1", "C8"], "enzyme"] == 5).all()
    assert_allclose(df.loc[["A12", "B12", "F12"], "product"], [50, 25, 1.5625])
    assert (df.loc[["A12", "F12"], "role"] == "standard").all()
    assert list(df.loc[["H1", "H2", "H3"], "role"]) == ["blank"] * 3 and df.loc["H1", "group"] == "blank"
    assert df.loc["D1", "role"] == "empty" and np.isnan(df.loc["D1", "substrate"])
    assert (df["role"] != "empty").sum() == 24 + 6 + 3
    assert expand_declared_layout(SPEC, 96).attrs["units"] == {"substrate": "uM", "enzyme": "nM"}


def test_declared_layout_errors() -> None:
    twice = {**SPEC, "wells": [{"wells": ["A1"], "role": "blank"}]}
    with pytest.raises(LayoutError, match=r"A1 is declared twice \(series\[0\] and wells\[0\]\)"):
        expand_declared_layout(twice, 96)
    with pytest.raises(LayoutError, match=r"series\[0\]\.factor"):
        expand_declared_layout({"series": [{**SPEC["series"][0], "factor": -1}]}, 96)  # type: ignore[dict-item]
    with pytest.raises(LayoutError, match=r"steps: 'Z'"):
        expand_declared_layout({"series": [{**SPEC["series"][0], "direction": "rows", "steps": ["Z"]}]}, 96)  # type: ignore[dict-item]
    with pytest.raises(LayoutError, match="unknown key"):
        expand_declared_layout({"sereis": []}, 96)


def test_check_match() -> None:
    check_match(["A1", "A2"], ["A02", "a1"], "p.csv")
    with pytest.raises(LayoutError) as info:
        check_match(["A1", "A2", "A3"], ["A1", "B1"], "p.csv")
    msg = str(info.value)
    assert "data but not in the layout: A2, A3" in msg and "layout but not in the data: B1" in msg
