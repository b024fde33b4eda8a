"""The water-peak pathlength's default k-factor is the commonly used 0.18 per cm (common practice, not a
primary value; the stage passes its own ``water_k``, so only direct callers rely on this default)."""

from __future__ import annotations

from numpy.testing import assert_allclose
from vzero.plugins.convert.pathlength import pathlength_from_water_peak


def test_default_k_factor_is_the_common_point_one_eight_per_cm() -> None:
    # the worked example beside the explicit-k test (test_pathlength.py): (A977 - A900) = 0.0990 with the
    # common-practice k = 0.18 per cm gives l = 0.55 cm, here without naming k
    assert_allclose(pathlength_from_water_peak(0.1390, 0.0400), 0.55, rtol=1e-12)
