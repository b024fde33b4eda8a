"""The `progress` rate's standard error when the curvature u = Km/(Km + S0) is confined to (0, 1).

The mean squared distance of a truncated normal from a point is checked against ``scipy.stats.truncnorm``'s
mean and variance (an independent implementation of the same distribution) and, far outside the range,
against numerical integration with ``scipy.integrate.quad``; the split of the delta-method variance against
the 3x3 covariance algebra written out here; the unbounded optimum of the curvature against scipy's
``least_squares`` without bounds; and the standard error itself against the scatter of 400 simulated
replicate wells (``simulate_plate``: the rate law integrated by ``solve_ivp``, not the closed form the fit
uses) on a curve far from completion, where the unbounded delta-method SE was 3.4x the scatter
(docs/rates.md). Invented data.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.optimize import brentq, least_squares
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates.progress import (
    _concentration_model,
    bounded_ln_v0_var,
    free_curvature,
    integrated_mm,
    progress_curve,
    truncated_mse,
)


def _truncnorm_mse(m: float, sd: float, est: float) -> float:
    """E[(U - est)²] for U ~ N(m, sd²) truncated to [0, 1], from scipy's truncated normal."""
    dist = stats.truncnorm(-m / sd, (1.0 - m) / sd, loc=m, scale=sd)
    return float(dist.var() + (dist.mean() - est) ** 2)


@pytest.mark.parametrize(("m", "sd", "est"), [
    (0.5, 0.01, 0.5),  # well inside: the plain variance sd²
    (0.09, 0.27, 0.09),  # near the lower bound, as at S0 = 10 Km, 5 % converted
    (-0.2, 0.27, 0.0),  # the optimum past the bound, the estimate on it
    (1.3, 0.4, 1.0),  # past the upper bound (mirrored in the closed form)
    (0.5, 2.7, 0.5),  # far wider than the range: nearly uniform
    (-3.0, 1.7, 0.0),
    (0.3, 30.0, 0.3),
])
def test_truncated_mse_matches_scipy(m: float, sd: float, est: float) -> None:
    got = truncated_mse(np.array([m]), np.array([sd]), np.array([est]))[0]
    assert got == pytest.approx(_truncnorm_mse(m, sd, est), rel=1e-6)


def test_truncated_mse_far_outside_the_range() -> None:
    # 40 sd below the bound: Z = Phi(b) - Phi(a) underflows in plain arithmetic; by quadrature of the
    # density exp(-(u - m)²/(2 sd²)) on [0, 1] (scipy), scaled at u = 0 so that it stays finite
    m, sd = -0.4, 0.01
    dens = lambda u: np.exp(-((u - m) ** 2 - m * m) / (2 * sd * sd))  # noqa: E731
    mass, _ = integrate.quad(dens, 0.0, 1.0, points=[0.0, 1e-3], epsabs=0, epsrel=1e-12)
    second, _ = integrate.quad(lambda u: u * u * dens(u), 0.0, 1.0, points=[0.0, 1e-3], epsabs=0, epsrel=1e-12)
    got = truncated_mse(np.array([m]), np.array([sd]), np.array([0.0]))[0]
    assert got == pytest.approx(second / mass, rel=1e-6)
    assert got < (sd * sd / abs(m)) ** 2 * 2.01  # an exponential tail: mean and SD sd²/|m|
    assert np.isnan(truncated_mse(np.array([0.5]), np.array([0.0]), np.array([0.5]))[0])


def test_bounded_variance_splits_the_covariance() -> None:
    # (baseline, ln v0, u): the part of Var(ln v0) with u held plus b² times the truncated normal's mean
    # squared distance from the fitted u
    corr = np.array([[1.0, 0.3, -0.2], [0.3, 1.0, 0.95], [-0.2, 0.95, 1.0]])
    sd_u = np.array([1e-4, 0.3, 1.0, 30.0])  # from well determined to far past its range
    sds = np.stack([np.full(4, 0.5), np.full(4, 0.01), sd_u], axis=1)
    cov = sds[:, :, None] * corr[None] * sds[:, None, :]
    u_free = np.array([0.4, -0.1, 0.5, 2.0])
    u_hat = np.clip(u_free, 0.0, 1.0)
    cll, clu, cuu = cov[:, 1, 1], cov[:, 1, 2], cov[:, 2, 2]
    b = clu / cuu
    mse = [_truncnorm_mse(m, s, e) for m, s, e in zip(u_free, np.sqrt(cuu), u_hat, strict=True)]
    expected = np.minimum(cll - b * clu + b * b * np.array(mse), cll)
    got = bounded_ln_v0_var(cov, u_hat, u_free)
    np.testing.assert_allclose(got, expected, rtol=1e-6)
    assert np.all(got <= cll * (1 + 1e-12))
    np.testing.assert_allclose(got[0], cll[0], rtol=1e-6)  # u well determined: the plain delta method


