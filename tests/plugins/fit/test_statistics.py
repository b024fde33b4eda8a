"""The fit statistics checked against calculations written here, independently of the engine.

Every reported number of the model comparison and of the uncertainties is recomputed in the test from its
textbook definition, with scipy.stats (an independent implementation of the t and F distributions; the engine
uses scipy.special) and numpy only:

* AICc for Gaussian errors, n·ln(RSS/n) + 2k + 2k(k+1)/(n − k − 1) with k = free parameters + 1 (Burnham &
  Anderson 2002, *Model Selection and Multimodel Inference*, eq. 2.14 and section 2.9);
* Akaike weights exp(−Δ/2)/Σexp(−Δ/2) (same source, section 2.9);
* the extra-sum-of-squares F-test, F = ((RSS₁ − RSS₂)/(df₁ − df₂))/(RSS₂/df₂) (Bates & Watts 1988,
  section 3.10; Motulsky & Christopoulos 2004, *Fitting Models to Biological Data*, ch. 22);
* Wald intervals estimate ± t(0.975, n − p)·SE with SE from s²(JᵀJ)⁻¹ (the covariance NIST StRD certifies);
* R² = 1 − RSS/TSS;
* the delta method for kcat = Vmax/E and kcat/Km = Vmax/(E·Km), including the Vmax–Km covariance;
* profile-likelihood limits from a brute-force profile on a grid (Bates & Watts 1988, ch. 6).

Data: the puromycin data of Treloar (1974) as printed in Bates & Watts (1988), Appendix A1.3
(tests/data/reference/puromycin.csv; README there), and invented simulated data where a boundary needs it.
"""

from __future__ import annotations

import math
import statistics
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from vzero.data import Table
from vzero.params import validate
from vzero.plugins import fit as fit_plugin
from vzero.plugins.fit import compare, engine
from vzero.plugins.fit import run as fit_run
from vzero.plugins.fit.catalog import BY_NAME
from vzero.plugins.fit.stage import FitStage
from vzero.registry import Registry
from vzero.stage import StageInput
from vzero.units import quantity

DATA = Path(__file__).resolve().parents[2] / "data" / "reference"
MM, HILL = BY_NAME["michaelis-menten"], BY_NAME["hill"]


def _puromycin(state: str = "treated") -> tuple[np.ndarray, np.ndarray]:
    frame = pd.read_csv(DATA / "puromycin.csv")
    frame = frame[frame["state"] == state]
    return frame["conc"].to_numpy(float), frame["rate"].to_numpy(float)


def _fit(model, s: np.ndarray, v: np.ndarray, **kw) -> engine.FitResult:
    x = {"substrate": s}
    return engine.fit(model.evaluate, model.jacobian, x, v, model.start(x, v), model.params,
                      bounds=dict(model.bounds), **kw)


def _aicc(rss: float, n: int, p: int) -> float:
    """AICc by hand (Burnham & Anderson 2002, eq. 2.14), k = p + 1 counting the error variance."""
    k = p + 1
    return n * np.log(rss / n) + 2 * k + 2 * k * (k + 1) / (n - k - 1)


def _numeric_jacobian(model, p: np.ndarray, s: np.ndarray) -> np.ndarray:
    """Central differences (independent of the models' analytic Jacobians)."""
    cols = []
    for i in range(p.size):
        h = 1e-6 * max(abs(p[i]), 1e-8)
        up, dn = p.copy(), p.copy()
        up[i] += h
        dn[i] -= h
        cols.append((model.evaluate(list(up), {"substrate": s}) - model.evaluate(list(dn), {"substrate": s})) / (2 * h))
    return np.stack(cols, axis=1)


# -- one fit: RSS, AICc, R², standard errors and Wald intervals ------------------------------------------


@pytest.fixture(scope="module")
def puromycin_fits() -> tuple[np.ndarray, np.ndarray, engine.FitResult, engine.FitResult]:
    s, v = _puromycin()
    return s, v, _fit(MM, s, v), _fit(HILL, s, v)


