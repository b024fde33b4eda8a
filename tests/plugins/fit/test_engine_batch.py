"""The fit engine's entry points against scipy.optimize.curve_fit as the independent reference: the batched
fit with padding and weights equals fitting each group alone, a fixed parameter is held (and the free one
then has its closed-form least-squares value), a start outside the bounds is clipped, and the evaluation
budget stops a fit with a message saying so. Invented Michaelis–Menten demo data."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import curve_fit
from vzero.plugins.fit import engine
from vzero.plugins.fit.catalog import BY_NAME

MM = BY_NAME["michaelis-menten"]
RNG = np.random.default_rng(20240611)
GROUPS = [  # (substrate levels, Vmax, Km)
    (np.array([0.5, 1.0, 2.0, 4.0, 8.0, 16.0, 32.0]), 10.0, 3.0),
    (np.array([0.2, 0.5, 1.0, 2.0, 5.0]), 4.0, 0.8),
    (np.array([1.0, 3.0, 9.0, 27.0, 81.0, 243.0]), 60.0, 25.0),
]


def _mm(s: np.ndarray, vmax: float, km: float) -> np.ndarray:
    return vmax * s / (km + s)


def _data() -> list[tuple[np.ndarray, np.ndarray, np.ndarray]]:
    out = []
    for s, vmax, km in GROUPS:
        sigma = 0.02 * _mm(s, vmax, km) + 0.05
        out.append((s, _mm(s, vmax, km) + RNG.normal(0, 1, s.size) * sigma, sigma))
    return out


def test_batched_weighted_fit_equals_curve_fit_per_group() -> None:
    data = _data()
    width = max(s.size for s, _, _ in data)
    shape = (len(data), width)
    s_pad, y_pad, sig_pad, mask = np.zeros(shape), np.zeros(shape), np.ones(shape), np.zeros(shape, bool)
    for g, (s, y, sig) in enumerate(data):
        s_pad[g, : s.size], y_pad[g, : s.size], sig_pad[g, : s.size], mask[g, : s.size] = s, y, sig, True
    p0 = np.array([MM.start({"substrate": s}, y) for s, y, _ in data])
    results = engine.fit_batch(MM.evaluate, MM.jacobian, {"substrate": s_pad}, y_pad, mask, p0, MM.params,
                               sigma=sig_pad, bounds=dict(MM.bounds))
    for (s, y, sig), res in zip(data, results, strict=True):
        popt, pcov = curve_fit(_mm, s, y, p0=[y.max(), np.median(s)], sigma=sig, absolute_sigma=False)
        assert res.success and res.n_points == s.size and res.dof == s.size - 2
        np.testing.assert_allclose(res.values, popt, rtol=1e-6)
        np.testing.assert_allclose([res.params[n].stderr for n in MM.params], np.sqrt(np.diag(pcov)), rtol=1e-4)
        assert res.rss == pytest.approx(float(np.sum(((y - _mm(s, *popt)) / sig) ** 2)), rel=1e-8)
        # the single-group entry point gives the same figures
        one = engine.fit(MM.evaluate, MM.jacobian, {"substrate": s}, y, list(res.values), MM.params, sigma=sig,
                         bounds=dict(MM.bounds))
        np.testing.assert_allclose(one.values, res.values, rtol=1e-6)


def test_a_fixed_parameter_is_held_and_the_free_one_is_its_closed_form() -> None:
    # Km fixed: v = Vmax·g(S) with g = S/(Km + S) is linear in Vmax, whose weighted least-squares value is
    # Σ(g·y/σ²)/Σ(g²/σ²) with variance s²/Σ(g²/σ²), s² = RSS/(n − 1) (linear regression through the origin)
    s, y, sig = _data()[0]
    res = engine.fit(MM.evaluate, MM.jacobian, {"substrate": s}, y, [1.0, 99.0], MM.params, sigma=sig,
                     fixed={"Km": 2.5})
    g = s / (2.5 + s)
    vmax = float(np.sum(g * y / sig**2) / np.sum(g**2 / sig**2))
    rss = float(np.sum(((y - vmax * g) / sig) ** 2))
    assert res.values[1] == 2.5 and res.params["Km"].fixed and res.params["Km"].stderr == 0.0
    assert res.values[0] == pytest.approx(vmax, rel=1e-9)
    assert res.dof == s.size - 1
    assert res.params["Vmax"].stderr == pytest.approx(np.sqrt(rss / (s.size - 1) / np.sum(g**2 / sig**2)), rel=1e-6)
    batch = engine.fit_batch(MM.evaluate, MM.jacobian, {"substrate": s[None]}, y[None], np.ones((1, s.size), bool),
                             np.array([[1.0, 99.0]]), MM.params, sigma=sig[None], fixed={"Km": 2.5})[0]
    assert batch.values[1] == 2.5 and batch.values[0] == pytest.approx(vmax, rel=1e-9)


def test_bounds_hold_the_solution_and_clip_the_start() -> None:
    # true Km 3 but Km bounded to [0.1, 1]: the fit ends on the upper bound; a start of Km = 50 is clipped to 1
    s, y, _ = _data()[0]
    res = engine.fit(MM.evaluate, MM.jacobian, {"substrate": s}, y, [10.0, 50.0], MM.params,
                     bounds={"Km": (0.1, 1.0)})
    assert res.values[1] == pytest.approx(1.0, abs=1e-9)
    # with Km at its bound, Vmax is the closed-form value for Km = 1 (unweighted)
    g = s / (1.0 + s)
    assert res.values[0] == pytest.approx(float(np.sum(g * y) / np.sum(g * g)), rel=1e-6)


def test_the_evaluation_budget_stops_the_fit_with_a_message() -> None:
    s, y, _ = _data()[0]
    res = engine.fit(MM.evaluate, MM.jacobian, {"substrate": s}, y, [1.0, 100.0], MM.params, max_nfev=2)
    assert not res.success
    assert res.message == "stopped at the fit's budget of 2 model evaluations"
    assert engine.FIT_MAX_NFEV == 5_000 and engine.FIT_SECONDS == 2.0
    ok = engine.fit(MM.evaluate, MM.jacobian, {"substrate": s}, y, [1.0, 100.0], MM.params)
    assert ok.success and ok.nfev < engine.FIT_MAX_NFEV


def test_padding_gets_a_harmless_fill_value() -> None:
    # padded points take the mean of the finite used values (weight 0, so they never count); 1 when none
    assert engine._fill_value(np.array([1.0, np.nan, 5.0])) == 3.0
    assert engine._fill_value(np.array([np.nan])) == 1.0
    assert engine._fill_value(np.array([])) == 1.0


def _km_profile_limits(s: np.ndarray, y: np.ndarray, sig: np.ndarray, confidence: float) -> tuple[float, float]:
    """Profile limits of Km by hand: with Km fixed the weighted RSS minimised over Vmax is
    Σ(y/σ)² − (Σ g·y/σ²)²/Σ(g/σ)², g = S/(Km + S); the limits are where it reaches
    RSS_min·(1 + F(confidence; 1, n − 2)/(n − 2)), found with scipy.optimize.brentq."""
    from scipy import optimize, stats

    def rss(km: float) -> float:
        g = s / (km + s)
        return float(np.sum((y / sig) ** 2) - np.sum(g * y / sig**2) ** 2 / np.sum((g / sig) ** 2))

    best = optimize.minimize_scalar(rss, bounds=(1e-3, 1e3), method="bounded", options={"xatol": 1e-12})
    dof = s.size - 2
    target = best.fun * (1 + stats.f.ppf(confidence, 1, dof) / dof)
    return (optimize.brentq(lambda k: rss(k) - target, 1e-6, best.x, xtol=1e-14),
            optimize.brentq(lambda k: rss(k) - target, best.x, 1e4, xtol=1e-14))


@pytest.mark.parametrize("confidence", [0.95, 0.8])
def test_profile_limits_of_km_against_a_hand_profile(confidence: float) -> None:
    data = _data()[:2]
    width = max(s.size for s, _, _ in data)
    shape = (2, width)
    s_pad, y_pad, sig_pad, mask = np.ones(shape), np.zeros(shape), np.ones(shape), np.zeros(shape, bool)
    for g, (s, y, sig) in enumerate(data):
        s_pad[g, : s.size], y_pad[g, : s.size], sig_pad[g, : s.size], mask[g, : s.size] = s, y, sig, True
    p0 = np.array([MM.start({"substrate": s}, y) for s, y, _ in data])
    fits = engine.fit_batch(MM.evaluate, MM.jacobian, {"substrate": s_pad}, y_pad, mask, p0, MM.params,
                            sigma=sig_pad, bounds=dict(MM.bounds), confidence=confidence)
    limits = engine.profile_batch(MM.evaluate, MM.jacobian, {"substrate": s_pad}, y_pad, mask, fits, "Km",
                                  sigma=sig_pad, bounds=dict(MM.bounds), confidence=confidence)
    for (s, y, sig), (lo, hi, note) in zip(data, limits, strict=True):
        want = _km_profile_limits(s, y, sig, confidence)
        assert (lo, hi) == pytest.approx(want, rel=1e-6) and note == ""
    # a fixed parameter or an unknown name has no profile
    held = engine.fit(MM.evaluate, MM.jacobian, {"substrate": data[0][0]}, data[0][1], [1.0, 3.0], MM.params,
                      fixed={"Km": 3.0})
    lo, hi, note = engine.profile_interval(MM.evaluate, MM.jacobian, {"substrate": data[0][0]}, data[0][1], held, "Km")
    assert np.isnan(lo) and np.isnan(hi) and note.startswith("no profile")
    assert np.isnan(engine.profile_interval(MM.evaluate, MM.jacobian, {"substrate": data[0][0]}, data[0][1], held,
                                            "Kx")[0])


def test_profile_interval_defaults_to_95_percent() -> None:
    s, y, sig = _data()[0]
    res = engine.fit(MM.evaluate, MM.jacobian, {"substrate": s}, y, MM.start({"substrate": s}, y), MM.params,
                     sigma=sig, bounds=dict(MM.bounds))
    lo, hi, note = engine.profile_interval(MM.evaluate, MM.jacobian, {"substrate": s}, y, res, "Km", sigma=sig,
                                           bounds=dict(MM.bounds))
    assert (lo, hi) == pytest.approx(_km_profile_limits(s, y, sig, 0.95), rel=1e-6) and note == ""


def _evaluations_needed(method: str, s: np.ndarray, y: np.ndarray, start: list[float]) -> int:
    """The smallest evaluation budget with which scipy.optimize.least_squares alone converges (not stopped
    by the budget) from ``start``, with the engine's tolerances."""
    from scipy.optimize import least_squares

    def f(p: np.ndarray) -> np.ndarray:
        return p[0] * s / (p[1] + s) - y

    def j(p: np.ndarray) -> np.ndarray:
        return np.column_stack([s / (p[1] + s), -p[0] * s / (p[1] + s) ** 2])

    for budget in range(2, 200):
        sol = least_squares(f, start, jac=j, method=method, max_nfev=budget, ftol=engine.TOL, xtol=engine.TOL,
                            gtol=engine.TOL)
        if sol.status != 0:
            return budget
    raise AssertionError(f"{method} did not converge within 200 evaluations")


