"""Documented thresholds exactly at equality, where the rule's own words decide the side.

A statistic compared with a threshold that is a parameter can be hit exactly: the function is run once to
read the statistic it reports, then again with the threshold set to that very number (the computation is
deterministic, so the statistic is the same bit for bit) and to the next float below it. Both sides of
each rule, from its docstring:

- :func:`vzero.plugins.rates.lagdecay.lag_decay`: FIT_FAILED when the residual RMS *exceeds*
  ``fail_ratio`` times the read noise, so a ratio equal to ``fail_ratio`` is no failure;
- :func:`vzero.plugins.rates.earlylag.early_lag`: a lag when the largest hinge t is *above* ``z``
  (module text: ``zmax > z``), so a statistic equal to ``z`` is no lag.

And one count at its edge: :func:`vzero.plugins.rates.polynomial.polynomial`'s residual ratio on the
smallest window a cubic is fitted to (one residual degree of freedom). Invented curves.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.rates import earlylag
from vzero.plugins.rates.lagdecay import lag_decay

T = np.arange(60) * 10.0


def _decaying(seed: int) -> np.ndarray:
    """A well whose rate falls first-order (k = 2e-3 /s) from 0.004 per s, read noise 0.003, and a slight
    wobble that leaves the residual RMS a little above the read noise."""
    rng = np.random.default_rng(seed)
    steady = 0.1 + 0.004 / 2e-3 * -np.expm1(-2e-3 * T) + 0.004 * np.sin(T / 40.0)
    return (steady + rng.normal(0.0, 0.003, T.size))[None, :]


def test_lag_decay_fails_only_above_fail_ratio() -> None:
    y = _decaying(11)
    ratio = float(lag_decay(T, y, fail_ratio=math.inf).extra["rmse_over_noise"][0])
    # (about 1.5 on this well; a NaN from a failed fit would fail the bit-for-bit check below, NaN != NaN)
    at = lag_decay(T, y, fail_ratio=ratio)
    assert at.extra["rmse_over_noise"][0] == ratio  # the same statistic, bit for bit
    assert not at.flags[0] & Flag.FIT_FAILED  # equal: does not exceed
    below = lag_decay(T, y, fail_ratio=float(np.nextafter(ratio, 0.0)))
    assert below.flags[0] & Flag.FIT_FAILED  # one float below the ratio: exceeds


def _lagged(seed: int) -> np.ndarray:
    """A rising well, slow for four reads then steady at 0.05 per s, read noise 0.02 (as in the early-lag
    edge tests)."""
    t = np.arange(60) * 5.0
    rng = np.random.default_rng(seed)
    return (np.where(t < 20.0, 0.01 * t, 0.05 * t - 0.8) + rng.normal(0.0, 0.02, t.size))[None, :]


def test_early_lag_needs_a_statistic_above_z() -> None:
    t = np.arange(60) * 5.0
    y = _lagged(5)
    args = (t, y, np.full(1, 0.02), np.ones(1), np.array([True]))
    zmax = float(earlylag.early_lag(*args, z=0.0).z[0])
    assert zmax > 3.0  # precondition: a clear lag
    at = earlylag.early_lag(*args, z=zmax)
    assert at.z[0] == zmax  # the same statistic, bit for bit
    assert not at.has[0]  # equal: not above
    assert at.lag_s[0] == 0.0
    below = earlylag.early_lag(*args, z=float(np.nextafter(zmax, -math.inf)))
    assert below.has[0]  # one float below: above it
    assert below.lag_s[0] > 0.0


def test_polynomial_ratio_with_one_residual_degree_of_freedom() -> None:
    # the smallest window the method fits: five reads for a cubic leaves n - degree - 1 = 1 residual degree
    # of freedom, and rmse_over_noise = sqrt(RSS / 1) / read noise (RSS of numpy.polyfit on the same reads);
    # a floor of the degrees of freedom above 1 would change it here and nowhere else
    from vzero.plugins.rates.polynomial import polynomial

    rng = np.random.default_rng(21)
    t = np.arange(40) * 5.0
    y = 0.2 + 3e-3 * t - 4e-6 * t**2 + rng.normal(0, 0.002, (3, t.size))
    r = polynomial(t, y, degree=3, window_s=20.0, min_points=5)
    sel = t <= 20.0
    assert sel.sum() == 5  # precondition: five reads in the window
    for i in range(3):
        c = np.polyfit(t[sel], y[i, sel], 3)
        rss = float(((y[i, sel] - np.polyval(c, t[sel])) ** 2).sum())
        want = np.sqrt(rss / 1.0) / r.extra["read_noise"][i]
        assert r.extra["rmse_over_noise"][i] == pytest.approx(want, rel=1e-7)
