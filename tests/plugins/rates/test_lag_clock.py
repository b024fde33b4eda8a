"""The active-time clock of the lag model: a hysteretic lag followed by irreversible first-order loss of the
active enzyme, against scipy's stiff ODE solver (an independent integration of the same scheme)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.rates.lagfit import active_time

T = np.linspace(0.0, 900.0, 91)


def _by_solve_ivp(tau: float, k: float) -> np.ndarray:
    """theta(t) = ∫a dt with dp/dt = -p/tau, da/dt = p/tau - k a (p(0) = 1, a(0) = 0 with a lag; a(0) = 1
    without), integrated by scipy's Radau at rtol 1e-11."""
    rate = 1.0 / tau if tau > 0 else 0.0

    def rhs(_t: float, z: np.ndarray) -> list[float]:
        p, a, _theta = z
        return [-p * rate, p * rate - k * a, a]

    z0 = [1.0, 0.0, 0.0] if tau > 0 else [0.0, 1.0, 0.0]
    sol = solve_ivp(rhs, (0.0, float(T[-1])), z0, method="Radau", t_eval=T, rtol=1e-11, atol=1e-13)
    return sol.y[2]


@pytest.mark.parametrize(("tau", "k"), [(60.0, 8e-4), (60.0, 0.0), (0.0, 8e-4), (0.0, 0.0), (30.0, 0.01),
                                        (60.0, 1.0 / 60.0), (60.0, 1.0 / 60.0 * (1 + 1e-9)), (240.0, 2e-3)])
def test_active_time_matches_the_integrated_scheme(tau: float, k: float):
    ref = _by_solve_ivp(tau, k)
    assert np.max(np.abs(active_time(T, tau, k) - ref)) <= 1e-8 * ref[-1]


def test_only_the_active_form_is_lost():
    """With a lag and inactivation the active time falls short of the lag-only clock by more than the
    reversible scheme's plateau would explain: half the active enzyme is gone by the end of a 900-s run at
    k = 8e-4 /s (exp(-0.72) = 0.49), so the last rate is about half the lag-only one."""
    with_decay = np.gradient(active_time(T, 60.0, 8e-4), T)
    lag_only = np.gradient(active_time(T, 60.0, 0.0), T)
    assert with_decay[-1] / lag_only[-1] == pytest.approx(np.exp(-8e-4 * 900) / (1 - 8e-4 * 60), rel=1e-2)


# --- the joint fit of lag time and decay constant, the plate's decay constant and its lag carried to wells
# where the detector sees none. Invented plates: Michaelis–Menten (Km 0.5 mM, Vmax 6e-4 mM/s) with a
# hysteretic lag and irreversible first-order loss of the active enzyme, integrated by scipy's Radau solver
# (independent of the closed form the fit uses), 90 reads at 10 s, 3.4 AU/mM, read noise 0.002 AU.

READS = np.arange(90) * 10.0
SPC = 3.4
KM, VMAX = 0.5, 6e-4
LEVELS = np.array([0.05, 0.1, 0.2, 0.35, 0.5, 0.75, 1.0, 2.0, 3.0, 5.0])


