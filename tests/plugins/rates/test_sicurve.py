"""The integrated substrate-inhibition curve (plugins/rates/sicurve.py) and its use by the default rate method.

Sources: the substrate-inhibition rate law v = Vmax S/(Km + S + S²/Ki) integrated numerically by
scipy.integrate.solve_ivp (Radau, an implicit Runge–Kutta method), an independent computation of S(t); at
Ki -> infinity the closed form of the integrated Michaelis–Menten equation with scipy.special.lambertw
(Schnell & Mendoza 1997, J. Theor. Biol. 187:207-212). Plates are invented (Km 0.3 mM, Ki 3 mM, Vmax
8e-4 mM/s, 3.4 AU/mM).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.special import lambertw
from vzero.plugins.rates.choice import model_choice
from vzero.plugins.rates.progress import progress_curve
from vzero.plugins.rates.sicurve import fit_si_curve, si_left, si_model

from tests.jacobian_check import assert_jacobian_matches_central_differences

T = np.arange(90) * 10.0
SPC = 3.4  # AU/mM, invented
VMAX, KM, KI = 8e-4, 0.3, 3.0


def shares(s0: float, km: float = KM, ki: float = KI) -> tuple[float, float]:
    """``p = Km/(S0 D)`` and ``q = S0/(Ki D)``, ``D = 1 + Km/S0 + S0/Ki`` (module text of sicurve.py)."""
    d = 1.0 + km / s0 + s0 / ki
    return km / s0 / d, s0 / ki / d


def v0_true(s0: np.ndarray | float) -> np.ndarray:
    s = np.asarray(s0, float)
    return VMAX * s / (KM + s + s * s / KI)


def radau_substrate(s0: np.ndarray) -> np.ndarray:
    """S(t) [wells, reads] (mM) of dS/dt = -Vmax S/(Km + S + S²/Ki) by scipy's Radau at rtol 1e-11."""
    sol = solve_ivp(lambda _t, s: -VMAX * s / (KM + s + s * s / KI), (0.0, T[-1]), np.asarray(s0, float),
                    method="Radau", t_eval=T, rtol=1e-11, atol=1e-15)
    assert sol.success
    return sol.y


@pytest.mark.parametrize("s0", [0.05, 0.4, 1.5, 6.0, 20.0])
def test_substrate_left_matches_radau_integration(s0: float) -> None:
    # reference: scipy.integrate.solve_ivp, Radau, of the substrate-inhibition rate law
    p, q = shares(s0)
    z = np.exp(si_left(v0_true(s0) * T / s0, p, q))
    assert z * s0 == pytest.approx(radau_substrate(np.array([s0]))[0], rel=1e-8, abs=1e-12 * s0)


def test_without_inhibition_it_is_the_integrated_michaelis_menten_closed_form() -> None:
    # reference: S = Km W((S0/Km) exp((S0 - Vmax t)/Km)), Lambert W from scipy.special (Schnell & Mendoza 1997);
    # q = 0 (Ki infinite) leaves p = Km/(Km + S0)
    s0, km = 0.4, 0.5
    s_ref = km * lambertw((s0 / km) * np.exp((s0 - VMAX * T) / km)).real
    v0 = VMAX * s0 / (km + s0)
    z = np.exp(si_left(v0 * T / s0, km / (km + s0), 0.0))
    assert z * s0 == pytest.approx(s_ref, rel=1e-9)


def test_jacobian_matches_central_differences() -> None:
    s0 = np.array([[1.5], [6.0]])
    p = np.array([[0.1, np.log(4e-4), 0.1, 0.3], [0.0, np.log(2e-4), 0.02, 0.6]])
    assert_jacobian_matches_central_differences(si_model(T, s0, SPC), p)


def test_fit_recovers_a_noise_free_curve_and_its_constants() -> None:
    # curves from scipy's Radau; the fit starts as model_choice starts it, from a power-law order near 0
    s0 = np.array([0.8, 1.5, 3.0])
    y = 0.05 + SPC * (s0[:, None] - radau_substrate(s0))
    start = np.stack([np.full(3, 0.05), np.log(v0_true(s0) * 0.97), np.full(3, 0.1), np.full(3, 0.2)], axis=1)
    fit = fit_si_curve(T, y, np.ones_like(y, bool), s0, SPC, np.full(3, 0.002), start, max_iter=60)
    assert fit["converged"].all()
    assert fit["v0"] == pytest.approx(SPC * v0_true(s0), rel=1e-3)
    assert fit["order"] == pytest.approx([shares(s)[0] - shares(s)[1] for s in s0], abs=0.02)
    assert fit["km"] == pytest.approx(KM, rel=0.1)
    assert fit["ki"] == pytest.approx(KI, rel=0.1)


