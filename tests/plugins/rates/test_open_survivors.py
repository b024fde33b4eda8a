"""Two places no earlier test reached: a signal-unit curve run to completion, and a decay beyond its bound.

1. :func:`vzero.plugins.rates.progress.signal_ln_v0_var` clips ``x = a P`` (``a = c1/(1 - r)``, the
   inverse amplitude) just below 1, where the rate-drop terms ``k(x)`` and ``m(x)`` are infinite but their
   products with ``v/v0 = (1 - x)/(1 - r x)`` tend to finite limits. On reads that reach the plateau
   (``P = A`` to the last bit) the variance must stay finite and equal the delta method's from a Jacobian
   taken by central differences of the integrated rate law, solved here by ``scipy.optimize.brentq`` in its
   own form (an independent route; the package's model code is not used for the reference).
2. :data:`vzero.plugins.rates.lagfit.K_BOUNDS`: the fitted decay constant stops at 5 over the run length
   (less than 1 % of the active enzyme left at the end, the module's documented bound); reference data from
   ``scipy.integrate.solve_ivp`` of the lag-and-inactivation scheme of the module text. Invented data.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import brentq
from vzero.plugins.rates.lagfit import _joint
from vzero.plugins.rates.progress import signal_ln_v0_var

T = np.arange(60) * 10.0


def _product(t: float, v0: float, c1: float, r: float) -> float:
    """Product (signal units) at time t of ``v0 t = r P + (1 - r)(-ln(1 - a P))/a``, ``a = c1/(1 - r)``,
    solved for ``y = -ln(1 - a P)`` (well conditioned up to completion): ``(1 - r) y + r (1 - e^-y) = a v0 t``."""
    a = c1 / (1.0 - r)
    rhs = a * v0 * t
    if rhs == 0.0:
        return 0.0
    y = brentq(lambda y: (1.0 - r) * y + r * -np.expm1(-y) - rhs, 0.0, rhs / (1.0 - r) + 1.0, xtol=1e-15,
               rtol=1e-15)
    return float(-np.expm1(-y) / a)


def _curve(theta: np.ndarray, base: float) -> np.ndarray:
    """Signal at the reads for (baseline, ln v0, c1, r) = theta, direction +1."""
    b, ln_v0, c1, r = theta
    return base + b + np.array([_product(float(t), float(np.exp(ln_v0)), c1, r) for t in T])


@pytest.mark.parametrize("r", [0.2, 0.6])
def test_signal_variance_is_finite_and_right_on_a_completed_curve(r: float) -> None:
    # v0 = 0.2 signal/s, amplitude A = (1 - r)/c1 = 2: complete to the last bit in the last reads
    c1 = (1.0 - r) / 2.0
    theta = np.array([0.0, np.log(0.2), c1, r])
    fitted = _curve(theta, 0.0)
    # precondition: several reads at the plateau, where a P rounds to within 1e-12 of 1 (or to 1 itself)
    assert np.sum(c1 / (1.0 - r) * fitted >= 1.0 - 1e-12) >= 5
    cols = []
    for j, h in enumerate([1e-6, 1e-6, 1e-6 * c1, 1e-6]):  # (baseline, ln v0, c1, r)
        up, dn = theta.copy(), theta.copy()
        up[j] += h
        dn[j] -= h
        cols.append((_curve(up, 0.0) - _curve(dn, 0.0)) / (2.0 * h))
    jac = np.array(cols)
    want = np.linalg.inv(jac @ jac.T)[1, 1]  # Var(ln v0) for unit read variance: any parametrisation
    p = np.array([[0.0, np.log(0.2), np.log(c1), np.log(r / (1.0 - r))]])
    got = signal_ln_v0_var(T, p, fitted[None, :], np.ones((1, T.size)), np.array([1.0]), np.array([1.0]))[0]
    assert np.isfinite(got)
    assert got == pytest.approx(want, rel=1e-4)


def _lag_decay_reads(t: np.ndarray, s0: float, km: float, vmax: float, tau: float, k: float) -> np.ndarray:
    """Product (mM) of the module text's scheme (inactive p -> active a at 1/tau, a lost at k; the
    Michaelis–Menten rate times a), integrated by scipy's Radau method."""
    def rhs(_t: float, z: np.ndarray) -> list[float]:
        p, a, s = z
        return [-p / tau, p / tau - k * a, -a * vmax * s / (km + s)]

    sol = solve_ivp(rhs, (0.0, float(t[-1])), [1.0, 0.0, s0], method="Radau", t_eval=t, rtol=1e-11, atol=1e-14)
    return s0 - sol.y[2]


@pytest.mark.parametrize(("k_span", "at_bound"), [(8.0, True), (3.0, False)])
def test_decay_constant_stops_at_its_bound(k_span: float, at_bound: bool) -> None:
    # a well whose activity is gone long before the end (k x run = 8, 0.03 % left) fits k at the bound
    # 5/run; one with k x run = 3 keeps its own value (the other side of the bound)
    t = np.arange(0.0, 1201.0, 10.0)
    span = float(t[-1])
    s0, km, vmax, tau, spc = 1.0, 0.5, 2e-3, 30.0, 1.0
    k = k_span / span
    y = (0.05 + spc * _lag_decay_reads(t, s0, km, vmax, tau, k))[None, :]
    p0 = np.array([[0.05, np.log(vmax * s0 / (km + s0)), km / (km + s0), tau, 2.0 / span]])
    out = _joint(t, y, np.array([s0]), spc, p0, np.array([1e-4]), 10.0, span)
    if at_bound:  # the documented bound (K_BOUNDS' text: "up to 5"), not the constant read back
        assert out["params"][0, 4] * span == pytest.approx(5.0, rel=1e-3)
    else:
        assert out["params"][0, 4] * span == pytest.approx(k_span, rel=1e-3)  # exact data: the truth