def test_free_curvature_is_the_unbounded_optimum() -> None:
    # near-linear curves (S0 = 10 Km, 5 % converted) whose noise pulls the best curvature below 0: the fit
    # stops on the bound u = 0, and the Gauss-Newton step goes to the least of the sum of squares in the
    # linear approximation. Independent check: the profile sum of squares over u in [0, 0.2] (baseline and
    # ln v0 re-fitted at each u by scipy least_squares) is a parabola there; the vertex extrapolated from it
    # must agree within a tenth of u's standard error (about 0.27 here)
    t = np.arange(60) * 10.0
    vmax = brentq(lambda v: 1 - integrated_mm(t[-1], 10.0, 1.0, v) / 10.0 - 0.05, 1e-9, 10.0)
    sim = simulate_plate(t, np.array([10.0]), 1.0, vmax, baseline=0.1)
    y = sim.signal + 0.002 * np.random.default_rng(5).standard_normal((60, t.size))
    r = progress_curve(t, y, s0=np.full(60, 10.0), signal_per_conc=1.0)
    u_fit = r.extra["km"] / (r.extra["km"] + 10.0)
    rows = np.flatnonzero(u_fit < 1e-6)[:6]
    assert rows.size >= 4  # the case this is about (about a third of such wells)
    model = _concentration_model(t, np.full((rows.size, 1), 10.0), 1.0)
    grid = np.linspace(1e-9, 0.2, 6)
    vertex, params = [], []
    for k, i in enumerate(rows):
        def res(p: np.ndarray, u: float, k: int = k, i: int = i) -> np.ndarray:
            return model(np.array([[p[0], p[1], u]]), np.array([k]))[0][0] - y[i]

        start = np.array([y[i, 0], np.log(r.v0[i])])
        fits = [least_squares(res, start, args=(u,), xtol=1e-14, ftol=1e-14, gtol=1e-14) for u in grid]
        cost = [2 * f.cost for f in fits]
        c2, c1, _ = np.polyfit(grid, cost, 2)
        vertex.append(-c1 / (2 * c2))
        params.append([*fits[0].x, grid[0]])
    got = free_curvature(model, np.array(params), y[rows], np.ones((rows.size, t.size)))
    assert np.all(got < 0) and np.all(np.array(vertex) < 0)
    np.testing.assert_allclose(got, vertex, atol=0.027)


def test_se_follows_the_scatter_far_from_completion() -> None:
    # S0 = Km, 5 % converted by the last read: u is not determined by the curve (its SE exceeds (0, 1)).
    # The unbounded delta-method SE was 3.4x the scatter here (SD of z 0.29, 2000 wells; docs/rates.md).
    t = np.arange(60) * 10.0
    vmax = brentq(lambda v: 1 - integrated_mm(t[-1], 1.0, 1.0, v) - 0.05, 1e-9, 10.0)
    sim = simulate_plate(t, np.array([1.0]), 1.0, vmax, baseline=0.1)
    truth = float(sim.v0_true[0])
    y = sim.signal + 0.002 * np.random.default_rng(21).standard_normal((400, t.size))
    r = progress_curve(t, y, s0=np.full(400, 1.0), signal_per_conc=1.0)
    assert np.all(np.isfinite(r.v0)) and np.all(r.stderr > 0)
    z = (r.v0 - truth) / r.stderr
    assert 0.8 <= np.std(z, ddof=1) <= 1.25, np.std(z, ddof=1)
    # 95 % intervals: conservative here by design (0.982 over 2000 wells, docs/rates.md), never short
    assert 0.93 <= np.mean(np.abs(z) <= 1.96) <= 0.995
    assert abs(np.mean(z)) < 0.3  # no bias beyond a third of a standard error


