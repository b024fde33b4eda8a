"""Well naming and plate geometry (ANSI/SLAS 4-2004 well positions)."""

from __future__ import annotations

import pytest
from vzero.plugins.kinetics.wells import (
    all_wells,
    infer_plate_size,
    normalise_well,
    plate_shape,
    well_from_index,
    well_index,
)


@pytest.mark.parametrize("raw", ["A1", "A01", "a1", " a001 ", "A 1"])
def test_normalise_equivalent_forms(raw: str) -> None:
    assert normalise_well(raw) == "A1"


@pytest.mark.parametrize("raw", ["", "1A", "A0", "A49", "AG1", "ABC1", "A1.5", "Well"])
def test_normalise_rejects_bad_names(raw: str) -> None:
    with pytest.raises(ValueError):
        normalise_well(raw)


def test_plate_shapes() -> None:
    # ANSI/SLAS 4-2004 (REFERENCES.md 7.3, verified secondary): 8x12, 16x24, 32x48.
    assert plate_shape(96) == (8, 12)
    assert plate_shape(384) == (16, 24)
    assert plate_shape(1536) == (32, 48)
    with pytest.raises(ValueError):
        plate_shape(48)


def test_index_check_values() -> None:
    # Row-major check values from REFERENCES.md 7.3 (conventions): 96: 0 -> A1, 12 -> B1, 95 -> H12;
    # 384: 383 -> P24; 1536: 1248 -> AA1, 1535 -> AF48.
    assert well_from_index(0, 96) == "A1"
    assert well_from_index(12, 96) == "B1"
    assert well_from_index(95, 96) == "H12"
    assert well_from_index(383, 384) == "P24"
    assert well_from_index(1248, 1536) == "AA1"
    assert well_from_index(1535, 1536) == "AF48"
    for size in (96, 384, 1536):
        wells = all_wells(size)
        assert len(wells) == size == len(set(wells))
        r, c = well_index(wells[-1], size)
        assert (r + 1, c + 1) == plate_shape(size)


def test_well_index_bounds() -> None:
    assert well_index("H12", 96) == (7, 11)
    assert well_index("p24", 384) == (15, 23)
    assert well_index("AF48", 1536) == (31, 47)
    with pytest.raises(ValueError, match="not on a 96-well plate"):
        well_index("I1", 96)
    with pytest.raises(ValueError):
        well_index("A13", 96)


def test_infer_plate_size() -> None:
    assert infer_plate_size(["A1", "H12"]) == 96
    assert infer_plate_size(["A1", "A13"]) == 384
    assert infer_plate_size(["Q1"]) == 1536
    assert infer_plate_size(["AA01"]) == 1536
    with pytest.raises(ValueError):
        infer_plate_size([])
