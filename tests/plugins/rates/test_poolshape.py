"""The plate's shape fitted jointly over wells (plugins/rates/poolshape.py) and its use by the default method.

Sources: every curve's substrate by scipy.integrate.solve_ivp (Radau, an implicit Runge–Kutta method, at
rtol 1e-11), an independent computation of S(t) for the Hill rate law (Hill 1910) and the
substrate-inhibition rate law (Haldane 1930); the joint normal equations and their inverse by numpy's dense
linear algebra on the full matrix (independent of the module's Schur-complement solve); the rate law fitted
to rates by scipy.optimize.curve_fit. Plates are invented (a cooperative enzyme with K0.5 0.3 mM and h 2.5;
an inhibited one with Km 0.3 mM and Ki 3 mM; 3.4 AU/mM).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import curve_fit
from vzero.plugins.rates.choice import model_choice, smooth_misfit
from vzero.plugins.rates.poolshape import (
    POOLED_CODES,
    _bordered_solve,
    _hill_eval,
    _normal_blocks,
    _si_eval,
    fit_pooled,
    pool_shape,
    shape_from_rates,
)

T = np.arange(90) * 10.0
SPC = 3.4  # AU/mM, invented
HILL = {"vmax": 4e-4, "k": 0.3, "h": 2.5}
SI = {"vmax": 8e-4, "km": 0.3, "ki": 3.0}
S_HILL = np.array([0.05, 0.1, 0.15, 0.2, 0.3, 0.4, 0.6, 1.0, 1.5])
S_SI = np.array([0.05, 0.1, 0.2, 0.4, 0.8, 1.5, 3.0, 6.0, 12.0])


def hill_rate(s: np.ndarray, vmax: float = HILL["vmax"]) -> np.ndarray:
    return vmax * s ** HILL["h"] / (HILL["k"] ** HILL["h"] + s ** HILL["h"])


def si_rate(s: np.ndarray, vmax: float = SI["vmax"]) -> np.ndarray:
    return vmax * s / (SI["km"] + s + s * s / SI["ki"])


def mm_rate(s: np.ndarray, vmax: float = 6e-4) -> np.ndarray:
    return vmax * s / (0.5 + s)


def radau_signal(rate: object, s0: np.ndarray, vmax: np.ndarray) -> np.ndarray:
    """Product signal [wells, reads] (AU) of dS/dt = -rate(S) by scipy's Radau (each well its own Vmax)."""
    sol = solve_ivp(lambda _t, s: -rate(np.fmax(s, 0.0), vmax), (0.0, T[-1]), s0, method="Radau",  # type: ignore[operator]
                    t_eval=T, rtol=1e-11, atol=1e-15)
    assert sol.success
    return SPC * (s0[:, None] - sol.y)


