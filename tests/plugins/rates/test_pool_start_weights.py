"""The plate-shape start (:func:`shape_from_rates`) is the rate law fitted to the wells' rates weighted by
their standard errors, and does not depend on the unit the rates are given in.

Invented scenario: nine wells of a cooperative enzyme (Hill law, Hill 1910) or of one inhibited by its own
substrate (Haldane 1930), rates with a few percent scatter and per-well standard errors that differ by a
factor of up to 20 (a few wells read at low signal) over a floor from the read noise. The reference is
scipy's ``curve_fit`` with ``sigma``.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import curve_fit
from vzero.plugins.rates.poolshape import shape_from_rates

S_HILL = np.array([0.05, 0.1, 0.15, 0.2, 0.3, 0.4, 0.6, 1.0, 1.5])  # mM
S_SI = np.array([0.05, 0.1, 0.2, 0.4, 0.8, 1.5, 3.0, 6.0, 12.0])  # mM


def _hill(x: np.ndarray, v: float, h: float, k: float) -> np.ndarray:
    return v * x**h / (k**h + x**h)


def _si(x: np.ndarray, v: float, km: float, ki: float) -> np.ndarray:
    return v * x / (km + x + x * x / ki)


def _rates(family: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(S0, rates in AU/s, their SEs): the law plus scatter drawn with each well's own SE."""
    rng = np.random.default_rng(21)
    if family == "hill":
        s, exact = S_HILL, _hill(S_HILL, 4e-4, 2.5, 0.3)
    else:
        s, exact = S_SI, _si(S_SI, 8e-4, 0.3, 3.0)
    rel = np.array([0.02, 0.4, 0.03, 0.02, 0.3, 0.02, 0.03, 0.25, 0.02])  # SE over rate, per well
    se = rel * exact + 2e-6  # and the read noise's share, 2e-6 AU/s in every well
    return s, exact + se * rng.standard_normal(s.size), se


@pytest.mark.parametrize("family", ["hill", "substrate-inhibition"])
def test_start_is_the_fit_weighted_by_the_standard_errors(family: str) -> None:
    s, v, se = _rates(family)
    law, p0 = (_hill, [5e-4, 2.0, 0.4]) if family == "hill" else (_si, [1e-3, 0.2, 5.0])
    # reference: scipy.optimize.curve_fit with sigma = the SEs (weighted least squares)
    ref, _ = curve_fit(law, s, v, p0=p0, sigma=se, maxfev=20000)
    got = shape_from_rates(family, s, v, se)
    assert got is not None
    assert got == pytest.approx(ref[1:], rel=1e-4)


@pytest.mark.parametrize("family", ["hill", "substrate-inhibition"])
def test_start_does_not_depend_on_the_rate_unit(family: str) -> None:
    # one well reports an SE of 0 (an exact rate), so the SE floor is in play; the same rates in mAU/s and in
    # AU/min (x1000, x60) are the same measurement and give the same shape (dimensional analysis)
    s, v, se = _rates(family)
    se = se.copy()
    se[3] = 0.0
    base = shape_from_rates(family, s, v, se)
    assert base is not None
    for factor in (1e3, 60.0, 1e-3):
        got = shape_from_rates(family, s, v * factor, se * factor)
        assert got is not None
        assert got == pytest.approx(base, rel=1e-6), factor
