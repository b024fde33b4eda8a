"""The power-law progress curve's order range, from both sides of each bound.

``progress_curve(model="power")`` fits ``v = v0 (1 - x)^n`` with the order n held between -0.5 and 10
(parameter ``m = n - 1`` in [-1.5, 9]). A well whose curve needs an order beyond either bound is pinned at it
and, because the bounded curve no longer describes the reads, flagged FIT_FAILED with no rate; a curve of an
order just inside a bound is fitted with its own order and a v0 within its noise. The curves are the
integrated rate law ``dx/dt = k (1 - x)^n`` integrated by scipy's Radau solver (independent of the closed
form :func:`vzero.plugins.rates.progress.power_conversion` the fit uses), with invented read noise.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.rates.progress import power_conversion, progress_curve

READS = np.arange(60) * 10.0  # s
SPC, S0 = 2.0, 1.0  # signal per mM, mM
NOISE = 0.001  # signal units
#: order, rate constant k = v0/S0 (1/s)
CASES = [(14.0, 2e-3), (9.5, 2e-3), (-1.0, 5e-4), (-0.3, 5e-4)]


def _converted(n: float, k: float) -> np.ndarray:
    """Fraction converted at the reads for ``dx/dt = k (1 - x)^n`` (scipy Radau, rtol 1e-10)."""
    sol = solve_ivp(lambda _t, x: [k * max(1.0 - x[0], 0.0) ** n], (0.0, READS[-1]), [0.0], t_eval=READS,
                    method="Radau", rtol=1e-10, atol=1e-13)
    return sol.y[0]


@pytest.fixture(scope="module")
def fitted() -> tuple:
    rng = np.random.default_rng(20261219)
    y = np.array([0.1 + SPC * S0 * _converted(n, k) for n, k in CASES])
    y = y + NOISE * rng.standard_normal(y.shape)
    return progress_curve(READS, y, s0=np.full(len(CASES), S0), signal_per_conc=SPC, model="power")


def test_the_closed_form_matches_the_integrated_rate_law() -> None:
    # the fit's model against the Radau integration: the test curves mean what the fit assumes
    for n, k in CASES:
        x = power_conversion(k * READS, np.array(n - 1.0))[0]
        np.testing.assert_allclose(x, _converted(n, k), atol=1e-8)


def test_an_order_above_ten_is_pinned_at_ten_and_fails(fitted) -> None:
    order, flags = fitted.extra["order"], fitted.flags
    assert order[0] == pytest.approx(10.0, abs=1e-4)  # n = 14 needs more than the bound allows
    assert flags[0] & Flag.FIT_FAILED and np.isnan(fitted.v0[0])
    # the residuals of the pinned fit are many times the read noise (the fail rule is 3)
    assert fitted.extra["rmse_over_noise"][0] > 3.0


def test_an_order_just_below_ten_is_fitted(fitted) -> None:
    assert fitted.extra["order"][1] == pytest.approx(9.5, abs=0.15)
    assert not fitted.flags[1] & Flag.FIT_FAILED
    # v0 = S0 k in mM/s, times signal per mM (the rate law at x = 0)
    assert fitted.v0[1] == pytest.approx(SPC * S0 * 2e-3, rel=0.01)


def test_an_order_below_minus_a_half_is_pinned_and_fails(fitted) -> None:
    assert fitted.extra["order"][2] == pytest.approx(-0.5, abs=1e-4)  # n = -1: a rate rising with conversion
    assert fitted.flags[2] & Flag.FIT_FAILED and np.isnan(fitted.v0[2])


def test_an_order_just_above_minus_a_half_is_fitted(fitted) -> None:
    assert fitted.extra["order"][3] == pytest.approx(-0.3, abs=0.05)
    assert not fitted.flags[3] & Flag.FIT_FAILED
    assert fitted.v0[3] == pytest.approx(SPC * S0 * 5e-4, rel=0.01)
    # the reported standard error is of the order of the scatter the noise leaves: the fitted v0 is within
    # four of them of the truth (a wide bound: one well, not a calibration)
    assert abs(fitted.v0[3] - SPC * S0 * 5e-4) < 4.0 * fitted.stderr[3]
