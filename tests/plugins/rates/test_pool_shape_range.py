"""The pooled Hill fit covers the documented range of Hill coefficients, H_POOL_RANGE = (1, 6), at both ends.

Noise-free invented plates (K0.5 0.3 mM, nine substrate levels, each well its own enzyme amount) whose
substrate curves come from scipy's Radau integrator (``radau_signal`` of test_poolshape.py, rtol 1e-11) for a
Hill rate law (Hill 1910) with h = 1.2 (near the lower end) and h = 5 (near the upper end); the joint fit,
started from h = 2.5, must return the h and K0.5 the curves were made with.
"""

from __future__ import annotations

import numpy as np
import pytest
from vzero.plugins.rates.poolshape import H_POOL_RANGE, fit_pooled

from tests.plugins.rates.test_poolshape import S_HILL, SPC, T, radau_signal


@pytest.mark.parametrize("h", [1.2, 5.0])
def test_joint_fit_recovers_a_hill_coefficient_near_either_end_of_the_range(h: float) -> None:
    assert H_POOL_RANGE == (1.0, 6.0)  # the documented range these two plates sit inside

    def rate(s: np.ndarray, vmax: np.ndarray) -> np.ndarray:
        return vmax * s**h / (0.3**h + s**h)

    scale = np.linspace(0.7, 1.3, S_HILL.size)
    vm = 4e-4 * scale
    y = 0.05 + radau_signal(rate, S_HILL, vm)
    v0 = SPC * rate(S_HILL, vm)
    fit = fit_pooled("hill", T, y, np.ones(y.shape, bool), S_HILL, SPC, np.full(S_HILL.size, 1e-4),
                     np.array([2.5, 0.35]), v0 * 1.1, y[:, 0])
    assert fit.converged
    assert fit.shape == pytest.approx([h, 0.3], rel=1e-4)
    np.testing.assert_allclose(fit.v0, v0, rtol=1e-4)
