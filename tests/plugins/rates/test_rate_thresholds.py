"""Each rate flag and window rule on both sides of its threshold.

Populations of invented curves are built to straddle a threshold (a range of curvature, noise, misfit or
conversion); every well must then carry the flag exactly when its own reported statistic is past the
threshold, and both sides must be populated, so a changed threshold (or a changed comparison) fails the
test. Curves from ``simulate_plate`` are integrated with scipy.integrate.solve_ivp; the others are closed
forms chosen for the property under test (exponential rate decay, straight lines). The thresholds are the
documented defaults (docs/rates.md): NOISY below |v0|/SE = 10, CURVATURE above |t| = 3 of the quadratic
term, windows stop at a 10 % fall of the rate or 10 % substrate conversion (common practice), fits refused
above a residual RMS of 3 × the read noise; minimum reads 6 (auto), 5 (polynomial), 8 (progress, lag-decay),
3 (window).
"""

from __future__ import annotations

import numpy as np
import pytest
from vzero.errors import StageError
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates import noise
from vzero.plugins.rates.auto import auto
from vzero.plugins.rates.lagdecay import lag_decay
from vzero.plugins.rates.polynomial import polynomial
from vzero.plugins.rates.progress import progress_curve
from vzero.plugins.rates.window import window_slopes

T = np.arange(60) * 10.0  # 60 reads every 10 s


def _has(result, flag: Flag) -> np.ndarray:
    return (np.asarray(result.flags) & int(flag)) != 0


def _both_sides(mask: np.ndarray, at_least: int = 5) -> None:
    assert mask.sum() >= at_least and (~mask).sum() >= at_least, f"{mask.sum()} of {mask.size} on one side"


def _decaying(k: np.ndarray, v0: float = 5e-4, sigma: float = 5e-4, seed: int = 0) -> np.ndarray:
    """Rate falling as exp(−k t) from v0 (signal/s), plus Gaussian read noise."""
    rng = np.random.default_rng(seed)
    return 0.1 + v0 * (1 - np.exp(-k[:, None] * T)) / k[:, None] + sigma * rng.standard_normal((k.size, T.size))


def test_noisy_threshold_on_the_shared_rule() -> None:
    flags = np.zeros(4, np.int64)
    noise.flag_noisy(np.array([9.99, 10.01, -10.01, 9.99]), np.ones(4), flags)
    assert list((flags & int(Flag.NOISY)) != 0) == [True, False, False, True]
    assert noise.NOISY_MIN_T == 10.0


@pytest.mark.parametrize("kernel", ["window", "auto", "polynomial", "progress", "lag-decay"])
def test_noisy_flag_straddles_a_signal_to_noise_of_ten(kernel: str) -> None:
    n = 120
    sigma = np.geomspace(2e-3, 6e-2, n)  # same slope, read noise over 30-fold: |v0|/SE from ~3 to ~60
    if kernel == "progress":  # four parameters in signal units: on a straight line its SE is a cubic's slope's
        sigma = sigma / 4
    rng = np.random.default_rng(4)
    y = 0.1 + 1e-4 * T[None, :] + sigma[:, None] * rng.standard_normal((n, T.size))
    run = {"window": lambda: window_slopes(T, y, 0.0, 600.0), "auto": lambda: auto(T, y, find_lag=False),
           "polynomial": lambda: polynomial(T, y), "progress": lambda: progress_curve(T, y),
           "lag-decay": lambda: lag_decay(T, y)}[kernel]
    r = run()
    ok = np.isfinite(r.v0) & np.isfinite(r.stderr)
    noisy = _has(r, Flag.NOISY)
    assert np.array_equal(noisy[ok], (np.abs(r.v0) / r.stderr)[ok] < 10)
    _both_sides(noisy[ok])


def test_curvature_flag_straddles_t_of_three() -> None:
    # rate falls by at most 11 % over the whole curve, so the window is (nearly) the whole curve and only
    # the significance of the quadratic term decides the flag
    r = auto(T, _decaying(np.geomspace(1e-6, 2e-4, 200)), find_lag=False)
    tc = r.extra["curvature_t"]
    curved = _has(r, Flag.CURVATURE)
    assert np.array_equal(curved, np.abs(tc) > 3.0)
    near = (np.abs(tc) > 1.5) & (np.abs(tc) < 6)  # wells close to the threshold, on both sides of it
    _both_sides(curved[near], 10)


