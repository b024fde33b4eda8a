"""The integrated Hill curve (plugins/rates/hillcurve.py) and its use by the default rate method.

Sources: the Hill rate law integrated numerically by scipy.integrate.solve_ivp (Radau, an implicit
Runge–Kutta method, and LSODA through plugins/kinetics/simulate.py), an independent computation of z(t); at
h = 1 the closed form of the integrated Michaelis–Menten equation with scipy.special.lambertw (Schnell &
Mendoza 1997, J. Theor. Biol. 187:207-212). Plates are invented (K0.5 0.3 mM, h 2.5, Vmax 4e-4 mM/s).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.special import lambertw
from scipy.stats import chi2
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates.choice import model_choice, smooth_misfit
from vzero.plugins.rates.hillcurve import fit_hill_curve, hill_left, hill_model
from vzero.plugins.rates.progress import progress_curve

from tests.jacobian_check import assert_jacobian_matches_central_differences

T = np.arange(90) * 10.0
SPC = 3.4  # AU/mM, invented
VMAX, K, H = 4e-4, 0.3, 2.5


@pytest.mark.parametrize("h", [0.7, 1.0, 2.5, 4.0])
@pytest.mark.parametrize("s0", [0.05, 0.3, 0.6, 1.5])
def test_substrate_left_matches_radau_integration(h: float, s0: float) -> None:
    # reference: scipy.integrate.solve_ivp, Radau, of dS/dt = -Vmax S^h/(K^h + S^h)
    sol = solve_ivp(lambda _t, s: -VMAX * s**h / (K**h + s**h), (0.0, T[-1]), [s0], method="Radau",
                    t_eval=T, rtol=1e-11, atol=1e-15)
    z = np.exp(hill_left(VMAX * T / s0, (K / s0) ** h, h))
    assert z * s0 == pytest.approx(sol.y[0], rel=1e-8, abs=1e-12 * s0)


def test_h_one_is_the_integrated_michaelis_menten_closed_form() -> None:
    # reference: S = Km W((S0/Km) exp((S0 - Vmax t)/Km)), Lambert W from scipy.special (Schnell & Mendoza 1997)
    s0, km = 0.4, 0.5
    s_ref = km * lambertw((s0 / km) * np.exp((s0 - VMAX * T) / km)).real
    for h in (1.0, 1.0 + 1e-9):  # at h = 1 and next to it (the expm1 form through the removable singularity)
        z = np.exp(hill_left(VMAX * T / s0, km / s0, h))
        assert z * s0 == pytest.approx(s_ref, rel=1e-9)


def test_jacobian_matches_central_differences() -> None:
    s0 = np.array([[0.3], [0.6]])
    p = np.array([[0.1, np.log(2e-4), 1.0, -0.4], [0.0, np.log(3e-4), 0.2, -1.4]])
    assert_jacobian_matches_central_differences(hill_model(T, s0, SPC), p)


def test_fit_recovers_a_noise_free_hill_curve() -> None:
    # curves from scipy solve_ivp (LSODA) through simulate_plate; v0 = Vmax S0^h/(K^h + S0^h) by construction
    s0 = np.array([0.2, 0.3, 0.4, 0.6])
    p = simulate_plate(T, s0, K, VMAX, hill=H, signal_per_conc=SPC, baseline=0.05, noise=0.0, seed=None)
    u0 = 0.95  # start as the power law would: K0.5 well above S0, order 1.5
    logit_u0 = np.full(4, np.log(u0 / (1 - u0)))
    start = np.stack([np.full(4, 0.05), np.log(p.v0_true / SPC * 0.9), np.full(4, 1.5), logit_u0], axis=1)
    fit = fit_hill_curve(T, p.signal, np.ones_like(p.signal, bool), s0, SPC, np.full(4, 0.002), start)
    assert fit["converged"].all()
    assert fit["v0"] == pytest.approx(p.v0_true, rel=2e-3)
    assert fit["h"] == pytest.approx(H, rel=0.03)


def hill_plate(s0: float, n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """``n`` noisy wells of the invented cooperative enzyme at one substrate level (ODE-integrated)."""
    s = np.full(n, s0)
    p = simulate_plate(T, s, K, VMAX, hill=H, signal_per_conc=SPC, baseline=0.05, noise=0.002, seed=seed)
    return p.signal, p.v0_true


def test_default_takes_the_hill_curve_where_the_power_law_runs_high() -> None:
    # at S0 = 1.33 K0.5 the order of the rate rises from 0.7 to 2.5 as the substrate falls; the power law
    # holds it constant and runs high (docs/rates.md measured 3.7-4.8 % at 0.3-0.4 mM)
    y, v_true = hill_plate(0.4, 48, seed=3)
    s0 = np.full(48, 0.4)
    # the per-well step alone (the plate's shape of step 9 would take these wells: test_poolshape.py)
    mc = model_choice(T, y, s0=s0, signal_per_conc=SPC, pool_shape=False)
    pw = progress_curve(T, y, s0=s0, signal_per_conc=SPC, model="power")
    err_mc, err_pw = mc.v0 / v_true - 1.0, pw.v0 / v_true - 1.0
    assert np.mean(mc.extra["model"] == 4) >= 0.5
    assert np.mean(err_pw) > 0.02  # the power law's bias this change removes
    assert abs(np.mean(err_mc)) < 0.01
    assert np.sqrt(np.mean(err_mc**2)) < 0.6 * np.sqrt(np.mean(err_pw**2))


def test_michaelis_menten_wells_seldom_reach_the_hill_curve() -> None:
    # the Hill curve replaces a kept Michaelis-Menten curve only where the curve leaves a smooth misfit (a test
    # at the 5 % level) and the Hill curve's v0 differs from it by more than 2 standard errors of their
    # difference; on Michaelis-Menten wells both happen together by chance only
    s0 = np.repeat([0.1, 0.25, 0.5, 1.0, 2.5], 40)
    p = simulate_plate(T, s0, 0.5, 6e-4, signal_per_conc=SPC, baseline=0.05, noise=0.002, seed=11)
    mc = model_choice(T, p.signal, s0=s0, signal_per_conc=SPC)
    assert np.mean(mc.extra["model"] == 4) <= 0.05
    # the misfit statistic follows chi² with about one degree of freedom there (median 0.45, scipy.stats.chi2)
    assert np.nanmedian(mc.extra["misfit"]) == pytest.approx(chi2.median(1), abs=0.25)
    assert np.nanmean(mc.extra["misfit"] > chi2.ppf(0.95, 1)) <= 0.10


def test_smooth_misfit_is_the_cubic_projection_of_the_residuals() -> None:
    # reference: numpy.linalg.lstsq of the residuals on a cubic in time, minus their mean's share; 30 reads,
    # so every block holds one read and the statistic is the read-by-read one
    rng = np.random.default_rng(4)
    t = np.arange(30) * 10.0
    y = rng.standard_normal((5, t.size)) + 0.05 * t
    valid = np.ones_like(y, bool)
    valid[2, [3, 17]] = False
    curve = 0.04 * t
    got = smooth_misfit(t, y, valid, lambda tb: np.broadcast_to(0.04 * tb, tb.shape), np.full(5, 0.5))
    for i in range(5):
        tt, r = t[valid[i]], (y[i] - curve)[valid[i]]
        design = np.vander(tt, 4)
        fitted = design @ np.linalg.lstsq(design, r, rcond=None)[0]
        want = (fitted @ fitted - r.size * r.mean() ** 2) / 0.25
        assert got[i] == pytest.approx(want, rel=1e-8)


def test_smooth_misfit_of_the_true_curve_is_chi2_with_three_degrees_of_freedom() -> None:
    # residuals of the true curve are read noise only: their projection on a cubic beyond a constant has three
    # degrees of freedom (reference: scipy.stats.chi2), also on block means of four or five reads
    rng = np.random.default_rng(8)
    sigma = 0.002
    y = 0.3 * (1 - np.exp(-T / 400.0)) + sigma * rng.standard_normal((4000, T.size))
    stat = smooth_misfit(T, y, np.ones_like(y, bool), lambda tb: 0.3 * (1 - np.exp(-tb / 400.0)),
                         np.full(4000, sigma))
    assert np.mean(stat) == pytest.approx(chi2.mean(3), abs=0.2)
    assert np.mean(stat > chi2.ppf(0.95, 3)) == pytest.approx(0.05, abs=0.012)


def test_default_replaces_a_michaelis_menten_curve_that_fits_a_cooperative_well_within_the_noise() -> None:
    # at S0 = 2 K0.5 (h = 2.5) the order of the rate rises from 0.4 to 2.5 as the substrate falls; the
    # Michaelis-Menten curve, whose order cannot rise that fast, still fits within the noise but runs about
    # 2.5 % high (docs/rates.md); the smooth misfit sends the wells to the Hill curve. Truth: the ODE
    # integration of simulate_plate (scipy.integrate.solve_ivp)
    y, v_true = hill_plate(0.6, 48, seed=5)
    s0 = np.full(48, 0.6)
    # the per-well step alone (the plate's shape of step 9 would take these wells: test_poolshape.py)
    mc = model_choice(T, y, s0=s0, signal_per_conc=SPC, pool_shape=False)
    mm = progress_curve(T, y, s0=s0, signal_per_conc=SPC)
    err_mc, err_mm = mc.v0 / v_true - 1.0, mm.v0 / v_true - 1.0
    assert np.median(mm.extra["rmse_over_noise"]) < 1.4  # the curve describes the reads within the noise
    assert np.mean(err_mm) > 0.015  # its bias, which this step removes
    assert np.mean(mc.extra["model"] == 4) >= 0.8
    assert abs(np.mean(err_mc)) < 0.005
    assert np.sqrt(np.mean(err_mc**2)) < 0.5 * np.sqrt(np.mean(err_mm**2))


def test_restart_is_only_made_when_asked() -> None:
    # the noise-free curves above from a poor start (order 0.2 at K0.5 well above S0): the first well's fit
    # ends unconverged; with restart=False it is returned so (the docstring's contract: callers that would
    # not keep it anyway are spared the second fit), with restart=True the start at u = 1/2 recovers it
    s0 = np.array([0.2, 0.3, 0.4, 0.6])
    p = simulate_plate(T, s0, K, VMAX, hill=H, signal_per_conc=SPC, baseline=0.05, noise=0.0, seed=None)
    start = np.stack([np.full(4, 0.05), np.log(p.v0_true / SPC * 0.9), np.full(4, 0.2),
                      np.full(4, np.log(0.95 / 0.05))], axis=1)
    args = (T, p.signal, np.ones_like(p.signal, bool), s0, SPC, np.full(4, 0.002), start)
    once, again = fit_hill_curve(*args, restart=False), fit_hill_curve(*args, restart=True)
    assert not once["converged"][0] and again["converged"][0]
    assert again["v0"][0] == pytest.approx(p.v0_true[0], rel=2e-3)


@pytest.mark.parametrize("n_reads", [5, 6, 20])
def test_misfit_ratio_uses_reads_less_four_degrees_of_freedom_at_least_one(monkeypatch: pytest.MonkeyPatch,
                                                                           n_reads: int) -> None:
    # module text of fit_hill_curve: ratio = residual RMS over sigma with four parameters, the degrees of
    # freedom max(n - 4, 1) (by hand); the fit is replaced by fixed figures (a converged, plausible fit:
    # h = n0/u = 2 at u = 1/2)
    import types

    from vzero.plugins.rates import hillcurve

    params = np.array([[0.05, np.log(1e-4), 1.0, 0.0]])

    def stand_in(*a: object, **k: object) -> types.SimpleNamespace:
        return types.SimpleNamespace(params=params, rss=np.array([4e-6]), tss=np.array([1.0]),
                                     cov_unit=np.eye(4)[None], converged=np.array([True]))

    monkeypatch.setattr(hillcurve, "fit_coarse_to_fine", stand_in)
    t = np.arange(20) * 10.0
    valid = (np.arange(20) < n_reads)[None, :]
    fit = fit_hill_curve(t, np.zeros((1, 20)), valid, np.array([0.5]), SPC, np.array([0.001]), params.copy())
    assert fit["converged"][0] and fit["h"][0] == pytest.approx(2.0)
    assert fit["ratio"][0] == pytest.approx(np.sqrt(4e-6 / max(n_reads - 4, 1)) / 0.001)