def test_rss_aicc_and_r_squared_by_definition(puromycin_fits) -> None:
    s, v, mm, hill = puromycin_fits
    for model, res in ((MM, mm), (HILL, hill)):
        pred = model.evaluate(list(res.values), {"substrate": s})
        rss = float(np.sum((v - pred) ** 2))
        assert res.rss == pytest.approx(rss, rel=1e-12)
        n, p = s.size, len(model.params)
        assert (res.n_points, res.dof) == (n, n - p)
        assert res.aicc == pytest.approx(_aicc(rss, n, p), rel=1e-12)
        tss = float(np.sum((v - v.mean()) ** 2))
        assert res.r_squared == pytest.approx(1 - rss / tss, rel=1e-12)
    # Bates & Watts (1988) section 2.3: treated puromycin, Vmax 212.7, Km 0.06412 (mM in their table)
    assert mm.value("Vmax") == pytest.approx(212.68, rel=1e-4)
    assert mm.value("Km") == pytest.approx(0.06412, rel=1e-3)


def test_standard_errors_and_wald_intervals_by_hand(puromycin_fits) -> None:
    s, v, mm, _ = puromycin_fits
    n, p = s.size, 2
    jac = _numeric_jacobian(MM, mm.values.copy(), s)
    cov = mm.rss / (n - p) * np.linalg.inv(jac.T @ jac)
    np.testing.assert_allclose(mm.covariance, cov, rtol=1e-5)
    tq = stats.t.ppf(0.975, n - p)  # Student's t from scipy.stats, on n − p degrees of freedom
    for i, name in enumerate(MM.params):
        est = mm.params[name]
        se = np.sqrt(cov[i, i])
        assert est.stderr == pytest.approx(se, rel=1e-5)
        assert est.ci_method == "wald-t"
        assert est.ci_low == pytest.approx(est.value - tq * se, rel=1e-6)
        assert est.ci_high == pytest.approx(est.value + tq * se, rel=1e-6)
    # 90 % intervals use t(0.95)
    res90 = _fit(MM, s, v, confidence=0.90)
    se = res90.params["Km"].stderr
    assert res90.params["Km"].ci_high - res90.value("Km") == pytest.approx(stats.t.ppf(0.95, n - p) * se, rel=1e-6)
    assert engine.t_quantile(0.95, 3) == pytest.approx(stats.t.ppf(0.975, 3), rel=1e-12)


def test_weighted_r_squared_uses_the_weighted_mean() -> None:
    # weighted least squares: R² = 1 − Σw²r²/Σw²(y − ȳ_w)², ȳ_w the mean weighted by w² = 1/σ²
    s, v = _puromycin()
    sigma = 0.05 * v + 2.0
    res = _fit(MM, s, v, sigma=sigma)
    w2 = 1 / sigma**2
    pred = MM.evaluate(list(res.values), {"substrate": s})
    ybar = np.sum(w2 * v) / np.sum(w2)
    assert res.rss == pytest.approx(np.sum(w2 * (v - pred) ** 2), rel=1e-10)
    assert res.r_squared == pytest.approx(1 - res.rss / np.sum(w2 * (v - ybar) ** 2), rel=1e-10)


# -- model comparison: F-test, AICc, Akaike weights ------------------------------------------------------


def test_f_test_and_akaike_weights_by_hand(puromycin_fits) -> None:
    s, _, mm, hill = puromycin_fits
    n = s.size
    t = compare.f_test(mm, hill, ("michaelis-menten", "hill"))
    assert t is not None
    df1, df2 = 1, n - 3
    f = ((mm.rss - hill.rss) / df1) / (hill.rss / df2)
    assert (t.df1, t.df2) == (df1, df2)
    assert (t.simple, t.complex) == ("michaelis-menten", "hill")  # the pair is named simpler model first
    assert t.f == pytest.approx(f, rel=1e-10)
    assert t.p == pytest.approx(stats.f.sf(f, df1, df2), rel=1e-8)  # scipy.stats.f, independent of special.fdtrc
    rows, preferred, _ = compare.compare_set({"michaelis-menten": mm, "hill": hill}, {"hill": {"michaelis-menten": ""}})
    a = {"michaelis-menten": _aicc(mm.rss, n, 2), "hill": _aicc(hill.rss, n, 3)}
    best = min(a.values())
    raw = {m: np.exp(-(x - best) / 2) for m, x in a.items()}
    for r in rows:
        assert r["aicc"] == pytest.approx(a[r["model"]], rel=1e-12)
        assert r["delta_aicc"] == pytest.approx(a[r["model"]] - best, abs=1e-10)
        assert r["akaike_weight"] == pytest.approx(raw[r["model"]] / sum(raw.values()), rel=1e-10)
    # treated puromycin is Michaelis-Menten (Bates & Watts 1988): Hill's extra parameter is not supported
    assert preferred == "michaelis-menten"


