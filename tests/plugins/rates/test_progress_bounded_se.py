"""The `progress` rate's standard error when the curvature u = Km/(Km + S0) is confined to (0, 1).

The variance and mean squared error of a clipped normal are checked against scipy's numerical integration
(``scipy.integrate.quad`` over ``scipy.stats.norm``), an independent computation of the same integrals, the
worst case over true values against a grid of them; the split of the delta-method
variance against the 3x3 covariance algebra written out here; and the standard error itself against the
scatter of 400 simulated replicate wells (``simulate_plate``: the rate law integrated by ``solve_ivp``, not
the closed form the fit uses) on a curve far from completion, where the unbounded delta-method SE was 3.4x
the scatter (docs/rates.md). Invented data.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.optimize import brentq
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates.progress import (
    bounded_ln_v0_var,
    clipped_mid_var,
    clipped_worst_mse,
    integrated_mm,
    progress_curve,
)


def _clipped_var_by_quadrature(sd: float) -> float:
    """Var(clip(X, 0, 1)) for X ~ N(1/2, sd²) by numerical integration (scipy), independent of the closed
    form: the mass beyond each bound sits on the bound."""
    h = min(0.5 / sd, 40.0)  # the bounds in standard units of X about its mean 1/2 (no mass past 40)
    inner, _ = integrate.quad(lambda z: (sd * z) ** 2 * stats.norm.pdf(z), -h, h, epsabs=1e-16)
    dist = stats.norm(0.5, sd)
    return inner + 0.25 * (dist.cdf(0.0) + dist.sf(1.0))  # mean 1/2 by symmetry; each bound is 1/2 away


@pytest.mark.parametrize("sd", [0.01, 0.1, 0.3, 0.5, 1.0, 3.0, 30.0])
def test_clipped_variance_matches_numerical_integration(sd: float) -> None:
    assert clipped_mid_var(np.array([sd]))[0] == pytest.approx(_clipped_var_by_quadrature(sd), rel=1e-7)


def _clipped_mse_by_quadrature(m: float, sd: float) -> float:
    """E[(clip(X, 0, 1) - m)²] for X ~ N(m, sd²) by numerical integration (scipy): the reads of X within
    (0, 1) in standard units, plus the mass on each bound at its distance from m."""
    lo, hi = max(-m / sd, -40.0), min((1.0 - m) / sd, 40.0)
    inner, _ = integrate.quad(lambda z: (sd * z) ** 2 * stats.norm.pdf(z), lo, hi, epsabs=1e-16)
    return inner + m * m * stats.norm.cdf(-m / sd) + (1.0 - m) ** 2 * stats.norm.sf((1.0 - m) / sd)


@pytest.mark.parametrize("sd", [0.01, 0.2, 0.4, 0.6, 1.0, 2.0, 10.0])
def test_worst_mse_is_the_largest_over_true_values(sd: float) -> None:
    # the closed form takes the larger of the mid-range and on-the-bound values; a grid of true values
    # (by quadrature) must not find a larger one
    grid = max(_clipped_mse_by_quadrature(m, sd) for m in np.linspace(0.0, 1.0, 101))
    assert clipped_worst_mse(np.array([sd]))[0] == pytest.approx(grid, rel=2e-3)


def test_clipped_variance_limits() -> None:
    # a well-determined u is not clipped (sd²); a hopeless one sits on either bound (variance 1/4)
    v = clipped_mid_var(np.array([1e-3, 1e4, 0.0]))
    assert v[0] == pytest.approx(1e-6, rel=1e-9)
    assert v[1] == pytest.approx(0.25, rel=1e-3)
    assert v[2] == 0.0
    w = clipped_worst_mse(np.array([1e-3, 1e4]))
    assert w[0] == pytest.approx(1e-6, rel=1e-9)
    assert w[1] == pytest.approx(0.5, rel=1e-3)  # truth on a bound, the estimate on either bound


def test_bounded_variance_splits_the_covariance() -> None:
    # (baseline, ln v0, u): the part of Var(ln v0) with u held plus the part through u, its variance capped
    corr = np.array([[1.0, 0.3, -0.2], [0.3, 1.0, 0.95], [-0.2, 0.95, 1.0]])
    sd_u = np.array([1e-4, 0.3, 1.0, 30.0])  # from well determined to far past its range
    sds = np.stack([np.full(4, 0.5), np.full(4, 0.01), sd_u], axis=1)
    cov = sds[:, :, None] * corr[None] * sds[:, None, :]
    cll, clu, cuu = cov[:, 1, 1], cov[:, 1, 2], cov[:, 2, 2]
    b = clu / cuu
    worst = [max(_clipped_mse_by_quadrature(m, s) for m in (0.0, 0.5)) for s in np.sqrt(cuu)]
    expected = cll - b * clu + b * b * np.array(worst)
    got = bounded_ln_v0_var(cov)
    np.testing.assert_allclose(got, expected, rtol=1e-6)
    assert np.all(got <= cll * (1 + 1e-12))
    np.testing.assert_allclose(got[0], cll[0], rtol=1e-6)  # u well determined: the plain delta method


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
