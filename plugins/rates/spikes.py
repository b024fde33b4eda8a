"""Single-read spikes (a bubble, a dust particle): find them by a robust test and mask them.

For each read with a finite read on either side, ``r = y_i - (a y_prev + b y_next)`` is its distance from the
straight line through its neighbours, normalised to unit variance for independent reads (the statistic of
:func:`vzero.plugins.rates.noise.read_noise`). A lone outlier of size A gives ``r ≈ A / sqrt(1.5)`` at its own
read and about half that, of the opposite sign, at both neighbours; a bend in a smooth curve or the end of a
lag gives neither. A read is a spike when ``|r| > z * sigma`` (sigma: the robust read noise, which a spike
barely moves) and both neighbours' ``r`` have the opposite sign and at most ``neighbour_max`` of its size.
With white noise, ``z = 6`` calls a false spike about once in 5e8 reads.
"""

from __future__ import annotations

import numpy as np

#: |r| / sigma above which a read is an outlier (see the module text).
SPIKE_Z = 6.0


def find_spikes(
    time: np.ndarray, signal: np.ndarray, sigma: np.ndarray, *, z: float = SPIKE_Z, neighbour_max: float = 0.8
) -> np.ndarray:
    """Boolean ``[n_wells, n_time]``: reads that are single-read outliers (NaN reads are never spikes)."""
    t = np.asarray(time, dtype=float)
    y = np.asarray(signal, dtype=float)
    n_w, n_t = y.shape
    if n_t < 5:
        return np.zeros(y.shape, dtype=bool)
    valid = np.isfinite(y)
    if valid.all():  # the common case: each read's neighbours are the reads beside it, plain slices
        a = (t[2:] - t[1:-1]) / (t[2:] - t[:-2])
        b = 1.0 - a
        r = np.full(y.shape, np.nan)
        r[:, 1:-1] = (y[:, 1:-1] - a * y[:, :-2] - b * y[:, 2:]) / np.sqrt(1.0 + a * a + b * b)
        return _spike_test(r, None, None, sigma, z, neighbour_max)
    idx = np.broadcast_to(np.arange(n_t), y.shape)
    # nearest finite read before and after each read (-1 / n_t where there is none)
    before = np.maximum.accumulate(np.where(valid, idx, -1), axis=1)
    prev = np.concatenate([np.full((n_w, 1), -1), before[:, :-1]], axis=1)
    after = np.minimum.accumulate(np.where(valid, idx, n_t)[:, ::-1], axis=1)[:, ::-1]
    nxt = np.concatenate([after[:, 1:], np.full((n_w, 1), n_t)], axis=1)
    inner = valid & (prev >= 0) & (nxt < n_t)
    pi, ni = np.clip(prev, 0, n_t - 1), np.clip(nxt, 0, n_t - 1)
    rows = np.arange(n_w)[:, None]
    t0, t2 = t[pi], t[ni]
    with np.errstate(invalid="ignore", divide="ignore"):
        a = (t2 - t[None, :]) / (t2 - t0)
        b = (t[None, :] - t0) / (t2 - t0)
        r = (y - a * y[rows, pi] - b * y[rows, ni]) / np.sqrt(1.0 + a * a + b * b)
    r = np.where(inner, r, np.nan)
    return _spike_test(r, pi, ni, sigma, z, neighbour_max)


def _spike_test(
    r: np.ndarray, prev: np.ndarray | None, nxt: np.ndarray | None, sigma: np.ndarray, z: float,
    neighbour_max: float,
) -> np.ndarray:
    """The test of the module text on each read's statistic ``r`` ``[n_wells, n_time]`` (NaN: no spike) and
    its neighbours', whose reads are ``prev`` and ``nxt`` (indices ``[n_wells, n_time]``; None: the reads
    beside it). Only the reads beyond ``z`` read noises (a handful per plate) have their neighbours looked
    at, so the test costs one pass over the plate."""
    with np.errstate(invalid="ignore"):
        big = np.abs(r) > z * np.asarray(sigma, dtype=float)[:, None]
    i, j = np.nonzero(big)
    if i.size == 0:
        return big
    r_i = r[i, j]
    r_prev = r[i, j - 1 if prev is None else prev[i, j]]
    r_next = r[i, j + 1 if nxt is None else nxt[i, j]]
    with np.errstate(invalid="ignore"):
        opposite = (np.sign(r_prev) == -np.sign(r_i)) & (np.sign(r_next) == -np.sign(r_i))
        small = np.fmax(np.abs(r_prev), np.abs(r_next)) <= neighbour_max * np.abs(r_i)
    big[i, j] = opposite & small
    return big
