"""The lag clock's plate-level rules, each from both sides, with the numbers the module text states.

:func:`vzero.plugins.rates.lagfit.plate_clock` carries a plate's lag and decay to its wells where the detector
saw no lag: only from at least 3 lag wells and a third of the usable ones, only where the plate's clock keeps
the enzyme at least half active at some read, and a well keeps it unless the curve without lag fits better
by more than 9 read variances. :func:`vzero.plugins.rates.lagfit.decay_after_lag` calls a decay where the
decay constant less 3 standard errors is above zero and leaves less activity at the last read than
``(1 - x)``. The lag fit itself is replaced here by designed figures where a rule, not the fit, is tested.

Outside references: the active-time clock written out by hand below from its scheme (checked against scipy's
Radau integration in test_lag_clock.py); reads integrated by scipy's solve_ivp (Radau) from the scheme
``dS/dt = -a Vmax S/(Km + S)``, ``dp/dt = -p/tau``, ``da/dt = p/tau - k a``; the inverse-variance mean by hand.
Invented plates (Km 0.5 mM, Vmax 6e-4 mM/s, 3.4 AU/mM).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import brentq
from vzero.plugins.rates import lagfit
from vzero.plugins.rates.progress import progress_curve

READS = np.arange(90) * 10.0  # s
SPC, KM, VMAX = 3.4, 0.5, 6e-4
S0 = np.array([0.5, 1.0, 2.0])
NOISE = 0.002


def _reads(tau: float, k: float, seed: int, s0: np.ndarray = S0) -> np.ndarray:
    """Reads [wells, 90] by scipy's Radau (rtol 1e-10) of the lag-and-inactivation scheme; invented noise."""
    n = s0.size
    rate = 1.0 / tau if tau > 0 else 0.0

    def rhs(_t: float, z: np.ndarray) -> np.ndarray:
        s, p, a = z[:n], z[n:2 * n], z[2 * n:]
        return np.concatenate([-a * VMAX * s / (KM + s), -p * rate, p * rate - k * a])

    z0 = np.concatenate([s0, np.full(n, 1.0 if tau > 0 else 0.0), np.full(n, 0.0 if tau > 0 else 1.0)])
    sol = solve_ivp(rhs, (0.0, READS[-1]), z0, method="Radau", t_eval=READS, rtol=1e-10, atol=1e-14)
    rng = np.random.default_rng(seed)
    return 0.05 + SPC * (s0[:, None] - sol.y[:n]) + NOISE * rng.standard_normal((n, READS.size))


def _fitted(n_lag: int, tau: np.ndarray | float = 60.0, tau_se: np.ndarray | float = 5.0,
            k_plate: float = 0.0) -> dict[str, np.ndarray]:
    """What :func:`lag_clock_fit` returns for the plate's lag wells, as far as the rule reads it."""
    return {"v0": np.ones(n_lag), "tau": np.broadcast_to(tau, (n_lag,)).astype(float),
            "tau_se": np.broadcast_to(tau_se, (n_lag,)).astype(float), "k_plate": np.array(k_plate)}


@pytest.fixture(scope="module")
def lagged() -> np.ndarray:
    return _reads(60.0, 0.0, seed=41)


def _carried(y: np.ndarray, fitted: dict[str, np.ndarray], n_usable: int, **kw: object) -> dict[str, np.ndarray]:
    return lagfit.plate_clock(READS, y, S0[: y.shape[0]], SPC, fitted, n_usable, sigma=np.full(y.shape[0], NOISE),
                              **kw)


@pytest.mark.parametrize(("n_lag", "n_usable", "carried"), [(2, 3, False), (3, 9, True), (3, 10, False),
                                                            (4, 12, True), (4, 13, False)])
def test_the_plate_clock_needs_three_lag_wells_and_a_third_of_the_usable(lagged, n_lag: int, n_usable: int,
                                                                         carried: bool) -> None:
    out = _carried(lagged, _fitted(n_lag), n_usable)
    assert bool(out["take"].any()) == carried
    assert np.isfinite(out["v0"]).all() == carried


def test_no_plate_decay_or_no_lag_time_carries_nothing(lagged) -> None:
    assert not _carried(lagged, _fitted(5, k_plate=np.nan), 5)["take"].any()
    assert not _carried(lagged, _fitted(5, tau=np.nan), 5)["take"].any()
    assert not lagfit.plate_clock(READS, lagged[:0], S0[:0], SPC, _fitted(5), 5, sigma=np.zeros(0))["take"].size


