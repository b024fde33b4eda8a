"""Both sides of the rate kernels' decisions, and their figures, against calculations written here.

Each test builds wells that sit just inside and just outside one rule and checks the product's answer well by
well against the rule recomputed by hand (numpy least squares, the exponential series, scipy): the small-x
series of the first-order rate-loss model's Jacobian, the decay pre-screen of the decay check, the sign of
the early-lag hinge statistic, the degrees of freedom of the substrate-inhibition curve's residual RMS and
the plate-shape start from the wells' rates. Wells and noise are invented.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.rates.checks import _falling
from vzero.plugins.rates.earlylag import early_lag, window_reads
from vzero.plugins.rates.lagdecay import _selwyn, lag_decay
from vzero.plugins.rates.noise import screen
from vzero.plugins.rates.poolshape import shape_from_rates
from vzero.plugins.rates.sicurve import fit_si_curve, si_left

# the thresholds as the modules state them (our choices, documented there and in docs/rates.md), written out
# so that a changed constant is caught: the decay pre-screen's margin 1.1, the early-lag test's one-sided
# threshold 4 and its least steady change per read, 2 read noises
PRESCREEN_MARGIN, EARLY_LAG_Z, MIN_STEP = 1.1, 4.0, 2.0


def _phi_series(x: np.ndarray, terms: int = 12) -> tuple[np.ndarray, np.ndarray]:
    """phi(x) = (1 - e^(-x))/x and phi'(x) from the exponential series (Abramowitz & Stegun 4.2.1):
    phi = sum_n (-x)^n/(n+1)!, phi' = sum_{n>=1} n (-1)^n x^(n-1)/(n+1)!."""
    phi = sum((-x) ** n / math.factorial(n + 1) for n in range(terms))
    dphi = sum(n * (-1) ** n * x ** (n - 1) / math.factorial(n + 1) for n in range(1, terms))
    return phi, dphi


def test_selwyn_jacobian_in_k_at_tiny_k_tau_follows_the_series() -> None:
    # below |k tau| = 1e-6 the model takes phi and phi' from their series; the d/dk column v0 tau² phi'(k tau)
    # must match the series of A&S 4.2.1 to 1e-10 (the next term, x/3 vs x/6, moves it by ~1e-7 relative)
    tau = np.linspace(0.0, 300.0, 31)[None, :]
    for k in (3e-9, -2e-9):
        p = np.array([[0.2, 4e-3, k]])
        f, jac = _selwyn(p, tau)
        phi, dphi = _phi_series(k * tau[0])
        np.testing.assert_allclose(f[0], 0.2 + 4e-3 * tau[0] * phi, rtol=1e-11)
        np.testing.assert_allclose(jac[0, 2], 4e-3 * tau[0] ** 2 * dphi, rtol=1e-10, atol=1e-300)
        np.testing.assert_allclose(jac[0, 1], tau[0] * phi, rtol=1e-11)
    # just above the switch (k tau ~ 1e-4 .. 1e-3) the closed form holds: central differences in k
    p = np.array([[0.2, 4e-3, 3e-6]])
    dk = np.array([0.0, 0.0, 1e-9])
    num = (_selwyn(p + dk, tau)[0] - _selwyn(p - dk, tau)[0]) / (2 * dk[2])
    np.testing.assert_allclose(_selwyn(p, tau)[1][0, 2], num[0], rtol=1e-5, atol=1e-12)


def test_lag_decay_recovers_strong_first_order_decay_from_its_clipped_start() -> None:
    # noise-free curves y0 + v0 (1 - e^(-k t))/k (Selwyn 1965's first-order loss of rate) with k t_end from
    # 0.5 to 50: the start value of k is clipped at 10/span, yet the fit reaches the curve's own v0 and k
    t = np.arange(60) * 10.0
    ks = np.array([0.5, 2.0, 5.0, 10.0, 15.0, 20.0, 30.0, 50.0]) / t[-1]
    y = 0.1 + 5e-3 * -np.expm1(-ks[:, None] * t) / ks[:, None]
    r = lag_decay(t, y, fail_ratio=np.inf)
    np.testing.assert_allclose(r.v0, 5e-3, rtol=1e-8)
    np.testing.assert_allclose(r.extra["k_decay"], ks, rtol=1e-8)
    assert not np.any(np.asarray(r.flags) & int(Flag.FIT_FAILED))