def _stub(rss: float, n: int, p: int) -> engine.FitResult:
    """A successful fit with the given RSS (the comparison looks at RSS, n, free parameters and AICc only)."""
    names = tuple(f"p{i}" for i in range(p))
    nan = np.full((p, p), np.nan)
    return engine.FitResult(names, {}, True, "", 1, rss, n - p, n, _aicc(rss, n, p), np.nan, nan, nan, False,
                            values=np.ones(p), free=np.ones(p, bool))


def _rss_for_p(p_target: float, rss_complex: float, n: int) -> float:
    """The simpler model's RSS (one parameter fewer) that gives an F-test p value of ``p_target``."""
    df2 = n - 3
    return rss_complex * (1 + stats.f.isf(p_target, 1, df2) / df2)


@pytest.mark.parametrize(("p_value", "expected"), [(0.09, "michaelis-menten"), (0.055, "michaelis-menten"),
                                                    (0.045, "hill"), (0.02, "hill")])
def test_f_test_overrules_the_lowest_aicc_only_when_p_is_at_least_alpha(p_value: float, expected: str) -> None:
    # n = 30: Hill has the lower AICc in every case here (hand calculation below), so the preferred model is
    # decided by the F-test at alpha = 0.05 (parsimony rule of the module docstring)
    n = 30
    hill = _stub(10.0, n, 3)
    mm = _stub(_rss_for_p(p_value, 10.0, n), n, 2)
    assert _aicc(hill.rss, n, 3) < _aicc(mm.rss, n, 2)
    rows, preferred, reason = compare.compare_set({"michaelis-menten": mm, "hill": hill},
                                                  {"hill": {"michaelis-menten": "h = 1"}}, alpha=0.05)
    assert preferred == expected, reason
    assert {r["selected_model"] for r in rows} == {expected}
    hill_row = next(r for r in rows if r["model"] == "hill")
    assert hill_row["p"] == pytest.approx(p_value, rel=1e-6)
    assert hill_row["delta_aicc"] == 0.0
    if expected == "michaelis-menten":
        assert "not supported" in reason


def test_lowest_aicc_wins_without_a_nesting_relation() -> None:
    n = 20
    a, b = _stub(5.0, n, 3), _stub(5.5, n, 3)
    _, preferred, reason = compare.compare_set({"competitive": a, "uncompetitive": b}, {})
    assert preferred == "competitive"
    dA = _aicc(5.5, n, 3) - _aicc(5.0, n, 3)
    assert f"{dA:.2g} higher" in reason


# -- cooperativity verdicts on both sides of each boundary -----------------------------------------------


@pytest.mark.parametrize(("ci", "p", "verdict"), [
    ((1.3, 2.1), 0.001, "positive"),
    ((0.45, 0.8), 0.001, "negative"),
    ((0.45, 0.8), 0.2, "not resolved by these data"),  # interval excludes 1, F-test does not agree
    ((0.85, 1.2), 0.4, "none"),  # inside the 0.8-1.25 margin
    ((0.81, 1.24), 0.4, "none"),
    ((0.79, 1.2), 0.4, "not resolved by these data"),  # lower end just outside the margin
    ((0.85, 1.26), 0.4, "not resolved by these data"),  # upper end just outside
    ((0.7, 1.4), 0.4, "not resolved by these data"),  # between the margins: too wide
    ((0.9, 1.1), 0.01, "not resolved by these data"),  # contains 1 but the F-test prefers Hill
    ((1.3, 2.1), 0.05, "not resolved by these data"),  # p exactly alpha is not significant (p < alpha is)
    ((0.85, 1.2), 0.05, "none"),
    ((np.nan, 1.1), 0.4, "not resolved by these data"),
])
def test_cooperativity_verdict_boundaries(ci: tuple[float, float], p: float, verdict: str) -> None:
    hill = _stub(1.0, 20, 3)
    got, reason = compare.cooperativity(hill, (*ci, "profile"), p, alpha=0.05, names=("Hill", "Michaelis–Menten", "h"))
    assert got == verdict, reason
    assert compare.EQUIVALENCE == (0.8, 1.25)


def _registry() -> Registry:
    reg = Registry()
    fit_plugin.vzero_register(reg)
    return reg


