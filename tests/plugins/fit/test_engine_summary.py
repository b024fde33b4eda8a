"""Every figure the fit summary reports, against an independent calculation: a straight line y = a + b·x
handed to ``engine.summarize`` as a solved least-squares problem, checked against scipy.stats.linregress
(slope, intercept SE, R²), numpy (the covariance s²·(JᵀJ)⁻¹), scipy.stats.t (interval quantiles) and the
AICc formula of Burnham & Anderson (2002, eq. 2.14, k counting the error variance), with every edge of the
summary's rules (degrees of freedom, AICc's n − k − 1, a zero RSS, a flat response, a fixed parameter)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from vzero.plugins.fit import engine

X = np.array([0.5, 1.0, 2.0, 3.0, 4.5, 6.0, 8.0])
Y = np.array([1.3, 1.9, 3.2, 3.8, 5.9, 7.1, 9.4])  # invented demo values


def _line(x: np.ndarray, y: np.ndarray, w: np.ndarray | None = None, free: tuple[bool, bool] = (True, True),
          values: np.ndarray | None = None, success: bool = True, confidence: float = 0.95) -> engine.FitResult:
    """Summarise the (weighted) least-squares line through (x, y), solved here with numpy."""
    w = np.ones_like(x) if w is None else w
    design = np.column_stack([np.ones_like(x), x])
    if values is None:
        values = np.linalg.lstsq(design * w[:, None], y * w, rcond=None)[0]
    resid = (y - design @ values) * w
    return engine.summarize(("a", "b"), values, np.array(free), design * w[:, None], resid, y, w, success=success,
                            message="", nfev=1, confidence=confidence)[0]


def test_line_figures_against_scipy_linregress() -> None:
    res = _line(X, Y)
    ref = stats.linregress(X, Y)
    n, k = X.size, 2
    assert res.values == pytest.approx([ref.intercept, ref.slope], rel=1e-12)
    assert res.params["b"].stderr == pytest.approx(ref.stderr, rel=1e-10)
    assert res.params["a"].stderr == pytest.approx(ref.intercept_stderr, rel=1e-10)
    assert res.r_squared == pytest.approx(ref.rvalue**2, rel=1e-12)
    assert (res.n_points, res.dof) == (n, n - k)
    rss = float(np.sum((Y - ref.intercept - ref.slope * X) ** 2))
    assert res.rss == pytest.approx(rss, rel=1e-12)
    kk = k + 1
    assert res.aicc == pytest.approx(n * np.log(rss / n) + 2 * kk + 2 * kk * (kk + 1) / (n - kk - 1), rel=1e-12)
    tq = stats.t.ppf(0.975, n - k)
    assert res.params["b"].ci_low == pytest.approx(ref.slope - tq * ref.stderr, rel=1e-10)
    assert res.params["b"].ci_high == pytest.approx(ref.slope + tq * ref.stderr, rel=1e-10)
    assert res.params["b"].ci_method == "wald-t" and res.errorbars and res.note == ""
    # covariance s²·(JᵀJ)⁻¹ and correlation (numpy)
    design = np.column_stack([np.ones_like(X), X])
    cov = rss / (n - k) * np.linalg.inv(design.T @ design)
    np.testing.assert_allclose(res.covariance, cov, rtol=1e-10)
    assert res.correlation[0, 1] == pytest.approx(cov[0, 1] / np.sqrt(cov[0, 0] * cov[1, 1]), rel=1e-10)
    assert engine.t_quantile(0.9, 5) == pytest.approx(stats.t.ppf(0.95, 5), rel=1e-12)
    assert np.isnan(engine.t_quantile(0.95, 0))


def test_weighted_line_against_numpy() -> None:
    # weights 1/σ: the weighted RSS, and R² of the weighted fit against the weighted mean Σw²y/Σw²
    w = np.array([1.0, 2.0, 0.5, 1.0, 3.0, 1.0, 0.25])
    res = _line(X, Y, w)
    design = np.column_stack([np.ones_like(X), X])
    beta = np.linalg.lstsq(design * w[:, None], Y * w, rcond=None)[0]
    rss = float(np.sum(((Y - design @ beta) * w) ** 2))
    mean = np.sum(w**2 * Y) / np.sum(w**2)
    tss = float(np.sum((w * (Y - mean)) ** 2))
    assert res.rss == pytest.approx(rss, rel=1e-12)
    assert res.r_squared == pytest.approx(1 - rss / tss, rel=1e-12)
    jw = design * w[:, None]
    np.testing.assert_allclose(res.covariance, rss / (X.size - 2) * np.linalg.inv(jw.T @ jw), rtol=1e-10)
    # a weight of 0 drops the point: the same as fitting without it
    w0 = np.ones_like(X)
    w0[3] = 0.0
    dropped = _line(X, Y, w0)
    ref = stats.linregress(np.delete(X, 3), np.delete(Y, 3))
    assert dropped.n_points == X.size - 1 and dropped.dof == X.size - 3
    assert dropped.params["b"].stderr == pytest.approx(ref.stderr, rel=1e-10)


def test_aicc_needs_n_above_k_plus_two_and_a_positive_rss() -> None:
    # AICc's correction 2k(k + 1)/(n − k − 1), k = 3 with the variance: defined from n = 5 on
    assert np.isfinite(_line(X[:5], Y[:5]).aicc)
    assert np.isnan(_line(X[:4], Y[:4]).aicc)
    # a perfect fit (RSS 0): ln 0 is not a criterion
    exact = _line(X, 1.0 + 2.0 * X)
    assert exact.rss == pytest.approx(0.0, abs=1e-20)
    exact0 = _line(X, 1.0 + 2.0 * X, values=np.array([1.0, 2.0]))
    assert exact0.rss == 0.0 and np.isnan(exact0.aicc)


def test_degrees_of_freedom_and_convergence_notes() -> None:
    two = _line(X[:2], Y[:2])
    assert two.dof == 0 and not two.errorbars and np.all(np.isnan(two.covariance))
    assert two.note == "no degrees of freedom left (2 points for 2 free parameters): no standard errors"
    assert np.isnan(two.params["b"].stderr) and two.params["b"].note == two.note
    three = _line(X[:3], Y[:3])
    assert three.dof == 1 and three.errorbars and np.isfinite(three.params["b"].stderr)
    failed = _line(X, Y, success=False)
    assert not failed.errorbars and failed.note == "the fit did not converge: no standard errors"
    # a flat response: no R² (TSS = 0)
    assert np.isnan(_line(X, np.full_like(X, 3.0)).r_squared)
    # the same x everywhere: the slope is not determined (singular Jacobian)
    same = _line(np.full_like(X, 2.0), Y, values=np.array([1.0, 1.0]))
    assert not same.errorbars and "singular Jacobian" in same.note


def test_a_fixed_parameter_has_zero_error_and_a_point_interval() -> None:
    # intercept fixed at 0: the slope's SE is that of a regression through the origin,
    # s²/Σx² with s² = RSS/(n − 1) (one free parameter)
    b = float(np.sum(X * Y) / np.sum(X * X))
    res = _line(X, Y, free=(False, True), values=np.array([0.0, b]))
    rss = float(np.sum((Y - b * X) ** 2))
    assert res.dof == X.size - 1
    assert res.params["b"].stderr == pytest.approx(np.sqrt(rss / (X.size - 1) / np.sum(X * X)), rel=1e-10)
    a = res.params["a"]
    assert (a.stderr, a.ci_low, a.ci_high, a.ci_method, a.fixed) == (0.0, 0.0, 0.0, "fixed", True)
    assert res.covariance[0].tolist() == [0.0, 0.0] and res.covariance[:, 0].tolist() == [0.0, 0.0]
    kk = 2
    assert res.aicc == pytest.approx(X.size * np.log(rss / X.size) + 2 * kk + 2 * kk * (kk + 1) / (X.size - kk - 1),
                                     rel=1e-12)