def _ramp_plate() -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Wells rising at 1e-3 AU/s whose rate changes to r times that at 150 s (r swept finely from 0.3 to
    2.7), the same fixed white noise (2e-3 AU) on every well; the last four reads of every other well
    missing, so the last block holds fewer reads than the one before it. Returns t, y, r, s0 (mM)."""
    t = np.arange(64) * 5.0
    r = np.linspace(0.3, 2.7, 241)
    v = 1e-3
    y = 0.1 + v * np.minimum(t, 150.0)[None, :] + v * r[:, None] * np.maximum(t - 150.0, 0.0)[None, :]
    y = y + 2e-3 * np.random.default_rng(4242).standard_normal(t.size)[None, :]
    y[1::2, -4:] = np.nan
    return t, y, r, np.full(r.size, 1e3)


def _falling_by_hand(t: np.ndarray, y: np.ndarray, s0: np.ndarray, spc: float, order: float) -> np.ndarray:
    """The rule of checks._falling's docstring, with numpy.polyfit lines over the first and last n_t/8 reads
    by index and slope standard errors sigma/sqrt(Sxx); sigma and the signed change from noise.screen."""
    sc = screen(y, min_points=8, time=t)
    width = max(4, t.size // 8)
    out = np.zeros(y.shape[0], dtype=bool)
    for i in range(y.shape[0]):
        d = np.sign(sc.change[i])
        slopes, inv = [], []
        for sl in (slice(0, width), slice(t.size - width, t.size)):
            ok = np.isfinite(y[i, sl])
            tt, yy = t[sl][ok], y[i, sl][ok]
            slopes.append(d * np.polyfit(tt, yy, 1)[0])
            inv.append(1.0 / np.sum((tt - tt.mean()) ** 2))
        se = sc.sigma[i] * math.sqrt(inv[0] + inv[1])
        x_end = min(max(abs(sc.change[i]) / (abs(spc) * s0[i]), 0.0), 1.0)
        allowed = slopes[0] * (1.0 - x_end) ** order
        out[i] = (slopes[1] < PRESCREEN_MARGIN * allowed + 3.0 * se) and (allowed > 3.0 * se)
    return out


def test_decay_prescreen_matches_its_rule_on_both_sides_of_the_bound() -> None:
    t, y, r, s0 = _ramp_plate()
    got = _falling(t, y, s0, 1.0, 1.0, 8)
    want = _falling_by_hand(t, y, s0, 1.0, 1.0)
    np.testing.assert_array_equal(got, want)
    # the sweep crosses the bound in both sets of wells: slower ends pass the screen, faster ones do not;
    # the 3-SE term lets ends a little faster than the margin through (about 0.24 v for the full wells)
    for part in (slice(0, None, 2), slice(1, None, 2)):
        assert got[part][r[part] < 1.0].all() and not got[part][r[part] > 2.5].any()
    full_cross, gappy_cross = r[0::2][~got[0::2]][0], r[1::2][~got[1::2]][0]
    assert PRESCREEN_MARGIN + 0.1 < full_cross < PRESCREEN_MARGIN + 0.5
    # fewer reads in the last block widen its slope's SE: the crossing moves up for the gappy wells
    assert gappy_cross > full_cross + 0.1


def test_decay_prescreen_needs_a_depletion_bound_clear_of_zero() -> None:
    # the same wells near full conversion: s0 swept so the depletion bound (1 - x_end) * first slope moves
    # through three SEs; only wells with the bound above it pass
    t, y, _, _ = _ramp_plate()
    y = np.repeat(y[:1], 121, axis=0)  # r = 0.3: the end is slow, the first condition holds
    change = screen(y, min_points=8, time=t).change[0]
    s0 = change / np.linspace(0.5, 0.99, 121)  # x_end from 0.5 to 0.99 (spc 1 AU/mM)
    got = _falling(t, y, s0, 1.0, 1.0, 8)
    np.testing.assert_array_equal(got, _falling_by_hand(t, y, s0, 1.0, 1.0))
    assert got[0] and not got[-1]


def _hinge_z(t: np.ndarray, y: np.ndarray, sigma: float, change: float) -> float:
    """Largest one-sided hinge t over knees 3 .. W//2 (earlylag module text) by numpy.linalg.lstsq."""
    w = window_reads(t.size)
    tc = t[:w] - t[0]
    best = -np.inf
    for k in range(3, w // 2 + 1):
        x = np.stack([np.ones(w), tc, np.minimum(tc - tc[k], 0.0)], axis=1)
        c = np.linalg.lstsq(x, y[:w], rcond=None)[0][2]
        var = np.linalg.inv(x.T @ x)[2, 2]
        best = max(best, -np.sign(change) * c / (sigma * math.sqrt(var)))
    return float(best)


def test_early_lag_statistic_has_the_sign_of_a_lag_not_of_depletion() -> None:
    # rising signals: a lag (flat for 20 s, then 2e-3 AU/s), a rate that falls from the start (early reads
    # above the steady line: depletion), a straight line; falling signals: the mirror images
    t = np.arange(80) * 5.0
    noise = 1e-3 * np.random.default_rng(77).standard_normal(t.size)
    lag = 0.1 + 2e-3 * np.maximum(t - 20.0, 0.0)
    drop = 0.1 + 0.5 * (1.0 - np.exp(-t / 100.0))
    line = 0.1 + 2e-3 * t
    y = np.vstack([lag, drop, line, 2.0 - lag, 2.0 - drop]) + noise
    sigma = np.full(y.shape[0], 1e-3)
    change = y[:, -1] - y[:, 0]
    res = early_lag(t, y, sigma, change, np.ones(y.shape[0], bool))
    want = np.array([_hinge_z(t, y[i], 1e-3, change[i]) for i in range(y.shape[0])])
    np.testing.assert_allclose(res.z, want, rtol=1e-8)
    assert res.has.tolist() == [True, False, False, True, False]
    assert want[0] > EARLY_LAG_Z and want[3] > EARLY_LAG_Z and want[1] < 0 and want[4] < 0


def _hinge_best(t: np.ndarray, y: np.ndarray, sigma: float) -> tuple[float, int, float, float]:
    """(largest hinge t, its knee, slope b, hinge c) for a rising signal, by numpy.linalg.lstsq."""
    w = window_reads(t.size)
    tc = t[:w] - t[0]
    best = (-np.inf, 0, np.nan, np.nan)
    for k in range(3, w // 2 + 1):
        x = np.stack([np.ones(w), tc, np.minimum(tc - tc[k], 0.0)], axis=1)
        _, b, c = np.linalg.lstsq(x, y[:w], rcond=None)[0]
        z = -c / (sigma * math.sqrt(np.linalg.inv(x.T @ x)[2, 2]))
        if z > best[0]:
            best = (float(z), k, float(b), float(c))
    return best


def test_early_lag_thresholds_on_both_sides_and_its_figures() -> None:
    # a short lag (flat for 10 s, then 2e-3 AU/s) with noise: called when the largest hinge t exceeds z and the
    # steady change per read is at least MIN_STEP read noises; just inside / outside each, by hand; the knee,
    # the early-over-steady ratio (b + c)/b and the lag -c t_k / b from the same least squares
    t = np.arange(80) * 5.0
    sigma = 1e-3
    y = 0.1 + 2e-3 * np.maximum(t - 10.0, 0.0) + sigma * np.random.default_rng(78).standard_normal(t.size)
    zmax, knee, b, c = _hinge_best(t, y, sigma)
    yy, one = y[None, :], np.ones(1, bool)
    ch = np.array([y[-1] - y[0]])
    r = early_lag(t, yy, np.array([sigma]), ch, one)
    assert r.has[0] and r.knee[0] == knee
    np.testing.assert_allclose([r.z[0], r.ratio[0], r.lag_s[0]], [zmax, (b + c) / b, -c * (t[knee] - t[0]) / b],
                               rtol=1e-8)
    assert early_lag(t, yy, np.array([sigma]), ch, one, z=zmax * 0.999).has[0]
    assert not early_lag(t, yy, np.array([sigma]), ch, one, z=zmax * 1.001).has[0]
    # the default threshold: the read noise claimed so that the statistic is 4.2 or 3.8 (it scales as 1/sigma)
    for target, called in ((4.2, True), (3.8, False)):
        s = sigma * zmax / target
        assert b * 5.0 / s >= MIN_STEP  # the step rule holds
        assert bool(early_lag(t, yy, np.array([s]), ch, one).has[0]) is called
    # the step rule on its own: the same reads with a read noise claimed so that b dt / sigma sits at
    # MIN_STEP (the statistic scales as 1/sigma; z lowered to keep it passing)
    dt = 5.0
    s_edge = b * dt / MIN_STEP
    for scale, called in ((0.999, True), (1.001, False)):
        s = s_edge * scale
        got = early_lag(t, yy, np.array([s]), ch, one, z=0.5 * zmax * sigma / s)
        assert bool(got.has[0]) is called


def test_substrate_inhibition_residual_rms_has_four_parameters_taken_off() -> None:
    # ratio = sqrt(rss / (n - 4)) / sigma over the counted reads (fit_si_curve's docstring); wells with
    # different numbers of missing reads, the curve from si_left with noise added (the figure is arithmetic
    # on the returned rss, whatever the fit reached)
    t = np.arange(60) * 10.0
    s0 = np.array([0.5, 1.0, 2.0])
    spc, v0 = 2.0, np.array([4e-4, 6e-4, 5e-4])  # AU/mM; mM/s
    p, q = 0.3, 0.2
    y = 0.05 + spc * s0[:, None] * -np.expm1(si_left(v0[:, None] * t / s0[:, None], p, q))
    y = y + 1e-3 * np.random.default_rng(5).standard_normal(y.shape)
    valid = np.ones(y.shape, bool)
    valid[1, -5:] = False
    valid[2, ::3] = False
    sigma = np.full(3, 1e-3)
    start = np.stack([np.full(3, 0.05), np.log(v0), np.full(3, p), np.full(3, q)], axis=1)
    fit = fit_si_curve(t, y, valid, s0, spc, sigma, start)
    n = valid.sum(axis=1)
    np.testing.assert_allclose(fit["ratio"], np.sqrt(fit["rss"] / (n - 4.0)) / sigma, rtol=1e-12)
    assert np.all(fit["ratio"] < 1.5)  # the curve it was drawn from describes the reads


def test_substrate_inhibition_se_takes_the_larger_of_residual_and_read_noise() -> None:
    # fit_si_curve's docstring: the covariance is scaled by the larger of the residual variance and sigma²;
    # the fit itself does not depend on sigma, so claiming a read noise far below the residual RMS and one far
    # above it scales the SE by exactly (sigma_big / rmse)
    t = np.arange(60) * 10.0
    s0, spc, v0 = np.array([1.0]), 2.0, np.array([6e-4])
    y = 0.05 + spc * s0[:, None] * -np.expm1(si_left(v0[:, None] * t / s0[:, None], 0.3, 0.2))
    y = y + 1e-3 * np.random.default_rng(6).standard_normal(y.shape)
    valid = np.ones(y.shape, bool)
    start = np.array([[0.05, math.log(6e-4), 0.3, 0.2]])
    low = fit_si_curve(t, y, valid, s0, spc, np.array([1e-9]), start)
    high = fit_si_curve(t, y, valid, s0, spc, np.array([1.0]), start)
    rmse = math.sqrt(low["rss"][0] / (t.size - 4))
    np.testing.assert_allclose(high["v0"], low["v0"], rtol=1e-12)
    np.testing.assert_allclose(high["se"][0] / low["se"][0], 1.0 / rmse, rtol=1e-9)


def test_inhibition_step_tries_only_wells_below_the_order_limit() -> None:
    # the curve is tried only where the power law's order is below SI_ORDER = 0.25 (sicurve's docstring):
    # the same reads with order 0.249 and 0.251; the fit's figures are NaN where it was not tried
    from vzero.plugins.rates.sicurve import inhibition_step

    t = np.arange(60) * 10.0
    s0, spc = np.array([1.0, 1.0]), 2.0
    y1 = 0.05 + spc * -np.expm1(si_left(6e-4 * t, 0.3, 0.2)) + 1e-3 * np.random.default_rng(8).standard_normal(t.size)
    y = np.vstack([y1, y1])
    keep, fit = inhibition_step(t, y, np.ones(y.shape, bool), s0, spc, np.full(2, 1e-3), np.full(2, 0.05),
                                np.full(2, spc * 6e-4), np.array([0.249, 0.251]), np.full(2, 5.0),
                                np.full(2, spc * 6e-4), np.full(2, 1e-5), lof_ratio=1.4, agree_z=2.0)
    assert np.isfinite(fit["v0"][0]) and np.isnan(fit["v0"][1]) and not keep[1]


def test_plate_shape_start_from_exact_rates_recovers_the_rate_law() -> None:
    # rates on the Hill law (Hill 1910) and the substrate-inhibition law (Haldane 1930) by hand: the start
    # fitted to them returns the laws' (h, K0.5) and (Km, Ki), whatever start the fit itself took
    s = np.array([0.05, 0.1, 0.15, 0.2, 0.3, 0.4, 0.6, 1.0, 1.5])
    v = 4e-4 * s**2.5 / (0.3**2.5 + s**2.5)
    got = shape_from_rates("hill", s, v, np.full(s.size, 1e-7))
    assert got is not None
    np.testing.assert_allclose(got, [2.5, 0.3], rtol=1e-6)
    s = np.array([0.05, 0.1, 0.2, 0.4, 0.8, 1.5, 3.0, 6.0, 12.0])
    v = 8e-4 * s / (0.3 + s + s * s / 3.0)
    got = shape_from_rates("substrate-inhibition", s, v, np.full(s.size, 1e-7))
    assert got is not None
    np.testing.assert_allclose(got, [0.3, 3.0], rtol=1e-6)


def _selwyn_curve(t: np.ndarray, y0: float, v0: float, k: float) -> np.ndarray:
    """Selwyn 1965 first-order loss of rate, for scipy's curve_fit."""
    return y0 + v0 * -np.expm1(-k * t) / k


def test_lag_decay_figures_match_scipy_curve_fit_with_missing_last_reads() -> None:
    # a decaying well (k t_end = 2) with white noise and its last three reads missing: v0, k, their standard
    # errors (the unscaled covariance times the larger of the residual variance, n - 3 degrees of freedom, and
    # the read variance), the residual RMS over the read noise, R² and the window, all against
    # scipy.optimize.curve_fit (independent Levenberg–Marquardt) and numpy
    from scipy.optimize import curve_fit

    t = np.arange(60) * 10.0
    k_true = 2.0 / t[-1]
    y = _selwyn_curve(t, 0.1, 5e-3, k_true) + 1e-3 * np.random.default_rng(31).standard_normal(t.size)
    y[-3:] = np.nan
    ok = np.isfinite(y)
    r = lag_decay(t, y[None, :], fail_ratio=np.inf)
    p, cov = curve_fit(_selwyn_curve, t[ok], y[ok], p0=[0.1, 5e-3, k_true], absolute_sigma=True,
                       xtol=1e-14, ftol=1e-14)
    resid = y[ok] - _selwyn_curve(t[ok], *p)
    rss = float(resid @ resid)
    rmse = math.sqrt(rss / (ok.sum() - 3))
    noise = float(r.extra["read_noise"][0])
    se = np.sqrt(np.diag(cov)) * max(rmse, noise)
    np.testing.assert_allclose(r.v0[0], p[1], rtol=1e-6)
    np.testing.assert_allclose(r.extra["k_decay"][0], p[2], rtol=1e-5)
    np.testing.assert_allclose(r.stderr[0], se[1], rtol=1e-4)
    np.testing.assert_allclose(r.extra["k_decay_stderr"][0], se[2], rtol=1e-4)
    np.testing.assert_allclose(r.extra["rmse_over_noise"][0], rmse / noise, rtol=1e-6)
    tss = float(np.sum((y[ok] - y[ok].mean()) ** 2))
    np.testing.assert_allclose(r.goodness[0], 1.0 - rss / tss, rtol=1e-9)
    assert r.window_start_s[0] == t[0] and r.window_end_s[0] == t[-4] and r.n_points[0] == ok.sum()
    assert not np.asarray(r.flags)[0] & int(Flag.LAG)


def test_lag_decay_rising_rate_is_a_lag_and_a_falling_one_is_not() -> None:
    # k significantly below zero (the rate rises through the window) flags LAG; the mirror curve does not
    t = np.arange(60) * 10.0
    noise = 1e-3 * np.random.default_rng(32).standard_normal(t.size)
    # and a straight line (k within its SEs of zero) is neither
    y = np.vstack([_selwyn_curve(t, 0.1, 2e-3, -1.0 / t[-1]), _selwyn_curve(t, 0.1, 5e-3, 1.0 / t[-1]),
                   0.1 + 3e-3 * t]) + noise
    r = lag_decay(t, y, fail_ratio=np.inf)
    k, se = r.extra["k_decay"], r.extra["k_decay_stderr"]
    assert k[0] + 3.0 * se[0] < 0 < k[1] - 3.0 * se[1]
    assert abs(k[2]) < 3.0 * se[2]
    lag = (np.asarray(r.flags) & int(Flag.LAG)) != 0
    assert lag.tolist() == [True, False, False]


@pytest.mark.parametrize("order", [1.0, 2.0])
def test_lag_decay_decay_flag_on_both_sides_of_the_depletion_bound(order: float) -> None:
    # one noisy decaying curve repeated with s0 swept so the conversion at the last read moves through the
    # bound: DECAY where the fitted decay's lower limit (k - 3 SE) loses more rate than (1 - x_end)^order,
    # by hand from the returned v0, k and SE (module text; depletion_order)
    t = np.arange(60) * 10.0
    # noise 1e-2 AU: k's SE is a few percent, so the 3-SE margin moves the crossing by several wells
    y1 = _selwyn_curve(t, 0.1, 5e-3, 2.0 / t[-1]) + 1e-2 * np.random.default_rng(33).standard_normal(t.size)
    x_target = np.linspace(0.5, 0.995, 200)
    change = 5e-3 * -np.expm1(-2.0) * t[-1] / 2.0
    s0 = change / x_target
    y = np.repeat(y1[None, :], s0.size, axis=0)
    r = lag_decay(t, y, s0=s0, signal_per_conc=1.0, depletion_order=order, fail_ratio=np.inf)
    v0, k, se = r.v0, r.extra["k_decay"], r.extra["k_decay_stderr"]
    span = t[-1] - t[0]
    x_end = np.abs(v0 * -np.expm1(-k * span) / k) / s0
    k_low = k - 3.0 * se
    want = (k_low > 0) & (np.exp(-k_low * span) < (1.0 - np.fmin(x_end, 1.0)) ** order)
    got = (np.asarray(r.flags) & int(Flag.DECAY)) != 0
    np.testing.assert_array_equal(got, want)
    assert got[0] and not got[-1]


@pytest.mark.parametrize(("n_reads", "flag"), [(0, Flag.ALL_MISSING), (1, Flag.TOO_FEW_POINTS)])
def test_lag_decay_with_no_or_one_read_reports_why_and_no_rate(n_reads: int, flag: Flag) -> None:
    # no reads at all, or a single read, on two wells: no rate, no lag time, no reads used, and the reason
    r = lag_decay(np.arange(n_reads) * 5.0, np.ones((2, n_reads)))
    assert np.isnan(r.v0).all() and np.isnan(r.lag_s).all() and np.isnan(r.extra["k_decay"]).all()
    assert np.asarray(r.n_points).tolist() == [0, 0]
    assert np.asarray(r.flags).tolist() == [int(flag)] * 2


def test_lag_block_test_on_both_sides_of_min_rise() -> None:
    # noise-free wells rising at r v over the first block (reads 0-7, n_time/8) and at v after it: a lag is
    # called when the first block's slope is below (1 - min_rise) = 0.8 of the steepest block's (block slopes
    # by numpy.polyfit); the lag time is where the steady line meets the first read's level, t_7 (1 - r), and
    # the steady state starts at the middle of the first block within 2 % of the steepest (by hand)
    from vzero.plugins.rates.lagdecay import detect_lag

    t = np.arange(64) * 5.0
    v = 2e-3
    r = np.array([0.70, 0.79, 0.799, 0.801, 0.81, 0.9])
    y = 0.1 + np.where(t <= t[7], r[:, None] * v * t, r[:, None] * v * t[7] + v * (t - t[7]))
    sc = screen(y, min_points=8, time=t)
    start, lag_s, has = detect_lag(t, y, sc, early=False)
    assert has.tolist() == (r < 0.8).tolist()
    np.testing.assert_allclose(lag_s[has], t[7] * (1.0 - r[has]), rtol=1e-9)
    assert (lag_s[~has] == 0.0).all() and (start[~has] == 0).all()
    for i in np.flatnonzero(has):
        slopes = np.array([np.polyfit(t[j:j + 8], y[i, j:j + 8], 1)[0] for j in range(t.size - 7)])
        first = int(np.argmax(slopes >= 0.98 * slopes.max()))
        assert start[i] == min(first + 4, t.size - 16)