def test_curvature_threshold_is_the_recipe_value() -> None:
    y = _decaying(np.full(1, 1.2e-4), sigma=2e-4, seed=1)
    tc = float(auto(T, y, find_lag=False).extra["curvature_t"][0])
    assert 3 < abs(tc) < 100
    assert _has(auto(T, y, find_lag=False, t_crit=abs(tc) * 0.99), Flag.CURVATURE)[0]
    assert not _has(auto(T, y, find_lag=False, t_crit=abs(tc) * 1.01), Flag.CURVATURE)[0]


@pytest.mark.parametrize("max_drop", [0.05, 0.10, 0.20])
def test_window_ends_where_the_rate_has_fallen_by_max_rate_drop(max_drop: float) -> None:
    # precise curves (noise 1e-5) whose rate falls as exp(−k t): the true fall at the window end is
    # 1 − exp(−k t_end); it must not pass the limit and, on the geometric grid of candidate ends (steps of
    # about 25 %), must not stop far short of it
    k = np.geomspace(5e-4, 5e-3, 50)
    r = auto(T, _decaying(k, sigma=1e-5, seed=2), find_lag=False, max_rate_drop=max_drop)
    cut = (r.window_end_s > T[5]) & (r.window_end_s < T[-1])  # neither the shortest nor the whole curve
    assert cut.sum() >= 10
    fall = 1 - np.exp(-k[cut] * r.window_end_s[cut])
    assert fall.max() <= 1.05 * max_drop
    assert fall.min() >= 0.75 * max_drop


def test_high_conversion_straddles_ten_percent_in_auto() -> None:
    # straight lines converting 5-20 % of the substrate by the end of the shortest window (6 reads)
    n, s0, spc = 100, np.full(100, 2.0), 0.5
    v = np.linspace(0.05, 0.2, n) * s0 / T[5]
    y = 0.1 + spc * v[:, None] * T[None, :] + 1e-4 * np.random.default_rng(2).standard_normal((n, T.size))
    r = auto(T, y, s0=s0, signal_per_conc=spc, find_lag=False)
    high = _has(r, Flag.HIGH_CONVERSION)
    conv = r.extra["conversion"]
    assert np.array_equal(high, conv > 0.10)
    _both_sides(high, 20)
    assert np.all(r.window_end_s[high] == T[5])  # even the shortest window passes 10 %
    assert conv[~high].max() <= 0.10 and conv[~high].min() > 0.08  # the others stop just before it


def test_high_conversion_straddles_ten_percent_in_polynomial() -> None:
    n, s0, spc = 101, np.full(101, 2.0), 0.5
    total = np.linspace(0.05, 0.15, n)  # fraction converted by the last read
    v = total * s0 / T[-1]
    y = 0.1 + spc * v[:, None] * T[None, :] + 1e-5 * np.random.default_rng(3).standard_normal((n, T.size))
    high = _has(polynomial(T, y, s0=s0, signal_per_conc=spc), Flag.HIGH_CONVERSION)
    assert np.array_equal(high[np.abs(total - 0.10) > 0.002], total[np.abs(total - 0.10) > 0.002] > 0.10)
    _both_sides(high, 20)


@pytest.mark.parametrize("kernel", [progress_curve, lag_decay])
def test_fit_refused_above_three_times_the_read_noise(kernel) -> None:
    # Michaelis-Menten curves (solve_ivp) plus a periodic misfit of growing amplitude: residual RMS over read
    # noise from about 1 to 8
    n = 200
    sim = simulate_plate(T, np.full(n, 1.0), 1.0, 1e-3, baseline=0.1, noise=0.002, seed=3)
    y = sim.signal + np.geomspace(1e-3, 2e-2, n)[:, None] * np.sin(2 * np.pi * T / 150)[None, :]
    r = kernel(T, y)
    ratio = r.extra["rmse_over_noise"]
    failed = _has(r, Flag.FIT_FAILED)
    assert np.array_equal(failed, ratio > 3.0)
    _both_sides(failed, 20)
    assert np.sum((ratio > 2.5) & (ratio < 3.5)) >= 10  # wells close to the limit on both sides
    tighter = kernel(T, y, fail_ratio=2.0)
    assert np.array_equal(_has(tighter, Flag.FIT_FAILED), ratio > 2.0)


