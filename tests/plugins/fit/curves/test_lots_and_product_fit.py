"""Joint curve fits with an activity factor per enzyme lot and competitive product inhibition, against an
independent fit: scipy.optimize.least_squares on the same reads, with the curve from the integrated rate law
solved point by point by scipy.optimize.brentq and every baseline an explicit parameter (no variable
projection). Estimates and standard errors must agree. Data invented: Michaelis-Menten with product
inhibition, two enzyme lots (the second 70 % as active), seeded Gaussian read noise.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq, least_squares
from vzero.plugins.fit.catalog import BY_NAME
from vzero.plugins.fit.curves.curve import Wells
from vzero.plugins.fit.curves.fit import CurveGroup, activity_name, fit_groups

VMAX, KM, KP, F_B = 30.0, 8.0, 20.0, 0.7  # uM/min, uM, uM, dimensionless
S0 = np.array([2.0, 6.0, 15.0, 40.0, 100.0, 2.0, 6.0, 15.0, 40.0, 100.0])
LOT = np.array([0, 0, 0, 0, 0, 1, 1, 1, 1, 1])
T = np.linspace(0.0, 1200.0, 25)  # s
NOISE = 0.05  # uM


def _substrate(vmax: float, km: float, kp: float, s0: float, tau: float) -> float:
    """S at effective time tau (min) from the integrated law Km(1 + S0/Kp)·ln(S0/S) + (1 − Km/Kp)(S0 − S)
    = Vmax·tau, solved by brentq (independent of the code under test)."""
    if tau <= 0:
        return s0
    a, alpha = km * (1 + s0 / kp), 1 - km / kp

    def f(s: float) -> float:
        return a * np.log(s0 / s) + alpha * (s0 - s) - vmax * tau

    lo = s0 * 1e-300
    return s0 if f(s0) >= 0 else (lo if f(lo) <= 0 else brentq(f, lo, s0, xtol=1e-15 * s0, rtol=1e-15))


def _curves(vmax: float, km: float, kp: float, fb: float) -> np.ndarray:
    out = np.empty((len(S0), len(T)))
    for i, (s0, lot) in enumerate(zip(S0, LOT, strict=True)):
        f = 1.0 if lot == 0 else fb
        out[i] = [s0 - _substrate(vmax, km, kp, s0, f * t / 60) for t in T]
    return out


@pytest.fixture(scope="module")
def reads() -> np.ndarray:
    rng = np.random.default_rng(20261203)
    base = rng.uniform(-0.5, 0.5, len(S0))
    return _curves(VMAX, KM, KP, F_B) + base[:, None] + rng.normal(0.0, NOISE, (len(S0), len(T)))


def _group(y: np.ndarray) -> CurveGroup:
    n = len(S0)
    wells = Wells(S0, np.zeros(n), np.full(n, 0.01), np.tile(T, (n, 1)), np.full(n, 1 / 60))
    return CurveGroup("g1", wells, y, np.ones(y.shape, bool), np.full(n, np.nan), [("p1", f"A{i + 1}") for i in
                      range(n)], lots=("A", "B"), lot=LOT)


def test_lot_factor_and_kp_agree_with_an_independent_fit(reads: np.ndarray) -> None:
    model = BY_NAME["michaelis-menten"]
    (fit,) = fit_groups(model, [_group(reads)], product=True, profile=False,
                        starts={"Vmax": 20.0, "Km": 5.0, "Kp": 50.0})
    res = fit.result
    assert res.success and res.errorbars
    names = ["Vmax", "Km", "Kp", activity_name("B")]
    assert list(res.names) == names

    def resid(q: np.ndarray) -> np.ndarray:
        return (_curves(*q[:4]) + q[4:, None] - reads).ravel()

    ref = least_squares(resid, [20.0, 5.0, 50.0, 1.0, *np.zeros(len(S0))], x_scale="jac",
                        bounds=([0, 0, 0, 0, *[-np.inf] * len(S0)], np.inf), xtol=1e-14, ftol=1e-14, gtol=1e-14)
    assert ref.success
    dof = ref.fun.size - ref.x.size
    cov = np.linalg.inv(ref.jac.T @ ref.jac) * (ref.fun @ ref.fun) / dof
    for j, name in enumerate(names):
        # scipy least_squares with explicit baselines: the same optimum and the same standard errors
        np.testing.assert_allclose(res.params[name].value, ref.x[j], rtol=1e-5, err_msg=name)
        np.testing.assert_allclose(res.params[name].stderr, np.sqrt(cov[j, j]), rtol=2e-3, err_msg=name)
    np.testing.assert_allclose(fit.baseline, ref.x[4:], atol=1e-5)
    # and the truth inside a 99 % band of the estimate (a fit that ignores the lots cannot pass this)
    for name, true in zip(names, (VMAX, KM, KP, F_B), strict=True):
        assert abs(res.params[name].value - true) < 2.6 * res.params[name].stderr, name


def test_groups_with_different_lots_are_refused_in_one_batch(reads: np.ndarray) -> None:
    g1 = _group(reads)
    g2 = CurveGroup("g2", g1.wells, reads, g1.used, g1.rates, g1.ids, lots=("A", "C"), lot=LOT)
    with pytest.raises(ValueError, match="same enzyme lots"):
        fit_groups(BY_NAME["michaelis-menten"], [g1, g2], profile=False)