def test_a_failed_first_algorithm_is_retried_with_the_other() -> None:
    # an unbounded fit that the requested algorithm cannot finish within the budget, while the other one can:
    # the engine's retry (lm ↔ trf) must give the converged fit (the same as curve_fit)
    s, y, _ = _data()[0]
    start = [1.0, 100.0]
    need = {m: _evaluations_needed(m, s, y, start) for m in ("trf", "lm")}
    assert need["trf"] != need["lm"]  # scipy's two algorithms take different paths from this start
    slow, fast = sorted(need, key=need.get, reverse=True)
    budget = need[fast]
    res = engine.fit(MM.evaluate, MM.jacobian, {"substrate": s}, y, start, MM.params, method=slow, max_nfev=budget)
    popt, _ = curve_fit(_mm, s, y, p0=[10.0, 3.0])
    assert res.success, res.message
    np.testing.assert_allclose(res.values, popt, rtol=1e-6)
    # with a budget neither can finish in, the fit fails and says why
    res = engine.fit(MM.evaluate, MM.jacobian, {"substrate": s}, y, start, MM.params, method=slow,
                     max_nfev=budget - 1)
    assert not res.success and "budget" in res.message


def test_a_side_beyond_the_allowed_expansions_is_open() -> None:
    # invented data with Km's upper profile limit 1.35 Wald half-widths above the estimate (the profile of
    # Km is skewed upwards) and the lower one 0.78 below: with max_expand = 1 only the Wald limit itself is
    # tried, so the upper side is reported open (NaN, with a note) and the lower one found; with 2 the upper
    # limit is reached too. Limits against the hand profile above.
    s = np.array([0.5, 1.0, 2.0, 4.0, 8.0])
    y = 10 * s / (20 + s) + np.array([0.02, -0.03, 0.01, 0.03, -0.02])
    res = engine.fit(MM.evaluate, MM.jacobian, {"substrate": s}, y, [1.0, 5.0], MM.params, bounds=dict(MM.bounds))
    want = _km_profile_limits(s, y, np.ones_like(s), 0.95)
    km = res.value("Km")
    # the data put the hand profile's upper limit 1.35 Wald half-widths above Km and the lower one 0.78 below
    # (so max_expand = 1 reaches only the lower side); the Wald half-width rests on the engine's Km and SE,
    # checked here against scipy's curve_fit, an independent fitter
    popt, pcov = curve_fit(lambda x, vmax, k: vmax * x / (k + x), s, y, p0=[1.0, 5.0])
    assert km == pytest.approx(popt[1], rel=1e-6)
    assert res.params["Km"].stderr == pytest.approx(np.sqrt(pcov[1, 1]), rel=1e-4)
    lo, hi, note = engine.profile_interval(MM.evaluate, MM.jacobian, {"substrate": s}, y, res, "Km",
                                           bounds=dict(MM.bounds), max_expand=1)
    assert lo == pytest.approx(want[0], rel=1e-6)
    assert np.isnan(hi)
    assert note == "upper limit not reached (open interval)"
    lo, hi, note = engine.profile_interval(MM.evaluate, MM.jacobian, {"substrate": s}, y, res, "Km",
                                           bounds=dict(MM.bounds), max_expand=2)
    assert (lo, hi) == pytest.approx(want, rel=1e-6)
    assert note == ""