@pytest.mark.parametrize(("kernel", "fewest"), [(auto, 6), (polynomial, 5), (progress_curve, 8), (lag_decay, 8),
                                                (lambda t, y: window_slopes(t, y, 0.0, 1e9), 3)])
def test_minimum_reads(kernel, fewest: int) -> None:
    rng = np.random.default_rng(1)
    for n_t, ok in ((fewest - 1, False), (fewest, True)):
        t = np.arange(n_t) * 10.0
        y = 0.1 + 1e-3 * t[None, :] + 1e-3 * rng.standard_normal((1, n_t))
        r = kernel(t, y)
        assert bool(np.isfinite(r.v0[0])) == ok, (n_t, Flag(int(r.flags[0])))
        assert bool(_has(r, Flag.TOO_FEW_POINTS)[0]) == (not ok)


def test_auto_needs_min_points_finite_reads_in_its_window() -> None:
    # masked reads: a well with 5 finite reads among its first 8 has no window of 6 reads there
    y = 0.1 + 1e-3 * T[None, :8] + 1e-4 * np.random.default_rng(0).standard_normal((2, 8))
    y[0, [1, 3, 5]] = np.nan
    r = auto(T[:8], y, find_lag=False)
    assert not np.isfinite(r.v0[0]) and np.isfinite(r.v0[1])
    assert r.n_points[1] >= 6


def test_window_flags_and_span_on_edge_wells() -> None:
    # a clean well carries no flag; an empty well only ALL_MISSING with no window; a well with one read in
    # the window has that read as its span but no rate
    t = np.arange(10) * 10.0
    y = np.vstack([0.1 + 1e-3 * t, np.full(10, np.nan), np.r_[0.1, np.full(9, np.nan)]])
    r = window_slopes(t, y, 0.0, 90.0)
    assert list(r.flags) == [0, int(Flag.ALL_MISSING) | int(Flag.TOO_FEW_POINTS), int(Flag.TOO_FEW_POINTS)]
    assert np.isnan(r.window_start_s[1]) and np.isnan(r.window_end_s[1])
    assert r.window_start_s[2] == 0.0 and r.window_end_s[2] == 0.0 and np.isnan(r.v0[2])
    assert r.window_end_s[0] == 90.0 and r.v0[0] == pytest.approx(1e-3, rel=1e-9)


def test_empty_well_has_no_window_in_polynomial() -> None:
    y = np.vstack([0.1 + 1e-3 * T, np.full(T.size, np.nan)])
    r = polynomial(T, y)
    assert r.window_start_s[0] == 0.0 and np.isnan(r.window_start_s[1]) and np.isnan(r.window_end_s[1])
    assert _has(r, Flag.ALL_MISSING)[1]


def test_auto_select_uses_the_straight_line_where_curvature_is_not_significant() -> None:
    # estimate="select": on straight wells the reported v0 and SE are those of the least-squares line over
    # the chosen window (numpy.polyfit as the independent reference; SE = s / sqrt(Sxx) with s the larger of
    # the read noise and the line's residual RMS over the window, n - 2 degrees of freedom)
    rng = np.random.default_rng(12)
    y = 0.1 + 2e-4 * T[None, :] + 0.002 * rng.standard_normal((8, T.size))
    r = auto(T, y, find_lag=False, estimate="select")
    straight = np.flatnonzero(~_has(r, Flag.CURVATURE))
    assert straight.size >= 4
    for i in straight:
        inside = (T >= r.window_start_s[i]) & (T <= r.window_end_s[i])
        slope = np.polyfit(T[inside], y[i, inside], 1)[0]
        assert r.v0[i] == pytest.approx(slope, rel=1e-9)
        sxx = np.sum((T[inside] - T[inside].mean()) ** 2)
        rss = np.polyfit(T[inside], y[i, inside], 1, full=True)[1]
        rmse = np.sqrt(rss[0] / (inside.sum() - 2))
        assert r.extra["rmse_over_noise"][i] == pytest.approx(rmse / r.extra["read_noise"][i], rel=1e-6)
        s = max(r.extra["read_noise"][i], rmse)
        assert r.stderr[i] == pytest.approx(s / np.sqrt(sxx), rel=1e-9)
    # the residual RMS counts where it is the larger (the read noise alone would give a narrower interval)
    assert any(r.extra["rmse_over_noise"][i] > 1.0 for i in straight)


