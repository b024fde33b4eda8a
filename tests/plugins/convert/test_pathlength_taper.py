"""Fill height and fill volume of a frustum-shaped well hold every digit for any taper, straight walls included.

Reference: the frustum's volume ``V(h) = ((s0 + k h)³ - s0³)/(3k)`` (``s0² h`` for straight walls) evaluated,
and solved for h, in 50-digit decimal arithmetic (Python's decimal module). Written as a difference of cubes
or of cube roots, the formula lost up to five digits to cancellation for tapers just past a straight-wall
threshold (relative error 6e-5 at k = 1.5e-12); the factored forms need no threshold. Invented geometry.
"""

from __future__ import annotations

from decimal import Decimal, getcontext

import pytest
from vzero.plugins.convert.pathlength import WellGeometry, pathlength_from_volume, volume_to_height_inverse

TAPERS_MM = [0.0, 1e-11, 1e-9, 1e-6, 0.5, -0.4]  # top minus bottom side (mm) over a 10 mm depth


def _geometry(taper_mm: float) -> WellGeometry:
    return WellGeometry("tiny-taper", "square", 6.0, 6.0 + taper_mm, 10.0, "invented")


def _k(taper_mm: float) -> Decimal:
    getcontext().prec = 50
    return (Decimal(6.0 + taper_mm) - Decimal(6)) / Decimal(10)


@pytest.mark.parametrize("taper_mm", TAPERS_MM)
def test_fill_height_is_exact_for_any_taper(taper_mm: float) -> None:
    k, s0, v = _k(taper_mm), Decimal(6), Decimal(200)  # µL
    exact_mm = v / s0**2 if k == 0 else ((3 * k * v + s0**3) ** (Decimal(1) / 3) - s0) / k
    got_mm = float(pathlength_from_volume(200.0, _geometry(taper_mm))) * 10.0
    assert got_mm == pytest.approx(float(exact_mm), rel=1e-14, abs=0)


@pytest.mark.parametrize("taper_mm", TAPERS_MM)
def test_fill_volume_is_exact_for_any_taper(taper_mm: float) -> None:
    k, s0, h = _k(taper_mm), Decimal(6), Decimal("5.5")  # mm
    exact_ul = s0**2 * h if k == 0 else ((s0 + k * h) ** 3 - s0**3) / (3 * k)
    got_ul = float(volume_to_height_inverse(_geometry(taper_mm), 5.5))
    assert got_ul == pytest.approx(float(exact_ul), rel=1e-14, abs=0)