def _stage(frame: pd.DataFrame, **settings) -> dict:
    values, problems = validate(FitStage.params, settings)
    assert not problems, problems
    units = {"rate": "uM/min", "substrate": "uM", "inhibitor": "uM", "enzyme": "nM"}
    data = StageInput({"rates": Table(frame, units)}, None, {}, {}, _registry(), lambda _m: None)
    return FitStage(**values).run(data).artifacts


def _binding_frame(h: float, seed: int, noise: float = 0.01) -> pd.DataFrame:
    """Invented demo data: a Hill binding curve (Vmax 10 uM/min, K0.5 10 uM) over 1000-fold in substrate,
    triplicates, Gaussian noise of constant SD (seeded)."""
    rng = np.random.default_rng(seed)
    s = np.repeat(np.geomspace(0.3, 300, 12), 3)
    v = 10 * s**h / (10**h + s**h) + noise * rng.standard_normal(s.size)
    return pd.DataFrame([{"plate": "P1", "well": f"W{k}", "group": "g", "role": "sample", "substrate": a,
                          "inhibitor": np.nan, "enzyme": 5.0, "rate": b, "flags": ""}
                         for k, (a, b) in enumerate(zip(s, v, strict=True))])


@pytest.mark.parametrize(("h", "verdict"), [(0.6, "negative"), (1.0, "none"), (2.0, "positive")])
def test_simulated_binding_curves_get_their_verdict(h: float, verdict: str) -> None:
    # negative cooperativity (h < 1) as in a simulated binding curve with two classes of site; the full
    # fit stage (profile intervals, F-test against Michaelis-Menten) must say which side of 1 h lies
    out = _stage(_binding_frame(h, seed=11), models=["michaelis-menten", "hill"], profile=True)
    row = out["cooperativity"].frame.iloc[0]
    assert row["verdict"] == verdict, row["reason"]
    assert row["h"] == pytest.approx(h, abs=0.1)


# -- derived quantities: kcat and kcat/Km by the delta method --------------------------------------------


def test_kcat_and_specificity_standard_errors_by_the_delta_method(puromycin_fits) -> None:
    _, _, mm, _ = puromycin_fits
    e = 2.5  # nM of enzyme (an invented value); rates in uM/min, substrate in uM
    rows = {r["parameter"]: r for r in fit_run._derived(MM, mm, e, "nM", "uM/min", "uM", 0.95)}
    vmax, km = mm.value("Vmax"), mm.value("Km")
    cov = mm.covariance
    to_per_s = 1e-6 / 1e-9 / 60  # (uM/min)/nM -> 1/s
    kcat = vmax / e * to_per_s
    assert rows["kcat"]["estimate"] == pytest.approx(kcat, rel=1e-12)
    assert rows["kcat"]["stderr"] == pytest.approx(np.sqrt(cov[0, 0]) / e * to_per_s, rel=1e-12)
    # kcat/Km = Vmax/(E Km); gradient (1/(E Km), −Vmax/(E Km²)); variance gᵀ C g with the full covariance
    spec_unit = to_per_s / 1e-6  # 1/(uM·s) -> 1/(M·s)
    g = np.array([1 / (e * km), -vmax / (e * km**2)]) * spec_unit
    assert cov[0, 1] > 0  # Vmax and Km are positively correlated: the covariance term matters
    assert rows["kcat/Km"]["estimate"] == pytest.approx(vmax / (e * km) * spec_unit, rel=1e-12)
    assert rows["kcat/Km"]["stderr"] == pytest.approx(np.sqrt(g @ cov @ g), rel=1e-9)
    tq = stats.t.ppf(0.975, mm.dof)
    assert rows["kcat/Km"]["ci_high"] == pytest.approx(rows["kcat/Km"]["estimate"] + tq * rows["kcat/Km"]["stderr"],
                                                       rel=1e-9)


# -- profile likelihood against a brute-force profile ----------------------------------------------------


def _brute_profile_km(s: np.ndarray, v: np.ndarray, grid: np.ndarray) -> np.ndarray:
    """RSS minimised over Vmax at each Km of the grid: Vmax enters linearly, so its optimum is closed-form
    (Σ v f / Σ f², f = S/(Km + S))."""
    f = s[None, :] / (grid[:, None] + s[None, :])
    vmax = (f @ v) / np.sum(f * f, axis=1)
    return np.sum((v[None, :] - vmax[:, None] * f) ** 2, axis=1)


