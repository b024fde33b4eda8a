"""Robust per-well read noise from second differences, shared by the rate kernels and the blank stage.

All functions work on whole plates: ``signal`` is ``[n_wells, n_time]``.
"""

from __future__ import annotations

import numpy as np

#: Scale from the median absolute deviation to the standard deviation of a normal distribution.
MAD_TO_SD = 1.4826


def row_median(a: np.ndarray) -> np.ndarray:
    """Median of each row of a finite 2-D array, equal to ``numpy.median(a, axis=1)``.

    One partition at the upper middle element and, for an even row length, the largest element below it:
    less work than ``numpy.median``, which partitions at two places and checks for NaN (the reads here are
    finite already).
    """
    k = a.shape[1] // 2
    part = np.partition(a, k, axis=1)
    hi = part[:, k]
    if a.shape[1] % 2:
        return hi
    return (part[:, :k].max(axis=1) + hi) / 2.0


def read_noise(signal: np.ndarray, time: np.ndarray | None = None) -> np.ndarray:
    """Robust per-well read noise (signal units) from second differences of the finite reads.

    For three consecutive finite reads the middle one is compared with the straight line through its
    neighbours, ``r = y1 - (a y0 + b y2)`` with ``a = (t2 - t1)/(t2 - t0)``, ``b = (t1 - t0)/(t2 - t0)``;
    for independent reads of standard deviation sigma, ``Var(r) = sigma² (1 + a² + b²)`` (for equal spacing
    this is the classic ``Var(y2 - 2 y1 + y0) = 6 sigma²``). The estimate is ``1.4826 * MAD`` of the
    normalised ``r``: robust to single outliers, and blind to straight lines and nearly so to smooth curves.
    Missing reads are skipped (the neighbours are the nearest finite reads). Wells with fewer than 3
    usable triples get NaN.
    """
    y = np.asarray(signal, dtype=float)
    n_w, n_t = y.shape
    out = np.full(n_w, np.nan)
    if n_t < 3:
        return out
    t = np.arange(n_t, dtype=float) if time is None else np.asarray(time, dtype=float)
    valid = np.isfinite(y)
    if valid.all():  # the common case: no reordering, plain medians
        t0, t1, t2 = t[:-2], t[1:-1], t[2:]
        a = (t2 - t1) / (t2 - t0)
        b = (t1 - t0) / (t2 - t0)
        r = (y[:, 1:-1] - a * y[:, :-2] - b * y[:, 2:]) / np.sqrt(1.0 + a * a + b * b)
        if n_t < 5:
            return out
        med = row_median(r)
        return MAD_TO_SD * row_median(np.abs(r - med[:, None]))
    # move each well's finite reads to the front, keeping their order
    order = np.argsort(~valid, axis=1, kind="stable")
    yv = np.take_along_axis(y, order, axis=1)
    tv = t[order]
    n_valid = valid.sum(axis=1)
    t0, t1, t2 = tv[:, :-2], tv[:, 1:-1], tv[:, 2:]
    with np.errstate(invalid="ignore", divide="ignore"):
        a = (t2 - t1) / (t2 - t0)
        b = (t1 - t0) / (t2 - t0)
        r = (yv[:, 1:-1] - a * yv[:, :-2] - b * yv[:, 2:]) / np.sqrt(1.0 + a * a + b * b)
    r[np.arange(n_t - 2)[None, :] >= (n_valid - 2)[:, None]] = np.nan
    enough = n_valid >= 5
    if np.any(enough):
        d = r[enough]
        med = np.nanmedian(d, axis=1, keepdims=True)
        out[enough] = MAD_TO_SD * np.nanmedian(np.abs(d - med), axis=1)
    return out
