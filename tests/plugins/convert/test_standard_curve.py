"""Standard-curve line, linear-range check and conversion with error propagation."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats
from vzero.errors import FitError
from vzero.plugins.convert.standard_curve import fit_standard_curve


def test_line_matches_scipy_linregress() -> None:
    rng = np.random.default_rng(7)
    conc = np.repeat([0.0, 5, 10, 20, 40, 80], 3)
    sig = 0.012 * conc + 0.05 + rng.normal(0, 0.004, conc.size)
    cur = fit_standard_curve(conc, sig, check_linearity=False)
    ref = stats.linregress(conc, sig)  # scipy's independent OLS with standard errors
    assert_allclose([cur.slope, cur.intercept], [ref.slope, ref.intercept], rtol=1e-10)
    assert_allclose([cur.slope_se, cur.intercept_se], [ref.stderr, ref.intercept_stderr], rtol=1e-8)
    assert_allclose(cur.r2, ref.rvalue**2, rtol=1e-10)
    # covariance of slope and intercept: -mean(x) * slope_se² for a line (textbook OLS identity)
    assert_allclose(cur.cov, -conc.mean() * ref.stderr**2, rtol=1e-8)
    assert cur.n_points == 18 and cur.dof == 16 and cur.conc_range == (0.0, 80.0)


def test_exact_line() -> None:
    cur = fit_standard_curve([0, 1, 2, 3], [1, 3, 5, 7])
    assert_allclose([cur.slope, cur.intercept], [2.0, 1.0], atol=1e-12)
    assert cur.slope_se < 1e-12 and cur.dropped_levels == ()


def test_saturating_top_standards_are_dropped() -> None:
    # Detector that bends at high signal: s = 2c / (1 + c/100); below c = 10 the bend is under 10 %.
    conc = np.repeat([0.0, 2.5, 5, 10, 20, 40, 80, 160], 2)
    rng = np.random.default_rng(3)
    sig = 2 * conc / (1 + conc / 100) + rng.normal(0, 0.05, conc.size)
    cur = fit_standard_curve(conc, sig)
    assert 160.0 in cur.dropped_levels and cur.conc_range[1] < 160
    assert cur.curvature_p >= 0.05
    assert cur.used.sum() == cur.n_points == 2 * (8 - len(cur.dropped_levels))
    straight = fit_standard_curve(conc, 2 * conc + rng.normal(0, 0.05, conc.size))
    assert straight.dropped_levels == () and straight.conc_range == (0.0, 160.0)


def test_to_conc_propagation_against_monte_carlo() -> None:
    # Monte Carlo of the slope's sampling error: rate/slope spread vs the first-order formula.
    conc = np.repeat([0.0, 10, 20, 40], 2)
    true_slope, sd, rate = 0.02, 0.01, 0.005
    rng = np.random.default_rng(11)
    sims = true_slope * conc + 0.1 + rng.normal(0, sd, (4000, conc.size))
    slopes = np.polyfit(conc, sims.T, 1)[0]
    mc_sd = np.std(rate / slopes)
    cur = fit_standard_curve(conc, true_slope * conc + 0.1 + rng.normal(0, sd, conc.size), check_linearity=False)
    conc_rate, se = cur.to_conc(rate)
    assert_allclose(conc_rate, rate / cur.slope)
    # the first-order SE uses this curve's slope and s; compare in relative terms with 15 % tolerance
    assert_allclose(se / abs(conc_rate), mc_sd / (rate / true_slope), rtol=0.15)
    _, se2 = cur.to_conc(np.array([rate]), np.array([0.001]))
    assert se2[0] > se


def test_signal_to_conc_inverts_line() -> None:
    cur = fit_standard_curve([0, 10, 20, 30, 40], [0.1, 0.3, 0.5, 0.7, 0.9])
    x, se = cur.signal_to_conc(np.array([0.4, 0.8]))
    assert_allclose(x, [15.0, 35.0], atol=1e-9)
    assert (se >= 0).all()


def test_errors() -> None:
    with pytest.raises(FitError, match="usable points"):
        fit_standard_curve([1, 1, 1], [0.1, 0.2, 0.3])
    with pytest.raises(FitError, match="not distinguishable"):
        fit_standard_curve([0, 1, 2, 3], [1, 0, 1, 0])


def test_signal_to_conc_standard_error_is_the_classical_calibration_formula() -> None:
    # inverse prediction of one new read y0: x0 = (y0 - b)/m with SE = (s/|m|) sqrt(1 + 1/n + (x0 - x̄)²/Sxx)
    # (the classical calibration interval of a straight line, e.g. Draper & Smith, Applied Regression
    # Analysis, section on inverse prediction); s, m and b from scipy.stats.linregress
    rng = np.random.default_rng(17)
    conc = np.repeat([0.0, 10, 20, 30, 40], 2)
    sig = 0.1 + 0.02 * conc + rng.normal(0, 0.01, conc.size)
    cur = fit_standard_curve(conc, sig, check_linearity=False)
    ref = stats.linregress(conc, sig)
    s = np.sqrt(np.sum((sig - ref.intercept - ref.slope * conc) ** 2) / (conc.size - 2))
    y0 = np.array([0.15, 0.5, 0.95])
    x0 = (y0 - ref.intercept) / ref.slope
    sxx = np.sum((conc - conc.mean()) ** 2)
    expected = s / abs(ref.slope) * np.sqrt(1 + 1 / conc.size + (x0 - conc.mean()) ** 2 / sxx)
    x, se = cur.signal_to_conc(y0)
    assert_allclose(x, x0, rtol=1e-10)
    assert_allclose(se, expected, rtol=1e-8)


def test_three_points_at_two_levels_are_enough_for_a_line_with_errors() -> None:
    # the documented minimum: 3 usable standard wells at 2 or more concentrations (one residual degree of freedom)
    cur = fit_standard_curve([0.0, 0.0, 4.0], [0.10, 0.12, 0.91])
    assert cur.dof == 1 and cur.n_points == 3 and np.isfinite(cur.slope_se) and cur.slope_se > 0
    assert_allclose(cur.slope, (0.91 - 0.11) / 4.0, rtol=1e-12)  # the line through the mean at 0 and the point at 4
    with pytest.raises(FitError, match="2 usable points"):
        fit_standard_curve([0.0, 4.0, np.nan], [0.1, 0.9, 0.5])


def test_a_standard_level_is_the_mean_of_its_usable_reads() -> None:
    # a standard with one usable read has that read as its level; one with none has no level and is named
    import pandas as pd
    from vzero.data import Traces
    from vzero.plugins.convert.standard_curve import standard_levels

    t = np.arange(4) * 10.0
    signal = np.array([[1.0, 2.0, 3.0, 6.0], [np.nan, 5.0, np.nan, np.nan], [np.nan] * 4, [9.0] * 4])
    wells = pd.DataFrame({"well": ["A1", "A2", "A3", "B1"], "role": ["standard"] * 3 + ["sample"],
                          "product": [1.0, 2.0, 4.0, np.nan]})
    traces = Traces("p", t, signal, np.isfinite(signal), np.zeros_like(signal, bool), wells, "RFU", {"product": "uM"})
    names, conc, level, empty = standard_levels(traces, "product")
    assert list(names) == ["A1", "A2", "A3"] and empty == ["A3"]
    assert_allclose(conc, [1.0, 2.0, 4.0])
    assert_allclose(level, [3.0, 5.0, np.nan])


def test_a_slope_of_exactly_one_is_a_valid_standard_line() -> None:
    # signal already in concentration units: residuals 0.25 (1, -1, -1, 1) are orthogonal to 1 and to x, so
    # the least-squares slope is 1 and the intercept 0 (normal equations by hand); such a line
    # must be accepted, not taken for a zero slope
    c = np.array([0.0, 1.0, 2.0, 3.0])
    curve = fit_standard_curve(c, c + 0.25 * np.array([1.0, -1.0, -1.0, 1.0]), check_linearity=False)
    ref = stats.linregress(c, c + 0.25 * np.array([1.0, -1.0, -1.0, 1.0]))
    assert curve.slope == pytest.approx(1.0, abs=1e-12) and curve.slope == pytest.approx(ref.slope, abs=1e-12)
    assert curve.intercept == pytest.approx(0.0, abs=1e-12)


def test_a_zero_slope_is_refused() -> None:
    with pytest.raises(FitError, match="not distinguishable from zero"):
        fit_standard_curve(np.array([0.0, 1.0, 2.0]), np.array([3.0, 3.0, 3.0]))


def test_two_points_left_after_the_linearity_test_have_no_residual_sd() -> None:
    # min_levels 2: the top level (two replicates, clearly curved) is dropped, leaving one point at each of
    # 0 and 1 uM: a line through two points has no residual degrees of freedom, so no residual SD (NaN),
    # and no slope SE
    curve = fit_standard_curve(np.array([0.0, 1.0, 2.0, 2.0]), np.array([0.0, 1.0, 4.0, 4.01]), min_levels=2)
    assert curve.dropped_levels == (2.0,) and curve.dof == 0 and curve.n_points == 2
    assert np.isnan(curve.residual_sd) and np.isnan(curve.slope_se)
    assert curve.slope == pytest.approx(1.0) and curve.r2 == pytest.approx(1.0)
