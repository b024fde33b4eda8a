"""The shape profile behind the standard error of a signal-unit progress curve (plugins/rates/shapegrid.py,
and progress.shape_profile).

Each piece is checked against an independent calculation: the conversion against scipy.optimize.brentq on
the implicit rate law, the fixed-shape curve against scipy.integrate.solve_ivp on the Michaelis–Menten rate
law itself, its Jacobian against central differences, the shape fits against scipy.optimize.least_squares,
and the mixture against a hand calculation. Invented data.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import brentq, least_squares
from vzero.plugins.rates.progress import progress_curve, shape_profile
from vzero.plugins.rates.shapegrid import (
    BEND_KNOTS,
    SHAPE_GRID,
    bend_factor,
    fixed_shape_model,
    mixed_ln_v0_var,
    profile_bend,
    shape_conversion,
)

T = np.arange(60) * 10.0


@pytest.mark.parametrize("r", [0.0, 1e-6, 0.25, 0.5, 0.9, 0.95])
@pytest.mark.parametrize("tau", [1e-9, 3e-6, 2e-5, 1e-3, 0.05, 0.4, 1.0, 2.0])
def test_conversion_solves_the_rate_law(r: float, tau: float) -> None:
    # reference: scipy.optimize.brentq on r x - (1 - r) ln(1 - x) = tau, bracketed in [0, 1)
    x_ref = brentq(lambda x: r * x - (1 - r) * np.log1p(-x) - tau, 0.0, 1 - 1e-15, xtol=1e-300, rtol=1e-15)
    x = float(shape_conversion(np.array([tau]), np.array([r]))[0])
    assert x == pytest.approx(x_ref, rel=1e-12, abs=0.0)


def test_conversion_at_vanishing_time() -> None:
    # the rate law's expansion x = tau - (1 - r) tau²/2 + ...: x/tau -> 1 as tau -> 0 (below the reach of
    # brentq's bracket in double precision)
    x = shape_conversion(np.array([1e-300, 1e-200, 0.0]), np.array([0.1, 0.5, 0.5]))
    np.testing.assert_allclose(x[:2], [1e-300, 1e-200], rtol=1e-15)
    assert x[2] == 0.0


@pytest.mark.parametrize(("r", "c1"), [(0.0, 0.4), (0.25, 0.3), (0.75, 0.2), (0.95, 0.02)])
def test_fixed_shape_curve_follows_michaelis_menten(r: float, c1: float) -> None:
    # reference: scipy.integrate.solve_ivp of dP/dt = Vmax (A - P)/(Km + A - P), the Michaelis-Menten rate
    # law with A = (1 - r)/c1, Km = A (1 - r)/r, Vmax = v0/r (first order dP/dt = v0 (1 - c1 P) when r = 0)
    v0, base, d = 2e-3, 0.1, 1.0
    if r == 0.0:
        def rate(_t: float, p: np.ndarray) -> np.ndarray:
            return v0 * (1 - c1 * p)
    else:
        amp = (1 - r) / c1
        km, vmax = amp * (1 - r) / r, v0 / r

        def rate(_t: float, p: np.ndarray) -> np.ndarray:
            return vmax * (amp - p) / (km + amp - p)
    sol = solve_ivp(rate, (0.0, T[-1]), [0.0], t_eval=T, rtol=1e-11, atol=1e-14, method="LSODA")
    model = fixed_shape_model(T, np.array([d]), np.array([r]))
    f, _ = model(np.array([[base, np.log(v0), c1]]), np.array([0]))
    np.testing.assert_allclose(f[0] - base, sol.y[0], rtol=1e-7, atol=1e-12)
    assert 0.05 < sol.y[0][-1] * c1 / (1 - r if r else 1)  # the curve bends: not a trivial comparison


def test_drop_term_matches_high_precision() -> None:
    # reference: j(x) = (x + (1 - x) ln(1 - x))/x² in 50-digit decimal arithmetic (Python's decimal module),
    # on both sides of the switch from the series to the closed form
    from decimal import Decimal, getcontext

    from vzero.plugins.rates.shapegrid import _drop_term

    getcontext().prec = 50
    for x in (1e-7, 3e-4, 9.9e-4, 1.1e-3, 0.02, 0.3, 0.9):
        xd = Decimal(x)
        ref = (xd + (1 - xd) * (1 - xd).ln()) / (xd * xd)
        assert float(_drop_term(np.array([x]))[0]) == pytest.approx(float(ref), rel=1e-12)


def test_zero_curvature_is_a_straight_line() -> None:
    # c1 = 0 at any shape: P = v0 t exactly (zero initial curvature)
    model = fixed_shape_model(T, np.array([-1.0, 1.0]), np.array([0.5, 0.95]))
    f, _ = model(np.array([[0.2, np.log(1e-3), 0.0], [0.1, np.log(4e-3), 0.0]]), np.array([0, 1]))
    np.testing.assert_allclose(f, [0.2 - 1e-3 * T, 0.1 + 4e-3 * T], rtol=1e-14, atol=1e-15)


@pytest.mark.parametrize(("r", "c1"), [(0.0, 0.3), (0.5, 0.0), (0.5, 0.25), (0.95, 0.01)])
def test_fixed_shape_jacobian_matches_central_differences(r: float, c1: float) -> None:
    # reference: central differences of the model's own values (forward at c1 = 0, its bound)
    d = np.array([-1.0])
    model = fixed_shape_model(T, d, np.array([r]))
    p = np.array([[0.3, np.log(2e-3), c1]])
    _, jac = model(p, np.array([0]))
    for i in range(3):
        h = 1e-6 * max(1.0, abs(p[0, i]))
        up, down = p.copy(), p.copy()
        up[0, i] += h
        if i == 2 and c1 == 0.0:
            num = (model(up, np.array([0]))[0] - model(p, np.array([0]))[0]) / h
        else:
            down[0, i] -= h
            num = (model(up, np.array([0]))[0] - model(down, np.array([0]))[0]) / (2 * h)
        scale = np.max(np.abs(num[0]))
        assert scale > 0
        np.testing.assert_allclose(jac[0, i], num[0], atol=2e-6 * scale)


def _curve(v0: float, c1: float, r: float, noise: float, seed: int, n: int = 6) -> np.ndarray:
    """``n`` noisy replicate wells of one fixed-shape curve (invented)."""
    model = fixed_shape_model(T, np.ones(1), np.array([r]))
    f, _ = model(np.array([[0.05, np.log(v0), c1]]), np.array([0]))
    return f[0] + noise * np.random.default_rng(seed).standard_normal((n, T.size))


def test_shape_fits_agree_with_least_squares() -> None:
    # reference: scipy.optimize.least_squares (trust region reflective, c1 >= 0) on the same block means
    y = _curve(2e-3, 0.4, 0.5, 0.002, 3)
    w = np.ones_like(y)
    start = np.column_stack([np.full(6, 0.04), np.full(6, np.log(1.8e-3)), np.full(6, np.log(0.3)), np.zeros(6)])
    prof = shape_profile(T, y, w, np.ones(6), start, np.full(6, 0.002**2))
    tb = T.reshape(20, 3).mean(axis=1)
    yb = y.reshape(6, 20, 3).mean(axis=2)
    for g, r in enumerate(SHAPE_GRID):
        model = fixed_shape_model(tb, np.ones(1), np.array([r]))
        for i in range(6):
            def resid(p: np.ndarray, i: int = i, model=model) -> np.ndarray:
                return np.sqrt(3.0) * (model(p[None, :], np.array([0]))[0][0] - yb[i])
            ref = least_squares(resid, [0.04, np.log(1.8e-3), 0.3], bounds=([-np.inf, -20, 0], [np.inf, 0, np.inf]),
                                xtol=1e-14, ftol=1e-14, gtol=1e-14)
            assert prof["converged"][i, g]
            assert prof["ln_v0"][i, g] == pytest.approx(ref.x[1], abs=2e-4)
            assert prof["rss"][i, g] == pytest.approx(2 * ref.cost, rel=1e-3, abs=1e-3 * 0.002**2)
    # the true shape fits best on most wells, the straight-ish ends worst: the grid does discriminate
    assert np.mean(np.argmin(prof["rss"], axis=1) == SHAPE_GRID.index(0.5)) >= 0.5


def test_shape_variance_is_the_delta_method_away_from_the_bound() -> None:
    # reference: the delta method from least_squares' Jacobian (ln v0 element of (J'J)^-1 times the read
    # variance) on a clearly bending curve, where the curvature's bound at zero removes nothing
    y = _curve(2e-3, 0.4, 0.5, 0.002, 4, n=1)
    start = np.array([[0.05, np.log(2e-3), np.log(0.4), 0.0]])
    prof = shape_profile(T, y, np.ones_like(y), np.ones(1), start, np.array([0.002**2]), grid=(0.5,))
    tb, yb = T.reshape(20, 3).mean(axis=1), y.reshape(20, 3).mean(axis=1)
    model = fixed_shape_model(tb, np.ones(1), np.array([0.5]))

    def resid(p: np.ndarray) -> np.ndarray:
        return np.sqrt(3.0) * (model(p[None, :], np.array([0]))[0][0] - yb)
    ref = least_squares(resid, [0.05, np.log(2e-3), 0.4], xtol=1e-14, ftol=1e-14, gtol=1e-14)
    var_ref = np.linalg.inv(ref.jac.T @ ref.jac)[1, 1] * 0.002**2
    assert prof["var"][0, 0] == pytest.approx(var_ref, rel=0.02)


def test_mixture_by_hand() -> None:
    # hand calculation: two shapes whose RSS differ by 2 s2 weigh 1 : e^-1 (s2 = 0.5, RSS about 2000 s2, so
    # that only differences of RSS may enter the weights); the variance is taken about the reported ln v0
    prof = {"ln_v0": np.array([[-7.01, -7.03, 0.5]]), "var": np.array([[4e-4, 1e-4, 1.0]]),
            "rss": np.array([[1000.0, 1001.0, 50.0]]), "converged": np.array([[True, True, False]])}
    w1, w2 = 1.0, np.exp(-1.0)
    expected = (w1 * (4e-4 + 0.01**2) + w2 * (1e-4 + 0.03**2)) / (w1 + w2)
    got = mixed_ln_v0_var(prof, np.array([-7.0]), np.array([0.5]))
    assert got[0] == pytest.approx(expected, rel=1e-12)
    prof["converged"][:] = False
    assert np.isnan(mixed_ln_v0_var(prof, np.array([-7.0]), np.array([0.5]))[0])


def _bounded_reference(model: object, yb: np.ndarray, p0: list[float], noise: float,
                       r: float) -> tuple[float, float, float, float]:
    """Reference for the bounded curvature at one fixed shape ``r``, from scipy alone: the bounded optimum and
    Jacobian of ``least_squares`` (block means of 3 reads, so residuals weighted by sqrt 3), the optimum without
    bounds one Gauss-Newton step from there (``numpy.linalg.lstsq``), and the variance of ln v0 as the part with
    c1 held plus b² E[(C - c1_hat)²], C normal about that optimum truncated to [0, (1 - r)/P_last]
    (``scipy.stats.truncnorm``). Returns the fitted c1, that variance, the bend statistic c_free/sd and the
    unbounded variance of ln v0."""
    from scipy.stats import truncnorm

    def resid(p: np.ndarray) -> np.ndarray:
        return np.sqrt(3.0) * (model(p[None, :], np.array([0]))[0][0] - yb)  # type: ignore[operator]

    fit = least_squares(resid, p0, bounds=([-1, -20, 0], [1, 0, np.inf]), xtol=1e-14, ftol=1e-14, gtol=1e-14)
    c_free = fit.x[2] - np.linalg.lstsq(fit.jac, fit.fun, rcond=None)[0][2]
    cov = np.linalg.inv(fit.jac.T @ fit.jac) * noise**2
    b, sd = cov[1, 2] / cov[2, 2], np.sqrt(cov[2, 2])
    p_last = model(fit.x[None, :], np.array([0]))[0][0][-1] - fit.x[0]  # type: ignore[operator]
    dist = truncnorm(-c_free / sd, ((1 - r) / p_last - c_free) / sd, loc=c_free, scale=sd)
    var = cov[1, 1] - cov[1, 2] * b + b * b * (dist.var() + (dist.mean() - fit.x[2]) ** 2)
    return float(fit.x[2]), float(var), float(c_free / sd), float(cov[1, 1])


def test_bounded_curvature_by_truncated_normal() -> None:
    # reference: on a straight line (true curvature 0) at one fixed shape, the variance of ln v0 is the part
    # with c1 held plus b² E[(C - c1_hat)²], C the normal likelihood of c1 about its optimum without bounds
    # truncated to [0, (1 - r)/P_last] (scipy.stats.truncnorm). The bounded optimum and its Jacobian from
    # scipy.optimize.least_squares; the optimum without bounds in the linear approximation, a Gauss-Newton
    # step from there (numpy.linalg.lstsq), since the model holds c1 at 0 below its bound
    r = 0.5
    y = _curve(2e-3, 0.0, r, 0.002, 11, n=40)
    tb = T.reshape(20, 3).mean(axis=1)
    yb = y.reshape(40, 20, 3).mean(axis=2)
    model = fixed_shape_model(tb, np.ones(1), np.array([r]))
    start = np.column_stack([np.full(40, 0.05), np.full(40, np.log(2e-3)), np.full(40, np.log(0.05)), np.zeros(40)])
    prof = shape_profile(T, y, np.ones_like(y), np.ones(40), start, np.full(40, 0.002**2), grid=(r,))
    shorter = []
    for i in range(40):
        c_hat, expected, z, unbounded = _bounded_reference(model, yb[i], [0.05, np.log(2e-3), 0.05], 0.002, r)
        if c_hat > 1e-6:  # the bound is not active on this well
            continue
        assert prof["var"][i, 0] == pytest.approx(expected, rel=0.02)
        # the bend statistic: the optimum without bounds over its standard error, from the same reference
        assert prof["bend"][i, 0] == pytest.approx(z, rel=0.02, abs=0.02)
        shorter.append(prof["var"][i, 0] / unbounded)
    assert len(shorter) >= 8  # about half the wells of a straight line end on the bound
    assert np.mean(shorter) < 0.9  # and there the bound does shorten the error bar


def test_signal_unit_progress_takes_the_mixture(monkeypatch: pytest.MonkeyPatch) -> None:
    # progress_curve without S0 reports SE(v0) = |v0| sqrt(mixture of ln v0's variance); where the mixture is
    # not finite (no shape's fit converged) it falls back to the four-parameter delta method
    import vzero.plugins.rates.progress as pg

    y = _curve(1.5e-3, 0.05, 0.8, 0.002, 5)
    base = progress_curve(T, y)
    monkeypatch.setattr(pg, "mixed_ln_v0_var", lambda prof, lv, s2: np.full(lv.shape, 0.01**2))
    monkeypatch.setattr(pg, "bend_factor", np.ones_like)  # the factor has its own tests below
    fixed = progress_curve(T, y)
    np.testing.assert_array_equal(fixed.v0, base.v0)  # the SE changes, never v0
    np.testing.assert_allclose(fixed.stderr, 0.01 * np.abs(base.v0), rtol=1e-12)
    monkeypatch.setattr(pg, "mixed_ln_v0_var", lambda prof, lv, s2: np.full(lv.shape, np.nan))
    lost = progress_curve(T, y)
    assert np.all(np.isfinite(lost.stderr))
    assert np.all(lost.stderr > 0)
    assert not np.allclose(lost.stderr, base.stderr, rtol=1e-3)


def test_bend_factor_shape() -> None:
    # the factor only ever shortens the profile's SE, less as the curve bends more clearly, and not at all
    # from the last knot on (there the profile is calibrated: docs/rates.md); a well without a converged
    # shape (z NaN) keeps its SE
    z = np.linspace(-20.0, 60.0, 4001)
    f = bend_factor(z)
    assert np.all(np.diff(f) >= 0.0)
    assert np.all((f > 0.0) & (f <= 1.0))
    assert f[0] < 0.9  # a straight-looking curve's SE is shortened (the measured factor, bench.se_calibration)
    last = BEND_KNOTS[-1][0]
    assert BEND_KNOTS[-1][1] == 1.0
    np.testing.assert_array_equal(f[z >= last], 1.0)
    assert bend_factor(np.array([np.nan]))[0] == 1.0
    knots_z = [k[0] for k in BEND_KNOTS]
    assert knots_z == sorted(knots_z)
    np.testing.assert_allclose(bend_factor(np.array(knots_z)), [k[1] for k in BEND_KNOTS], rtol=0, atol=0)


def test_profile_bend_takes_the_best_converged_shape() -> None:
    # by hand: the least RSS among converged shapes (the third shape has a smaller RSS but did not converge)
    prof = {"rss": np.array([[3.0, 1.0, 0.5], [np.nan, 2.0, 1.0], [1.0, 1.0, 1.0]]),
            "converged": np.array([[True, True, False], [True, True, True], [False, False, False]]),
            "bend": np.array([[0.1, 2.5, 9.0], [7.0, -0.3, 1.2], [1.0, 1.0, 1.0]])}
    z = profile_bend(prof)
    assert z[0] == 2.5
    assert z[1] == 1.2
    assert np.isnan(z[2])


def test_bend_factor_leaves_a_clearly_curving_well_alone(monkeypatch: pytest.MonkeyPatch) -> None:
    # a well whose curve clearly bends (S0 = Km, 30 % converted: z about 10) keeps the profile's SE exactly;
    # a straight one (no curvature) has it shortened by the factor at its own z, and v0 never changes
    import vzero.plugins.rates.progress as pg

    bent = _curve(1.5e-3, 0.4, 0.5, 0.002, 21, n=6)
    straight = _curve(1.5e-3, 0.0, 0.5, 0.002, 22, n=6)
    y = np.vstack([bent, straight])
    seen: list[dict[str, np.ndarray]] = []
    real = pg.shape_profile
    monkeypatch.setattr(pg, "shape_profile", lambda *a, **k: seen.append(real(*a, **k)) or seen[-1])
    calibrated = progress_curve(T, y)
    z = profile_bend(seen[0])
    monkeypatch.setattr(pg, "bend_factor", np.ones_like)
    plain = progress_curve(T, y)
    np.testing.assert_array_equal(calibrated.v0, plain.v0)
    assert np.all(z[:6] > BEND_KNOTS[-1][0])
    np.testing.assert_array_equal(calibrated.stderr[:6], plain.stderr[:6])
    np.testing.assert_allclose(calibrated.stderr[6:] / plain.stderr[6:], bend_factor(z[6:]), rtol=1e-12)
    assert np.all(calibrated.stderr[6:] < plain.stderr[6:])


def test_bounded_curvature_near_completion_by_truncated_normal() -> None:
    # reference as above, on a curve that nearly completes at its shape (x = aP about 0.9 at the last read), so
    # that the curvature's upper bound (1 - r)/P_last (the whole apparent amplitude converted by the last
    # read; the documented range of shape_profile) cuts into its likelihood: the variance from
    # scipy.stats.truncnorm on [0, (1 - r)/P_last] with the bounded optimum and Jacobian of least_squares
    r = 0.5
    y = _curve(2e-3, 1.0, r, 0.02, 12, n=12)
    tb = T.reshape(20, 3).mean(axis=1)
    yb = y.reshape(12, 20, 3).mean(axis=2)
    model = fixed_shape_model(tb, np.ones(1), np.array([r]))
    start = np.column_stack([np.full(12, 0.05), np.full(12, np.log(2e-3)), np.zeros(12), np.zeros(12)])
    prof = shape_profile(T, y, np.ones_like(y), np.ones(12), start, np.full(12, 0.02**2), grid=(r,))
    for i in range(12):
        _, expected, _, _ = _bounded_reference(model, yb[i], [0.05, np.log(2e-3), 1.0], 0.02, r)
        assert prof["var"][i, 0] == pytest.approx(expected, rel=0.03)