def test_the_carried_figures_are_the_pooled_lag_and_the_curve_on_its_clock(lagged) -> None:
    # lag times 50 s (SE 5) and 70 s (SE 10), three wells: inverse-variance mean by hand
    tau = np.array([50.0, 70.0, 70.0])
    se = np.array([5.0, 10.0, 10.0])
    want_tau = float(np.sum(tau / se**2) / np.sum(1.0 / se**2))
    out = _carried(lagged, _fitted(3, tau=tau, tau_se=se, k_plate=8e-4), 3)
    np.testing.assert_allclose(out["tau"], want_tau, rtol=1e-12)
    np.testing.assert_allclose(out["k"], 8e-4)
    # the Michaelis–Menten curve fitted on that active time (the clock of the module text, by hand)
    theta = _theta(READS, want_tau, 8e-4)
    ref = progress_curve(theta, lagged, s0=S0, signal_per_conc=SPC, fail_ratio=np.inf)
    np.testing.assert_allclose(out["v0"], ref.v0, rtol=1e-9)
    np.testing.assert_allclose(out["stderr"], ref.stderr, rtol=1e-9)
    np.testing.assert_allclose(out["ratio"], ref.extra["rmse_over_noise"], rtol=1e-9)
    # with the true clock (60-s lag, no decay, as the reads were made) the wells' true v0 (fully active enzyme
    # at t = 0, Vmax S0/(Km + S0) in signal/s) comes back within 3 %
    true = _carried(lagged, _fitted(3, tau=60.0, k_plate=0.0), 3)
    np.testing.assert_allclose(true["v0"], SPC * VMAX * S0 / (KM + S0), rtol=0.03)


def _theta(t: np.ndarray, tau: float, k: float) -> np.ndarray:
    """Active time of the scheme (module text of lagfit), written out here:
    ((1 - exp(-k t))/k - tau (1 - exp(-t/tau))) / (1 - k tau), and t - tau (1 - exp(-t/tau)) at k = 0."""
    lag = tau * (1.0 - np.exp(-t / tau))
    if k == 0.0:
        return t - lag
    return ((1.0 - np.exp(-k * t)) / k - lag) / (1.0 - k * tau)


def _peak(tau: float, k: float) -> float:
    """Largest mean active fraction between reads, from the hand-written clock."""
    return float(np.max(np.diff(_theta(READS, tau, k)) / np.diff(READS)))


def test_the_peak_activity_is_the_largest_mean_active_fraction_between_reads() -> None:
    for tau, k in ((60.0, 8e-4), (300.0, 2e-3), (30.0, 0.0)):
        got = lagfit.peak_activity(READS, np.array([tau]), np.array([k]))[0]
        assert got == pytest.approx(_peak(tau, k), rel=1e-9)


@pytest.mark.parametrize(("peak", "carried"), [(0.51, True), (0.49, False)])
def test_the_plate_clock_needs_the_enzyme_half_active_at_some_read(lagged, peak: float, carried: bool) -> None:
    # a 300-s lag: the decay constant that puts the enzyme's peak activity at 0.51 / 0.49 of full (brentq on
    # the hand-written clock); the module text's bound is one half
    tau = 300.0
    k = brentq(lambda kk: _peak(tau, kk) - peak, 1e-5, 5e-2, xtol=1e-12)
    out = _carried(lagged, _fitted(3, tau=tau, k_plate=k), 3)
    assert bool(np.isfinite(out["v0"]).any()) == carried


def test_a_well_keeps_the_plate_clock_unless_the_plain_curve_fits_it_better_by_nine_read_variances() -> None:
    # wells without any lag, given a plate lag of 60 s: the clock fits them worse than the plain curve;
    # sigma is set so that the residual sums differ by 8.9 and 9.1 read variances
    y = _reads(0.0, 0.0, seed=43)
    fits = [progress_curve(axis, y, s0=S0, signal_per_conc=SPC, fail_ratio=np.inf)
            for axis in (_theta(READS, 60.0, 0.0), READS)]
    yc = y - y.mean(axis=1, keepdims=True)
    rss_clock, rss_plain = ((1.0 - f.goodness) * np.sum(yc * yc, axis=1) for f in fits)
    worse = rss_clock - rss_plain
    assert (worse > 0).all()
    for ratio, kept in ((8.9, True), (9.1, False)):
        sigma = np.sqrt(worse / ratio)
        out = lagfit.plate_clock(READS, y, S0, SPC, _fitted(3), 3, sigma=sigma)
        assert out["take"].tolist() == [kept] * 3


def test_the_plate_clock_reads_eight_reads_by_default(lagged) -> None:
    t = READS[:8] * 6.0
    y = lagged[:, ::6][:, :8]
    out = lagfit.plate_clock(t, y, S0, SPC, _fitted(3), 3, sigma=np.full(3, NOISE))
    assert np.isfinite(out["v0"]).all()
    assert not np.isfinite(lagfit.plate_clock(t, y, S0, SPC, _fitted(3), 3, sigma=np.full(3, NOISE),
                                              min_points=9)["v0"]).any()


# ------------------------------------------------------------------------------------ decay after a lag


