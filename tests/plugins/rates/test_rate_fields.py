"""Every field the shared rate code returns, against an independent calculation written here.

The kernels are vectorised over wells; these tests recompute each well on its own, in plain loops, with
scipy.stats.linregress (slope, its standard error and r) or with the textbook formula written out, so a
wrong moment, degree of freedom, mask or edge rule in the vectorised code shows as a mismatch. Each case
is a handful of wells: quick tests.
"""

from __future__ import annotations

import statistics

import numpy as np
import pytest
from scipy import stats
from vzero.errors import StageError
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.rates import noise
from vzero.plugins.rates.window import MIN_POINTS, window_slopes

T = np.array([0.0, 7.0, 15.0, 30.0, 41.0, 60.0, 75.0, 92.0, 110.0, 121.0])  # uneven read times (s)


def _flag(flags: np.ndarray, f: Flag) -> list[bool]:
    return [bool(x & int(f)) for x in np.asarray(flags)]


def _plate() -> np.ndarray:
    """Wells with 0 .. 10 usable reads in the window, one constant well, a noisy line and clean lines."""
    rng = np.random.default_rng(11)
    y = 0.2 + 3e-3 * T[None, :] + 4e-3 * rng.standard_normal((9, T.size))
    y[0] = np.nan  # all missing
    y[1, [0, 1, 2, 3, 4, 5, 6, 8, 9]] = np.nan  # one read
    y[2, [2, 3, 4, 6, 7, 8]] = np.nan  # two reads in the window (t = 7 and 60), more outside it
    y[3, [1, 2, 3, 5]] = np.nan  # three reads in the window (t = 41, 75, 92)
    y[4] = 0.5  # constant
    y[5] = 0.2 + 1e-5 * T + 5e-3 * rng.standard_normal(T.size)  # noisy line
    y[6, 7] = np.nan  # a missing read inside the window
    y[7] = 0.1 - 2e-3 * T  # an exact falling line
    return y


def test_window_fields_match_linregress_well_by_well() -> None:
    # reference: scipy.stats.linregress on each well's finite reads inside [start, end]
    start, end = 5.0, 95.0
    y = _plate()
    r = window_slopes(T, y, start, end)
    inside = (T >= start) & (T <= end)
    for i, row in enumerate(y):
        use = inside & np.isfinite(row)
        n = int(use.sum())
        assert r.n_points[i] == n
        if n:
            assert r.window_start_s[i] == T[use][0] and r.window_end_s[i] == T[use][-1]
        else:
            assert np.isnan(r.window_start_s[i]) and np.isnan(r.window_end_s[i])
        assert np.isnan(r.lag_s[i])
        constant = n >= MIN_POINTS and np.ptp(row[use]) == 0
        if n < MIN_POINTS or constant:
            assert np.isnan(r.v0[i]) and np.isnan(r.stderr[i]) and np.isnan(r.goodness[i])
            continue
        ref = stats.linregress(T[use], row[use])
        assert r.v0[i] == pytest.approx(ref.slope, rel=1e-9, abs=1e-15)
        assert r.stderr[i] == pytest.approx(ref.stderr, rel=1e-6, abs=1e-9)  # exact line: rounding
        assert r.goodness[i] == pytest.approx(ref.rvalue**2, rel=1e-9)
    assert r.goodness_name == "r_squared"
    assert _flag(r.flags, Flag.ALL_MISSING) == [i == 0 for i in range(9)]
    assert _flag(r.flags, Flag.TOO_FEW_POINTS) == [i in (0, 1, 2) for i in range(9)]
    assert _flag(r.flags, Flag.NO_SIGNAL) == [i == 4 for i in range(9)]
    snr = np.abs(r.v0) / r.stderr
    assert _flag(r.flags, Flag.NOISY) == [bool(np.isfinite(s) and s < 10) for s in snr]
    assert _flag(r.flags, Flag.NOISY)[5] and not _flag(r.flags, Flag.NOISY)[8]