def _crossings(grid: np.ndarray, rss: np.ndarray, target: float) -> tuple[float, float]:
    inside = rss <= target
    i0, i1 = np.flatnonzero(inside)[[0, -1]]
    lo = np.interp(target, [rss[i0], rss[i0 - 1]], [grid[i0], grid[i0 - 1]])
    hi = np.interp(target, [rss[i1], rss[i1 + 1]], [grid[i1], grid[i1 + 1]])
    return float(lo), float(hi)


@pytest.mark.parametrize("case", ["puromycin", "unsaturated"])
def test_profile_interval_matches_a_brute_force_profile(case: str) -> None:
    if case == "puromycin":
        s, v = _puromycin()
    else:
        # invented: substrate only up to Km and 8 % noise, so the profile of Km is strongly skewed (its upper limit
        # lies many Wald half-widths above the estimate)
        rng = np.random.default_rng(2)
        s = np.repeat(np.linspace(0.5, 10, 8), 2)
        v = 10 * s / (10 + s) + 0.8 * rng.standard_normal(s.size)
    res = _fit(MM, s, v)
    n = s.size
    target = res.rss * (1 + stats.f.ppf(0.95, 1, n - 2) / (n - 2))  # F-based threshold, scipy.stats
    km = res.value("Km")
    grid = np.geomspace(km / 20, km * 50, 200_001)
    lo, hi = _crossings(grid, _brute_profile_km(s, v, grid), target)
    got = engine.profile_interval(MM.evaluate, MM.jacobian, {"substrate": s}, v, res, "Km", bounds=dict(MM.bounds))
    assert got[2] == "", got
    np.testing.assert_allclose(got[:2], (lo, hi), rtol=1e-4)
    if case == "unsaturated":  # the skew this case is for
        wald = res.params["Km"].ci_high - km
        assert hi - km > 4 * wald


# -- weights ------------------------------------------------------------------------------------------------


def test_relative_weighting_floor() -> None:
    # sigma ∝ |rate|, floored at 5 % of the largest |rate| (docs/fitting.md)
    y = np.array([0.01, 0.04, 0.06, 0.5, 1.0])
    sigma, note = fit_run._sigma("relative", y, np.arange(5))
    assert note == ""
    np.testing.assert_allclose(sigma, [0.05, 0.05, 0.06, 0.5, 1.0])


def test_replicate_weighting_uses_sample_sd_with_a_floor() -> None:
    # per-level SD with n − 1 in the denominator (statistics.stdev), floored at 0.1 × the median level SD;
    # levels without replicates get the median
    y = np.array([1.0, 1.2, 2.0, 2.6, 3.0, 3.0001, 5.0])
    levels = np.array([0, 0, 1, 1, 2, 2, 3])
    sigma, note = fit_run._sigma("replicate", y, levels)
    assert note == ""
    sds = [statistics.stdev([1.0, 1.2]), statistics.stdev([2.0, 2.6]), statistics.stdev([3.0, 3.0001])]
    typical = statistics.median(sds)
    want = [sds[0], sds[0], sds[1], sds[1], 0.1 * typical, 0.1 * typical, typical]
    np.testing.assert_allclose(sigma, want, rtol=1e-12)
    sigma, note = fit_run._sigma("replicate", y[:3], levels[:3])
    assert sigma is None and "two or more levels" in note


def test_comparison_with_a_failed_nested_model() -> None:
    # the Hill fit failed: no F-test, Michaelis-Menten preferred as the only model, the failed row kept
    n = 20
    mm = _stub(5.0, n, 2)
    failed = engine.FitResult(("a", "b", "c"), {}, False, "did not converge", 0, np.nan, n - 3, n, np.nan, np.nan,
                              np.full((3, 3), np.nan), np.full((3, 3), np.nan), False)
    rows, preferred, reason = compare.compare_set({"michaelis-menten": mm, "hill": failed},
                                                  {"hill": {"michaelis-menten": "h = 1"}})
    assert preferred == "michaelis-menten" and reason == "lowest AICc (only model fitted)"
    hill_row = next(r for r in rows if r["model"] == "hill")
    assert np.isnan(hill_row["p"]) and np.isnan(hill_row["akaike_weight"]) and not hill_row["success"]
    assert next(r for r in rows if r["model"] == "michaelis-menten")["akaike_weight"] == 1.0
    assert compare.f_test(mm, failed, ("michaelis-menten", "hill")) is None