def _decay_after_lag(monkeypatch: pytest.MonkeyPatch, k: float, k_se: float, tau: float, y: np.ndarray,
                     **kw: object) -> bool:
    """The rule of decay_after_lag on a designed lag fit (one well)."""
    monkeypatch.setattr(lagfit, "lag_clock_fit", lambda *a, **k_: {"k": np.array([k]), "k_se": np.array([k_se]),
                                                                   "tau": np.array([tau])})
    return bool(lagfit.decay_after_lag(READS, y[None, :], np.array([1.0]), SPC, **kw)[0])


def test_decay_after_lag_needs_the_decay_three_standard_errors_above_zero(monkeypatch: pytest.MonkeyPatch) -> None:
    # a well that converts nothing (x = 0, so 1 - x = 1): any k_low = k - 3 SE above zero leaves less
    # activity at the last read, exp(-k_low (890 - 60)) < 1, and none at or below zero does
    y = np.full(READS.size, 0.05)
    assert _decay_after_lag(monkeypatch, 1e-3, 1e-3 / 3.03, 60.0, y)
    assert not _decay_after_lag(monkeypatch, 1e-3, 1e-3 / 2.97, 60.0, y)
    assert not _decay_after_lag(monkeypatch, -1e-3, 1e-6, 60.0, y)


def test_decay_after_lag_compares_the_activity_left_with_the_substrate_left(monkeypatch: pytest.MonkeyPatch) -> None:
    # x from the means of the first and last three reads: 0.05 and 0.05 + 0.34 * 4 = 1.41 AU, x = 0.4 of
    # 1 mM at 3.4 AU/mM; left = exp(-k_low (t_end - tau)) against (1 - x)^1 = 0.6, with k_low = k (SE tiny)
    y = np.full(READS.size, 0.05)
    y[-3:] = 0.05 + 0.4 * SPC
    t_run = READS[-1] - 60.0
    for factor, want in ((1.01, True), (0.99, False)):
        k = -math.log(0.6) / t_run * factor
        assert _decay_after_lag(monkeypatch, k, 1e-12, 60.0, y) == want
    # a negative lag time counts from zero: exp(-k t_end)
    k = -math.log(0.6) / READS[-1]
    assert _decay_after_lag(monkeypatch, k * 1.01, 1e-12, -30.0, y)
    assert not _decay_after_lag(monkeypatch, k * 0.99, 1e-12, -30.0, y)
    # a higher order lets depletion explain more: (1 - x)^2 = 0.36
    k = -math.log(0.6) / t_run * 1.01
    assert not _decay_after_lag(monkeypatch, k, 1e-12, 60.0, y, order=2.0)


def test_peak_activity_from_two_reads_and_none_from_one() -> None:
    # two reads: the mean active fraction between them, theta(t1) - theta(t0) over t1 - t0 (clock by hand);
    # a single read has no interval: NaN
    t = np.array([0.0, 120.0])
    got = lagfit.peak_activity(t, np.array([60.0, 0.0]), np.array([8e-4, 0.0]))
    want = (_theta(t, 60.0, 8e-4)[1] - _theta(t, 60.0, 8e-4)[0]) / 120.0
    assert got[0] == pytest.approx(want, rel=1e-9)
    assert got[1] == pytest.approx(1.0)  # no lag, no decay: always fully active
    assert np.isnan(lagfit.peak_activity(t[:1], np.array([60.0]), np.array([8e-4]))).all()
    assert np.isnan(lagfit.peak_activity(t, np.array([np.nan]), np.array([8e-4]))).all()


def test_decay_after_lag_takes_the_first_and_last_three_finite_reads(monkeypatch: pytest.MonkeyPatch) -> None:
    # missing reads at both ends: the conversion is measured between the means of the first three finite reads
    # (-0.3, 0.15, 0.15 of 1 mM at 3.4 AU/mM about 0.05 AU: mean 0.05 AU) and of the last three finite reads
    # (0.5, 0.5, 0.2: mean 0.4 above it), x = 0.4; the last finite read alone would give 0.2 and the last
    # three positions (two of them missing) the same
    y = np.full(READS.size, 0.05)
    y[:1] = np.nan  # one missing at the start, two at the end: the positions do not mirror each other
    y[1] = 0.05 - 0.3 * SPC
    y[2:4] = 0.05 + 0.15 * SPC
    y[-5:-2] = 0.05 + SPC * np.array([0.5, 0.5, 0.2])
    y[-2:] = np.nan
    first = np.mean(y[1:4])
    last = np.mean(y[-5:-2])
    x = abs(last - first) / SPC
    assert x == pytest.approx(0.4)
    t_run = READS[-1] - 60.0
    for factor, want in ((1.01, True), (0.99, False)):
        k = -math.log(1.0 - x) / t_run * factor
        assert _decay_after_lag(monkeypatch, k, 1e-12, 60.0, y) == want