def inhibited_wells(s0: float, n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """``n`` noisy wells (read noise 0.002 AU) of the invented inhibited enzyme at one substrate level."""
    rng = np.random.default_rng(seed)
    y = 0.05 + SPC * (s0 - radau_substrate(np.array([s0]))) + 0.002 * rng.standard_normal((n, T.size))
    return np.round(y, 3), np.full(n, SPC * v0_true(s0))


def test_default_takes_the_inhibition_curve_where_the_power_law_runs_high() -> None:
    # at S0 = Ki/2 the order of the rate rises from -0.18 to -0.05 over the run (28 % converted); the power law
    # holds it constant and runs 0.4 % high (docs/rates.md, model-choice step 6d); the curve removes that
    y, v_true = inhibited_wells(1.5, 120, seed=3)
    s0 = np.full(120, 1.5)
    # the per-well step alone (the plate's shape of step 9 would take these wells: test_poolshape.py)
    mc = model_choice(T, y, s0=s0, signal_per_conc=SPC, pool_shape=False)
    pw = progress_curve(T, y, s0=s0, signal_per_conc=SPC, model="power", quick=True)
    err_mc, err_pw = mc.v0 / v_true - 1.0, pw.v0 / v_true - 1.0
    assert np.mean(mc.extra["model"] == 5) >= 0.6
    assert np.mean(err_pw) > 0.002  # the power law's bias this step removes
    assert abs(np.mean(err_mc)) < 0.3 * np.mean(err_pw)


def test_michaelis_menten_wells_seldom_reach_the_inhibition_curve() -> None:
    # high substrate levels of a Michaelis-Menten enzyme (S0 up to 10 Km) have a power-law order near 0; the
    # curve replaces their kept curve only where its inhibition term is needed (F-test at 5 %) or the
    # Michaelis-Menten curve sits on its zero-order bound while the power law's order is below zero
    rng = np.random.default_rng(11)
    s0 = np.repeat([1.0, 2.5, 5.0], 60)
    km, vmax = 0.5, 6e-4
    sol = solve_ivp(lambda _t, s: -vmax * s / (km + s), (0.0, T[-1]), s0, method="Radau", t_eval=T,
                    rtol=1e-10, atol=1e-14)
    y = 0.05 + SPC * (s0[:, None] - sol.y) + 0.002 * rng.standard_normal((s0.size, T.size))
    mc = model_choice(T, y, s0=s0, signal_per_conc=SPC)
    assert np.mean(mc.extra["model"] == 5) <= 0.05


def test_inhibition_step_keeps_the_curve_only_where_every_clause_holds(monkeypatch: pytest.MonkeyPatch) -> None:
    # the decision of sicurve.inhibition_step (its docstring), clause by clause and on both sides of each
    # threshold, with the fit itself replaced by fixed figures: each well's reads carry its own number in
    # the first read, and the stand-in fit returns that well's row of FIT. The F critical value is
    # scipy.stats.f.ppf (independent of the module's own call)
    from scipy import stats
    from vzero.plugins.rates import sicurve

    n_t, sigma, r_mm, lof, z = 20, 0.01, 2.0, 1.5, 2.0
    rss3 = r_mm**2 * sigma**2 * (n_t - 3)  # the Michaelis-Menten curve's RSS, three parameters
    crit = stats.f.ppf(1 - sicurve.SI_ALPHA, 1, n_t - 4)

    def rss_at(f: float) -> float:  # the four-parameter RSS that gives F = f
        return rss3 / (1 + f / (n_t - 4))

    # per well: power-law order, power-law v0, r_mm, and the fit's converged, v0, rss, ratio; expected keep
    wells = [
        (0.0, 1.0, r_mm, True, 1.0, rss_at(crit * 1.001), 1.0, True),   # every clause holds
        (0.0, 1.0, r_mm, True, 1.0, rss_at(crit * 0.999), 1.0, False),  # F just below the critical value
        (0.0, 1.0, r_mm, True, 1.0, rss_at(2 * crit), lof, True),       # misfit exactly at lof_ratio
        (0.0, 1.0, r_mm, True, 1.0, rss_at(2 * crit), lof * (1 + 1e-9), False),
        (0.0, 1.0, r_mm, True, 1.5, rss_at(2 * crit), 1.0, True),       # v0 exactly agree_z SEs away
        (0.0, 1.0, r_mm, True, 1.5 + 1e-9, rss_at(2 * crit), 1.0, False),
        (0.0, 1.0, r_mm, False, 1.0, rss_at(2 * crit), 1.0, False),     # not converged (or not physical)
        (sicurve.SI_ORDER, 1.0, r_mm, True, 1.0, rss_at(2 * crit), 1.0, False),  # order not below SI_ORDER
        (sicurve.SI_ORDER - 1e-6, 1.0, r_mm, True, 1.0, rss_at(2 * crit), 1.0, True),
        (-0.5, -1.0, r_mm, True, 1.0, rss_at(2 * crit), 1.0, False),    # power-law rate of the wrong sign
        (-0.5, 1.0, np.nan, True, 1.0, rss_at(2 * crit), 1.0, False),   # no Michaelis-Menten misfit
        (-1.5, 1.0, r_mm, True, 1.0, rss_at(2 * crit), 1.0, True),      # order beyond -0.9: start clipped
    ]
    n_w = len(wells)
    seen: dict[str, np.ndarray] = {}

    def stand_in(t: np.ndarray, y: np.ndarray, valid: np.ndarray, s0: np.ndarray, spc: float, sig: np.ndarray,
                 start: np.ndarray, *, max_iter: int) -> dict[str, np.ndarray]:
        seen["rows"], seen["start"] = y[:, 0].astype(int), start
        rows = y[:, 0].astype(int)
        col = np.array([[w[k] for w in wells] for k in range(3, 7)])[:, rows]
        return {"converged": col[0].astype(bool), "v0": col[1], "rss": col[2], "ratio": col[3],
                "se": np.full(rows.size, 0.1), "p": np.full(rows.size, 0.4), "q": np.full(rows.size, 0.2),
                "order": np.full(rows.size, 0.2), "km": np.full(rows.size, 1.0), "ki": np.full(rows.size, 2.0)}

    monkeypatch.setattr(sicurve, "fit_si_curve", stand_in)
    t = np.arange(n_t) * 10.0
    y = np.zeros((n_w, n_t))
    y[:, 0] = np.arange(n_w)
    order, pw_v0, rm = (np.array([w[k] for w in wells], float) for k in range(3))
    spc = 2.0
    keep, out = sicurve.inhibition_step(t, y, np.ones((n_w, n_t), bool), np.full(n_w, 1.0), spc,
                                        np.full(n_w, sigma), np.full(n_w, 0.05), pw_v0, order, rm,
                                        np.full(n_w, 1.0), np.full(n_w, 0.25), lof_ratio=lof, agree_z=z)
    assert keep.tolist() == [w[7] for w in wells]
    tried = seen["rows"]
    assert tried.tolist() == [i for i in range(n_w) if i not in (7, 9, 10)]
    assert np.isnan(out["v0"][[7, 9, 10]]).all() and (out["v0"][tried] == [wells[i][4] for i in tried]).all()
    # the start (documented beside SI_ITER): baseline, ln(v0/spc), and shares p, q with p - q the power
    # law's order (clipped to +-0.9), both at least 0.05
    start = seen["start"]
    np.testing.assert_allclose(start[:, 0], 0.05)
    np.testing.assert_allclose(start[:, 1], np.log(pw_v0[tried] / spc))
    np.testing.assert_allclose(start[:, 2] - start[:, 3], np.clip(order[tried], -0.9, 0.9), atol=1e-12)
    np.testing.assert_allclose(np.fmin(start[:, 2], start[:, 3]), 0.05)


@pytest.mark.parametrize(("share_sum", "physical"), [(0.998, True), (0.999, False), (1.5, False)])
def test_a_fit_is_physical_only_below_the_share_sum_limit(monkeypatch: pytest.MonkeyPatch, share_sum: float,
                                                           physical: bool) -> None:
    # module text of fit_si_curve: Km = S0 p D and Ki = S0/(q D), D = 1/(1 - p - q), are positive and finite
    # only for p + q < 1; MAX_SHARE_SUM (0.999) is the limit, on both sides. The fit is replaced by fixed
    # figures (a converged fit at p = 0.6, q = share_sum - 0.6); Km and Ki by hand
    import types

    from vzero.plugins.rates import sicurve

    p, q = 0.6, share_sum - 0.6
    params = np.array([[0.05, np.log(2e-4), p, q]])

    def stand_in(*a: object, **k: object) -> types.SimpleNamespace:
        return types.SimpleNamespace(params=params, rss=np.array([1e-4]), tss=np.array([1.0]),
                                     cov_unit=np.eye(4)[None], converged=np.array([True]))

    monkeypatch.setattr(sicurve, "fit_coarse_to_fine", stand_in)
    t = np.arange(20) * 10.0
    fit = fit_si_curve(t, np.zeros((1, 20)), np.ones((1, 20), bool), np.array([0.5]), SPC, np.array([0.002]),
                       params.copy())
    assert sicurve.MAX_SHARE_SUM == 0.999 and bool(fit["converged"][0]) is physical
    if physical:
        d = 1.0 / (1.0 - share_sum)
        assert fit["km"][0] == pytest.approx(0.5 * p * d) and fit["ki"][0] == pytest.approx(0.5 / (q * d))
    else:
        assert np.isnan(fit["km"][0]) and np.isnan(fit["ki"][0])
    assert fit["order"][0] == pytest.approx(p - q)
