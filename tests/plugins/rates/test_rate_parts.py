"""The numerical parts the polynomial and progress-curve methods are built from, against independent
calculations (invented data): the closed-form 3x3 Hankel inverse against numpy.linalg.inv, the masked
polynomial fit and the start quadratic against numpy.polyfit, the window mask and the block means by hand,
and the power-law conversion against the integrated rate laws of orders 0, 1 and 2 (standard chemical
kinetics) and central differences.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from vzero.plugins.rates.polynomial import inv3_hankel, masked_polyfit, window_mask
from vzero.plugins.rates.progress import block_means, power_conversion, start_quadratic


def test_hankel_inverse_against_numpy() -> None:
    rng = np.random.default_rng(1)
    u = rng.uniform(0, 1, (4, 12))
    m = (u[:, :, None] ** np.arange(5)).sum(axis=1)  # moment sums of four sets of points
    for k in range(4):
        h = np.array([[m[k, i + j] for j in range(3)] for i in range(3)])
        np.testing.assert_allclose(inv3_hankel(m[k]), np.linalg.inv(h), rtol=1e-8)
    np.testing.assert_allclose(inv3_hankel(m), np.linalg.inv(np.array(
        [[[m[k, i + j] for j in range(3)] for i in range(3)] for k in range(4)])), rtol=1e-8)


@pytest.mark.parametrize("degree", [1, 2, 3])
def test_masked_polyfit_against_polyfit(degree: int) -> None:
    rng = np.random.default_rng(2)
    u = np.tile(np.linspace(0, 1, 20), (3, 1))
    y = 1.0 + 0.5 * u - 0.3 * u**2 + rng.normal(0, 0.01, u.shape)
    w = np.ones_like(y)
    w[1, ::3] = 0.0  # masked reads
    y[2, 4] = np.nan  # a missing read (weight set to 0 by the fit)
    fit = masked_polyfit(u, y, w, degree)
    for k in range(3):
        keep = (w[k] > 0) & np.isfinite(y[k])
        coef = np.polyfit(u[k, keep], y[k, keep], degree)[::-1]
        np.testing.assert_allclose(fit.coef[k], coef, rtol=1e-7, atol=1e-10)
        x = u[k, keep][:, None] ** np.arange(degree + 1)
        np.testing.assert_allclose(fit.cov_unit[k], np.linalg.inv(x.T @ x), rtol=1e-6)
        resid = y[k, keep] - x @ coef
        assert fit.rss[k] == pytest.approx(resid @ resid, rel=1e-6)
        assert fit.r2[k] == pytest.approx(1 - resid @ resid / ((y[k, keep] - y[k, keep].mean()) ** 2).sum(), rel=1e-9)
        assert fit.n[k] == keep.sum()
    # no more reads than coefficients: NaN
    few = masked_polyfit(u[:1], y[:1], (np.arange(20) <= degree).astype(float)[None, :], degree)
    assert np.isnan(few.coef).all() and np.isnan(few.rss).all() and np.isnan(few.r2).all()


def test_start_quadratic_against_polyfit_and_its_minimum_of_four_reads() -> None:
    rng = np.random.default_rng(3)
    u = np.linspace(0, 1, 15)
    y = 2.0 - 0.4 * u + 0.9 * u**2 + rng.normal(0, 0.02, (3, 15))
    w = np.ones_like(y)
    w[1, 5:9] = 0.0
    w[2, 4:] = 0.0  # four reads: still fitted
    y[1, 6] = np.nan  # a weight-0 read may be missing
    got = start_quadratic(u, y, w)
    for k in range(3):
        keep = w[k] > 0
        np.testing.assert_allclose(got[k], np.polyfit(u[keep], y[k, keep], 2)[::-1], rtol=1e-6)
    w[2, 3] = 0.0  # three reads: none
    assert np.isnan(start_quadratic(u, y, w)[2]).all() and np.isfinite(start_quadratic(u, y, w)[:2]).all()


def test_window_mask_includes_both_ends() -> None:
    t = np.arange(6) * 10.0
    got = window_mask(t, np.array([10.0, 0.0]), np.array([30.0, 5.0]))
    assert got.tolist() == [[0, 1, 1, 1, 0, 0], [1, 0, 0, 0, 0, 0]]


def test_block_means_by_hand() -> None:
    # blocks of 3 over 7 reads: [0, 1, 2], [3, 4, 5], [6] (padded); a masked read moves the block's time
    t = np.arange(7) * 2.0
    y = np.array([[1.0, 2.0, 3.0, 4.0, 5.0, 9.0, 7.0]])
    w = np.array([[1, 1, 1, 1, 1, 0, 1]], float)
    tb, yb, wb = block_means(t, y, w, 3)
    np.testing.assert_allclose(tb[0], [2.0, 7.0, 12.0])
    np.testing.assert_allclose(yb[0], [2.0, 4.5, 7.0])
    np.testing.assert_allclose(wb[0], [math.sqrt(3), math.sqrt(2), 1.0])
    # an empty block: its reads' mean time, value 0, weight 0
    tb, yb, wb = block_means(t, y, np.array([[1, 1, 1, 0, 0, 0, 1]], float), 3)
    assert tb[0, 1] == 8.0 and yb[0, 1] == 0.0 and wb[0, 1] == 0.0


def test_power_conversion_against_the_integrated_rate_laws() -> None:
    # x(u) for dx/du = (1 - x)^n: n = 1 -> 1 - exp(-u); n = 2 -> u/(1 + u); n = 0 -> min(u, 1);
    # n = 1.5 -> 1 - (1 + u/2)^-2; n = 1 + 5e-5 (the series) against exp(-log1p(m u)/m)
    u = np.array([0.0, 0.1, 0.5, 0.9, 2.0])
    cases = [(0.0, 1 - np.exp(-u)), (1.0, u / (1 + u)), (-1.0, np.minimum(u, 1.0)), (0.5, 1 - (1 + u / 2) ** -2),
             (5e-5, -np.expm1(-np.log1p(5e-5 * u) / 5e-5)), (-5e-5, -np.expm1(-np.log1p(-5e-5 * u) / -5e-5))]
    for m, want in cases:
        x, dx_dlnk, dx_dm = power_conversion(u, np.full(u.shape, m))
        np.testing.assert_allclose(x, want, rtol=1e-10, atol=1e-15)
        if m == -1.0:  # used up from u = 1 on: x = 1, no derivatives there
            assert dx_dlnk[-1] == 0.0 and dx_dm[-1] == 0.0
            continue
        # d/d ln k at fixed m is u dx/du; central differences in ln u and in m
        h = 1e-6
        up, dn = power_conversion(u * math.exp(h), np.full(u.shape, m))[0], power_conversion(
            u * math.exp(-h), np.full(u.shape, m))[0]
        np.testing.assert_allclose(dx_dlnk, (up - dn) / (2 * h), rtol=1e-5, atol=1e-10)
        hm = 1e-3 if abs(m) > 1e-3 else 2e-5
        mp, mm = power_conversion(u, np.full(u.shape, m + hm))[0], power_conversion(u, np.full(u.shape, m - hm))[0]
        np.testing.assert_allclose(dx_dm, (mp - mm) / (2 * hm), rtol=1e-3, atol=1e-8)
