"""The built-in well shapes against what a plate of that format can hold.

Three of the four shapes in :data:`PLATE_GEOMETRIES` are marked "from memory", so each is checked against
properties every plate of its format must have: the well fits inside the well pitch of the plate-format
standard, the well is shallower than the plate is tall, a flat-bottom well widens towards its mouth, and the
full well holds a volume of the order that plates of that format are sold for. The volume bands are common
practice (from memory), deliberately wide (a factor of about 1.5-2 end to end): they catch a dimension
doubled or halved, not a plate maker's exact figure. Geometric pathlengths are estimates for research use;
where a pathlength matters, use the plate maker's drawing or the lab's validated procedure.
"""

from __future__ import annotations

import math

import pytest
from vzero.plugins.convert.pathlength import PLATE_GEOMETRIES, pathlength_from_volume

# Well pitch (centre to centre, mm): ANSI/SLAS 4-2004 Well Positions, 9.0 / 4.5 / 2.25 mm for 96 / 384 / 1536
# wells (the project's reference notes, section 7.3: verified secondary for all three; written here from
# memory of that table).
PITCH_MM = {"96": 9.0, "384": 4.5, "1536": 2.25}
# Plate height 14.35 ± 0.25 mm: ANSI/SLAS 2-2004 Height Dimensions (reference notes, section 7.3).
PLATE_HEIGHT_MM = 14.35 + 0.25

# Full-well volume (µL) by plate, common practice (from memory, not a standard): a 96-well flat-bottom well
# holds about 350 µL, a half-area 96 well about half of that, a 384 well about 100-150 µL, a 1536 well of the
# order of 10 µL (not 25).
CAPACITY_BAND_UL = {
    "96-flat": (320.0, 400.0),
    "96-half-area": (150.0, 210.0),
    "384-flat": (90.0, 160.0),
    "1536-flat": (8.0, 16.0),
}


def _format(name: str) -> str:
    return name.split("-", 1)[0]


def test_every_built_in_shape_has_a_band_here() -> None:
    # a shape added without a check here would escape every test below
    assert set(PLATE_GEOMETRIES) == set(CAPACITY_BAND_UL)


@pytest.mark.parametrize("name", sorted(CAPACITY_BAND_UL))
def test_full_well_volume_is_of_the_order_the_format_holds(name: str) -> None:
    low, high = CAPACITY_BAND_UL[name]  # common practice, from memory (see above)
    assert low <= PLATE_GEOMETRIES[name].capacity_ul <= high


@pytest.mark.parametrize("name", sorted(CAPACITY_BAND_UL))
def test_well_fits_the_standard_pitch_and_plate_height(name: str) -> None:
    g = PLATE_GEOMETRIES[name]
    pitch = PITCH_MM[_format(name)]  # ANSI/SLAS 4-2004 (reference notes 7.3)
    # the mouth of a well is narrower than the pitch (a wall stands between neighbours); a square mouth's
    # side, and a round mouth's diameter, must both stay below it
    assert g.top_mm < pitch
    # and wider than a third of it: no well in a standard plate leaves two thirds of the pitch as wall
    # (common practice)
    assert g.top_mm > pitch / 3.0
    # a well is shallower than the plate is tall (ANSI/SLAS 2-2004: 14.35 ± 0.25 mm)
    assert 0.0 < g.depth_mm < PLATE_HEIGHT_MM
    # a flat-bottom well of a moulded plate widens towards its mouth (draft angle, common practice) and only
    # a little: the mouth is at most 1.5 times the bottom
    assert g.bottom_mm <= g.top_mm <= 1.5 * g.bottom_mm


@pytest.mark.parametrize("name", sorted(CAPACITY_BAND_UL))
def test_half_the_capacity_stands_below_half_the_depth_and_above_a_third(name: str) -> None:
    # a well that widens upwards holds less in its lower half: half the full volume stands higher than half
    # the depth; a frustum whose mouth is at most 1.5 x its base (area at most 2.25 x) still puts half its
    # volume below 0.65 of the depth (solid geometry: V(h) of the frustum, solved by hand for the 1.5 x case
    # gives h/H = 0.60)
    g = PLATE_GEOMETRIES[name]
    h_cm = float(pathlength_from_volume(g.capacity_ul / 2.0, g))
    assert 0.5 * g.depth_mm <= h_cm * 10.0 <= 0.65 * g.depth_mm
    # the full well stands at the full depth
    assert float(pathlength_from_volume(g.capacity_ul, g)) * 10.0 == pytest.approx(g.depth_mm, rel=1e-9)


def test_square_wells_hold_more_than_round_ones_of_the_same_size() -> None:
    # a square of side s has area s², a circle of diameter s pi s²/4 (solid geometry): the 384 and 1536
    # shapes are square, the 96 ones round (as marked in the table)
    assert {g.name: g.shape for g in PLATE_GEOMETRIES.values()} == {
        "96-flat": "round", "96-half-area": "round", "384-flat": "square", "1536-flat": "square"}
    g = PLATE_GEOMETRIES["384-flat"]
    assert g.area_mm2(2.0) == pytest.approx(4.0)
    assert PLATE_GEOMETRIES["96-flat"].area_mm2(2.0) == pytest.approx(math.pi)
