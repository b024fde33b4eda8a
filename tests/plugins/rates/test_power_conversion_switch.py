"""The power-law conversion uses its closed form from the documented switch on (|m| >= 1e-4), where it is
accurate to about 1e-12 (ln(1 + m u) loses about eps/(m u) relatively), also far into completion.

:func:`power_conversion` documents ``x = -expm1(-g)`` with ``g = ln(1 + m u)/m``, and a series in ``m`` only
below ``|m| = 1e-4``, where the closed form loses digits. The series' truncation error grows as
``u (m u)³/4``, so near complete conversion (``u`` of 10 to 20, the last reads of a curve run to completion)
the choice matters. The reference is the integrated n-th order rate law (standard chemical kinetics,
``1 - x = (1 + m u)^(-1/m)``) written with numpy's ``log1p``, accurate to a few ulps here.
"""

from __future__ import annotations

import numpy as np
import pytest
from vzero.plugins.rates.progress import power_conversion

U = np.array([0.5, 2.0, 5.0, 10.0, 20.0])  # k t: up to 1 - e^-20 converted


@pytest.mark.parametrize("m", [1e-4, -1e-4, 1.5e-4, -1.5e-4, 3e-4, -3e-4])
def test_closed_form_from_the_switch_on(m: float) -> None:
    x, dx_dlnk, _ = power_conversion(U, np.full(U.shape, m))
    g = np.log1p(m * U) / m
    left = np.exp(-g)  # substrate left, 1 - x
    np.testing.assert_allclose(x, -np.expm1(-g), rtol=1e-11)
    # d x / d ln k = u dx/du = u (1 - x)^n = left u/(1 + m u), relative to a value that is itself e^-20 small;
    # the series would be off by u (m u)^3/4 here: 2.5e-9 at m = 1e-4, u = 10
    np.testing.assert_allclose(dx_dlnk, left * U / (1.0 + m * U), rtol=1e-10)


@pytest.mark.parametrize("m", [5e-5, -5e-5, 9e-5, -9e-5])
def test_series_below_the_switch_within_its_truncation_bound(m: float) -> None:
    # the series u (1 - m u/2 + (m u)²/3) leaves out u (m u)³/4 and what follows (Taylor series of ln(1 + z))
    _, dx_dlnk, _ = power_conversion(U, np.full(U.shape, m))
    g = np.log1p(m * U) / m
    want = np.exp(-g) * U / (1.0 + m * U)
    bound = U * np.abs(m * U) ** 3 / 4 * 1.01 + 1e-13
    assert np.all(np.abs(dx_dlnk / want - 1.0) <= bound)