def test_window_r_squared_of_a_poor_line_is_well_below_one() -> None:
    # R² = 1 − RSS/TSS (its definition); a cloud around a flat line has R² near 0, an exact line exactly 1
    rng = np.random.default_rng(3)
    y = np.vstack([0.3 + 1e-4 * T + 2e-2 * rng.standard_normal(T.size), 0.3 + 1e-3 * T])
    r = window_slopes(T, y, 0.0, 200.0)
    fit = np.polyfit(T, y[0], 1)
    rss = float(((y[0] - np.polyval(fit, T)) ** 2).sum())
    tss = float(((y[0] - y[0].mean()) ** 2).sum())
    assert r.goodness[0] == pytest.approx(1 - rss / tss, rel=1e-9)
    assert r.goodness[0] < 0.5
    assert r.goodness[1] == pytest.approx(1.0, abs=1e-12)


def test_mad_to_sd_is_the_normal_quartile_factor() -> None:
    # 1 / Φ⁻¹(0.75) (scipy.stats.norm), the consistency factor of the median absolute deviation
    assert noise.MAD_TO_SD == pytest.approx(1 / stats.norm.ppf(0.75), rel=1e-4)
    assert noise.NO_SIGNAL_T == 4.0


def _read_noise_by_hand(t: np.ndarray, row: np.ndarray) -> float:
    """1.4826 · MAD of the normalised second differences of the finite reads (the estimator's definition)."""
    keep = np.isfinite(row)
    tt, yy = t[keep], row[keep]
    if yy.size < 5:
        return float("nan")
    r = []
    for j in range(1, yy.size - 1):
        a = (tt[j + 1] - tt[j]) / (tt[j + 1] - tt[j - 1])
        b = (tt[j] - tt[j - 1]) / (tt[j + 1] - tt[j - 1])
        r.append((yy[j] - a * yy[j - 1] - b * yy[j + 1]) / np.sqrt(1 + a * a + b * b))
    med = statistics.median(r)
    return 1.4826 * statistics.median(abs(x - med) for x in r)


@pytest.mark.parametrize("n_t", [5, 6, 7, 10])
@pytest.mark.parametrize("gaps", [False, True])
def test_read_noise_is_the_mad_of_normalised_second_differences(n_t: int, gaps: bool) -> None:
    t = T[:n_t]
    rng = np.random.default_rng(n_t)
    y = 1.0 + 0.01 * t[None, :] + 0.02 * rng.standard_normal((4, n_t)) + np.array([[0], [1], [2], [3]]) * 1e-3 * t
    if gaps:
        y[1, 2] = np.nan
        y[2, [0, n_t - 1]] = np.nan
    got = noise.read_noise(y, t)
    for i in range(4):
        ref = _read_noise_by_hand(t, y[i])
        if np.isnan(ref):
            assert np.isnan(got[i])
        else:
            assert got[i] == pytest.approx(ref, rel=1e-12)
    assert np.isfinite(got[0]) and np.isfinite(got[3])


def test_read_noise_of_equally_spaced_reads_without_time_axis() -> None:
    # equal spacing: Var(y2 − 2y1 + y0) = 6σ², so the normalisation is 1/sqrt(1 + ¼ + ¼)
    y = np.array([[0.0, 1.0, 0.0, 2.0, 0.0, 1.0, 0.0]])
    assert noise.read_noise(y)[0] == pytest.approx(_read_noise_by_hand(np.arange(7.0), y[0]), rel=1e-12)
    assert np.isnan(noise.read_noise(np.ones((2, 4)))).all()
    assert np.isnan(noise.read_noise(np.ones((1, 2)))).all()


@pytest.mark.parametrize("n", [5, 6])
def test_row_median_equals_numpy_median(n: int) -> None:
    a = np.random.default_rng(n).standard_normal((6, n))
    np.testing.assert_array_equal(noise.row_median(a), np.median(a, axis=1))


