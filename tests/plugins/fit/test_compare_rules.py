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
