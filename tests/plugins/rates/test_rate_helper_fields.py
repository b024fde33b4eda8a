"""Every returned figure of the small helpers behind the default rate method (``model-choice``) and the shared
checks, against an independent calculation: the spike test, the censored-read trim, the early quadratic, its
bias bound, the difference SE and where DISAGREES is judged, the Hill curve's substrate left, the lag clock,
the short-lag hinge test and the read-window rule (invented data throughout).

Outside references, named beside each check: numpy.polyfit and numpy.linalg.lstsq (least squares),
scipy.optimize.brentq (the implicit integrated Hill law), scipy.integrate.quad (the active time as the
integral of the active fraction), central differences, and plain loops that follow the module texts.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, optimize
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates import checks, earlylag, hillcurve, lagfit
from vzero.plugins.rates.checks import difference_se, mark_decay, mark_disagreement, shared_checks
from vzero.plugins.rates.choice import DIFF_FLOOR, EarlyQuadratic, early_quadratic, quadratic_bias, trim_censored
from vzero.plugins.rates.noise import conversion_scale, screen
from vzero.plugins.rates.spikes import SPIKE_Z, find_spikes

# ---------------------------------------------------------------------------------------------- spikes


def _spikes_by_loop(t: np.ndarray, y: np.ndarray, sigma: np.ndarray, z: float, nmax: float) -> np.ndarray:
    """The module text of vzero.plugins.rates.spikes written as a plain loop over reads (NaN reads skipped)."""
    out = np.zeros(y.shape, dtype=bool)
    if y.shape[1] < 5:
        return out
    for w in range(y.shape[0]):
        idx = [i for i in range(y.shape[1]) if math.isfinite(y[w, i])]
        r = {}
        for j in range(1, len(idx) - 1):
            p, i, n = idx[j - 1], idx[j], idx[j + 1]
            a = (t[n] - t[i]) / (t[n] - t[p])
            b = (t[i] - t[p]) / (t[n] - t[p])
            r[i] = (y[w, i] - a * y[w, p] - b * y[w, n]) / math.sqrt(1 + a * a + b * b)
        for j in range(1, len(idx) - 1):
            p, i, n = idx[j - 1], idx[j], idx[j + 1]
            if p not in r or n not in r:
                continue
            ri = r[i]
            big = abs(ri) > z * sigma[w]
            opposite = np.sign(r[p]) == -np.sign(ri) and np.sign(r[n]) == -np.sign(ri)
            small = max(abs(r[p]), abs(r[n])) <= nmax * abs(ri)
            out[w, i] = bool(big and opposite and small)
    return out


def test_spike_threshold_on_both_sides_of_z_sigma() -> None:
    # equal spacing: a lone step A on a straight line gives r = A/sqrt(1.5) at the read and -A/(2 sqrt(1.5))
    # beside it (module text; hand calculation), so the call flips between A = 5.99 and 6.01 sqrt(1.5) sigma
    t = np.arange(12) * 10.0
    base = 3.0 + 0.02 * t
    sigma = np.array([1.0, 1.0, 2.0])
    y = np.tile(base, (3, 1))
    y[0, 6] += 6.01 * math.sqrt(1.5)
    y[1, 6] += 5.99 * math.sqrt(1.5)
    y[2, 6] -= 6.01 * math.sqrt(1.5) * 2.0  # a dip, in a noisier well
    got = find_spikes(t, y, sigma)
    assert got[0].tolist() == [i == 6 for i in range(12)]
    assert not got[1].any()
    assert got[2].tolist() == [i == 6 for i in range(12)]
    assert SPIKE_Z == 6.0


def test_spike_needs_five_reads_and_inner_neighbours() -> None:
    t = np.arange(5) * 1.0
    y = np.array([[0.0, 0.0, 50.0, 0.0, 0.0]])
    assert find_spikes(t, y, np.array([1.0]))[0].tolist() == [False, False, True, False, False]
    assert not find_spikes(t[:4], y[:, :4], np.array([1.0])).any()  # fewer than five reads: never
    # a step at the second read has no statistic on its left neighbour (the first read): not called
    y1 = np.array([[0.0, 50.0, 0.0, 0.0, 0.0]])
    assert not find_spikes(t, y1, np.array([1.0])).any()


def test_spike_neighbour_rule_on_both_sides_of_its_limit() -> None:
    # neighbours' r equal to -(0.5 + 1.5 d) of the spike's when a second step d A sits one read further on
    # (hand calculation, equal spacing); the rule keeps the call up to neighbour_max and drops it above
    t = np.arange(9) * 1.0
    y = np.zeros((2, 9))
    y[:, 4] = 100.0
    y[0, 3] = -3.0  # makes the left neighbour's |r| larger
    y[1, 3] = 3.0
    sigma = np.array([1.0, 1.0])
    for nmax in (0.5, 0.55, 0.6, 0.8, 1.0):
        np.testing.assert_array_equal(find_spikes(t, y, sigma, neighbour_max=nmax),
                                      _spikes_by_loop(t, y, sigma, SPIKE_Z, nmax))
    assert find_spikes(t, y, sigma, neighbour_max=0.8)[:, 4].tolist() == [True, True]
    assert find_spikes(t, y, sigma, neighbour_max=0.5)[:, 4].tolist() == [False, False]


@pytest.mark.parametrize("gaps", [False, True])
def test_spikes_match_the_module_text_as_a_loop(gaps: bool) -> None:
    rng = np.random.default_rng(41)
    t = np.cumsum(rng.uniform(4.0, 6.0, 40))  # uneven read times
    y = 10.0 + 0.05 * t + rng.normal(0.0, 1.0, (30, 40))
    for w in range(30):  # spikes and dips of many sizes, some next to each other
        for i in rng.choice(40, 3, replace=False):
            y[w, i] += rng.choice([-1, 1]) * rng.uniform(2.0, 14.0)
    if gaps:
        y[rng.random(y.shape) < 0.15] = np.nan
    sigma = rng.uniform(0.8, 1.2, 30)
    got = find_spikes(t, y, sigma)
    want = _spikes_by_loop(t, y, sigma, SPIKE_Z, 0.8)
    np.testing.assert_array_equal(got, want)
    assert 5 < want.sum() < 80  # the draw holds calls and non-calls
    assert not got[~np.isfinite(y)].any()


# ---------------------------------------------------------------------------------------------- trim


def test_trim_censored_masks_the_reads_beside_missing_blocks_by_hand() -> None:
    n = np.nan
    y = np.array([[n, n, 1, 2, 3, 4, 5, 6],
                  [1, 2, 3, 4, 5, 6, n, n],
                  [n, 1, 2, 3, 4, 5, 6, n],
                  [1, 2, 3, n, 5, 6, 7, 8],   # an inner gap is not a censored block
                  [n, n, n, n, n, n, n, n]], dtype=float)
    one = trim_censored(y.copy(), 1)
    want = y.copy()
    want[0, 2] = want[1, 5] = want[2, 1] = want[2, 6] = np.nan
    np.testing.assert_array_equal(one, want)
    two = trim_censored(y.copy(), 2)
    want2 = want.copy()
    want2[0, 3] = want2[1, 4] = want2[2, 2] = want2[2, 5] = np.nan
    np.testing.assert_array_equal(two, want2)
    np.testing.assert_array_equal(trim_censored(y.copy(), 0), y)
    full = np.arange(12.0).reshape(2, 6)
    np.testing.assert_array_equal(trim_censored(full.copy(), 1), full)


# ---------------------------------------------------------------------------------------------- quadratic


def _quadratic_by_polyfit(t: np.ndarray, y: np.ndarray, end: int, sigma: float) -> dict[str, float]:
    """Reference: numpy.polyfit of a quadratic in (t - t0) over the finite reads before ``end``; the SE of the
    slope from (X'X)^-1 and the read noise; R² and RMSE from their definitions."""
    keep = np.isfinite(y) & (np.arange(t.size) < end)
    tc, yk = t[keep] - t[0], y[keep]
    c2, c1, c0 = np.polyfit(tc, yk, 2)
    x = np.column_stack([np.ones_like(tc), tc, tc**2])
    inv = np.linalg.inv(x.T @ x)
    resid = yk - (c0 + c1 * tc + c2 * tc**2)
    rss = float(resid @ resid)
    tss = float(((yk - yk.mean()) ** 2).sum())
    return {"v0": c1, "curvature": 2 * c2, "se": sigma * math.sqrt(inv[1, 1]), "n": int(keep.sum()),
            "end_s": float(t[np.flatnonzero(keep)[-1]]), "goodness": 1 - rss / tss,
            "ratio": math.sqrt(rss / (keep.sum() - 3)) / sigma}


def _assert_matches(q: EarlyQuadratic, row: int, ref: dict[str, float]) -> None:
    np.testing.assert_allclose(q.v0[row], ref["v0"], rtol=1e-7)
    np.testing.assert_allclose(q.curvature[row], ref["curvature"], rtol=1e-6)
    np.testing.assert_allclose(q.se[row], ref["se"], rtol=1e-7)
    np.testing.assert_allclose(q.goodness[row], ref["goodness"], rtol=1e-7)
    np.testing.assert_allclose(q.rmse_over_noise[row], ref["ratio"], rtol=1e-6)
    assert q.n[row] == ref["n"]
    assert q.end_s[row] == ref["end_s"]


def test_early_quadratic_window_and_figures_against_polyfit() -> None:
    rng = np.random.default_rng(7)
    t = 30.0 + np.arange(40) * 5.0  # the first read is not at zero
    tc = t - t[0]
    y = np.vstack([2.0 + 0.010 * tc - 4e-6 * tc**2, 1.0 - 0.02 * tc + 1e-5 * tc**2, 2.0 + 0.004 * tc])
    y = y + rng.normal(0.0, 0.003, y.shape)
    y[1, 5] = np.nan  # a missing read inside the window
    full = np.array([1.0, 2.0, 10.0])
    sigma = np.array([0.003, 0.004, 0.005])
    q = early_quadratic(t, y, full, frac=0.2, min_points=8, sigma=sigma)
    for w in range(3):
        y0 = np.nanmean(y[w][np.isfinite(y[w])][:3])
        beyond = np.flatnonzero(np.isfinite(y[w]) & (np.abs(y[w] - y0) > 0.2 * full[w]))
        stop = beyond[0] if beyond.size else t.size
        enough = np.flatnonzero(np.isfinite(y[w]))[7] + 1  # just after the 8th finite read
        _assert_matches(q, w, _quadratic_by_polyfit(t, y[w], max(stop, enough), sigma[w]))
    assert q.n[0] < 40 and q.n[2] == 40  # the first well stops at 20 % of its full change, the last never


def test_early_quadratic_without_a_scale_takes_a_third_of_the_reads_or_min_points() -> None:
    rng = np.random.default_rng(8)
    t = np.arange(45) * 4.0
    y = 1.0 + 0.01 * t - 2e-5 * t**2 + rng.normal(0.0, 0.002, (2, 45))
    q = early_quadratic(t, y, None, frac=0.2, min_points=8, sigma=np.array([0.002, 0.002]))
    _assert_matches(q, 0, _quadratic_by_polyfit(t, y[0], 15, 0.002))  # 45 // 3 reads
    q20 = early_quadratic(t, y, None, frac=0.2, min_points=20, sigma=np.array([0.002, 0.002]))
    _assert_matches(q20, 1, _quadratic_by_polyfit(t, y[1], 20, 0.002))  # min_points is larger


def test_early_quadratic_measures_conversion_from_the_mean_of_the_first_three_reads() -> None:
    # reads 0, 0, 0, then rising by 0.041 per read: the level is 0 (mean of the first three reads; with a
    # fourth read it would be 0.01025). Read 7 sits at 0.205, beyond 20 % of a full change of 1 from 0 but not
    # from 0.01025, so the window stops there (reads 0-6 used, hand calculation)
    t = np.arange(20) * 5.0
    y = np.where(np.arange(20) < 3, 0.0, 0.041 * (np.arange(20) - 2.0))[None, :]
    q = early_quadratic(t, y, np.array([1.0]), frac=0.2, min_points=4, sigma=np.array([0.01]))
    assert q.n[0] == 7 and q.end_s[0] == 30.0


def test_early_quadratic_needs_four_reads() -> None:
    t = np.arange(10) * 2.0
    y = np.full((2, 10), np.nan)
    y[0, :4] = [1.0, 1.1, 1.25, 1.3]
    y[1, :3] = [1.0, 1.1, 1.25]
    q = early_quadratic(t, y, None, frac=0.2, min_points=4, sigma=np.array([0.01, 0.01]))
    assert np.isfinite(q.v0[0]) and np.isfinite(q.curvature[0]) and np.isfinite(q.goodness[0])
    assert np.isnan(q.v0[1]) and np.isnan(q.curvature[1]) and np.isnan(q.goodness[1])
    assert np.isnan(q.rmse_over_noise[1])  # three reads leave no residual degree of freedom
    assert q.n.tolist() == [4, 3]


def test_quadratic_bias_by_hand() -> None:
    # n = -P'' S0 spc / v0², x = change / (|spc| S0), bias = 0.1 max(|n(2n-1)|, |n(3n-2)|) x² (hand)
    q = EarlyQuadratic(v0=np.array([0.01, 0.01, -0.02]), se=np.ones(3), curvature=np.array([-2e-5, 1e-5, 4e-5]),
                       end_s=np.ones(3), n=np.ones(3, np.int64), rmse_over_noise=np.ones(3), goodness=np.ones(3))
    s0, spc = np.array([1.0, 2.0, 0.5]), -2.0
    n, bias = quadratic_bias(q, np.array([0.3, 0.4, 0.2]), s0, spc)
    for w in range(3):
        nw = -q.curvature[w] * s0[w] * spc / q.v0[w] ** 2
        xw = [0.3, 0.4, 0.2][w] / (2.0 * s0[w])
        assert n[w] == pytest.approx(nw, rel=1e-12)
        assert bias[w] == pytest.approx(0.1 * max(abs(nw * (2 * nw - 1)), abs(nw * (3 * nw - 2))) * xw**2, rel=1e-12)
    assert n[0] == pytest.approx(-0.4) and n[1] == pytest.approx(0.4)
    # at n = 0.4 the constant-order term (0.08) is the smaller, the Michaelis-Menten one (0.32) is taken
    assert bias[1] == pytest.approx(0.1 * 0.32 * 0.1**2)


def test_difference_se_on_both_sides_of_the_floor() -> None:
    # sqrt(|a² - b²|) (Hausman 1978, Econometrica 46:1251) where it is above DIFF_FLOOR of the larger SE
    got = difference_se(np.array([1.0, 1.0, 0.5, 2.0]), np.array([0.5, 0.99, 1.0, 2.0]))
    assert DIFF_FLOOR == 0.3
    np.testing.assert_allclose(got, [math.sqrt(0.75), 0.3, math.sqrt(0.75), 0.6], rtol=1e-12)


# ---------------------------------------------------------------------------------------------- Hill curve


def _ln_z_by_brentq(tau: float, kappa: float, h: float) -> float:
    """Reference: the integrated Hill law tau = (1 - z) + kappa (z^(1-h) - 1)/(h - 1) (-kappa ln z at h = 1)
    solved for ln z by scipy.optimize.brentq."""
    def g(w: float) -> float:
        z = math.exp(w)
        a = (1 - h) * w  # (z^(1-h) - 1)/(h - 1) = -w expm1(a)/a, exact through h = 1 (-ln z)
        f = -w if a == 0.0 else -w * math.expm1(a) / a
        return (1 - z) + kappa * f - tau
    return optimize.brentq(g, -50.0, 0.0, xtol=1e-14, rtol=1e-13)


@pytest.mark.parametrize(("tau", "kappa", "h"), [(0.3, 0.5, 1.0), (2.0, 0.5, 1.0), (0.8, 2.0, 2.0),
                                                 (1.5, 0.2, 3.0), (0.5, 1.0, 0.7), (0.05, 10.0, 1.5),
                                                 (3.0, 4.0, 1.0 + 1e-9)])
def test_hill_left_solves_the_integrated_hill_law(tau: float, kappa: float, h: float) -> None:
    want = _ln_z_by_brentq(tau, kappa, h)
    assert hillcurve.hill_left(np.array([tau]), np.array([kappa]), np.array([h]))[0] == pytest.approx(want, rel=1e-9)
    # from a nearby start too
    got = hillcurve.hill_left(np.array([tau]), np.array([kappa]), np.array([h]), start=np.array([want * 0.9]))
    assert got[0] == pytest.approx(want, rel=1e-9)


def test_hill_left_edges() -> None:
    # nothing used at tau <= 0; with h < 1 the substrate runs out at tau = 1 + kappa/(1 - h) (z = 0 in the law)
    got = hillcurve.hill_left(np.array([0.0, -1.0, 5.0]), np.array([0.5, 0.5, 0.5]), np.array([1.0, 1.0, 0.5]))
    assert got[0] == 0.0 and got[1] == 0.0
    assert got[2] == pytest.approx(hillcurve.LN_Z_FLOOR, abs=1e-6)


def test_plausible_hill_coefficient_on_both_sides_of_the_range() -> None:
    # h = n0 / u = n0 (1 + exp(-logit u)); logit u = 60 makes u = 1 to the last bit (hand calculation)
    lo, hi = hillcurve.H_RANGE
    p = np.array([[0, 0, lo, 60.0], [0, 0, lo * 0.999, 60.0], [0, 0, hi, 60.0], [0, 0, hi * 1.001, 60.0],
                  [0, 0, 1.0, 0.0], [0, 0, 4.5, 0.0]])
    assert hillcurve._plausible(p).tolist() == [True, False, True, False, True, False]  # h = 2 and 9 last


# ---------------------------------------------------------------------------------------------- lag clock


def _theta_by_ode(t: np.ndarray, tau: float, k: float) -> np.ndarray:
    """Reference: the active time, the integral of the active fraction a(s) of the module text, solved with
    dp/dt = -p/tau, da/dt = p/tau - k a (p(0) = 1, a(0) = 0) by scipy.integrate.solve_ivp at the times ``t``
    (sorted, from 0); scipy.integrate.quad of exp(-k s) without a lag."""
    t = np.asarray(t, float)
    if tau <= 0:
        return np.array([integrate.quad(lambda s: math.exp(-k * s), 0, x, epsabs=1e-13, epsrel=1e-12)[0]
                         for x in t])
    sol = integrate.solve_ivp(lambda s, u: [-u[0] / tau, u[0] / tau - k * u[1], u[1]], (0, t[-1]),
                              [1.0, 0.0, 0.0], t_eval=t, rtol=1e-11, atol=1e-13)
    return sol.y[2]


@pytest.mark.parametrize(("tau", "k"), [(60.0, 8e-4), (30.0, 0.0), (0.0, 2e-3), (0.0, 0.0), (50.0, 0.02),
                                        (40.0, 1.0 / 40.0), (20.0, -5e-4)])
def test_active_time_and_clock_against_the_integral_of_the_active_fraction(tau: float, k: float) -> None:
    t = np.array([0.0, 5.0, 45.0, 300.0, 900.0])
    want = _theta_by_ode(t, tau, k)
    if k >= 0:  # active_time is written for k >= 0 (a negative k is taken as none); clock takes any sign
        np.testing.assert_allclose(lagfit.active_time(t, tau, k), want, rtol=1e-7, atol=1e-9)
    theta, d_tau, d_k = lagfit.clock(t[None, :], np.array([[tau]]), np.array([[k]]))
    np.testing.assert_allclose(theta[0], want, rtol=1e-6, atol=1e-8)
    if tau > 0 and k > 0 and abs(1 - k * tau) > 0.1:
        # derivatives by central differences of the closed form (away from k tau = 1, where it loses digits)
        h_tau, h_k = 1e-4 * tau, 1e-7
        num_tau = (lagfit.active_time(t, tau + h_tau, k) - lagfit.active_time(t, tau - h_tau, k)) / (2 * h_tau)
        num_k = (lagfit.active_time(t, tau, k + h_k) - lagfit.active_time(t, tau, k - h_k)) / (2 * h_k)
        np.testing.assert_allclose(d_tau[0], num_tau, rtol=1e-4, atol=1e-7)
        np.testing.assert_allclose(d_k[0], num_k, rtol=1e-4, atol=1e-3)


def test_clock_next_to_k_tau_one_interpolates_within_its_gap() -> None:
    t = np.array([[10.0, 100.0, 600.0]])
    tau = 40.0
    for k_tau in (1.0 - 5e-4, 1.0 + 2e-4, 1.0 - 2e-3):
        theta = lagfit.clock(t, np.array([[tau]]), np.array([[k_tau / tau]]))[0][0]
        want = _theta_by_ode(t[0], tau, k_tau / tau)
        np.testing.assert_allclose(theta, want, rtol=1e-6)


def test_pooled_and_plate_decay_by_hand() -> None:
    # inverse-variance mean sum(x/se²)/sum(1/se²) and SE 1/sqrt(sum(1/se²)); NaN and se <= 0 left out
    x = np.array([1.0, 2.0, 4.0, np.nan, 9.0])
    se = np.array([1.0, 2.0, 2.0, 1.0, 0.0])
    mean, sd = lagfit.pooled(x, se)
    assert mean == pytest.approx((1 + 2 / 4 + 4 / 4) / (1 + 0.25 + 0.25))
    assert sd == pytest.approx(1 / math.sqrt(1.5))
    assert all(math.isnan(v) for v in lagfit.pooled(np.array([np.nan]), np.array([1.0])))
    # kept only at K_PLATE_Z standard errors above zero or more (3 x 1/sqrt(2) on two equal wells)
    z = lagfit.K_PLATE_Z / math.sqrt(2)
    assert lagfit.plate_decay(np.array([z, z]), np.array([1.0, 1.0]))[0] == pytest.approx(z)
    assert lagfit.plate_decay(np.array([z * 0.999] * 2), np.array([1.0, 1.0])) == (0.0, pytest.approx(1 / math.sqrt(2)))


def test_peak_activity_is_the_largest_mean_active_fraction_between_reads() -> None:
    t = np.arange(0.0, 600.0, 5.0)
    tau, k = np.array([60.0, 0.0, np.nan]), np.array([8e-4, 1e-3, 0.0])
    got = lagfit.peak_activity(t, tau, k)
    for w in range(2):
        theta = _theta_by_ode(t, tau[w], k[w])
        assert got[w] == pytest.approx(np.max(np.diff(theta) / 5.0), rel=1e-6)
    assert math.isnan(got[2])
    # the closed form's peak, a = (exp(-k t) - exp(-t/tau))/(1 - k tau) at t* = ln(1/(k tau)) tau/(1 - k tau)
    ts = math.log(1 / (8e-4 * 60.0)) * 60.0 / (1 - 8e-4 * 60.0)
    assert got[0] == pytest.approx((math.exp(-8e-4 * ts) - math.exp(-ts / 60.0)) / (1 - 0.048), rel=2e-3)


# ---------------------------------------------------------------------------------------------- short lags


@pytest.mark.parametrize(("n", "want"), [(9, 9), (60, 12), (72, 12), (78, 13), (120, 20), (180, 30), (600, 30)])
def test_short_lag_window_is_a_sixth_between_12_and_30(n: int, want: int) -> None:
    assert earlylag.window_reads(n) == want


def _hinge_by_lstsq(t: np.ndarray, y: np.ndarray, knee: int, sigma: float, direction: float) -> tuple[float, ...]:
    """Reference: numpy.linalg.lstsq of y = a + b t + c min(t - t_k, 0) over the window's finite reads; the
    hinge t value -sign(change) c / (sigma sqrt((X'X)^-1_cc))."""
    keep = np.isfinite(y)
    tc = t - t[0]
    x = np.column_stack([np.ones_like(tc), tc, np.minimum(tc - tc[knee], 0.0)])[keep]
    (_, b, c), *_ = np.linalg.lstsq(x, y[keep], rcond=None)
    var_c = np.linalg.inv(x.T @ x)[2, 2]
    return -direction * c / (sigma * math.sqrt(var_c)), b, c


def test_early_lag_hinge_statistic_and_lag_against_lstsq() -> None:
    rng = np.random.default_rng(5)
    t = np.arange(60) * 5.0  # window of 12 reads, knees 3..6
    steady = 0.05 * t
    lag = np.where(t < 20.0, 0.01 * t, 0.05 * t - 0.8)  # slow for four reads, then steady
    y = np.vstack([lag, steady, -lag, lag]) + rng.normal(0.0, 0.02, (4, 60))
    y[3, 2] = np.nan  # a well with a missing read goes through its own normal equations
    sigma = np.full(4, 0.02)
    change = np.array([1.0, 1.0, -1.0, 1.0])
    res = earlylag.early_lag(t, y, sigma, change, np.ones(4, bool))
    w = earlylag.window_reads(60)
    for row in range(4):
        stats = [_hinge_by_lstsq(t[:w], y[row, :w], k, 0.02, change[row]) for k in range(3, w // 2 + 1)]
        best = int(np.argmax([s[0] for s in stats]))
        z, b, c = stats[best]
        assert res.z[row] == pytest.approx(z, rel=1e-7)
        has = z > earlylag.EARLY_LAG_Z and change[row] * b * 5.0 >= earlylag.MIN_STEP * 0.02
        assert bool(res.has[row]) == has
        if has:
            assert res.knee[row] == 3 + best
            assert res.lag_s[row] == pytest.approx(-c * (t[3 + best] - t[0]) / b, rel=1e-7)
            assert res.ratio[row] == pytest.approx((b + c) / b, rel=1e-7)
        else:
            assert res.knee[row] == 0 and res.lag_s[row] == 0.0 and math.isnan(res.ratio[row])
    assert res.has.tolist() == [True, False, True, True]


def test_early_lag_on_both_sides_of_its_thresholds() -> None:
    # the hinge t scales as 1/sigma: one lagged well (early rate 0.4 of the steady one for four reads, nearly
    # noiseless) judged with sigma set so that its t is just above / below EARLY_LAG_Z; its steady step is
    # then about 2.4 read noises, above MIN_STEP
    t = np.arange(60) * 5.0
    rng = np.random.default_rng(6)
    shape = np.where(t < 20.0, 0.02 * t, 0.05 * t - 0.6) + rng.normal(0.0, 1e-4, 60)
    one = np.ones(1, bool)
    z1 = earlylag.early_lag(t, shape[None, :], np.array([1.0]), np.ones(1), one).z[0]
    above = earlylag.early_lag(t, shape[None, :], np.array([z1 / 4.001]), np.ones(1), one)
    below = earlylag.early_lag(t, shape[None, :], np.array([z1 / 3.999]), np.ones(1), one)
    assert above.z[0] == pytest.approx(4.001) and bool(above.has[0])
    assert below.z[0] == pytest.approx(3.999) and not bool(below.has[0])
    sigma = np.array([0.02])
    # steady change per read b * dt against MIN_STEP read noises (sigma set just either side; the lag is
    # long and the reads nearly noiseless, so the hinge t stays above EARLY_LAG_Z)
    long_lag = np.where(t < 30.0, 0.0, 0.05 * (t - 30.0)) + rng.normal(0.0, 1e-4, 60)
    stats = [_hinge_by_lstsq(t[:12], long_lag[:12], k, 1.0, 1.0) for k in range(3, 7)]
    b = stats[int(np.argmax([s[0] for s in stats]))][1]
    for s, want in ((b * 5.0 / 2.001, True), (b * 5.0 / 1.999, False)):
        got = earlylag.early_lag(t, long_lag[None, :], np.array([s]), np.ones(1), one)
        assert got.z[0] > earlylag.EARLY_LAG_Z
        assert bool(got.has[0]) == want
    untested = earlylag.early_lag(t, shape[None, :], sigma, np.ones(1), np.zeros(1, bool))
    assert not untested.has[0] and math.isnan(untested.z[0]) and math.isnan(untested.lag_s[0])


# ---------------------------------------------------------------------------------------------- shared checks


def test_disagreement_is_judged_only_on_rated_wells_without_a_lag() -> None:
    # three copies of one Michaelis-Menten well (scipy solve_ivp), each given a v0 three times the true one
    # (far beyond DISAGREE_Z): the one with a rate and no LAG is flagged; a LAG well and a well without a
    # rate are left alone; without s0 or signal_per_conc nothing is judged (the same result object back)
    t = np.arange(120) * 5.0
    p = simulate_plate(t, np.full(3, 0.5), 1.0, 4e-4, signal_per_conc=5.0, baseline=0.05, noise=0.002, seed=3)
    v = 3.0 * p.v0_true
    v[2] = np.nan
    res = RateResult(v0=v, stderr=np.full(3, 1e-7), window_start_s=np.zeros(3), window_end_s=np.full(3, 595.0),
                     goodness=np.ones(3), flags=np.array([0, int(Flag.LAG), 0]), n_points=np.full(3, 120),
                     lag_s=np.zeros(3))
    got = mark_disagreement(t, p.signal, res, s0=np.full(3, 0.5), signal_per_conc=5.0)
    assert ((got.flags & Flag.DISAGREES) != 0).tolist() == [True, False, False]
    assert (got.flags & ~int(Flag.DISAGREES)).tolist() == res.flags.tolist()
    for s0, spc in ((None, 5.0), (np.full(3, 0.5), None)):
        assert mark_disagreement(t, p.signal, res, s0=s0, signal_per_conc=spc) is res
        assert mark_decay(t, p.signal, res, s0=s0, signal_per_conc=spc, modelled=False) is res
    # a method that compares with the model-free estimate itself is not judged again
    quiet = shared_checks(t, p.signal, res, s0=np.full(3, 0.5), signal_per_conc=5.0, finds_lags=True,
                          models_decay=True, compares_model_free=True)
    assert not (quiet.flags & Flag.DISAGREES).any()
    loud = shared_checks(t, p.signal, res, s0=np.full(3, 0.5), signal_per_conc=5.0, finds_lags=True,
                         models_decay=True)
    assert (loud.flags & Flag.DISAGREES).tolist() == (got.flags & Flag.DISAGREES).tolist()


def test_clock_derivative_in_k_without_decay_is_the_closed_form() -> None:
    # theta = ((1 - exp(-k t))/k - L)/(1 - k tau) with L = tau (1 - exp(-t/tau)) (module text); to first order
    # in k, (t - k t²/2 - L)(1 + k tau), so d theta/dk at k = 0 is -t²/2 + tau (t - L) (hand expansion); the
    # clock uses its series there (|k t| < 1e-6)
    t = np.array([[0.0, 5.0, 60.0, 300.0, 900.0]])
    tau = 45.0
    _, _, d_k = lagfit.clock(t, np.array([[tau]]), np.array([[0.0]]))
    x = t[0] / tau
    want = -t[0] ** 2 / 2 + tau * (t[0] + tau * np.expm1(-x))
    np.testing.assert_allclose(d_k[0], want, rtol=1e-9, atol=1e-9)


def test_early_lag_time_is_measured_from_the_first_read() -> None:
    # the same reads with the clock started 30 s earlier: the same lag time (it is counted from the first read,
    # EarlyLag's text), knee and statistic
    t = np.arange(60) * 5.0
    y = np.where(t < 20.0, 0.01 * t, 0.05 * t - 0.8) + np.random.default_rng(5).normal(0.0, 0.02, 60)
    args = (np.array([0.02]), np.ones(1), np.ones(1, bool))
    a = earlylag.early_lag(t, y[None, :], *args)
    b = earlylag.early_lag(t + 30.0, y[None, :], *args)
    assert a.has[0] and b.has[0] and a.knee[0] == b.knee[0]
    assert b.lag_s[0] == pytest.approx(a.lag_s[0], rel=1e-9) and b.z[0] == pytest.approx(a.z[0], rel=1e-9)


def test_early_lag_needs_eight_reads() -> None:
    # eight reads, flat for four and then steep: tested (knees 3 and 4 of window_reads(8) = 8); seven: not
    t = np.arange(8) * 5.0
    y = np.where(np.arange(8) < 4, 0.0, 1.0 * (np.arange(8) - 3.0)) + np.array([0, 1, -1, 0, 1, -1, 0, 1]) * 1e-3
    args = (np.array([0.01]), np.ones(1), np.ones(1, bool))
    assert earlylag.early_lag(t, y[None, :], *args).has[0]
    assert not earlylag.early_lag(t[:7], y[None, :7], *args).has[0]


def test_decay_is_not_judged_where_depletion_leaves_no_rate_to_compare(monkeypatch: pytest.MonkeyPatch) -> None:
    # module text of checks._falling: near full conversion the slowest end rate depletion explains,
    # first rate x (1 - x_end)^3, is within three standard errors of zero, and decay and depletion cannot be
    # told apart "whatever the fit would say". Wells of an inactivating enzyme (k = 6e-3 /s, scipy solve_ivp)
    # that run to about 90 % conversion: the decay fit alone would flag them; the rule leaves them unflagged
    t = np.arange(120) * 5.0
    s0 = np.array([0.05, 0.1, 0.2])
    p = simulate_plate(t, s0, 0.5, 8e-3, k_inact=6e-3, signal_per_conc=5.0, baseline=0.05, noise=0.001, seed=12)
    bare = RateResult(v0=np.ones(3))
    assert (mark_decay(t, p.signal, bare, s0=s0, signal_per_conc=5.0, modelled=False).flags == 0).all()
    monkeypatch.setattr(checks, "_falling", lambda t, y, *a: np.ones(y.shape[0], dtype=bool))
    fit_alone = mark_decay(t, p.signal, bare, s0=s0, signal_per_conc=5.0, modelled=False)
    assert ((np.asarray(fit_alone.flags) & Flag.DECAY) != 0).all()


def test_model_free_gap_allows_for_the_quadratics_own_bias() -> None:
    # (|v0 - v_q| - b |v_q|) / SE_d (module text of checks.model_free_gap), composed by hand from the parts
    # checked above (the early quadratic against numpy.polyfit, its bias bound, the difference SE) on a
    # strongly curving Michaelis-Menten well (S0 = 0.2 Km, scipy solve_ivp) where b is not negligible
    t = np.arange(120) * 5.0
    s0 = np.array([0.1, 0.1])
    p = simulate_plate(t, s0, 0.5, 4e-4, signal_per_conc=5.0, baseline=0.05, noise=0.0005, seed=4)
    v = np.array([1.5, 0.7]) * p.v0_true
    se = np.array([2e-5, 1e-5])
    gap = checks.model_free_gap(t, p.signal, v, se, s0=s0, signal_per_conc=5.0)
    y = trim_censored(p.signal.copy(), 1)
    sc = screen(y, min_points=8, time=t)
    q = early_quadratic(t, y, conversion_scale(s0, 5.0, 2), frac=0.2, min_points=8, sigma=sc.sigma)
    _, b = quadratic_bias(q, np.abs(sc.change), s0, 5.0)
    assert (b * np.abs(q.v0) > 0.05 * difference_se(q.se, se)).all()  # the allowance is visible
    want = (np.abs(v - q.v0) - b * np.abs(q.v0)) / difference_se(q.se, se)
    np.testing.assert_allclose(gap, want, rtol=1e-9)


def test_shared_checks_read_eight_reads_by_default() -> None:
    # the window method calls the shared checks without min_points: eight reads are then enough to judge a
    # rate three times the true one (DISAGREES); with nine required the well is not judged
    t = np.arange(8) * 20.0
    s0 = np.array([0.5])
    p = simulate_plate(t, s0, 0.5, 4e-4, signal_per_conc=5.0, baseline=0.05, noise=0.0005, seed=6)
    res = RateResult(v0=3.0 * p.v0_true, stderr=np.full(1, 1e-6), window_start_s=np.zeros(1),
                     window_end_s=np.full(1, 140.0), goodness=np.ones(1), flags=np.zeros(1, np.int64),
                     n_points=np.full(1, 8), lag_s=np.zeros(1))
    kw = {"s0": s0, "signal_per_conc": 5.0, "finds_lags": True, "models_decay": True}
    assert shared_checks(t, p.signal, res, **kw).flags[0] & Flag.DISAGREES
    assert not shared_checks(t, p.signal, res, min_points=9, **kw).flags[0] & Flag.DISAGREES


def test_the_decay_prescreen_margin_keeps_every_well_the_fit_would_flag(monkeypatch: pytest.MonkeyPatch) -> None:
    # a dense range of inactivation constants at low read noise (scipy solve_ivp), so that some wells' last
    # block rate lies within the pre-screen's 10 % margin of the depletion bound: the flags are the same with
    # the pre-screen (margin 1.1) and without it, and a pre-screen without the margin would lose some
    t = np.arange(120) * 5.0
    k = np.geomspace(1e-4, 3e-3, 40)
    s0 = np.full(40, 1.0)
    p = simulate_plate(t, s0, 0.5, 4e-4, k_inact=k, signal_per_conc=5.0, baseline=0.05, noise=2e-4, seed=21)
    bare = RateResult(v0=np.ones(40))
    kw = {"s0": s0, "signal_per_conc": 5.0, "modelled": False}
    with_screen = mark_decay(t, p.signal, bare, **kw).flags
    monkeypatch.setattr(checks, "PRESCREEN_MARGIN", 1.0 / 1.1)
    tight = mark_decay(t, p.signal, bare, **kw).flags
    monkeypatch.setattr(checks, "_falling", lambda t, y, *a: np.ones(y.shape[0], dtype=bool))
    without = mark_decay(t, p.signal, bare, **kw).flags
    np.testing.assert_array_equal(with_screen, without)
    assert (np.asarray(without) != 0).sum() >= 5
    assert (np.asarray(tight) != np.asarray(without)).any()


@pytest.mark.parametrize(("n_t", "screened"), [(11, False), (12, True), (15, True), (16, True)])
def test_decay_prescreen_needs_three_blocks_of_reads(n_t: int, screened: bool) -> None:
    # module text of checks._falling: blocks of max(4, n_t // 8) reads; with fewer than three blocks' worth
    # of reads every well goes to the decay fit, from three blocks on the pre-screen judges. Two wells whose
    # signal approaches 25 as 25 (1 - exp(-t/20)): at S0 = 5 uM (5 signal/uM, full conversion 25) depletion
    # explains the fall and the bound first*(1 - x_end)^3 is within noise, so a screened plate spares it
    # the fit; at S0 = 100 uM (conversion under 25 %) the fall is not depletion, and it goes to the fit
    t = np.arange(n_t) * 5.0
    y = 25.0 * (1.0 - np.exp(-t / 20.0)) + np.tile([1e-3, -1e-3], n_t)[:n_t]
    out = checks._falling(t, np.vstack([y, y]), np.array([5.0, 100.0]), 5.0, 3.0, 8)
    assert out.tolist() == ([False, True] if screened else [True, True])


def test_decay_after_lag_of_no_wells_is_an_empty_mask() -> None:
    out = lagfit.decay_after_lag(np.arange(20) * 5.0, np.zeros((0, 20)), np.zeros(0), 5.0)
    assert out.shape == (0,) and out.dtype == bool


@pytest.mark.parametrize(("z", "kept"), [(2.9, False), (3.1, True)])
def test_plate_decay_counts_from_three_standard_errors(z: float, kept: bool) -> None:
    # module text of lagfit.plate_decay: 0 where the pooled value is less than K_PLATE_Z (3) standard errors
    # above zero; one well pools to its own value and SE
    k, se = lagfit.plate_decay(np.array([z * 1e-3]), np.array([1e-3]))
    assert lagfit.K_PLATE_Z == 3.0
    assert se == pytest.approx(1e-3) and k == (pytest.approx(z * 1e-3) if kept else 0.0)



def test_model_free_allows_no_bias_where_the_substrate_is_unknown() -> None:
    # checks.model_free: the bias share is predicted from S0; a well without S0 gets no allowance (0, not
    # NaN and not a share of its own), so the gap there is the plain difference in standard errors
    t = np.arange(60) * 10.0
    p = simulate_plate(t, np.array([0.5, 0.5]), 0.5, 4e-4, signal_per_conc=2.5, noise=0.0005, seed=3)
    ref = checks.model_free(t, p.signal, s0=np.array([0.5, np.nan]), signal_per_conc=2.5)
    assert ref.bias[1] == 0.0 and 0.0 < ref.bias[0] < 0.01 and ref.usable.all()