def test_ki_conversion_needs_one_substrate_concentration() -> None:
    # Cheng-Prusoff needs the S of the titration: wells at 6 and 6.5 uM (within 1 uM of each other, but not
    # the same) are refused; 6 uM everywhere is converted, Ki = IC50/(1 + S/Km) (Cheng & Prusoff 1973)
    model = BY_NAME["logistic-4p"]
    i = np.geomspace(0.05, 50, 12)
    v = model.evaluate([10.0, 0.5, 2.0, 1.0], {"inhibitor": i})
    res = engine.fit(model.evaluate, model.jacobian, {"inhibitor": i}, v, [9, 1, 1, 1], model.params,
                     bounds=dict(model.bounds))
    cfg = {"mechanism": "competitive", "x": "substrate", "km": quantity("2 uM"), "km_stderr": None}
    same = fit_run._ki_rows(model, res, np.full(12, 6.0), cfg, "nM", "uM", 0.95)[0]
    assert same["estimate"] == pytest.approx(2.0 / (1 + 6 / 2), rel=1e-6)
    mixed = fit_run._ki_rows(model, res, np.r_[np.full(6, 6.0), np.full(6, 6.5)], cfg, "nM", "uM", 0.95)[0]
    assert np.isnan(mixed["estimate"]) and "one positive substrate concentration" in mixed["note"]


@pytest.mark.parametrize("mech", ["competitive", "uncompetitive"])
def test_ki_standard_error_carries_the_km_uncertainty(mech: str) -> None:
    # Cheng & Prusoff (1973): Ki = IC50/f with f = 1 + S/Km (competitive) or 1 + Km/S (uncompetitive); its
    # SE by first-order error propagation, by hand: sqrt((se_IC50/f)^2 + (Ki/f * df/dKm * se_Km)^2), with
    # df/dKm = -S/Km^2 or 1/S
    model = BY_NAME["logistic-4p"]
    i = np.geomspace(0.05, 50, 12)
    v = model.evaluate([10.0, 0.5, 2.0, 1.0], {"inhibitor": i}) + np.random.default_rng(3).normal(0, 0.05, 12)
    res = engine.fit(model.evaluate, model.jacobian, {"inhibitor": i}, v, [9, 1, 1, 1], model.params,
                     bounds=dict(model.bounds))
    cfg = {"mechanism": mech, "x": "substrate", "km": quantity("2 uM"), "km_stderr": quantity("0.5 uM")}
    row = fit_run._ki_rows(model, res, np.full(12, 6.0), cfg, "nM", "uM", 0.95)[0]
    k, k_se = res.params[model.ki_from].value, res.params[model.ki_from].stderr
    assert k_se > 0
    f, dfdkm = (1 + 6.0 / 2.0, -6.0 / 4.0) if mech == "competitive" else (1 + 2.0 / 6.0, 1 / 6.0)
    assert row["estimate"] == pytest.approx(k / f, rel=1e-9)
    assert row["stderr"] == pytest.approx(math.sqrt((k_se / f) ** 2 + (k / f / f * dfdkm * 0.5) ** 2), rel=1e-9)


def test_f_test_needs_a_nested_pair_with_residual_degrees_of_freedom() -> None:
    # F = ((RSS1 - RSS2)/df1) / (RSS2/df2) is defined only for df1 > 0, df2 > 0 and RSS2 > 0 (extra sum of
    # squares test, e.g. Motulsky & Christopoulos 2004, ch. 22); otherwise there is no test
    n = 10
    assert compare.f_test(_stub(2.0, n, 2), _stub(1.0, n, 3), ("a", "b")) is not None
    assert compare.f_test(_stub(2.0, n, 3), _stub(1.0, n, 3), ("a", "b")) is None  # df1 = 0
    assert compare.f_test(_stub(2.0, n, 9), _stub(1e-3, n, 10), ("a", "b")) is None  # df2 = 0
    with np.errstate(divide="ignore"):  # the stub's AICc of an exact fit is -inf
        exact = _stub(0.0, n, 3)
    assert compare.f_test(_stub(2.0, n, 2), exact, ("a", "b")) is None  # exact fit: RSS2 = 0


