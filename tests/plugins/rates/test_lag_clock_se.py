"""Standard errors of the lag clock's fit with the plate's decay constant held, against an independent
linearisation.

With the decay constant ``k`` held at the plate's value, :func:`vzero.plugins.rates.lagfit._joint` reports for
v0 and the lag time the variances given ``k`` (the Schur complement of the five-parameter covariance, which
equals the inverse of the four-parameter information block) and adds to v0's the spread the plate value's
own standard error carries in, ``(C_vk/C_kk)² SE_k²``. Here the same figures are computed from a Jacobian
taken by central finite differences of a model written independently in the test: the Michaelis–Menten
substrate from scipy's Lambert W (``S = Km W((S0/Km) exp((S0 - Vmax theta)/Km))``) on the active-time clock
of the module text written out by hand; covariance ``(J'J)^-1`` by numpy, scaled by the larger of the
residual variance and the read noise squared. Reads integrated by scipy's solve_ivp (Radau). Invented plate.
"""

from __future__ import annotations

import functools

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.special import lambertw
from vzero.plugins.rates import lagfit

READS = np.arange(90) * 10.0  # s
SPC, KM, VMAX, TAU, K = 3.4, 0.5, 6e-4, 60.0, 8e-4
S0 = np.array([0.5, 2.0])
SIGMA = 0.002


@functools.cache
def _reads() -> np.ndarray:
    n = S0.size

    def rhs(_t: float, z: np.ndarray) -> np.ndarray:
        s, p, a = z[:n], z[n:2 * n], z[2 * n:]
        return np.concatenate([-a * VMAX * s / (KM + s), -p / TAU, p / TAU - K * a])

    sol = solve_ivp(rhs, (0.0, READS[-1]), np.concatenate([S0, np.ones(n), np.zeros(n)]), method="Radau",
                    t_eval=READS, rtol=1e-10, atol=1e-14)
    rng = np.random.default_rng(61)
    return 0.05 + SPC * (S0[:, None] - sol.y[:n]) + SIGMA * rng.standard_normal((n, READS.size))


def _curve(p: np.ndarray, s0: float) -> np.ndarray:
    """baseline + SPC (S0 - S(theta)) for parameters (baseline, ln v0 in mM/s, u = Km/(Km + S0), tau, k)."""
    base, ln_v0, u, tau, k = p
    km, vmax = s0 * u / (1.0 - u), np.exp(ln_v0) / (1.0 - u)
    lag = tau * (1.0 - np.exp(-READS / tau))
    theta = ((1.0 - np.exp(-k * READS)) / k - lag) / (1.0 - k * tau)
    s = km * lambertw(s0 / km * np.exp((s0 - vmax * theta) / km)).real
    return base + SPC * (s0 - s)


def _jacobian(p: np.ndarray, s0: float) -> np.ndarray:
    """[90, 5] central differences of :func:`_curve`."""
    steps = np.array([1e-6, 1e-6, 1e-6, 1e-4, 1e-9])
    cols = []
    for i, h in enumerate(steps):
        up, down = p.copy(), p.copy()
        up[i] += h
        down[i] -= h
        cols.append((_curve(up, s0) - _curve(down, s0)) / (2 * h))
    return np.column_stack(cols)


@pytest.mark.parametrize("k_se", [0.0, 2e-4])
def test_held_decay_standard_errors_match_an_independent_linearisation(k_se: float) -> None:
    y = _reads()
    p0 = np.column_stack([np.full(2, 0.05), np.log(VMAX * S0 / (KM + S0)), KM / (KM + S0), np.full(2, TAU),
                          np.full(2, K)])
    out = lagfit._joint(READS, y, S0, SPC, p0, np.full(2, SIGMA), 10.0, READS[-1], k_se=k_se)
    assert np.all(out["params"][:, 4] == K)  # held
    for i in range(2):
        p = out["params"][i]
        jac = _jacobian(p, S0[i])
        resid = y[i] - _curve(p, S0[i])
        np.testing.assert_allclose(out["rss"][i], resid @ resid, rtol=1e-6)
        scale2 = max(resid @ resid / (READS.size - 4), SIGMA**2)
        cov5 = np.linalg.inv(jac.T @ jac) * scale2
        cov4 = np.linalg.inv(jac[:, :4].T @ jac[:, :4]) * scale2  # the conditional covariance given k
        slope = cov5[1, 4] / cov5[4, 4]
        v0 = SPC * np.exp(p[1])
        assert out["v0"][i] == pytest.approx(v0, rel=1e-12)
        want_se = v0 * np.sqrt(cov4[1, 1] + slope**2 * k_se**2)
        assert out["stderr"][i] == pytest.approx(want_se, rel=2e-3)
        assert out["tau_se"][i] == pytest.approx(np.sqrt(cov4[3, 3]), rel=2e-3)
        assert out["k_se"][i] == pytest.approx(k_se, abs=1e-15)
        assert out["ratio"][i] == pytest.approx(np.sqrt(resid @ resid / (READS.size - 4)) / SIGMA, rel=1e-6)
    # the plate value's error widens v0's: visible at this size
    if k_se > 0:
        held = lagfit._joint(READS, y, S0, SPC, p0, np.full(2, SIGMA), 10.0, READS[-1], k_se=0.0)
        assert (out["stderr"] > 1.05 * held["stderr"]).all()


def test_grid_fit_start_values_and_residuals_at_the_true_lag() -> None:
    # step 1 of the module text on reads made without decay (k = 0): at the true lag time the start values are
    # the curve's own baseline, ln v0 (mM/s) and u = Km/(Km + S0), and the residual sum is the noise's;
    # at no lag the fit is far worse. The residual sum by hand from the model written above.
    n = S0.size

    def rhs(_t: float, z: np.ndarray) -> np.ndarray:
        s, p, a = z[:n], z[n:2 * n], z[2 * n:]
        return np.concatenate([-a * VMAX * s / (KM + s), -p / TAU, p / TAU])

    sol = solve_ivp(rhs, (0.0, READS[-1]), np.concatenate([S0, np.ones(n), np.zeros(n)]), method="Radau",
                    t_eval=READS, rtol=1e-10, atol=1e-14)
    rng = np.random.default_rng(62)
    y = 0.05 + SPC * (S0[:, None] - sol.y[:n]) + 2e-4 * rng.standard_normal((n, READS.size))
    at_lag = lagfit._grid_fit(READS, y, S0, SPC, TAU, 8)
    no_lag = lagfit._grid_fit(READS, y, S0, SPC, 0.0, 8)
    assert at_lag["ok"].all()
    np.testing.assert_allclose(at_lag["start"][:, 0], 0.05, atol=3e-4)
    np.testing.assert_allclose(at_lag["start"][:, 1], np.log(VMAX * S0 / (KM + S0)), atol=0.01)
    np.testing.assert_allclose(at_lag["start"][:, 2], KM / (KM + S0), rtol=0.05)
    for i in range(n):
        base, ln_v0, u = at_lag["start"][i]
        # the k = 0 clock, by the hand-written model with a vanishing decay constant
        resid = y[i] - _curve(np.array([base, ln_v0, u, TAU, 1e-12]), S0[i])
        assert at_lag["rss"][i] == pytest.approx(resid @ resid, rel=0.02)
    assert (at_lag["rss"] < 2.0 * READS.size * 2e-4**2).all()  # of the order of the noise: n sigma²
    assert (no_lag["rss"] > 10.0 * at_lag["rss"]).all()
