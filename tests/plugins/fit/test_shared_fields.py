"""The shared-error correction's bookkeeping (plugins/fit/shared.py): which wells form a set, how a result's
standard errors, intervals, covariance and note change, and when it is left alone.

References: Student's t quantile from scipy.stats; the weighted-least-squares sandwich written out with numpy
for a straight line (as in test_shared_blanks.py); the rest by hand. Invented numbers.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from vzero.plugins.fit import engine, shared
from vzero.plugins.kinetics.rates_table import blank_set_ids


def test_shape_pools_by_plate_and_pool() -> None:
    plate = np.array(["p1", "p1", "p2", "p1", "p1", "p2"])
    pool = np.array([0.0, 0.0, 0.0, 1.0, np.nan, np.nan])
    ids = shared.shape_pools(plate, pool)
    assert ids[0] == ids[1]
    assert len({ids[0], ids[2], ids[3]}) == 3  # another plate, another pool
    assert ids[4] == ids[5] == -1
    assert ids[0] >= 0


def test_blank_sets_treat_missing_text_as_no_blank() -> None:
    ids = blank_set_ids(np.array(["p", "p", "p", "p"]), np.array(["G1", "nan", " ", "G1"]))
    assert ids[0] == ids[3] >= 0
    assert ids[1] == ids[2] == -1


@pytest.mark.parametrize(("ids", "want"), [([0, 0, 1], 1), ([0, 1, 2], 0), ([-1, -1, 0], 0), ([3, 3, 0, 0], 2)])
def test_shared_groups_count_ids_seen_twice(ids: list[int], want: int) -> None:
    assert shared._shared_groups(np.array(ids)) == want


def _line() -> tuple[engine.FitResult, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    x = np.repeat([1.0, 2.0, 4.0, 8.0], 3)
    sd = 0.1 + 0.05 * x
    y = 1.0 + 0.5 * x + sd * np.random.default_rng(2).standard_normal(x.size)
    res = engine.fit(lambda p, xx: p[0] + p[1] * xx["x"], lambda p, xx: [np.ones_like(xx["x"]), xx["x"]], {"x": x},
                     y, [0.0, 1.0], ["a", "b"], sigma=sd)
    design = np.stack([np.ones_like(x), x], axis=1)
    resid = y - design @ res.values
    return res, x, sd, design, resid


def _sandwich_se(design: np.ndarray, sd: np.ndarray, resid: np.ndarray, r: np.ndarray) -> np.ndarray:
    w = np.diag(1 / sd**2)
    bread = np.linalg.inv(design.T @ w @ design)
    cov = bread @ design.T @ w @ np.diag(sd) @ r @ np.diag(sd) @ w @ design @ bread
    scale = float((resid / sd) @ np.linalg.solve(r, resid / sd)) / (resid.size - 2)
    return np.sqrt(np.diag(cov) * scale)


@pytest.mark.parametrize("which", ["blanks", "shape", "both"])
def test_adjust_gives_the_sandwich_standard_errors_and_wald_intervals(which: str) -> None:
    res, x, sd, design, resid = _line()
    n = x.size
    sets = np.repeat(np.arange(4), 3) if which != "shape" else np.full(n, -1)
    a = np.full(n, 0.4 if which != "shape" else 0.0)
    pools = np.zeros(n, int) if which != "blanks" else None
    u = np.stack([0.3 * np.sign(x - 3.0), np.full(n, 0.2)], axis=1) if which != "blanks" else None
    out, note = shared.adjust(res, design, resid, sd, sets, a, 0.95, pools, u)
    r = shared.correlation(sets, a, pools, u)
    want = _sandwich_se(design, sd, resid, r)
    got = np.array([out.params["a"].stderr, out.params["b"].stderr])
    np.testing.assert_allclose(got, want, rtol=1e-8)
    tq = stats.t.ppf(0.975, n - 2)
    for k, name in enumerate(("a", "b")):
        est = out.params[name]
        assert est.ci_low == pytest.approx(est.value - tq * want[k], rel=1e-8)
        assert est.ci_high == pytest.approx(est.value + tq * want[k], rel=1e-8)
        assert est.value == res.params[name].value
    np.testing.assert_allclose(np.sqrt(np.diag(out.covariance)), want, rtol=1e-8)
    np.testing.assert_allclose(out.correlation, out.covariance / np.outer(want, want), rtol=1e-8)
    assert ("4 common blank sets" in note) == (which != "shape")
    assert ("plate shape of 1 pool(s)" in note) == (which != "blanks")
    factor_a = want[0] / res.params["a"].stderr
    assert f"a ×{factor_a:.2f}" in note


def test_widen_scales_profile_sides_and_leaves_fixed_and_unknown_alone() -> None:
    res, *_ = _line()
    prof = engine.ParamEstimate("a", 2.0, 0.1, 1.7, 2.5, "profile")
    fixed = engine.ParamEstimate("b", 0.5, 0.0, 0.5, 0.5, "fixed", fixed=True)
    res = engine.FitResult(res.names, {"a": prof, "b": fixed}, True, "", 1, res.rss, res.dof, res.n_points,
                           res.aicc, res.r_squared, np.array([[0.01, 0.0], [0.0, 0.0]]), np.eye(2), True, "before",
                           np.array([2.0, 0.5]), np.array([True, False]))
    out = shared.widen(res, {"a": 1.5, "b": 3.0}, np.array([[0.0225]]), 0.95, "after")
    a = out.params["a"]
    assert (a.stderr, a.ci_low, a.ci_high) == pytest.approx((0.15, 2.0 - 1.5 * 0.3, 2.0 + 1.5 * 0.5))
    assert a.ci_method == "profile"
    assert out.params["b"] is fixed
    assert out.covariance[0, 0] == pytest.approx(0.0225)
    assert out.covariance[1, 1] == 0.0
    assert out.note == "before; after"
    same = shared.widen(res, {"a": float("nan")}, np.array([[0.01]]), 0.95, "")
    assert same.params["a"] is prof
    assert same.note == "before"


def test_adjust_needs_error_bars_and_a_shared_set() -> None:
    res, x, sd, design, resid = _line()
    n = x.size
    alone = np.arange(n)  # every well its own blank: nothing shared
    assert shared.adjust(res, design, resid, sd, alone, np.full(n, 0.5), 0.95) == (res, "")
    one = np.where(np.arange(n) < 2, 0, -1)  # one set of two wells
    out, note = shared.adjust(res, design, resid, sd, one, np.full(n, 0.5), 0.95)
    assert note
    assert out is not res
    both = shared.adjust(res, design, resid, sd, one, np.full(n, 0.5), 0.95, np.where(np.arange(n) < 2, 0, -1),
                         np.full((n, 2), 0.1))
    assert "1 common blank sets and the plate shape of 1 pool(s)" in both[1]
    broken = engine.FitResult(res.names, res.params, False, "", 1, res.rss, res.dof, res.n_points, res.aicc,
                              res.r_squared, res.covariance, res.correlation, False, "", res.values, res.free)
    assert shared.adjust(broken, design, resid, sd, one, np.full(n, 0.5), 0.95) == (broken, "")


def test_correlation_caps_each_wells_shares_at_one() -> None:
    # a = 0.6 and |u|² = 0.8: the loadings are scaled so that a + |u|² = 1 (by hand: factor sqrt(0.4/0.8));
    # a well below the cap keeps its loadings
    sets = np.array([0, 0, -1])
    a = np.array([0.6, 0.6, 0.0])
    pools = np.array([1, 1, 1])
    u = np.array([[np.sqrt(0.8), 0.0], [0.5, 0.0], [0.5, 0.0]])
    r = shared.correlation(sets, a, pools, u)
    assert r[0, 2] == pytest.approx(np.sqrt(0.4) * 0.5)
    assert r[1, 2] == pytest.approx(0.25)
    assert r[0, 1] == pytest.approx(0.6 + np.sqrt(0.4) * 0.5)


def test_correlation_reads_missing_shares_and_loadings_as_none() -> None:
    # NaN shares and loadings count as 0 and a share above 1 as 1 (by hand)
    sets = np.array([0, 0, 0])
    pools = np.array([2, 2, -1])
    r = shared.correlation(sets, np.array([np.nan, 0.5, 1.7]), pools, np.array([[np.nan, 0.3], [0.2, 0.1], [0.4, 0.4]]))
    assert r[0, 1] == pytest.approx(0.0 + 0.3 * 0.1)
    assert r[1, 2] == pytest.approx(np.sqrt(0.5 * 1.0))
    assert r[0, 2] == 0.0
