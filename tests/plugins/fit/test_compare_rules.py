"""The model comparison's guards and default: an F-test only between fits of the same points, and the
default significance level of 0.05 (common practice) when the caller gives none."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy import stats
from vzero.plugins.fit import compare

from tests.plugins.fit.test_statistics import _rss_for_p, _stub


def test_no_f_test_between_fits_of_different_points() -> None:
    assert compare.f_test(_stub(12.0, 30, 2), _stub(10.0, 29, 3), ("a", "b")) is None
    got = compare.f_test(_stub(12.0, 30, 2), _stub(10.0, 30, 3), ("a", "b"))
    # extra-sum-of-squares F = ((12 − 10) / 1) / (10 / 27), p from scipy.stats.f
    assert got is not None and got.f == pytest.approx(5.4) and got.p == pytest.approx(stats.f.sf(5.4, 1, 27))


@pytest.mark.parametrize(("p_value", "expected"), [(0.07, "michaelis-menten"), (0.04, "hill")])
def test_default_alpha_is_five_percent(p_value: float, expected: str) -> None:
    n = 30
    mm, hill = _stub(_rss_for_p(p_value, 10.0, n), n, 2), _stub(10.0, n, 3)
    _, preferred, _ = compare.compare_set({"michaelis-menten": mm, "hill": hill}, {"hill": {"michaelis-menten": ""}})
    assert preferred == expected


def test_a_failed_fit_with_a_finite_rss_is_left_out_of_the_comparison() -> None:
    # a solver that stops at its iteration cap still reports the RSS where it stopped: that fit (here with
    # the lowest AICc) must not take part, and the Akaike weights are over the successful fits only
    n = 20
    good, other = _stub(5.0, n, 2), _stub(5.5, n, 2)
    failed = dataclasses.replace(_stub(1.0, n, 2), success=False, message="iteration limit")
    rows, preferred, _ = compare.compare_set({"competitive": good, "uncompetitive": other, "mixed": failed}, {})
    assert preferred == "competitive"
    weights = {r["model"]: r["akaike_weight"] for r in rows}
    assert np.isnan(weights["mixed"])
    assert weights["competitive"] + weights["uncompetitive"] == pytest.approx(1.0)


def test_rows_of_a_nested_chain_walk_down_while_the_extra_parameters_are_unsupported() -> None:
    # mixed (4 params) nests competitive and uncompetitive (3), which nest nothing here. Competitive has the
    # lowest AICc; mixed vs competitive at p = 0.5 and mixed vs uncompetitive at p = 0.01: mixed gets one row per
    # F-test (F and p by scipy.stats.f with the extra-sum-of-squares F); competitive is kept (mixed is not
    # chosen, so no walk).
    n = 30
    mixed = _stub(10.0, n, 4)
    comp = _stub(10.0 * (1 + stats.f.isf(0.5, 1, n - 4) / (n - 4)), n, 3)
    unc = _stub(10.0 * (1 + stats.f.isf(0.01, 1, n - 4) / (n - 4)), n, 3)
    nests = {"mixed": {"competitive": "", "uncompetitive": ""}}
    rows, chosen, reason = compare.compare_set({"mixed": mixed, "competitive": comp, "uncompetitive": unc}, nests)
    assert chosen == "competitive" and reason.startswith("lowest AICc (next best")
    mixed_rows = [r for r in rows if r["model"] == "mixed"]
    assert [r["f_test_against"] for r in mixed_rows] == ["competitive", "uncompetitive"]
    assert [r["p"] for r in mixed_rows] == pytest.approx([0.5, 0.01], rel=1e-6)
    assert [r["F"] for r in mixed_rows] == pytest.approx([stats.f.isf(0.5, 1, n - 4), stats.f.isf(0.01, 1, n - 4)])
    assert all(r["n_params"] == 4 and r["dof"] == n - 4 for r in mixed_rows)
    assert [r["selected"] for r in rows] == [False, False, True, False]
    assert {r["selected_model"] for r in rows} == {"competitive"}
    assert [r["f_test_against"] for r in rows if r["model"] != "mixed"] == ["", ""]
    # mixed preferred by AICc (F at p = 0.1 is about 2.9: 30 ln(1 + F/26) = 3.2 above the larger penalty's
    # 2.7), but its extra parameter over competitive not supported at p = 0.1 >= alpha: the choice walks down
    comp2 = _stub(10.0 * (1 + stats.f.isf(0.1, 1, n - 4) / (n - 4)), n, 3)
    rows2, chosen2, reason2 = compare.compare_set({"mixed": mixed, "competitive": comp2},
                                                  {"mixed": {"competitive": ""}})
    assert min(rows2, key=lambda r: r["aicc"])["model"] == "mixed"
    assert chosen2 == "competitive" and reason2.startswith("competitive: the extra parameter(s) of mixed")


def test_without_aicc_the_simplest_fitted_model_is_taken() -> None:
    # three points: AICc of a two- or three-parameter model is undefined (n - k - 1 <= 0)
    undefined = {m: dataclasses.replace(_stub(r, 3, k), aicc=np.nan) for m, r, k in
                 (("hill", 0.1, 3), ("michaelis-menten", 0.2, 2))}
    rows, chosen, reason = compare.compare_set(undefined, {})
    assert chosen == "michaelis-menten" and reason.startswith("too few points for AICc")
    assert all(np.isnan(r["aicc"]) and np.isnan(r["akaike_weight"]) for r in rows)
    _, only, why = compare.compare_set({"hill": _stub(0.1, 30, 3)}, {})
    assert only == "hill" and why == "lowest AICc (only model fitted)"


@pytest.mark.parametrize(("ci", "verdict"), [
    ((1.0, 1.2), "none"),  # an interval that ends at 1 contains 1 (closed interval)
    ((0.85, 1.0), "none"),
    ((0.8, 1.25), "none"),  # the margin's own ends count as inside
    ((1.0 + 1e-12, 1.2), "positive"),
    ((0.85, 1.0 - 1e-12), "negative"),
])
def test_cooperativity_at_the_ends_of_the_interval(ci: tuple[float, float], verdict: str) -> None:
    got, reason = compare.cooperativity(_stub(1.0, 20, 3), (*ci, "profile"), 0.001 if verdict != "none" else 0.4,
                                        names=("Hill", "Michaelis–Menten", "h"))
    assert got == verdict, reason


def test_parsimony_keeps_the_simpler_model_when_p_equals_alpha() -> None:
    # the extra parameter is supported only when p < alpha (common practice); alpha set to the pair's own
    # p value (from compare.f_test, checked against scipy.stats.f above) puts the rule on its boundary
    n = 30
    simple, cplx = _stub(_rss_for_p(0.03, 10.0, n), n, 2), _stub(10.0, n, 3)
    p = compare.f_test(simple, cplx, ("michaelis-menten", "hill")).p
    nests = {"hill": {"michaelis-menten": ""}}
    fits = {"michaelis-menten": simple, "hill": cplx}
    assert compare.compare_set(fits, nests, alpha=p)[1] == "michaelis-menten"
    assert compare.compare_set(fits, nests, alpha=p * (1 + 1e-9))[1] == "hill"


NAMES = ("Hill", "Michaelis–Menten", "h")


@pytest.mark.parametrize(("p_value", "outside", "verdict"), [
    (0.049, True, "positive"), (0.07, True, "not resolved by these data"),
    (0.049, False, "not resolved by these data"), (0.07, False, "none"),
])
def test_cooperativity_default_alpha_is_five_percent(p_value: float, outside: bool, verdict: str) -> None:
    # alpha is not passed: the default 0.05 (common practice) decides whether the F-test supports h ≠ 1,
    # with p just below it and at 0.07 (inside 0.05 and 0.1, so a default of 0.1 would reverse the verdict)
    ci = (1.1, 1.2) if outside else (0.9, 1.1)
    got, reason = compare.cooperativity(_stub(1.0, 20, 3), (*ci, "profile"), p_value, names=NAMES)
    assert got == verdict, reason


def test_cooperativity_reasons_and_the_unresolved_branches() -> None:
    fit = _stub(1.0, 20, 3)
    assert compare.cooperativity(None, (1.1, 1.2, "profile"), 0.001, names=NAMES) == (
        "not resolved by these data", "the Hill equation could not be fitted")
    failed = dataclasses.replace(fit, success=False)
    assert compare.cooperativity(failed, (1.1, 1.2, "profile"), 0.001, names=NAMES)[0] == "not resolved by these data"
    for ci in [(np.nan, 1.2), (1.1, np.inf), (-np.inf, 1.2)]:
        got, why = compare.cooperativity(fit, (*ci, "profile"), 0.001, names=NAMES)
        assert got == "not resolved by these data" and why == "no profile interval for h (open or undetermined)"
    # an interval below 1 with the F-test agreeing: negative, with the interval and p printed
    got, why = compare.cooperativity(fit, (0.5, 0.8, "wald"), 0.002, 0.05, names=NAMES)
    assert got == "negative"
    assert why == "wald interval of h [0.5, 0.8] excludes 1; F-test against Michaelis–Menten p = 0.002"
    # no F-test at all (NaN p): the interval alone decides
    assert compare.cooperativity(fit, (1.3, 2.0, "profile"), np.nan, names=NAMES)[0] == "positive"
    got, why = compare.cooperativity(fit, (0.95, 1.05, "profile"), np.nan, names=NAMES)
    assert got == "none" and why.endswith("; no F-test against Michaelis–Menten")
    # contains 1 but wider than the equivalence margin on either side
    for ci in [(0.79, 1.1), (0.9, 1.26)]:
        got, why = compare.cooperativity(fit, (*ci, "profile"), 0.5, names=NAMES)
        assert got == "not resolved by these data" and "too wide to rule out cooperativity" in why
    assert compare.EQUIVALENCE == (0.8, 1.25)


def test_f_test_by_hand_and_its_refusals() -> None:
    n = 20
    # F = ((RSS_s − RSS_c)/df1)/(RSS_c/df2), p from scipy.stats.f.sf (extra-sum-of-squares test)
    got = compare.f_test(_stub(12.0, n, 2), _stub(10.0, n, 4), ("a", "b"))
    assert got is not None and (got.df1, got.df2, got.simple, got.complex) == (2, 16, "a", "b")
    assert got.f == pytest.approx((2.0 / 2) / (10.0 / 16)) and got.p == pytest.approx(stats.f.sf(1.6, 2, 16))
    # the more complex model fits worse (a local minimum): F is 0 (p = 1), not negative, for any shortfall
    for worse in (10.3, 10.001):
        t = compare.f_test(_stub(10.0, n, 2), _stub(worse, n, 3), ("a", "b"))
        assert t is not None and t.f == 0.0 and t.p == 1.0
    # a small improvement gives a small F, not a floor
    t = compare.f_test(_stub(10.1, n, 2), _stub(10.0, n, 3), ("a", "b"))
    assert t is not None and t.f == pytest.approx(0.1 / (10.0 / 17))
    # the same number of parameters, the "simpler" one larger, a perfect fit or no residual dof: no test
    assert compare.f_test(_stub(12.0, n, 3), _stub(10.0, n, 3), ("a", "b")) is None
    assert compare.f_test(_stub(12.0, n, 4), _stub(10.0, n, 3), ("a", "b")) is None
    assert compare.f_test(_stub(12.0, n, 2), dataclasses.replace(_stub(1.0, n, 3), rss=0.0), ("a", "b")) is None
    assert compare.f_test(_stub(12.0, 3, 2), _stub(10.0, 3, 3), ("a", "b")) is None  # df2 = 0
    failed = dataclasses.replace(_stub(12.0, n, 2), success=False)
    assert compare.f_test(failed, _stub(10.0, n, 3), ("a", "b")) is None


def test_akaike_weights_and_deltas_by_hand() -> None:
    # w_i = exp(−Δ_i/2)/Σ_j exp(−Δ_j/2), Δ_i = AICc_i − min AICc (Burnham & Anderson 2002, eq. 2.13)
    n = 24
    fits = {"a": _stub(10.0, n, 2), "b": _stub(9.0, n, 3), "c": _stub(12.0, n, 2)}
    rows, chosen, reason = compare.compare_set(fits, {})
    aicc = {m: f.aicc for m, f in fits.items()}
    best = min(aicc.values())
    raw = {m: np.exp(-(a - best) / 2) for m, a in aicc.items()}
    by = {r["model"]: r for r in rows}
    for m in fits:
        assert by[m]["delta_aicc"] == pytest.approx(aicc[m] - best, abs=1e-12)
        assert by[m]["akaike_weight"] == pytest.approx(raw[m] / sum(raw.values()), rel=1e-12)
        assert by[m]["selected"] == (m == chosen) and by[m]["selected_model"] == chosen
        assert by[m]["n_params"] == int(m == "b") + 2 and by[m]["dof"] == n - by[m]["n_params"]
    assert chosen == min(aicc, key=aicc.get)
    second = sorted(a - best for m, a in aicc.items() if m != chosen)[0]
    assert reason == f"lowest AICc (next best {second:.2g} higher)"


def test_without_any_aicc_the_model_with_fewest_parameters_is_taken() -> None:
    n = 12  # a real fit reports NaN AICc when n − k − 1 ≤ 0; set here directly
    fits = {m: dataclasses.replace(_stub(1.0, n, p), aicc=np.nan) for m, p in [("b", 3), ("a", 2)]}
    rows, chosen, reason = compare.compare_set(fits, {})
    assert chosen == "a" and reason == "too few points for AICc; simplest model that could be fitted"
    assert all(np.isnan(r["akaike_weight"]) and np.isnan(r["delta_aicc"]) for r in rows)
    assert compare.compare_set({}, {})[1:] == ("", "no model could be fitted")


def test_parsimony_reason_names_the_test() -> None:
    # Hill has the lower AICc but p = 0.2 ≥ 0.05: Michaelis–Menten is selected and the reason gives F and p;
    # with p = 0.01 Hill stays and the reason adds the test (values from compare.f_test, checked above)
    n = 30
    nests = {"hill": {"michaelis-menten": ""}}
    for p_target, want in [(0.2, "michaelis-menten"), (0.01, "hill")]:
        simple, cplx = _stub(_rss_for_p(p_target, 10.0, n), n, 2), _stub(10.0, n, 3)
        if p_target == 0.2:
            cplx = dataclasses.replace(cplx, aicc=simple.aicc - 1.0)  # Hill first on AICc
        t = compare.f_test(simple, cplx, ("michaelis-menten", "hill"))
        assert t.p == pytest.approx(p_target, rel=1e-9)
        _, chosen, reason = compare.compare_set({"michaelis-menten": simple, "hill": cplx}, nests)
        assert chosen == want
        if want == "michaelis-menten":
            assert reason == (f"michaelis-menten: the extra parameter(s) of hill are not supported "
                              f"(F = {t.f:.3g}, p = {t.p:.3g} ≥ 0.05)")
        else:
            assert reason.endswith(f"; F-test against michaelis-menten: p = {t.p:.3g}")


def test_parsimony_walks_down_a_chain_of_two_nested_models() -> None:
    # mixed (4 parameters) nests competitive (3), which nests michaelis-menten (2). Mixed has the lowest AICc
    # (set directly), but neither extra parameter is supported (p = 0.3, then p = 0.4, extra-sum-of-squares F
    # by scipy.stats.f): the walk ends at michaelis-menten; with the second p at 0.01 it stops at competitive
    n = 30
    mixed = _stub(10.0, n, 4)
    comp = _stub(10.0 * (1 + stats.f.isf(0.3, 1, n - 4) / (n - 4)), n, 3)
    for p_last, want in [(0.4, "michaelis-menten"), (0.01, "competitive")]:
        mm = _stub(comp.rss * (1 + stats.f.isf(p_last, 1, n - 3) / (n - 3)), n, 2)
        fits = {"mixed": dataclasses.replace(mixed, aicc=-100.0), "competitive": comp, "michaelis-menten": mm}
        nests = {"mixed": {"competitive": ""}, "competitive": {"michaelis-menten": ""}}
        rows, chosen, reason = compare.compare_set(fits, nests)
        assert chosen == want, reason
        by = {r["model"]: r for r in rows}
        assert by["mixed"]["p"] == pytest.approx(0.3, rel=1e-9) and by["mixed"]["f_test_against"] == "competitive"
        assert by["competitive"]["p"] == pytest.approx(p_last, rel=1e-9)
        # a model tested against nothing has one row with no test
        assert by["michaelis-menten"]["f_test_against"] == "" and np.isnan(by["michaelis-menten"]["F"])
        assert all(r["selected_model"] == want for r in rows)
