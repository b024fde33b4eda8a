"""Fixed-window least-squares slopes, vectorised over wells.

For each well, the ordinary least-squares line through the usable reads with ``start <= t <= end``: the
slope is v0 (signal/s), with its standard error from the residual variance (n - 2 degrees of freedom) and
the coefficient of determination R². All wells are solved at once from weighted sums, so a 1536-well plate
costs a handful of array operations. Flags: ALL_MISSING, TOO_FEW_POINTS, NO_SIGNAL (a constant well: no rate)
and NOISY (signal-to-noise of the slope below 10; the rate is kept).
"""

from __future__ import annotations

import numpy as np
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.rates.noise import flag_noisy

MIN_POINTS = 3


def window_slopes(time: np.ndarray, signal: np.ndarray, start_s: float, end_s: float) -> RateResult:
    """Slopes over ``[start_s, end_s]`` for every row of ``signal`` ([n_wells, n_time], NaN = missing)."""
    t = np.asarray(time, dtype=float)
    y = np.asarray(signal, dtype=float)
    w = (np.isfinite(y) & (t >= start_s) & (t <= end_s)).astype(float)
    yz = np.where(w > 0, y, 0.0)
    n = w.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        t_mean = (w * t).sum(axis=1) / n
        y_mean = yz.sum(axis=1) / n
        dt = (t[None, :] - t_mean[:, None]) * w
        dy = (yz - y_mean[:, None]) * w
        sxx = (dt * dt).sum(axis=1)
        sxy = (dt * dy).sum(axis=1)
        syy = (dy * dy).sum(axis=1)
        slope = sxy / sxx
        rss = np.maximum(syy - slope * sxy, 0.0)
        stderr = np.sqrt(rss / (n - 2) / sxx)
        r2 = np.where(syy > 0, 1.0 - rss / syy, np.nan)
        t_lo = np.where(w > 0, t[None, :], np.inf).min(axis=1)
        t_hi = np.where(w > 0, t[None, :], -np.inf).max(axis=1)
    flags = np.zeros(len(y), dtype=np.int64)
    flags |= np.where(~np.isfinite(y).any(axis=1), int(Flag.ALL_MISSING), 0)
    few = n < MIN_POINTS
    flags |= np.where(few, int(Flag.TOO_FEW_POINTS), 0)
    constant = (syy == 0) & ~few
    flags |= np.where(constant, int(Flag.NO_SIGNAL), 0)
    bad = few | constant | ~np.isfinite(slope)
    # NOISY as for every method: the slope's signal-to-noise |v0| / SE(v0) below 10 (docs/rates.md). The
    # rate is still reported; the recipe's fit step decides whether noisy wells are fitted.
    flag_noisy(np.where(bad, np.nan, slope), stderr, flags)
    nan = np.full(len(y), np.nan)
    return RateResult(
        v0=np.where(bad, np.nan, slope),
        stderr=np.where(bad | (n <= 2), np.nan, stderr),
        window_start_s=np.where(n > 0, t_lo, np.nan),
        window_end_s=np.where(n > 0, t_hi, np.nan),
        goodness=np.where(bad, np.nan, r2),
        flags=flags,
        n_points=n.astype(np.int64),
        lag_s=nan.copy(),
        goodness_name="r_squared",
    )
