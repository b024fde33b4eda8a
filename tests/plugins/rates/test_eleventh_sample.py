"""Rate kernels at the edges an eleventh mutation sample found untested: a spike two reads from the start of
a well with a missing read, the small-argument branch of the Hill progress curve's integral, model-choice's
misfit statistic on nearly singular normal equations, a negatively cooperative Hill well, the lag clock on a
curve without lag, and the shape profile of a well shorter than its block count. Each against an independent
calculation named beside it (scipy, 50-digit decimal arithmetic, closed forms, hand calculation); invented
data."""

from __future__ import annotations

from decimal import Decimal, getcontext

import numpy as np
import pytest
from numpy.testing import assert_array_equal
from scipy.integrate import solve_ivp
from scipy.optimize import least_squares
from scipy.special import lambertw
from vzero.plugins.rates import hillcurve
from vzero.plugins.rates.choice import smooth_misfit
from vzero.plugins.rates.hillcurve import fit_hill_curve
from vzero.plugins.rates.lagfit import lag_clock_fit
from vzero.plugins.rates.progress import shape_profile
from vzero.plugins.rates.shapegrid import fixed_shape_model
from vzero.plugins.rates.spikes import find_spikes


def test_a_spike_at_the_third_read_is_found_when_a_later_read_is_missing() -> None:
    # invented well: a straight line (0.1 AU + 0.002 AU per read) with a 0.2 AU bubble at read 2; sigma
    # 0.005 AU. By the module text's statistic, r = 0.2/sqrt(1.5) at read 2 (40 sigma) and -0.1/sqrt(1.5)
    # at reads 1 and 3 (opposite sign, half its size): a spike. Read 1's own neighbours are reads 0 and 2.
    t = np.arange(10) * 20.0
    y = 0.1 + 0.002 * np.arange(10)
    y[2] += 0.2
    expected = np.zeros((1, 10), bool)
    expected[0, 2] = True
    sigma = np.array([0.005])
    assert_array_equal(find_spikes(t, y[None], sigma), expected)  # every read finite
    gap = y.copy()
    gap[8] = np.nan  # a missing read far from the spike: its neighbours are unchanged
    assert_array_equal(find_spikes(t, gap[None], sigma), expected)


def _f_reference(w: float, h: float) -> float:
    """``(z^(1 - h) - 1)/(h - 1)`` at ``ln z = w`` in 50-digit decimal arithmetic (the closed form of the
    Hill curve's integral; at h = 1 its limit -ln z)."""
    getcontext().prec = 50
    dh = Decimal(h) - 1
    return float(-w) if dh == 0 else float((((1 - Decimal(h)) * Decimal(w)).exp() - 1) / dh)


def test_the_hill_integral_is_exact_next_to_h_equal_one() -> None:
    # h within 1e-8 of 1 takes the module's series branch (|(1 - h) ln z| < 1e-8), the rest expm1: both
    # must match the closed form to rounding (relative 1e-14); the series' first-order term is 1e-9 here
    for w in (-2.0, -0.7, -9.0):
        for h in (1.0, 1.0 + 3e-9, 1.0 - 4e-9, 1.0 + 2e-10, 1.0 + 1e-6, 0.5, 2.5):
            got = float(hillcurve._f(np.array([w]), np.array([h]))[0])
            want = _f_reference(w, h)
            assert abs(got - want) <= 1e-14 * abs(want), (w, h, got, want)


def _misfit_of_four_reads(step_s: float) -> tuple[float, float]:
    """Model-choice's misfit statistic of a well whose only usable reads are its first four (``step_s``
    apart; the 16 later reads, 1200-2500 s, saturated), residuals 0.01 AU x (1, -3, 3, -1) about a zero curve,
    read noise 0.01 AU; and its closed-form value: four blocks are fitted exactly by a cubic, so the part a
    cubic explains beyond a constant is the sum of squares about the mean, (1 + 9 + 9 + 1) = 20 read
    variances."""
    t = np.concatenate([np.arange(4) * step_s, np.linspace(1200.0, 2500.0, 16)])
    y = np.full((1, 20), np.nan)
    y[0, :4] = np.array([1.0, -3.0, 3.0, -1.0]) * 0.01
    got = smooth_misfit(t, y, np.isfinite(y), lambda tb: np.zeros_like(tb), np.array([0.01]))
    return float(got[0]), 20.0


def test_the_misfit_is_a_projection_even_when_the_reads_crowd_together() -> None:
    # a projection's squared norm lies between 0 and the squared norm of what it projects (Bessel's
    # inequality): that holds whatever the read times, also when four reads a few seconds apart make the
    # cubic's normal equations nearly singular (smallest eigenvalue 1e-14 - 1e-9 of the trace here)
    for step in np.geomspace(2.0, 80.0, 61):
        got, total = _misfit_of_four_reads(float(step))
        assert -1e-9 * total <= got <= total * (1 + 1e-9), (step, got)
    # reads well apart: the closed form itself (relative 1e-6)
    for step in (300.0, 390.0):
        got, total = _misfit_of_four_reads(step)
        assert abs(got - total) <= 1e-6 * total, (step, got)


