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
from scipy.optimize import least_squares, minimize_scalar
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


def _group(model: str, theta: list[float], seed: int, s0: np.ndarray = S0) -> CurveGroup:
    rng = np.random.default_rng(seed)
    y = _curves(model, np.array(theta), s0) + rng.uniform(0.0, 2.0, (s0.size, 1))
    y += 0.4 * rng.standard_normal(y.shape)
    n = s0.size
    wells = Wells(s0, np.zeros(n), np.ones(n), np.tile(T, (n, 1)), np.full(n, 1 / 60))
    rates = BY_NAME[model].evaluate(theta, {"substrate": s0})
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


@pytest.mark.slow
@pytest.mark.parametrize("seed", [1, 3])
def test_a_poorly_saturated_design_leaves_the_upper_km_limit_open(seed: int) -> None:
    # substrate at most 1 % of Km: the curves fix Vmax/Km but not Km. The profile of Km stays below the level
    # however large Km gets (open upper side); its lower limit still lies on the level. With Km held, the
    # inner problem is one-dimensional (Vmax), minimised by scipy's minimize_scalar (Brent) here.
    s0 = np.geomspace(1.0, 20.0, 6)
    g = _group("michaelis-menten", [60.0, 2000.0], seed, s0)
    res = fit_groups(BY_NAME["michaelis-menten"], [g])[0].result
    km = res.params["Km"]
    level = res.rss * (1 + special.fdtri(1, res.dof, 0.95) / res.dof)
    rise = level - res.rss
    ratio = res.values[0] / res.values[1]  # Vmax/Km, what these data determine

    def profile(k: float) -> float:
        def rss(log_v: float) -> float:
            r = g.y - _curves("michaelis-menten", np.array([np.exp(log_v), k]), s0)
            return float(np.sum((r - r.mean(axis=1, keepdims=True)) ** 2))

        c = np.log(ratio * (k + s0.mean()))
        return float(minimize_scalar(rss, bracket=(c - 0.5, c, c + 0.5), tol=1e-12).fun)

    assert np.isnan(km.ci_high) and "upper limit not reached (open interval)" in km.note
    assert profile(1e3 * km.value) < level
    assert np.isfinite(km.ci_low) and km.ci_low < km.value
    assert profile(km.ci_low) == pytest.approx(level, abs=1e-3 * rise)
    assert profile(0.9 * km.ci_low) > level > profile(1.1 * km.ci_low)


def test_the_fast_search_gives_the_limits_of_the_general_one(monkeypatch: pytest.MonkeyPatch) -> None:
    # the curve fit's own profile search (one evaluation per point) against the search the rate fits use (an
    # inner Levenberg-Marquardt run per point), on three groups at once: the same limits to 1e-6 of the
    # half-width, the same notes; the general search without its time budget (a busy machine must not decide)
    from vzero.plugins.fit import engine
    from vzero.plugins.fit.curves import fit as curve_fit

    groups = [_group("hill", [6.0, 60.0, 1.8], seed=k) for k in range(3)]
    fast = fit_groups(BY_NAME["hill"], groups)
    monkeypatch.setattr(engine, "PROFILE_SECONDS", 1e6)
    monkeypatch.setattr(curve_fit, "profile_intervals",
                        lambda evaluate, general, y, w, results, profiled, *rest: {
                            n: general(n, np.arange(len(results))) for n in profiled})
    slow = fit_groups(BY_NAME["hill"], groups)
    for a, b in zip(fast, slow, strict=True):
        for name in BY_NAME["hill"].profile:
            p, q = a.result.params[name], b.result.params[name]
            half = q.ci_high - q.ci_low
            assert p.note == q.note
            np.testing.assert_allclose([p.ci_low, p.ci_high], [q.ci_low, q.ci_high], rtol=0, atol=1e-6 * half)