def plate(rate: object, s0: np.ndarray, vmax: float, noise: float, seed: int,
          scale: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Reads (AU, baseline 0.05, white noise) and true v0 (AU/s) per well; ``scale`` varies the enzyme per well."""
    vm = vmax * (np.ones(s0.size) if scale is None else scale)
    y = 0.05 + radau_signal(rate, s0, vm)
    y = y + noise * np.random.default_rng(seed).standard_normal(y.shape)
    return y, SPC * rate(s0, vm)  # type: ignore[operator]


@pytest.mark.parametrize("family", ["hill", "substrate-inhibition"])
def test_noise_free_joint_fit_recovers_shape_and_rates_of_the_radau_curves(family: str) -> None:
    # reference: scipy.integrate.solve_ivp (Radau) of each rate law; every well's enzyme differs (scale), so
    # only the shape is shared; started 30-50 % off in the shape and 10 % off in every v0
    scale = np.linspace(0.7, 1.3, 9)
    if family == "hill":
        y, v0 = plate(hill_rate, S_HILL, HILL["vmax"], 0.0, 0, scale)
        truth, start, s0 = np.array([HILL["h"], HILL["k"]]), np.array([1.7, 0.45]), S_HILL
    else:
        y, v0 = plate(si_rate, S_SI, SI["vmax"], 0.0, 0, scale)
        truth, start, s0 = np.array([SI["km"], SI["ki"]]), np.array([0.2, 4.5]), S_SI
    valid = np.ones(y.shape, bool)
    fit = fit_pooled(family, T, y, valid, s0, SPC, np.full(s0.size, 1e-4), start, v0 * 1.1, y[:, 0])
    assert fit.converged
    assert fit.shape == pytest.approx(truth, rel=1e-4)
    assert fit.v0 == pytest.approx(v0, rel=1e-5)
    assert np.all(fit.ratio < 0.1)


@pytest.mark.parametrize("make", [_hill_eval, _si_eval])
def test_shape_jacobian_matches_central_differences(make: object) -> None:
    # reference: central differences of the model's own values (independent of the chain rule through the
    # per-well curve's parameters)
    s0 = S_HILL if make is _hill_eval else S_SI
    f = make(T, s0, SPC)  # type: ignore[operator]
    g = np.log([2.2, 0.35]) if make is _hill_eval else np.log([0.35, 2.5])
    base, lv = np.full(s0.size, 0.05), np.log(hill_rate(s0) if make is _hill_eval else si_rate(s0))
    _, jl, jg = f(g, base, lv)
    for k in range(2):
        d = np.zeros(2)
        d[k] = 1e-6
        num = (f(g + d, base, lv)[0] - f(g - d, base, lv)[0]) / 2e-6
        assert np.max(np.abs(num - jg[:, k])) <= 1e-5 * np.max(np.abs(jg[:, k]))
    num_v = (f(g, base, lv + 1e-6)[0] - f(g, base, lv - 1e-6)[0]) / 2e-6
    assert np.max(np.abs(num_v - jl[:, 1])) <= 1e-5 * np.max(np.abs(jl[:, 1]))


def _dense(jl: np.ndarray, jg: np.ndarray, w: np.ndarray) -> np.ndarray:
    """The full Jacobian [reads of every well, 2 n + 2] with its rows weighted by sqrt(w)."""
    n, _, n_t = jl.shape
    full = np.zeros((n * n_t, 2 * n + 2))
    for i in range(n):
        rows = slice(i * n_t, (i + 1) * n_t)
        full[rows, 2 * i:2 * i + 2] = (jl[i] * np.sqrt(w[i])).T
        full[rows, 2 * n:] = (jg[i] * np.sqrt(w[i])).T
    return full


def test_bordered_step_equals_the_dense_normal_equations() -> None:
    # reference: numpy.linalg.solve on the full (2 n + 2) normal matrix, Marquardt-damped
    rng = np.random.default_rng(4)
    n, n_t = 5, 30
    jl, jg = rng.standard_normal((n, 2, n_t)), rng.standard_normal((n, 2, n_t))
    w, r = rng.uniform(0.5, 2.0, (n, n_t)), rng.standard_normal((n, n_t))
    lam = 0.3
    dg, dl = _bordered_solve(*_normal_blocks(r, w, jl, jg), lam)
    full = _dense(jl, jg, w)
    m = full.T @ full
    m = m + lam * np.diag(np.diag(m))
    step = np.linalg.solve(m, full.T @ (np.sqrt(w) * r).reshape(-1))
    assert dl.reshape(-1) == pytest.approx(step[:2 * n], rel=1e-9, abs=1e-12)
    assert dg == pytest.approx(step[2 * n:], rel=1e-9, abs=1e-12)


def _dense_se(fit: object, y: np.ndarray, sigma: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """v0's SE without any scaling, from the dense inverse of the full normal matrix at the fit (numpy), the
    shape block of that inverse, and the per-well Jacobian of ln v0 (for the SE with the shape held)."""
    f = _hill_eval(T, S_HILL, SPC)
    _, jl, jg = f(np.log(fit.shape), fit.baseline, np.log(fit.v0 / SPC))  # type: ignore[attr-defined]
    w = np.ones(y.shape) / sigma[:, None] ** 2
    cov = np.linalg.inv((lambda a: a.T @ a)(_dense(jl, jg, w)))
    return fit.v0 * np.sqrt(np.diag(cov)[1:2 * S_HILL.size:2]), cov[-2:, -2:], jl  # type: ignore[attr-defined]


def test_rate_standard_errors_carry_the_shapes_uncertainty() -> None:
    # reference: the diagonal of the dense inverse of the full normal matrix at the optimum (numpy.linalg.inv):
    # the delta method through the joint covariance. The read noise is stated a little above the reads'
    # scatter (0.0025 for 0.002), so that no variance is scaled up and the two must agree exactly
    y, v0 = plate(hill_rate, S_HILL, HILL["vmax"], 0.002, 5)
    valid = np.ones(y.shape, bool)
    sigma = np.full(S_HILL.size, 0.0025)
    fit = fit_pooled("hill", T, y, valid, S_HILL, SPC, sigma, np.array([2.0, 0.4]), v0, y[:, 0])
    assert np.all(fit.ratio < 1.0) and fit.chi2 < fit.dof
    se_dense, cov_shape, jl = _dense_se(fit, y, sigma)
    assert fit.se == pytest.approx(se_dense, rel=1e-6)
    assert fit.shape_cov == pytest.approx(cov_shape, rel=1e-6)
    # and the shape's share is real: each well's SE with the shape held is smaller
    held = fit.v0 * np.sqrt(1.0 / np.einsum("nt,nt->n", jl[:, 1] ** 2, valid / sigma[:, None] ** 2))
    assert np.all(fit.se > held)


def test_rate_standard_errors_grow_with_the_residual_scatter() -> None:
    # the read noise stated at half the reads' scatter: the variances are scaled up by the wells' own residual
    # variance (own block) and the plate's (shape block), so each SE over the dense unscaled one lies
    # between the two scales (reference as above, numpy's dense inverse)
    y, v0 = plate(hill_rate, S_HILL, HILL["vmax"], 0.002, 6)
    sigma = np.full(S_HILL.size, 0.001)
    fit = fit_pooled("hill", T, y, np.ones(y.shape, bool), S_HILL, SPC, sigma, np.array([2.0, 0.4]), v0, y[:, 0])
    se_dense, _, _ = _dense_se(fit, y, sigma)
    own, plate_scale = fit.ratio**2, fit.chi2 / fit.dof
    assert np.all(own > 2.5) and plate_scale > 2.5
    got = (fit.se / se_dense) ** 2
    assert np.all(got >= np.fmin(own, plate_scale) * (1 - 1e-9))
    assert np.all(got <= np.fmax(own, plate_scale) * (1 + 1e-9))
    assert not np.allclose(got, plate_scale, rtol=1e-3)  # the wells' own scatter counts, not the plate's alone


@pytest.mark.parametrize("family", ["hill", "substrate-inhibition"])
def test_start_from_rates_matches_scipy_curve_fit(family: str) -> None:
    # reference: scipy.optimize.curve_fit of the rate law to the same exact rates
    if family == "hill":
        s, law = S_HILL, (lambda x, v, h, k: v * x**h / (k**h + x**h))
        v, p0, want = hill_rate(S_HILL), [5e-4, 2.0, 0.4], [HILL["h"], HILL["k"]]
    else:
        s, law = S_SI, (lambda x, v, km, ki: v * x / (km + x + x * x / ki))
        v, p0, want = si_rate(S_SI), [1e-3, 0.2, 5.0], [SI["km"], SI["ki"]]
    ref, _ = curve_fit(law, s, v, p0=p0, maxfev=5000)
    got = shape_from_rates(family, s, v, np.full(s.size, 1e-6))
    assert got is not None
    assert got == pytest.approx(ref[1:], rel=1e-4)
    assert got == pytest.approx(want, rel=1e-4)


def _evidence(n: int, wells: tuple[int, ...], c: float) -> np.ndarray:
    code = np.full(n, 0.0)
    code[list(wells)] = c
    return code


def test_michaelis_menten_plate_never_gets_a_pooled_hill_shape() -> None:
    # the plate-level check: wells made to look cooperative by a forced model code (the per-well evidence) do
    # not give a Michaelis–Menten plate a Hill shape (reference curves: scipy's Radau of v = Vmax S/(Km + S));
    # the same call on a cooperative plate does (so the check is not one that always refuses)
    s0 = np.array([0.05, 0.1, 0.2, 0.35, 0.5, 0.75, 1.0, 2.0, 3.0])
    for rate, s, want in ((mm_rate, s0, False), (hill_rate, S_HILL, True)):
        y, v0 = plate(rate, s, 6e-4 if rate is mm_rate else HILL["vmax"], 0.002, 7)
        sigma = np.full(s.size, 0.002)
        pc = pool_shape(T, y, np.ones(y.shape, bool), s, SPC, sigma, _evidence(s.size, (2, 4), 4.0), v0 * 1.01,
                        v0 * 0.01, y[:, 0], v0, v0 * 0.05, lof_ratio=1.4, agree_z=2.0, min_reads=8,
                        smooth_misfit=smooth_misfit)
        assert pc.take.any() == want
        if want:
            assert pc.fit is not None and pc.fit.shape[0] == pytest.approx(HILL["h"], rel=0.05)


def test_no_evidence_no_joint_fit_and_unknown_substrate_never_pooled() -> None:
    y, v0 = plate(hill_rate, S_HILL, HILL["vmax"], 0.002, 8)
    sigma = np.full(S_HILL.size, 0.002)
    args = (T, y, np.ones(y.shape, bool))
    kw = {"lof_ratio": 1.4, "agree_z": 2.0, "min_reads": 8, "smooth_misfit": smooth_misfit}
    # no well kept the Hill curve and the rates, with SEs of 10x themselves, show no cooperativity either
    none = pool_shape(*args, S_HILL, SPC, sigma, _evidence(9, (), 4.0), v0, v0 * 10.0, y[:, 0], v0, v0 * 0.05, **kw)
    assert none.fit is None and not none.take.any()
    s0 = S_HILL.copy()
    s0[3] = np.nan
    some = pool_shape(*args, s0, SPC, sigma, _evidence(9, (5,), 4.0), v0, v0 * 0.01, y[:, 0], v0, v0 * 0.05, **kw)
    assert some.take.sum() >= 6 and not some.take[3] and np.isnan(some.v0[3])


def _plates(rate: object, s0: np.ndarray, vmax: float, n: int) -> list[tuple[np.ndarray, np.ndarray]]:
    return [plate(rate, s0, vmax, 0.002, 100 + k) for k in range(n)]


@pytest.mark.parametrize("family", ["hill", "substrate-inhibition"])
def test_default_method_uses_the_plate_shape_and_is_closer_to_the_truth(family: str) -> None:
    # reference: scipy's Radau curves of each law (true v0 from the law at S0); 6 noisy plates each. The plate
    # shape reaches wells (models 6, 7) and lowers the RMS error over the plates against the same method
    # without it (pool_shape=False), as on the project's benchmark (docs/rates.md, model-choice step 9)
    rate, s0, vmax = (hill_rate, S_HILL, HILL["vmax"]) if family == "hill" else (si_rate, S_SI, SI["vmax"])
    err_new, err_old, pooled = [], [], 0
    for y, v0 in _plates(rate, s0, vmax, 6):
        new = model_choice(T, y, s0=s0, signal_per_conc=SPC)
        old = model_choice(T, y, s0=s0, signal_per_conc=SPC, pool_shape=False)
        pooled += int(np.sum(new.extra["model"] == POOLED_CODES[family]))
        assert not np.any(old.extra["model"] >= 6)
        err_new.append(new.v0 / v0 - 1.0)
        err_old.append(old.v0 / v0 - 1.0)
    assert pooled >= 3 * s0.size
    rms_new, rms_old = np.sqrt(np.mean(np.square(err_new))), np.sqrt(np.mean(np.square(err_old)))
    assert rms_new < 0.9 * rms_old


def test_michaelis_menten_plate_is_unchanged_by_the_step() -> None:
    # reference: scipy's Radau curves of v = Vmax S/(Km + S); no well of a Michaelis–Menten plate takes a
    # plate shape, so the rates are those of the method without the step
    s0 = np.array([0.05, 0.1, 0.2, 0.35, 0.5, 0.75, 1.0, 2.0, 3.0, 5.0])
    for y, _ in _plates(mm_rate, s0, 6e-4, 3):
        new = model_choice(T, y, s0=s0, signal_per_conc=SPC)
        old = model_choice(T, y, s0=s0, signal_per_conc=SPC, pool_shape=False)
        assert not np.any(new.extra["model"] >= 6)
        np.testing.assert_array_equal(new.v0, old.v0)


def test_a_well_whose_curve_leaves_a_smooth_misfit_keeps_its_own_choice() -> None:
    # the per-well check of point 4 (docs/rates.md, step 9): the misfit statistic is passed in, so one well's
    # value is set on either side of POOL_MISFIT (chi² with two degrees of freedom at 1 %, scipy.stats.chi2)
    from scipy.stats import chi2
    from vzero.plugins.rates.poolshape import POOL_MISFIT

    assert POOL_MISFIT == pytest.approx(chi2.ppf(0.99, 2), abs=0.01)
    y, v0 = plate(hill_rate, S_HILL, HILL["vmax"], 0.002, 9)
    sigma = np.full(S_HILL.size, 0.002)
    taken = []
    for value in (POOL_MISFIT - 0.05, POOL_MISFIT + 0.05):
        def fake(t: np.ndarray, yy: np.ndarray, valid: np.ndarray, curve: object, sig: np.ndarray,
                 value: float = value) -> np.ndarray:
            out = np.zeros(yy.shape[0])
            out[4] = value
            return out

        pc = pool_shape(T, y, np.ones(y.shape, bool), S_HILL, SPC, sigma, _evidence(9, (5,), 4.0), v0, v0 * 0.01,
                        y[:, 0], v0, v0 * 0.05, lof_ratio=1.4, agree_z=2.0, min_reads=8, smooth_misfit=fake)
        taken.append(pc.take.copy())
    assert taken[0].all()
    assert not taken[1][4] and taken[1][np.arange(9) != 4].all()


def test_pooled_misfit_is_small_for_the_plate_shape_and_large_for_another() -> None:
    # reference curves: scipy's Radau; with the plate's shape right the statistic is chi²-sized (read noise
    # only), while a Michaelis–Menten well (Km 0.3 mM) fitted with the Hill plate's shape leaves a large one
    y, v0 = plate(hill_rate, S_HILL, HILL["vmax"], 0.002, 10)
    sigma = np.full(S_HILL.size, 0.002)
    valid = np.ones(y.shape, bool)
    fit = fit_pooled("hill", T, y, valid, S_HILL, SPC, sigma, np.array([2.0, 0.4]), v0, y[:, 0])
    from vzero.plugins.rates.poolshape import pooled_misfit

    right = pooled_misfit(fit, T, y, valid, S_HILL, SPC, sigma, smooth_misfit)
    assert np.all(right < 13.8)  # chi² with 2 degrees of freedom at 0.1 % (scipy.stats.chi2.ppf(0.999, 2))
    y_mm = y.copy()
    y_mm[6] = 0.05 + radau_signal(lambda s, vm: vm * s / (0.3 + s), S_HILL[6:7], np.array([4e-4]))[0]
    fit_mm = fit_pooled("hill", T, y_mm, valid, S_HILL, SPC, sigma, np.array([2.0, 0.4]), v0, y_mm[:, 0])
    wrong = pooled_misfit(fit_mm, T, y_mm, valid, S_HILL, SPC, sigma, smooth_misfit)
    assert wrong[6] > 13.8


def test_falling_signal_plate_takes_the_shape_with_the_right_sign() -> None:
    # a substrate read directly (signal falls as it is used: signal per concentration -3.4 AU/mM, invented);
    # reference curves: scipy's Radau of the Hill law; the plate's shape recovers h and every v0 keeps its sign
    scale = np.linspace(0.8, 1.2, 9)
    y, v0 = plate(hill_rate, S_HILL, HILL["vmax"], 0.0, 0, scale)
    y_fall, v_fall = 2.0 - (y - 0.05), -v0
    fit = fit_pooled("hill", T, y_fall, np.ones(y.shape, bool), S_HILL, -SPC, np.full(9, 1e-4),
                     np.array([1.8, 0.4]), v_fall * 1.1, y_fall[:, 0])
    assert fit.converged and fit.shape == pytest.approx([HILL["h"], HILL["k"]], rel=1e-4)
    assert fit.v0 == pytest.approx(v_fall, rel=1e-5) and np.all(fit.v0 < 0)
    noisy = y_fall + 0.002 * np.random.default_rng(12).standard_normal(y.shape)
    r = model_choice(T, noisy, s0=S_HILL, signal_per_conc=-SPC)
    pooled = r.extra["model"] == POOLED_CODES["hill"]
    assert pooled.sum() >= 5
    assert np.all(np.abs(r.v0[pooled] / v_fall[pooled] - 1.0) < 4 * r.stderr[pooled] / np.abs(v_fall[pooled]))


def test_shape_loadings_give_the_rates_covariance_through_the_shape() -> None:
    # reference: the off-diagonal ln v0 blocks of the dense inverse of the full normal matrix at the optimum
    # (numpy.linalg.inv), i.e. the covariance two wells' ln v0 share through the plate's shape; the read noise
    # is stated above the reads' scatter so that no variance is scaled (as in the test above)
    y, v0 = plate(hill_rate, S_HILL, HILL["vmax"], 0.002, 5)
    sigma = np.full(S_HILL.size, 0.0025)
    fit = fit_pooled("hill", T, y, np.ones(y.shape, bool), S_HILL, SPC, sigma, np.array([2.0, 0.4]), v0, y[:, 0])
    f = _hill_eval(T, S_HILL, SPC)
    _, jl, jg = f(np.log(fit.shape), fit.baseline, np.log(fit.v0 / SPC))
    cov = np.linalg.inv((lambda a: a.T @ a)(_dense(jl, jg, np.ones(y.shape) / sigma[:, None] ** 2)))
    ln_v0 = cov[1:2 * S_HILL.size:2, 1:2 * S_HILL.size:2]
    off = ~np.eye(S_HILL.size, dtype=bool)
    np.testing.assert_allclose((fit.load @ fit.load.T)[off], ln_v0[off], rtol=1e-6, atol=1e-12)
    assert fit.load.shape == (S_HILL.size, 2)