def test_the_hill_curve_fit_keeps_a_negatively_cooperative_well() -> None:
    # invented enzyme with negative cooperativity (h = 0.45, K0.5 0.3 mM, Vmax 4e-4 mM/s, 3.4 AU/mM), reads
    # every 10 s for 15 min; reference curve: scipy.integrate.solve_ivp (Radau) of dS/dt = -Vmax S^h/(K^h +
    # S^h), and v0 = Vmax S0^h/(K^h + S0^h) (the rate law at t = 0). h = 0.45 lies inside the documented range
    # of Hill coefficients a fit may end with, so the fit is kept (converged) and finds h and v0.
    t = np.arange(90) * 10.0
    vmax, k, h, spc, base = 4e-4, 0.3, 0.45, 3.4, 0.05
    s0 = np.array([0.1, 0.3, 0.9])
    y = np.empty((3, t.size))
    for i, s in enumerate(s0):
        sol = solve_ivp(lambda _t, x: -vmax * x**h / (k**h + x**h), (0.0, t[-1]), [s], method="Radau",
                        t_eval=t, rtol=1e-11, atol=1e-15)
        y[i] = base + spc * (s - sol.y[0])
    v0 = spc * vmax * s0**h / (k**h + s0**h)
    start = np.stack([np.full(3, base), np.log(v0 / spc * 0.9), np.full(3, 0.6), np.zeros(3)], axis=1)
    fit = fit_hill_curve(t, y, np.ones_like(y, bool), s0, spc, np.full(3, 1e-3), start)
    assert fit["converged"].all()
    assert fit["h"] == pytest.approx(h, rel=0.03)
    assert fit["v0"] == pytest.approx(v0, rel=3e-3)


def test_the_lag_clock_finds_no_lag_where_there_is_none() -> None:
    # invented plate without lag or inactivation (Km 0.5 mM, Vmax 4e-4 mM/s, 3.4 AU/mM, reads every 10 s for
    # 15 min); reference curve: the integrated Michaelis-Menten closed form S = Km W((S0/Km) exp((S0 - Vmax
    # t)/Km)) with scipy.special.lambertw (Schnell & Mendoza 1997). The lag time may go down to 0, so the fit
    # ends at a lag far below one read interval and at the closed form's v0 = Vmax S0/(Km + S0).
    t = np.arange(90) * 10.0
    km, vmax, spc, base = 0.5, 4e-4, 3.4, 0.05
    s0 = np.array([0.2, 0.5, 1.5])
    s = km * lambertw((s0[:, None] / km) * np.exp((s0[:, None] - vmax * t) / km)).real
    y = base + spc * (s0[:, None] - s)
    fit = lag_clock_fit(t, y, s0, spc, sigma=np.full(3, 1e-3))
    assert np.all(fit["tau"] < 0.1 * 10.0), fit["tau"]
    assert fit["v0"] == pytest.approx(spc * vmax * s0 / (km + s0), rel=1e-6)


def test_the_shape_profile_of_a_short_well_fits_every_read() -> None:
    # a well of 12 reads (fewer than the 20 blocks the profile compresses to): blocks of one read, so each
    # fixed-shape fit is that of the reads themselves. Reference: scipy.optimize.least_squares (trust region
    # reflective, c1 >= 0) of the same fixed-shape curve on the 12 reads. Invented well: baseline 0.05 AU,
    # v0 2e-3 AU/s, c1 0.4, shape 0.5, read noise 0.002 AU.
    t = np.arange(12) * 30.0
    f, _ = fixed_shape_model(t, np.ones(1), np.array([0.5]))(np.array([[0.05, np.log(2e-3), 0.4]]), np.array([0]))
    y = f + 0.002 * np.random.default_rng(11).standard_normal((1, t.size))
    start = np.array([[0.04, np.log(1.8e-3), np.log(0.3), 0.0]])
    prof = shape_profile(t, y, np.ones_like(y), np.ones(1), start, np.array([0.002**2]), grid=(0.5,))
    model = fixed_shape_model(t, np.ones(1), np.array([0.5]))

    def resid(p: np.ndarray) -> np.ndarray:
        return model(p[None, :], np.array([0]))[0][0] - y[0]
    ref = least_squares(resid, [0.04, np.log(1.8e-3), 0.3], bounds=([-np.inf, -20, 0], [np.inf, 0, np.inf]),
                        xtol=1e-14, ftol=1e-14, gtol=1e-14)
    assert prof["converged"][0, 0]
    assert prof["ln_v0"][0, 0] == pytest.approx(ref.x[1], abs=2e-4)
    assert prof["rss"][0, 0] == pytest.approx(2 * ref.cost, rel=1e-3)