def test_read_noise_needs_five_reads() -> None:
    # three second-difference triples (five reads) are the fewest the estimate uses (docstring of read_noise)
    rng = np.random.default_rng(3)
    y = 0.1 + 0.01 * rng.standard_normal((2, 5))
    y[1, 0] = np.nan
    sigma = noise.read_noise(y, np.arange(5.0))
    assert np.isfinite(sigma[0]) and sigma[0] > 0 and np.isnan(sigma[1])


def test_progress_goodness_is_r_squared_of_the_fit() -> None:
    # R² = 1 − RSS/TSS with RSS = (rmse_over_noise × read_noise)² × (n − 3) (three parameters with known S0)
    sim = simulate_plate(T, np.full(20, 1.0), 1.0, 1e-3, baseline=0.1, noise=0.002, seed=6)
    r = progress_curve(T, sim.signal, s0=np.full(20, 1.0), signal_per_conc=1.0)
    rss = (r.extra["rmse_over_noise"] * r.extra["read_noise"]) ** 2 * (T.size - 3)
    tss = np.sum((sim.signal - sim.signal.mean(axis=1, keepdims=True)) ** 2, axis=1)
    np.testing.assert_allclose(r.goodness, 1 - rss / tss, rtol=1e-9)
    assert r.goodness_name == "r_squared"


def test_conversion_scale_needs_both_substrate_and_signal_per_conc() -> None:
    # percent conversion needs S0 and the signal per unit product; with either missing there is no scale,
    # and auto runs without the conversion check (no HIGH_CONVERSION, conversion NaN)
    assert noise.conversion_scale(np.array([1.0, 2.0]), None, 2) is None
    assert noise.conversion_scale(None, 2.5, 2) is None
    np.testing.assert_allclose(noise.conversion_scale(np.array([1.0, 0.0]), -2.5, 2), [2.5, np.nan])
    y = 0.1 + 5e-3 * T[None, :] + np.zeros((2, 1))  # 3 signal units by the end: far past 10 % of S0 = 1
    r = auto(T, y, s0=np.ones(2), find_lag=False)
    assert not _has(r, Flag.HIGH_CONVERSION).any() and np.isnan(r.extra["conversion"]).all()
    r = auto(T, y, s0=np.ones(2), signal_per_conc=1.0, find_lag=False)
    assert _has(r, Flag.HIGH_CONVERSION).all()


def test_auto_goodness_is_r_squared_of_the_window_quadratic() -> None:
    # goodness = 1 - RSS/TSS of the reported quadratic over the chosen window; numpy.polyfit over the same
    # reads is the independent reference (TSS about the window's mean)
    sim = simulate_plate(T, np.array([0.5, 1.0, 3.0]), 1.0, 4e-3, signal_per_conc=1.0, baseline=0.1)
    rng = np.random.default_rng(21)
    y = sim.signal + 0.002 * rng.standard_normal(sim.signal.shape)
    r = auto(T, y, find_lag=False)
    for i in range(y.shape[0]):
        inside = (T >= r.window_start_s[i]) & (T <= r.window_end_s[i])
        yi = y[i, inside]
        fitted = np.polyval(np.polyfit(T[inside], yi, 2), T[inside])
        r2 = 1.0 - np.sum((yi - fitted) ** 2) / np.sum((yi - yi.mean()) ** 2)
        assert r.goodness[i] == pytest.approx(r2, abs=1e-9)
        assert 0.5 < r2 < 1.0