def test_a_bounded_fit_that_fails_stays_inside_its_bounds() -> None:
    # falling rates cannot be described by Michaelis-Menten with Km >= 0: the fit may fail, but whatever it
    # reports must respect the bound (an unbounded retry would find a negative Km)
    s = np.array([1, 2, 4, 8, 16, 32.0])
    v = np.array([5, 4.6, 4.1, 3.9, 3.5, 3.2])
    res = _fit(MM, s, v)
    assert res.value("Km") >= 0.0
    # scipy's unbounded least squares does find a lower cost at a negative Km here: the bound is binding
    from scipy.optimize import least_squares
    free = least_squares(lambda q: q[0] * s / (q[1] + s) - v, [5.0, -0.5], method="lm")
    assert free.x[1] < 0 and 2 * free.cost < res.rss


def test_batched_fit_matches_scipy_curve_fit_and_the_single_fit() -> None:
    # both Puromycin groups (Bates & Watts 1988) in one batched fit: estimates and standard errors against
    # scipy.optimize.curve_fit (independent solver; its pcov is scaled by RSS/dof like ours), RSS by hand
    from scipy.optimize import curve_fit
    groups = [_puromycin("treated"), _puromycin("untreated")]
    n = max(g[0].size for g in groups)
    s = np.zeros((2, n))
    v = np.zeros((2, n))
    mask = np.zeros((2, n), bool)
    for i, (si, vi) in enumerate(groups):
        s[i, :si.size], v[i, :si.size], mask[i, :si.size] = si, vi, True
    x = {"substrate": s}
    p0 = np.array([MM.start({"substrate": si}, vi) for si, vi in groups])
    batch = engine.fit_batch(MM.evaluate, MM.jacobian, x, v, mask, p0, MM.params, bounds=dict(MM.bounds))
    for (si, vi), res in zip(groups, batch, strict=True):
        popt, pcov = curve_fit(lambda c, vm, km: vm * c / (km + c), si, vi, p0=[200.0, 0.1])
        np.testing.assert_allclose([res.value("Vmax"), res.value("Km")], popt, rtol=1e-5)
        np.testing.assert_allclose([res.params["Vmax"].stderr, res.params["Km"].stderr], np.sqrt(np.diag(pcov)),
                                   rtol=1e-4)
        rss = float(np.sum((vi - popt[0] * si / (popt[1] + si)) ** 2))
        assert res.rss == pytest.approx(rss, rel=1e-6)
        assert res.aicc == pytest.approx(_aicc(rss, si.size, 2), rel=1e-6)


@pytest.mark.parametrize(("e", "why"), [(0.0, "not positive"), (-2.5, "not positive"), (np.nan, "unknown"),
                                        (np.inf, "unknown")])
def test_kcat_needs_a_finite_positive_enzyme_concentration(puromycin_fits, e: float, why: str) -> None:
    # kcat = Vmax/[E] is defined only for a finite [E] > 0: otherwise one row, no number, and the reason
    _, _, mm, _ = puromycin_fits
    with np.errstate(divide="ignore", invalid="ignore"):
        rows = fit_run._derived(MM, mm, e, "nM", "uM/min", "uM", 0.95)
    assert [r["parameter"] for r in rows] == ["kcat"]
    assert np.isnan(rows[0]["estimate"]) and np.isnan(rows[0]["stderr"]) and why in rows[0]["note"]


def test_weighted_batched_fit_matches_scipy_curve_fit() -> None:
    # weights 1/sigma²: estimates and the weighted RSS sum(((v - f)/sigma)²) against scipy.optimize.curve_fit
    # with the same sigma (independent solver); AICc from that RSS (Burnham & Anderson 2002, eq. 2.14)
    from scipy.optimize import curve_fit
    s, v = _puromycin("treated")
    sigma = 2.0 + 0.05 * v  # invented per-point SDs, growing with the rate
    x = {"substrate": s[None, :]}
    p0 = np.array([MM.start({"substrate": s}, v)])
    res = engine.fit_batch(MM.evaluate, MM.jacobian, x, v[None, :], np.ones((1, s.size), bool), p0, MM.params,
                           sigma=sigma[None, :], bounds=dict(MM.bounds))[0]
    popt, _ = curve_fit(lambda c, vm, km: vm * c / (km + c), s, v, p0=[200.0, 0.1], sigma=sigma)
    np.testing.assert_allclose([res.value("Vmax"), res.value("Km")], popt, rtol=1e-5)
    rss = float(np.sum(((v - popt[0] * s / (popt[1] + s)) / sigma) ** 2))
    assert res.rss == pytest.approx(rss, rel=1e-6)
    assert res.aicc == pytest.approx(_aicc(rss, s.size, 2), rel=1e-6)
