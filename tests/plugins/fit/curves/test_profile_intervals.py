"""Profile-likelihood intervals of the curve fit against an independent profile.

At each reported limit the profile RSS (the RSS minimised over the other parameters, baselines projected
out) must equal the level RSS_min·(1 + F(0.95; 1, dof)/dof) (Bates & Watts 1988, ch. 6; Venzon &
Moolgavkar 1988). The independent profile uses scipy's ``least_squares`` for the minimisation and scipy's
``solve_ivp`` (DOP853, rtol 1e-11) for the curves: neither the closed forms nor the Newton search of the fit
are involved. Invented scenario: rates in µM/min, substrate in µM, reads every 30 s for 20 min.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special
from scipy.integrate import solve_ivp
from scipy.optimize import least_squares
from vzero.plugins.fit.catalog import BY_NAME
from vzero.plugins.fit.curves.curve import Wells
from vzero.plugins.fit.curves.fit import CurveGroup, fit_groups

T = np.arange(0.0, 1200.0, 30.0)
S0 = np.geomspace(5.0, 400.0, 6)


def _curves(model: str, theta: np.ndarray, s0: np.ndarray) -> np.ndarray:
    """Product [n_wells, n_reads] by solve_ivp: dP/dt = v(S0 − P)/60 for every well at once."""
    m = BY_NAME[model]

    def rhs(_t: float, p: np.ndarray) -> np.ndarray:
        return m.evaluate(list(theta), {"substrate": np.maximum(s0 - p, 0.0)}) / 60.0

    sol = solve_ivp(rhs, (0.0, T[-1]), np.zeros(s0.size), method="DOP853", t_eval=T, rtol=1e-11, atol=1e-12)
    assert sol.success
    return sol.y


def _group(model: str, theta: list[float], seed: int) -> CurveGroup:
    rng = np.random.default_rng(seed)
    y = _curves(model, np.array(theta), S0) + rng.uniform(0.0, 2.0, (S0.size, 1))
    y += 0.4 * rng.standard_normal(y.shape)
    n = S0.size
    wells = Wells(S0, np.zeros(n), np.ones(n), np.tile(T, (n, 1)), np.full(n, 1 / 60))
    rates = BY_NAME[model].evaluate(theta, {"substrate": S0})
    return CurveGroup("g", wells, y, np.ones(y.shape, bool), rates, [("P1", f"A{k + 1}") for k in range(n)])


def _profile_rss(model: str, values: np.ndarray, j: int, t: float, y: np.ndarray) -> float:
    """min over the other parameters of the RSS with parameter ``j`` held at ``t`` (baselines projected out:
    each well's residuals centred), by least_squares from the estimate."""
    others = [k for k in range(values.size) if k != j]

    def resid(q: np.ndarray) -> np.ndarray:
        theta = values.copy()
        theta[j] = t
        theta[others] = q
        r = y - _curves(model, theta, S0)
        return (r - r.mean(axis=1, keepdims=True)).ravel()

    sol = least_squares(resid, values[others], x_scale="jac", xtol=1e-13, ftol=1e-13, gtol=1e-13)
    return float(2.0 * sol.cost)


@pytest.mark.slow
@pytest.mark.parametrize(("model", "theta"), [("michaelis-menten", [6.0, 60.0]),
                                              ("hill", [6.0, 60.0, 1.8]),
                                              ("substrate-inhibition", [6.0, 40.0, 150.0])])
def test_limits_lie_where_the_independent_profile_reaches_the_level(model: str, theta: list[float]) -> None:
    g = _group(model, theta, seed=7)
    res = fit_groups(BY_NAME[model], [g])[0].result
    assert res.success and res.errorbars
    level = res.rss * (1 + special.fdtri(1, res.dof, 0.95) / res.dof)
    rise = level - res.rss
    # the minimum itself: least_squares from the fit's estimate finds no lower RSS (to 1e-6 of the rise)
    assert _profile_rss(model, res.values, 0, res.values[0], g.y) >= res.rss - 1e-6 * rise
    for name in BY_NAME[model].profile:
        p = res.params[name]
        j = res.names.index(name)
        assert p.ci_method == "profile" and p.ci_low < p.value < p.ci_high, (name, p)
        for limit in (p.ci_low, p.ci_high):
            # at the limit the independent profile is at the level, to 1e-4 of the rise: a limit moved by 1e-4
            # of the half-width moves the RSS by 2e-4 of the rise (the Wald limits here miss by 1-9 %)
            rss = _profile_rss(model, res.values, j, limit, g.y)
            assert rss == pytest.approx(level, abs=1e-4 * rise), (name, limit, (rss - level) / rise)