def test_progress_power_model_needs_the_substrate_and_recovers_first_order() -> None:
    # far below Km the rate falls in proportion to the substrate left (first order, n = 1):
    # P = S0 (1 - exp(-k t)), v0 = k S0 (closed form of first-order kinetics)
    s0, k = 2.0, 1.5e-3
    rng = np.random.default_rng(5)
    y = 0.05 + s0 * -np.expm1(-k * T)[None, :] + 0.002 * rng.standard_normal((6, T.size))
    r = progress_curve(T, y, s0=np.full(6, s0), signal_per_conc=1.0, model="power")
    np.testing.assert_allclose(r.v0, k * s0, rtol=0.02)
    np.testing.assert_allclose(r.extra["order"], 1.0, atol=0.1)
    assert np.all(np.abs(r.v0 - k * s0) < 4 * r.stderr)
    with pytest.raises(StageError, match="power"):
        progress_curve(T, y, model="power")


def test_no_signal_straddles_t_of_four() -> None:
    # NO_SIGNAL when the straight line through every read is within 4 standard errors of flat (its own
    # slope_t); for white noise the two-sided chance of |t| > 4 is 2 * scipy.stats.norm.sf(4) = 6.3e-5,
    # the figure documented beside NO_SIGNAL_T
    from scipy import stats

    assert 2 * stats.norm.sf(noise.NO_SIGNAL_T) == pytest.approx(6.3e-5, rel=0.02)
    rng = np.random.default_rng(8)
    sxx = np.sum((T - T.mean()) ** 2)
    slopes = np.linspace(0.0, 8.0, 200) * 0.002 / np.sqrt(sxx)  # slope_t from 0 to about 8
    y = 0.1 + slopes[:, None] * T[None, :] + 0.002 * rng.standard_normal((slopes.size, T.size))
    sc = noise.screen(y, min_points=6, time=T)
    flagged = (sc.flags & int(Flag.NO_SIGNAL)) != 0
    np.testing.assert_array_equal(flagged, np.abs(sc.slope_t) <= 4.0)
    _both_sides(flagged, at_least=30)


def test_direction_from_the_first_and_last_three_finite_reads() -> None:
    # `change` = mean of the last three finite reads minus the mean of the first three (docstring of
    # screen), with or without missing reads; on y = t² the count of reads averaged shows in the value
    y = (T / 100.0)[None, :] ** 2 + np.zeros((2, 1))
    y[1, 1] = np.nan  # second read missing: the first three finite reads are 0, 2 and 3
    sc = noise.screen(y, min_points=6, time=T)
    u = T / 100.0
    assert sc.change[0] == pytest.approx(np.mean(u[-3:] ** 2) - np.mean(u[:3] ** 2), rel=1e-12)
    assert sc.change[1] == pytest.approx(np.mean(u[-3:] ** 2) - np.mean(u[[0, 2, 3]] ** 2), rel=1e-12)


def test_window_gives_a_constant_well_no_signal_and_no_rate() -> None:
    # a well whose reads are all equal has no change to measure: NO_SIGNAL, no rate, no R²
    y = np.vstack([np.full(10, 0.25), 0.1 + 1e-3 * np.arange(10.0)])
    r = window_slopes(np.arange(10) * 10.0, y, 0.0, 90.0)
    assert _has(r, Flag.NO_SIGNAL).tolist() == [True, False]
    assert np.isnan(r.v0[0]) and np.isnan(r.goodness[0]) and r.v0[1] == pytest.approx(1e-4, rel=1e-9)


def test_windows_that_start_and_end_inside_the_curve_report_their_own_span() -> None:
    # window 30-90 s of a 600-s curve: the span is the first and last read inside it, and the slope is the
    # least-squares line (numpy.polyfit) or the quadratic's slope at the window start over exactly those reads
    rng = np.random.default_rng(4)
    y = 0.1 + 2e-4 * T + 1e-7 * T**2 + 0.002 * rng.standard_normal((3, T.size))
    inside = (T >= 30.0) & (T <= 90.0)
    r = window_slopes(T, y, 30.0, 90.0)
    assert np.all(r.window_start_s == 30.0) and np.all(r.window_end_s == 90.0)
    np.testing.assert_allclose(r.v0, [np.polyfit(T[inside], yi[inside], 1)[0] for yi in y], rtol=1e-9)
    p = polynomial(T, y, window_s=120.0)  # from the first read: 0-120 s
    assert np.all(p.window_start_s == 0.0) and np.all(p.window_end_s == 120.0)
    first = T <= 120.0
    np.testing.assert_allclose(p.v0, [np.polyfit(T[first], yi[first], 2)[1] for yi in y], rtol=1e-6)