def _low_signal_plate() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Times (s), S0 (mM) and reads of five wells, Km 0.5 mM, total signal change 0.017-6.8 AU at read noise
    0.003 (integrated by solve_ivp)."""
    t = np.arange(90) * 10.0
    s0 = np.array([0.005, 0.01, 0.02, 0.5, 2.0])
    y = simulate_plate(t, s0, 0.5, 9e-4, signal_per_conc=3.4, baseline=0.05, noise=0.003, seed=4).signal
    return t, s0, y


def test_bounded_se_only_where_the_rate_is_resolved(monkeypatch: pytest.MonkeyPatch) -> None:
    # The bound's correction rests on the linear approximation; where even the corrected SE of v0 exceeds the
    # NOISY limit (a tenth of v0) it is not applied, and the larger, unbounded SE is kept (docs/rates.md: on
    # the low-signal plate's lowest substrates the bounded SE was 0.43x the scatter). Two runs: once with the
    # bounded variance replaced by the unbounded one (cov[1, 1]), once by a quarter of it (half the SE): the
    # second must report half the unbounded SE exactly where that half is within a tenth of v0.
    from vzero.plugins.rates import progress

    t, s0, y = _low_signal_plate()
    runs = {}
    for name, share in (("unbounded", 1.0), ("half", 0.25)):
        monkeypatch.setattr(progress, "bounded_ln_v0_var",
                            lambda cov, u_hat, u_free, share=share: share * cov[:, 1, 1])
        runs[name] = progress_curve(t, y, s0=s0, signal_per_conc=3.4)
    se_u, se_h = runs["unbounded"].stderr, runs["half"].stderr
    resolved = 0.5 * se_u <= 0.1 * np.abs(runs["unbounded"].v0)
    np.testing.assert_allclose(se_h[resolved], 0.5 * se_u[resolved], rtol=1e-12)
    np.testing.assert_allclose(se_h[~resolved], se_u[~resolved], rtol=1e-12)
    # both sides are in this plate, and a well whose unbounded SE is beyond the limit but whose corrected one
    # is within it (the rule judges the corrected SE): the lowest substrate beyond, the next ones within
    np.testing.assert_array_equal(resolved, [False, True, True, True, True])
    # model-choice's quick fits keep the unbounded SE (docs/rates.md says why)
    quick = progress_curve(t, y, s0=s0, signal_per_conc=3.4, quick=True)
    monkeypatch.setattr(progress, "bounded_ln_v0_var", lambda cov, u_hat, u_free: np.zeros(cov.shape[0]))
    np.testing.assert_array_equal(progress_curve(t, y, s0=s0, signal_per_conc=3.4, quick=True).stderr, quick.stderr)


@pytest.mark.parametrize(("past", "kept"), [(1.9, True), (2.1, False)])
def test_bounded_se_not_where_the_free_curvature_lies_far_past_a_bound(monkeypatch: pytest.MonkeyPatch,
                                                                      past: float, kept: bool) -> None:
    # A free optimum of u more than PAST_BOUND_Z = 2 of its SEs past a bound means the curve asks for a shape
    # Michaelis–Menten cannot take (a rate falling faster than first order, as a cooperative enzyme's): the
    # bound is then the model's limit, and the unbounded SE is kept. The free optimum is set by hand at
    # 1 + past * sd_u (sd_u read from the covariance the fit hands over) on the resolved wells.
    from vzero.plugins.rates import progress

    t, s0, y = _low_signal_plate()
    seen: dict[str, np.ndarray] = {}

    def half(cov: np.ndarray, u_hat: np.ndarray, u_free: np.ndarray) -> np.ndarray:
        seen["sd_u"] = np.sqrt(cov[:, 2, 2])
        return 0.25 * cov[:, 1, 1]

    monkeypatch.setattr(progress, "bounded_ln_v0_var", half)
    first = progress_curve(t, y, s0=s0, signal_per_conc=3.4)  # the free optimum as the fit finds it
    monkeypatch.setattr(progress, "free_curvature", lambda *a: 1.0 + past * seen["sd_u"])
    moved = progress_curve(t, y, s0=s0, signal_per_conc=3.4)
    monkeypatch.setattr(progress, "bounded_ln_v0_var", lambda cov, u_hat, u_free: cov[:, 1, 1].copy())
    unbounded = progress_curve(t, y, s0=s0, signal_per_conc=3.4).stderr
    resolved = slice(1, None)  # wells 1-4 (test above)
    np.testing.assert_allclose(first.stderr[resolved], 0.5 * unbounded[resolved], rtol=1e-12)
    np.testing.assert_allclose(moved.stderr[resolved], (0.5 if kept else 1.0) * unbounded[resolved], rtol=1e-12)