def _change_by_hand(row: np.ndarray) -> float:
    """Mean of the last m finite reads minus the first m, m = clip(n // 3, 1, 3)."""
    v = row[np.isfinite(row)]
    m = min(max(v.size // 3, 1), 3)
    return float(v[-m:].mean() - v[:m].mean())


@pytest.mark.parametrize("gaps", [False, True])
def test_screen_fields_by_hand(gaps: bool) -> None:
    t = np.arange(12) * 10.0
    rng = np.random.default_rng(5)
    y = np.vstack([
        0.1 + 2e-3 * t + 1e-3 * rng.standard_normal(t.size),  # clear rise
        0.1 + 1e-5 * t + 1e-3 * rng.standard_normal(t.size),  # no signal
        0.9 - 2e-3 * t + 1e-3 * rng.standard_normal(t.size),  # clear fall
        np.full(t.size, 0.4),  # constant, noise-free: sigma from the floor
        0.1 + 2e-3 * t,  # noise-free line
    ])
    if gaps:
        y[0, [0, 5]] = np.nan
        y[2, -1] = np.nan
    s = noise.screen(y, min_points=4, time=t)
    for i, row in enumerate(y):
        keep = np.isfinite(row)
        assert s.n_valid[i] == keep.sum()
        assert s.change[i] == pytest.approx(_change_by_hand(row), rel=1e-12, abs=1e-15)
        sigma = max(np.nan_to_num(_read_noise_by_hand(t, row)), 1e-7 * np.nanmax(np.abs(row)))
        assert s.sigma[i] == pytest.approx(sigma, rel=1e-12)
        ref = stats.linregress(t[keep], row[keep])
        sxx = ((t[keep] - t[keep].mean()) ** 2).sum()
        assert s.slope_t[i] == pytest.approx(ref.slope * np.sqrt(sxx) / sigma, rel=1e-9, abs=1e-9)
    assert _flag(s.flags, Flag.NO_SIGNAL) == [False, True, False, True, False]
    assert list(s.usable) == [True, False, True, False, True]
    assert s.valid.shape == y.shape


def test_screen_change_uses_up_to_three_reads_at_each_end() -> None:
    # m = clip(n // 3, 1, 3): 2 reads → 1, 6 reads → 2, 12 reads → 3 at each end
    for n in (2, 6, 12):
        row = np.arange(n, dtype=float) ** 2
        for y in (row[None, :], np.append(row, np.nan)[None, :]):
            assert noise.screen(y, min_points=2).change[0] == pytest.approx(_change_by_hand(y[0]))


def test_screen_reads_counted_against_min_points() -> None:
    y = np.full((6, 8), np.nan)
    y[1, :2] = [0.0, 1.0]
    y[2, :3] = [0.0, 1.0, 2.0]
    y[3] = np.arange(8.0)
    y[4, 3] = 2.0  # one read
    y[5, :3] = 2.0  # exactly min_points reads, flat: no signal
    s = noise.screen(y, min_points=3)
    assert _flag(s.flags, Flag.ALL_MISSING) == [True, False, False, False, False, False]
    assert _flag(s.flags, Flag.TOO_FEW_POINTS) == [False, True, False, False, True, False]
    assert _flag(s.flags, Flag.NO_SIGNAL) == [False, False, False, False, False, True]
    assert list(s.usable) == [False, False, True, True, False, False]
    # fewer than 5 reads: no read-noise estimate, so the floor 1e-7 × the largest |read| is the noise
    assert s.sigma[2] == pytest.approx(2e-7) and s.sigma[5] == pytest.approx(2e-7)


def test_conversion_scale_by_hand() -> None:
    s = noise.conversion_scale(np.array([2.0, 0.0, -1.0, 0.5]), -0.5, 4)
    np.testing.assert_array_equal(s[[0, 3]], [1.0, 0.25])
    assert np.isnan(s[1]) and np.isnan(s[2])
    np.testing.assert_array_equal(noise.conversion_scale(3.0, 2.0, 2), [6.0, 6.0])
    assert noise.conversion_scale(None, 2.0, 2) is None
    for bad in (0.0, float("inf"), float("nan")):
        with pytest.raises(StageError, match="signal_per_conc"):
            noise.conversion_scale(3.0, bad, 2)


def test_check_inputs_shapes_and_time_axis() -> None:
    t, y = noise.check_inputs([0, 1, 2], [1, 2, 3])
    assert y.shape == (1, 3) and t.dtype == float
    with pytest.raises(StageError, match="shape"):
        noise.check_inputs([0, 1, 2], np.ones((2, 4)))
    for times in ([0, 1, 1], [0, 2, 1], [0, np.nan, 2]):
        with pytest.raises(StageError, match="strictly increasing"):
            noise.check_inputs(times, np.ones((2, 3)))


def test_flag_noisy_and_finish_leave_no_rate_wells_alone() -> None:
    flags = np.array([0, int(Flag.NO_SIGNAL), int(Flag.FIT_FAILED), 0, 0, int(Flag.LAG), 0], np.int64)
    v0 = np.array([1.0, 1.0, 1.0, np.nan, 1.0, 1.0, -5.0])
    se = np.array([0.2, 0.2, 0.2, 0.2, np.nan, 0.05, 0.5])  # the last exactly at |v0|/SE = 10: not noisy
    noise.flag_noisy(v0, se, flags)
    assert _flag(flags, Flag.NOISY) == [True, False, False, False, True, False, False]
    flags = flags[:6]
    fields = noise.blank_result(6, flags, "rmse")
    assert fields["goodness_name"] == "rmse" and (fields["n_points"] == 0).all()
    fields["v0"][:] = 2.0
    fields["stderr"][:] = 0.1
    res = noise.finish(fields, {"k": np.arange(6.0)})
    assert list(np.isnan(res.v0)) == [False, True, True, False, False, False]
    assert list(np.isnan(res.stderr)) == [False, True, True, False, False, False]
    assert list(res.extra) == ["k"]


def test_polynomial_goodness_is_r_squared_of_the_window_fit() -> None:
    # R² = 1 − RSS/TSS of numpy.polyfit's quadratic on the same window (its definition); one poor fit
    from vzero.plugins.rates.polynomial import polynomial

    rng = np.random.default_rng(6)
    t = np.arange(40) * 5.0
    y = 0.2 + 3e-3 * t - 4e-6 * t**2 + rng.normal(0, 0.002, (4, t.size))
    y[3] = 0.2 + 2e-4 * t + rng.normal(0, 0.01, t.size)
    r = polynomial(t, y, degree=2, window_s=120.0)
    sel = t <= 120.0
    assert r.goodness_name == "r_squared"
    for i in range(4):
        c = np.polyfit(t[sel], y[i, sel], 2)
        rss = float(((y[i, sel] - np.polyval(c, t[sel])) ** 2).sum())
        tss = float(((y[i, sel] - y[i, sel].mean()) ** 2).sum())
        assert r.goodness[i] == pytest.approx(1 - rss / tss, rel=1e-9)
    assert r.goodness[3] < 0.9


def test_polynomial_residual_ratio_has_degree_plus_one_parameters_taken_off() -> None:
    # rmse_over_noise = sqrt(RSS / (n − degree − 1)) / read noise: RSS of numpy.polyfit's fit on the same
    # window, n − degree − 1 its residual degrees of freedom, the read noise the method reports
    from vzero.plugins.rates.polynomial import polynomial

    rng = np.random.default_rng(8)
    t = np.arange(40) * 5.0
    y = 0.2 + 3e-3 * t - 4e-6 * t**2 + rng.normal(0, 0.002, (3, t.size))
    for degree in (2, 3):
        r = polynomial(t, y, degree=degree, window_s=120.0)
        sel = t <= 120.0
        for i in range(3):
            c = np.polyfit(t[sel], y[i, sel], degree)
            rss = float(((y[i, sel] - np.polyval(c, t[sel])) ** 2).sum())
            want = np.sqrt(rss / (sel.sum() - degree - 1)) / r.extra["read_noise"][i]
            assert r.extra["rmse_over_noise"][i] == pytest.approx(want, rel=1e-7)


@pytest.mark.parametrize(("t0", "start_s"), [(0.0, 40.0), (100.0, None), (100.0, 130.0)])
def test_polynomial_slope_is_taken_at_the_window_start(t0: float, start_s: float | None) -> None:
    # a quadratic in time from the window start s: y = 0.2 + 0.03 (t - s) - 4e-5 (t - s)^2 has slope 0.03
    # at s; numpy.polyfit on the window's reads gives the same slope (independent least squares). The
    # window starts at the first read when start_s is None, and reads need not start at t = 0
    from vzero.plugins.rates.polynomial import polynomial
    t = t0 + np.arange(60) * 5.0
    s = t[0] if start_s is None else start_s
    y = 0.2 + 0.03 * (t - s) - 4e-5 * (t - s) ** 2 + np.tile([1e-4, -1e-4, 0.0], 20)
    res = polynomial(t, y[None, :], degree=2, start_s=start_s)
    w = t >= s
    ref = np.polyfit(t[w] - s, y[w], 2)[1]
    assert res.v0[0] == pytest.approx(ref, rel=1e-6)
    assert res.v0[0] == pytest.approx(0.03, rel=1e-2)
