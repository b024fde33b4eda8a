"""The lag and decay kernels' building blocks against independent calculations: block lines against
scipy.stats.linregress block by block, the first-order rate-loss model and its Jacobian against the closed
form and central differences, and the lag time of a noise-free broken line (a flat baseline, then a
straight rise: the lag is the break, by hand)."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy import stats
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.rates.lagdecay import _block_lines, _selwyn, detect_lag, mark_lags
from vzero.plugins.rates.noise import screen

T = np.arange(30) * 10.0 + 5.0


@pytest.mark.parametrize("gaps", [False, True])
def test_block_lines_match_linregress(gaps: bool) -> None:
    rng = np.random.default_rng(8)
    y = 0.3 + 2e-3 * T[None, :] + 1e-4 * (T[None, :] - 50.0) ** 2 * np.array([[0.0], [1.0], [-1.0]])
    y = y + 1e-3 * rng.standard_normal(y.shape)
    if gaps:
        y[0, [0, 3, 4]] = np.nan
        y[1, 10:14] = np.nan  # a block of width 5 there has fewer than 3 reads
    valid = np.isfinite(y)
    width = 5
    slope, ybar, tbar, inv_sxx = _block_lines(T, y, valid, width)
    assert slope.shape == (3, T.size - width + 1)
    for i in range(3):
        for j in range(T.size - width + 1):
            keep = valid[i, j:j + width]
            tt, yy = T[j:j + width][keep], y[i, j:j + width][keep]
            if tt.size < 3:
                assert np.isnan(slope[i, j]) and np.isnan(ybar[i, j])
                continue
            ref = stats.linregress(tt, yy)
            assert slope[i, j] == pytest.approx(ref.slope, rel=1e-7, abs=1e-12)
            assert ybar[i, j] == pytest.approx(yy.mean(), rel=1e-10)
            assert tbar[i, j] == pytest.approx(tt.mean(), rel=1e-12)
            assert inv_sxx[i, j] == pytest.approx(1 / ((tt - tt.mean()) ** 2).sum(), rel=1e-9)
    assert gaps == bool(np.isnan(slope).any())


@pytest.mark.parametrize("k", [0.0, 1e-9, 2e-3, -1e-3])
def test_rate_loss_model_and_jacobian(k: float) -> None:
    tau = np.array([0.0, 1e-4, 30.0, 300.0, 900.0])
    p = np.array([[0.2, 4e-3, k]])
    f, jac = _selwyn(p, tau)
    # closed form y0 + v0 (1 − e^(−k τ)) / k, and its k → 0 limit y0 + v0 τ
    want = 0.2 + 4e-3 * (tau if k == 0 else -np.expm1(-k * tau) / k)
    np.testing.assert_allclose(f[0], want, rtol=1e-9, atol=1e-15)
    for m, h in enumerate((1e-6, 1e-8, 1e-7)):
        dp = np.zeros(3)
        dp[m] = h
        num = (_selwyn(p + dp, tau)[0] - _selwyn(p - dp, tau)[0]) / (2 * h)
        np.testing.assert_allclose(jac[0, m], num[0], rtol=1e-5, atol=1e-9)


def test_lag_time_and_steady_start_of_a_broken_line() -> None:
    t = np.arange(60) * 10.0
    v = 2e-3
    breaks = np.array([150.0, 200.0, 270.0, 460.0])  # the last: steady start capped at n − 2·width
    y = 0.1 + v * np.maximum(t[None, :] - breaks[:, None], 0.0)
    sc = screen(y, min_points=8, time=t)
    start, lag_s, has = detect_lag(t, y, sc, early=False)
    assert has.all()
    np.testing.assert_allclose(lag_s, breaks, rtol=1e-9)
    width = max(4, t.size // 8)
    for i in range(breaks.size):
        slopes = np.array([stats.linregress(t[j:j + width], y[i, j:j + width]).slope
                           for j in range(t.size - width + 1)])
        first = int(np.argmax(slopes >= 0.98 * slopes.max()))  # settle: within 2 % of the steepest
        assert start[i] == min(first + width // 2, t.size - 2 * width)
    assert start[-1] == t.size - 2 * width
    # a straight line from the first read has no lag
    _, lag0, has0 = detect_lag(t, 0.1 + v * t[None, :], screen(0.1 + v * t[None, :], min_points=8, time=t))
    assert not has0.any() and lag0[0] == 0.0


@pytest.mark.parametrize(("rise", "lags"), [(0.9, [True, False]), (1.1, [True, True])])
def test_lag_rise_is_judged_with_the_first_blocks_own_standard_error(rise: float, lags: list[bool]) -> None:
    # module text of detect_lag: a lag where the steepest block's slope exceeds the first block's by z = 6
    # standard errors of the difference, hypot(SE first, SE steepest), SE = sigma / sqrt(Sxx) per block. A
    # well flat over its first block (4 reads, 5 s apart) and then rising at `rise` read noises per second;
    # in the second well the first read is missing, so the first block's Sxx falls from 125 to 50 s^2 and the
    # threshold rises from 6 sqrt(2/125) = 0.76 to 6 sqrt(1/50 + 1/125) = 1.004 read noises per s (by
    # hand): 0.9 is a lag only where the whole first block was read, 1.1 in both
    t = np.arange(32) * 5.0
    sigma = 0.01
    y = np.where(t < 20.0, 0.0, rise * sigma * (t - 17.5))
    y = np.vstack([y, y])
    y[1, 0] = np.nan
    sc = screen(y, min_points=8, time=t)
    sc = dataclasses.replace(sc, sigma=np.full(2, sigma))
    assert detect_lag(t, y, sc, early=False)[2].tolist() == lags


def test_lag_check_marks_a_lag_well_and_leaves_a_straight_one() -> None:
    # lagdecay.mark_lags: LAG (and UNMODELLED where the method does not model it) on a well flat for 20 s
    # and then rising at 0.01/s, nothing on a straight line; without any lag the result is returned as is
    t = np.arange(40) * 5.0
    wiggle = np.tile([1e-4, -1e-4], 20)
    lagged = np.where(t < 20.0, 0.0, 0.01 * (t - 17.5)) + wiggle
    out = mark_lags(t, np.vstack([lagged, 0.01 * t + wiggle]), RateResult(v0=np.ones(2)), modelled=False)
    flags = np.asarray(out.flags)
    assert flags[0] & Flag.LAG and flags[0] & Flag.UNMODELLED and flags[1] == 0
    plain = RateResult(v0=np.ones(1))
    assert mark_lags(t, (0.01 * t + wiggle)[None, :], plain, modelled=False) is plain


def test_lag_decay_goodness_is_one_less_the_residual_share_of_the_total() -> None:
    # R² = 1 - RSS/TSS of the lag-decay fit. Wells of an inactivating enzyme (scipy solve_ivp through
    # simulate_plate, read noise 0.002): a fit that describes them leaves RSS of about n sigma², so
    # 1 - R² must be within a factor 2 of n sigma² / TSS, TSS about each well's mean by hand
    from vzero.plugins.kinetics.simulate import simulate_plate
    from vzero.plugins.rates.lagdecay import lag_decay
    t = np.arange(120) * 5.0
    s0 = np.array([1.0, 2.0])
    p = simulate_plate(t, s0, 0.5, 8e-4, k_inact=3e-3, signal_per_conc=5.0, baseline=0.05, noise=0.002, seed=4)
    r = lag_decay(t, p.signal, s0=s0, signal_per_conc=5.0)
    tss = ((p.signal - p.signal.mean(axis=1, keepdims=True)) ** 2).sum(axis=1)
    share = (1.0 - np.asarray(r.goodness)) / (t.size * 0.002**2 / tss)
    assert ((share > 0.5) & (share < 2.0)).all()
