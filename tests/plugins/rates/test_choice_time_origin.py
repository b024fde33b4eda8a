"""model-choice's time-scaled kernels do not depend on the clock's origin (invented data).

The early quadratic's slope at the first read (step 2) and the smooth misfit of step 6c work in time measured
from the first read, scaled by the run's span: reads stamped from a clock that started an hour before the
first read must give the figures of the same reads stamped from zero, to rounding (the times used here are
whole seconds, so ``t - t[0]`` is the same array either way and the figures are equal to the last digits). A
span taken from the wrong origin still gives a polynomial fit over the same reads in exact arithmetic but a
badly scaled one in floating point, and so figures off in their later digits (the residual sum of squares,
formed by subtraction, first). Both are also checked against numpy.polyfit / numpy.polynomial (independent).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from vzero.plugins.rates.choice import early_quadratic, smooth_misfit

T = np.arange(60) * 10.0  # s
HOUR = 3600.0  # s: the first read of the late plate, whole seconds


def _reads() -> np.ndarray:
    """Three invented wells on a high baseline (fluorescence-like counts): a curving rise, a faster one, and a
    near-straight one; read noise 0.002."""
    rng = np.random.default_rng(19)
    rise = 1e-3 * T - 6e-7 * T**2 + 5e-10 * T**3
    y = np.vstack([50.0 + rise, 50.0 + 2.0 * rise, 50.0 + 0.2 * rise])
    return y + rng.normal(0.0, 0.002, y.shape)


FULL = np.array([1.0, 0.5, 10.0])  # signal change at full conversion (invented)
SIGMA = np.full(3, 0.002)


def test_early_quadratic_is_the_same_from_a_late_clock() -> None:
    y = _reads()
    a = early_quadratic(T, y, FULL, frac=0.2, min_points=8, sigma=SIGMA)
    b = early_quadratic(T + HOUR, y, FULL, frac=0.2, min_points=8, sigma=SIGMA)
    for name in ("v0", "se", "curvature", "rmse_over_noise", "goodness"):
        np.testing.assert_allclose(getattr(b, name), getattr(a, name), rtol=1e-11, err_msg=name)
    np.testing.assert_array_equal(b.n, a.n)
    np.testing.assert_array_equal(b.end_s, a.end_s + HOUR)
    assert a.n.tolist()[:2] != [60, 60] and a.n[2] == 60  # two windows end early, one holds every read
    for w in range(3):
        # numpy.polyfit of a quadratic in (t - t[0]) over the same reads; residual RMS over n - 3 reads
        n = int(b.n[w])
        tt = (T + HOUR)[:n] - (T + HOUR)[0]
        c2, c1, _ = np.polyfit(tt, y[w, :n], 2)
        resid = y[w, :n] - np.polyval([c2, c1, _], tt)
        assert b.v0[w] == pytest.approx(c1, rel=1e-8)
        assert b.curvature[w] == pytest.approx(2.0 * c2, rel=1e-6)
        # the kernel forms the residual sum of squares by subtraction: on a baseline 25 000 read noises high
        # it keeps about five digits
        assert b.rmse_over_noise[w] == pytest.approx(math.sqrt(resid @ resid / (n - 3)) / SIGMA[w], rel=1e-4)


def test_smooth_misfit_is_the_same_from_a_late_clock() -> None:
    y = _reads()
    valid = np.isfinite(y)

    def line(origin: float):  # the straight part of the reads as the "fitted curve" (misfit: the rest)
        return lambda tb: 1e-3 * (tb - origin)

    a = smooth_misfit(T, y, valid, line(0.0), SIGMA)
    b = smooth_misfit(T + HOUR, y, valid, line(HOUR), SIGMA)
    np.testing.assert_allclose(b, a, rtol=1e-9)
    # numpy.polynomial.polynomial.polyfit of a cubic (weighted least squares on the block means, blocks of
    # equal size so equal weights) minus the constant's share: the statistic's definition, independently
    from vzero.plugins.rates.progress import QUICK_BLOCKS

    k = max(T.size // QUICK_BLOCKS, 1)
    tb = T.reshape(-1, k).mean(axis=1)
    for w in range(3):
        e = y[w].reshape(-1, k).mean(axis=1) - 1e-3 * tb
        fit = np.polynomial.polynomial.Polynomial.fit(tb, e, 3)
        explained = k * (((fit(tb) - e.mean()) ** 2).sum())
        # the kernel's constant term and its small ridge work on the baseline: about five digits here
        assert a[w] == pytest.approx(explained / SIGMA[w] ** 2, rel=1e-4)
