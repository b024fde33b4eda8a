"""Short lags: are the first reads below the steady-rate line? A one-sided test with a stated false-alarm rate.

The block comparison of :func:`vzero.plugins.rates.lagdecay.detect_lag` needs a lag as long as one block
(n_time/8 reads). A lag of only a few reads shows instead as early reads that lie below the straight line the
later reads follow. Over the first ``W`` reads (:func:`window_reads`) each well is fitted with a line plus a
hinge at read ``k``::

    y = a + b t + c min(t - t_k, 0)        for k = 3 .. K

so the rate is ``b + c`` before read ``k`` and ``b`` after it (``c`` < 0 for a rising signal: a lag). The
statistic is the hinge's t value, ``-sign(change) c / SE(c)``, with SE from the robust read noise of
:func:`vzero.plugins.rates.noise.screen`; a lag is called when its largest value over ``k`` exceeds
:data:`EARLY_LAG_Z` in a well whose steady change per read is at least :data:`MIN_STEP` read noises.
Substrate depletion bends the curve the other way (early reads above the line), so it never raises the
statistic; it only hides a lag in a well that depletes fast.

All wells and knees are solved at once: with every read finite the design is the same for every well, so each
``c`` is one row of a pseudo-inverse applied to the reads; wells with missing reads get their own 3 x 3 normal
equations, batched.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: One-sided threshold of the largest hinge t over the knees (our choice; 3.5 flagged a chance run of low
#: first reads in one of the demo's 324 sample wells). On white noise it fires on 0.06-0.08 % of clean wells
#: (61-120 reads); on the benchmark's clean plates (seven scenarios without a lag, 200 noise draws each,
#: blank-corrected reads) see ``python -m bench.flags --lags`` and docs/rates.md, "Flags: measured".
EARLY_LAG_Z = 4.0


#: Steady change per read, in read noises, below which a well is not tested: there even a lag at half the
#: steady rate for three reads is found in under a third of wells (docs/rates.md, "Flags: measured"), so the
#: test would add mostly false alarms (our choice).
MIN_STEP = 2.0


def window_reads(n_time: int) -> int:
    """Reads the test looks at: a sixth of the curve, at least 12 and at most 30 (common practice: the early
    part that depletion bends little)."""
    return int(min(n_time, max(12, min(30, n_time // 6))))


@dataclass(frozen=True)
class EarlyLag:
    """Result of :func:`early_lag` per well: ``has`` (a lag), ``knee`` (index of the first read at the steady
    rate; 0 without a lag), ``lag_s`` (time where the steady line meets the starting level, s, measured from
    the first read's time as ``time`` is; 0 without a lag) and ``z`` (largest hinge t, NaN when not tested),
    plus ``ratio`` (early rate over steady rate at the chosen knee)."""

    has: np.ndarray
    knee: np.ndarray
    lag_s: np.ndarray
    z: np.ndarray
    ratio: np.ndarray


def _design(t: np.ndarray, knees: np.ndarray) -> np.ndarray:
    """``[K, W, 3]`` design matrices (1, t, hinge at each knee) over the window's times ``t`` [W]."""
    tc = t - t[0]
    hinge = np.minimum(tc[None, :] - tc[knees][:, None], 0.0)
    ones = np.ones_like(hinge)
    return np.stack([ones, np.broadcast_to(tc, hinge.shape), hinge], axis=2)


def early_lag(
    time: np.ndarray,
    signal: np.ndarray,
    sigma: np.ndarray,
    change: np.ndarray,
    usable: np.ndarray,
    *,
    z: float = EARLY_LAG_Z,
    first_knee: int = 3,
) -> EarlyLag:
    """Test the first reads of every well against the steady-rate line (module text).

    ``time`` [n_time] s; ``signal`` [n_wells, n_time] (NaN = missing); ``sigma`` read noise per well (signal
    units); ``change`` total change (its sign is the signal's direction); ``usable`` wells to test.
    """
    t = np.asarray(time, dtype=float)
    y = np.asarray(signal, dtype=float)
    n_w, n_t = y.shape
    none = EarlyLag(np.zeros(n_w, bool), np.zeros(n_w, np.int64), np.where(usable, 0.0, np.nan),
                    np.full(n_w, np.nan), np.full(n_w, np.nan))
    w = window_reads(n_t)
    knees = np.arange(first_knee, w // 2 + 1)
    if n_t < 8 or knees.size == 0:
        return none
    x = _design(t[:w], knees)  # [K, W, 3]
    yw = y[:, :w]
    valid = np.isfinite(yw)
    coef = np.full((n_w, knees.size, 3), np.nan)
    var_c = np.full((n_w, knees.size), np.nan)
    full = valid.all(axis=1) & usable
    if full.any():
        xtx_inv = np.linalg.inv(np.einsum("kwi,kwj->kij", x, x))  # [K, 3, 3]
        pinv = np.einsum("kij,kwj->kiw", xtx_inv, x)  # [K, 3, W]
        coef[full] = np.einsum("kiw,nw->nki", pinv, yw[full])
        var_c[full] = xtx_inv[:, 2, 2][None, :]
    part = ~full & usable & (valid.sum(axis=1) >= 8)
    if part.any():
        wv = valid[part].astype(float)  # [m, W]
        yz = np.where(valid[part], yw[part], 0.0)
        xtx = np.einsum("mw,kwi,kwj->mkij", wv, x, x)
        xty = np.einsum("mw,kwi,mw->mki", wv, x, yz)
        det_ok = np.abs(np.linalg.det(xtx)) > 1e-12 * np.diagonal(xtx, axis1=2, axis2=3).prod(axis=-1).clip(1e-300)
        xtx[~det_ok] = np.eye(3)
        inv = np.linalg.inv(xtx)
        c = np.einsum("mkij,mkj->mki", inv, xty)
        c[~det_ok] = np.nan
        coef[part] = c
        var_c[part] = np.where(det_ok, inv[:, :, 2, 2], np.nan)
    d = np.sign(change)[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        tstat = -d * coef[:, :, 2] / (sigma[:, None] * np.sqrt(var_c))
        tfin = np.where(np.isfinite(tstat), tstat, -np.inf)
        best = np.argmax(tfin, axis=1)
        rows = np.arange(n_w)
        zmax = tstat[rows, best]
        b = coef[rows, best, 1]
        c = coef[rows, best, 2]
        step = d[:, 0] * b * float(np.median(np.diff(t[:w])))  # steady change per read
        has = usable & (zmax > z) & (step >= MIN_STEP * sigma)
        ratio = (b + c) / b
        tk = t[knees[best]] - t[0]
        lag = np.where(has, -c * tk / b, np.where(usable, 0.0, np.nan))
    knee = np.where(has, knees[best], 0).astype(np.int64)
    return EarlyLag(has, knee, lag, np.where(usable, zmax, np.nan), np.where(has, ratio, np.nan))
