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
