"""Pathlength from fill volume and from the water peak."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from vzero.errors import RecipeError
from vzero.plugins.convert.pathlength import (
    PLATE_GEOMETRIES,
    WellGeometry,
    pathlength_from_volume,
    pathlength_from_water_peak,
    volume_to_height_inverse,
    water_absorbance_per_cm,
)


def test_96_flat_heights_match_reference_frustum() -> None:
    # REFERENCES.md 7.2 (computed there from the 6.86/6.35/10.67 mm dimension sheet, flat meniscus):
    # 100/150/200/250/300 µL -> 0.31/0.46/0.60/0.75/0.89 cm, printed to two decimals.
    got = pathlength_from_volume(np.array([100, 150, 200, 250, 300]), "96-flat")
    assert_allclose(got, [0.31, 0.46, 0.60, 0.75, 0.89], atol=0.005)
    # REFERENCES.md 7.2: 200 µL in a 96 well is ~0.5-0.6 cm (common practice): a plausibility band only.
    assert 0.5 <= pathlength_from_volume(200, "96-flat") <= 0.61


def test_cylinder_limit_and_inverse() -> None:
    # A straight cylinder of 1 cm² (diameter sqrt(400/pi) mm) holds 100 µL per mm: 100 µL -> 0.1 cm exactly.
    cyl = WellGeometry("cyl", "round", np.sqrt(400 / np.pi), np.sqrt(400 / np.pi), 20.0, "test shape")
    assert_allclose(pathlength_from_volume(100.0, cyl), 0.1, rtol=1e-12)
    for g in PLATE_GEOMETRIES.values():
        v = np.linspace(0.05, 0.95, 7) * g.capacity_ul
        assert_allclose(volume_to_height_inverse(g, pathlength_from_volume(v, g) * 10), v, rtol=1e-10)


def test_volume_errors() -> None:
    with pytest.raises(RecipeError, match="did you mean '96-flat'"):
        pathlength_from_volume(100, "96-flta")
    with pytest.raises(RecipeError, match="does not fit"):
        pathlength_from_volume(500, "96-flat")
    with pytest.raises(RecipeError):
        pathlength_from_volume(0, "384-flat")


def test_water_peak_formula() -> None:
    # REFERENCES.md 7.1: (A977 - A900) = 0.0990 with k = 0.18 -> l = 0.55 cm (rel 1e-12).
    assert_allclose(pathlength_from_water_peak(0.1390, 0.0400, 0.18), 0.55, rtol=1e-12)
    out = pathlength_from_water_peak(np.array([0.2, 0.05]), np.array([0.1, 0.06]), 0.18)
    assert_allclose(out[0], 0.1 / 0.18)
    assert np.isnan(out[1])  # A977 below A900: no pathlength
    with pytest.raises(RecipeError):
        pathlength_from_water_peak(0.2, 0.1, 0.0)


def test_water_k_factor_from_segelstein_1981() -> None:
    # Figures copied from water_segelstein1981_850_1050nm.csv (Segelstein 1981, via the reference pack):
    # wavelength (µm), k_imag, and the pack's computed decadic absorbance per cm.
    lam_um = np.array([0.8954, 0.8995, 0.9057, 0.9705, 0.975, 0.9795, 1.0])
    k_imag = np.array([4.622e-07, 4.862e-07, 5.15e-07, 3.502e-06, 3.48e-06, 3.418e-06, 3e-06])
    a_pack = np.array([0.02817, 0.02950, 0.03103, 0.19693, 0.19479, 0.19044, 0.16373])
    a = water_absorbance_per_cm(lam_um * 1000, k_imag)
    assert_allclose(a, a_pack, rtol=3e-4)  # the pack prints 4-5 significant digits
    # REFERENCES.md 7.1: A977 - A900 = 0.163 per cm for pure water (linear interpolation in that table),
    # about 9 % below the common-practice 0.18.
    k_factor = np.interp(977.0, lam_um * 1000, a) - np.interp(900.0, lam_um * 1000, a)
    assert_allclose(k_factor, 0.163, atol=0.0015)
    assert_allclose(pathlength_from_water_peak(0.163 * 0.55, 0.0, k_factor), 0.55, rtol=0.01)


def test_capacity_is_the_frustum_volume_for_round_and_square_wells() -> None:
    # volume of a frustum of height h between parallel faces of areas A1 and A2: h/3 (A1 + A2 + sqrt(A1 A2))
    # (solid geometry); A = s² for a square well of side s, pi d²/4 for a round one of diameter d
    for g in PLATE_GEOMETRIES.values():
        a1, a2 = (s**2 if g.shape == "square" else np.pi * s**2 / 4 for s in (g.bottom_mm, g.top_mm))
        assert g.capacity_ul == pytest.approx(g.depth_mm / 3 * (a1 + a2 + np.sqrt(a1 * a2)), rel=1e-12)
    prism = WellGeometry("prism", "square", 5.0, 5.0, 10.0, "test shape")  # 25 mm² floor: 100 µL stand 4 mm
    assert_allclose(pathlength_from_volume(100.0, prism), 0.4, rtol=1e-12)


def test_water_peak_equal_to_its_reference_gives_no_pathlength() -> None:
    # module text: wells whose difference is not positive get NaN; a difference of zero is not positive
    from vzero.plugins.convert.pathlength import pathlength_from_water_peak
    out = pathlength_from_water_peak(np.array([0.25, 0.25, 0.26]), np.array([0.25, 0.26, 0.25]), 0.2)
    assert np.isnan(out[0]) and np.isnan(out[1]) and out[2] == pytest.approx(0.01 / 0.2)