def _curves(s0: np.ndarray, tau: np.ndarray | float, k: float, noise: float,
            seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Reads [wells, 90] and the true v0 (AU/s, fully active enzyme at t = 0) from solve_ivp (Radau, rtol 1e-10)
    of dS/dt = -a Vmax S/(Km + S), dp/dt = -p/tau, da/dt = p/tau - k a (per-well tau; 0: no lag)."""
    n = s0.size
    tau = np.broadcast_to(np.asarray(tau, float), (n,))
    rate = np.where(tau > 0, 1.0 / np.where(tau > 0, tau, 1.0), 0.0)

    def rhs(_t: float, z: np.ndarray) -> np.ndarray:
        s, p, a = z[:n], z[n:2 * n], z[2 * n:]
        return np.concatenate([-a * VMAX * s / (KM + s), -p * rate, p * rate - k * a])

    z0 = np.concatenate([s0, (tau > 0).astype(float), (tau <= 0).astype(float)])
    sol = solve_ivp(rhs, (0.0, READS[-1]), z0, method="Radau", t_eval=READS, rtol=1e-10, atol=1e-14)
    rng = np.random.default_rng(seed)
    y = 0.05 + SPC * (s0[:, None] - sol.y[:n]) + noise * rng.standard_normal((n, READS.size))
    return y, SPC * VMAX * s0 / (KM + s0)


def _theta_dop853(tau: float, k: float) -> np.ndarray:
    """theta(t) of the scheme by scipy's DOP853 (explicit, rtol 1e-13): any sign of k."""
    rate = 1.0 / tau if tau > 0 else 0.0
    z0 = [1.0, 0.0, 0.0] if tau > 0 else [0.0, 1.0, 0.0]
    sol = solve_ivp(lambda _t, z: [-z[0] * rate, z[0] * rate - k * z[1], z[1]], (0.0, READS[-1]), z0,
                    method="DOP853", t_eval=READS, rtol=1e-13, atol=1e-15)
    return sol.y[2]


@pytest.mark.parametrize(("tau", "k"), [(60.0, 8e-4), (60.0, -4e-4), (0.0, 8e-4), (60.0, 1.0 / 60.0 * (1 + 2e-4)),
                                        (30.0, 0.01)])
def test_clock_and_its_derivatives_match_the_integrated_scheme(tau: float, k: float):
    from vzero.plugins.rates.lagfit import clock

    def theta(a: float, b: float) -> np.ndarray:
        return clock(READS[None, :], np.array([[a]]), np.array([[b]]))[0][0]

    value, d_tau, d_k = (x[0] for x in clock(READS[None, :], np.array([[tau]]), np.array([[k]])))
    ref = _theta_dop853(tau, k)  # scipy's integrator, independent of the closed form
    assert np.max(np.abs(value - ref)) <= 2e-6 * ref[-1]
    # the derivatives against central differences of the integrated scheme (at tau = 0, the lower bound, a
    # forward difference of the clock itself: a lag of 1 ms is too stiff for the explicit integrator)
    h_tau, h_k = 1e-3, 1e-7
    fd_tau = ((_theta_dop853(tau + h_tau, k) - _theta_dop853(tau - h_tau, k)) / (2 * h_tau) if tau > 0
              else (theta(h_tau, k) - value) / h_tau)
    fd_k = (_theta_dop853(tau, k + h_k) - _theta_dop853(tau, k - h_k)) / (2 * h_k)
    assert np.max(np.abs(d_tau - fd_tau)) <= 1e-3 * np.max(np.abs(fd_tau)), (tau, k)
    assert np.max(np.abs(d_k - fd_k)) <= 1e-3 * np.max(np.abs(fd_k)), (tau, k)


def test_joint_fit_recovers_v0_lag_and_decay():
    from vzero.plugins.rates.lagfit import lag_clock_fit

    y, v0 = _curves(LEVELS, 60.0, 8e-4, 0.002, seed=3)
    fit = lag_clock_fit(READS, y, LEVELS, SPC)
    high = LEVELS >= 0.35
    # within noise of the truth where the signal is large (SE of v0 below 1.5 % there); the fit with the lag
    # time taken from a fit without decay was 9-12 % low on these wells
    np.testing.assert_allclose(fit["v0"][high], v0[high], rtol=0.03)
    np.testing.assert_allclose(fit["tau"][high], 60.0, rtol=0.10)
    assert float(fit["k_plate"]) == pytest.approx(8e-4, rel=0.15)
    assert not fit["own_k"].any()  # one enzyme: every well uses the plate's constant
    # the low wells, where one well alone cannot tell decay from depletion, are within their wider noise
    np.testing.assert_allclose(fit["v0"][~high], v0[~high], rtol=0.10)
    z = (fit["v0"] - v0) / fit["stderr"]
    assert np.all(np.abs(z) < 4.0)


def test_a_plate_without_decay_keeps_k_zero():
    from vzero.plugins.rates.lagfit import lag_clock_fit

    y, v0 = _curves(LEVELS, 60.0, 0.0, 0.002, seed=5)
    fit = lag_clock_fit(READS, y, LEVELS, SPC)
    assert float(fit["k_plate"]) == 0.0 and np.all(fit["k"] == 0.0)
    np.testing.assert_allclose(fit["v0"][LEVELS >= 0.35], v0[LEVELS >= 0.35], rtol=0.03)


def test_plate_decay_is_the_inverse_variance_mean_and_zero_when_not_significant():
    from vzero.plugins.rates.lagfit import K_PLATE_Z, plate_decay

    k, se = np.array([8e-4, 9e-4, 5e-4, np.nan]), np.array([1e-4, 2e-4, 4e-4, 1e-4])
    mean, err = plate_decay(k, se)
    w = 1.0 / se[:3] ** 2
    assert mean == pytest.approx(np.average(k[:3], weights=w)) and err == pytest.approx(w.sum() ** -0.5)
    small, _ = plate_decay(np.array([1e-4, 2e-4]), np.array([1e-4, 1e-4]))  # z = 2.1 < K_PLATE_Z
    assert K_PLATE_Z > 2.2 and small == 0.0


def test_model_choice_carries_the_plate_lag_to_wells_whose_lag_it_cannot_see():
    from vzero.plugins.rates.choice import model_choice
    from vzero.plugins.rates.lagdecay import detect_lag
    from vzero.plugins.rates.noise import screen

    y, v0 = _curves(LEVELS, 60.0, 8e-4, 0.002, seed=7)
    seen = detect_lag(READS, y, screen(y, min_points=8, time=READS))[2]
    assert not seen.all() and seen.sum() >= 3  # the detector misses the low wells
    r = model_choice(READS, y, s0=LEVELS, signal_per_conc=SPC)
    assert np.all(r.extra["model"] == 3) and np.all(r.flags & Flag.LAG) and np.all(r.flags & Flag.DECAY)
    np.testing.assert_allclose(r.v0[~seen], v0[~seen], rtol=0.08)  # the curve without lag was 10-45 % low
    high = LEVELS >= 0.35  # where the SE of v0 is below 1.5 %
    np.testing.assert_allclose(r.v0[high], v0[high], rtol=0.03)
    np.testing.assert_allclose(r.v0, v0, rtol=0.08)


def test_the_plate_lag_is_not_carried_from_one_well():
    from vzero.plugins.rates.choice import model_choice

    s0 = np.tile([0.2, 0.5, 1.0, 2.0, 5.0], 2)
    tau = np.zeros(s0.size)
    tau[4] = 120.0  # one well of ten with a lag: a property of that well, not of the plate
    y, v0 = _curves(s0, tau, 0.0, 0.002, seed=9)
    r = model_choice(READS, y, s0=s0, signal_per_conc=SPC)
    assert r.extra["model"][4] == 3 and r.lag_s[4] > 0
    others = np.arange(s0.size) != 4
    assert np.all(r.lag_s[others] == 0) and not np.any(r.extra["model"][others] == 3)
    np.testing.assert_allclose(r.v0[others], v0[others], rtol=0.03)


def test_the_shared_decay_check_sees_decay_after_a_lag():
    # DECAY after a lag, checked on the lag clock: flagged (with UNMODELLED) for a method that models neither;
    # the same plate without decay gets no DECAY
    from vzero.plugins.kinetics.rate_result import RateResult
    from vzero.plugins.rates.checks import shared_checks

    s0 = LEVELS[LEVELS >= 0.5]
    for k, expect in ((8e-4, True), (0.0, False)):
        y, _ = _curves(s0, 60.0, k, 0.002, seed=13)
        r = shared_checks(READS, y, RateResult(v0=np.ones(s0.size)), s0=s0, signal_per_conc=SPC, finds_lags=False,
                          models_decay=False)
        flags = np.asarray(r.flags)
        assert np.all(flags & Flag.LAG)
        assert np.all((flags & Flag.DECAY) != 0) == expect and np.any((flags & Flag.DECAY) != 0) == expect
        assert np.all(flags & Flag.UNMODELLED)  # the lag alone is unmodelled here


def test_peak_activity_matches_the_sequential_scheme_and_guards_extrapolation() -> None:
    # active fraction of the sequential scheme (precursor -> active, lag tau; active lost at rate k):
    # a(t) = (exp(-k t) - exp(-t/tau)) / (1 - k tau), the textbook consecutive first-order reactions
    # (closed form written out here, independent of the module's clock)
    from vzero.plugins.rates.lagfit import MIN_PEAK_ACTIVITY, peak_activity

    t = np.arange(0.0, 901.0, 10.0)
    for tau, k in ((60.0, 8e-4), (120.0, 2e-3), (400.0, 5e-3)):
        fine = np.linspace(0.0, 900.0, 90001)
        a = (np.exp(-k * fine) - np.exp(-fine / tau)) / (1.0 - k * tau)
        got = peak_activity(t, np.array([tau]), np.array([k]))[0]
        assert got == pytest.approx(a.max(), rel=2e-3)
    # the benchmark's lag plate (60 s, 8e-4 /s) peaks near 0.86: far above the bound; a long lag with fast
    # loss (400 s, 5e-3 /s) never shows half the enzyme active: its v0 would be an extrapolation
    assert peak_activity(t, np.array([60.0]), np.array([8e-4]))[0] > 0.8 > MIN_PEAK_ACTIVITY
    assert peak_activity(t, np.array([400.0]), np.array([5e-3]))[0] < MIN_PEAK_ACTIVITY
    assert np.isnan(peak_activity(t, np.array([np.nan]), np.array([0.0]))[0])


@pytest.mark.parametrize(("k0", "se0"), [(np.nan, 1e-4), (1e-3, np.nan), (1e-3, 0.0), (np.inf, 1e-4)])
def test_the_decay_profile_is_refused_without_a_usable_start(k0: float, se0: float):
    # the profile searches k0 ± 4 se0 (lagfit._profile_decay): without a finite start and a positive finite
    # spread there is no interval to search, and the plate gets no decay constant (NaN, NaN), whatever the reads
    from vzero.plugins.rates.lagfit import _profile_decay

    t = np.arange(10) * 10.0
    y = np.tile(0.01 * t, (2, 1))
    k, se = _profile_decay(t, y, np.ones(2), 1.0, np.zeros((2, 3)), np.full(2, 1e-3), 10.0, 90.0, k0, se0)
    assert np.isnan(k) and np.isnan(se)
