"""The checks every built-in rates method gets after its kernel: lags and loss of activity (decay).

A method's own kernel may or may not look for a lag or a falling rate. Whatever it did, the framework-side
kernel (:class:`vzero.plugins.rates.KernelRates` and the ``window`` method) runs these shared checks on the
same reads, so the flags mean the same on every method:

* LAG, from :func:`vzero.plugins.rates.lagdecay.detect_lag` (:func:`vzero.plugins.rates.lagdecay.mark_lags`);
* DECAY, from the first-order-decay fit of :func:`vzero.plugins.rates.lagdecay.lag_decay`: the fitted rate at
  the last read is below what substrate depletion can explain, ``(1 - x)^n`` with ``n`` =
  :data:`DEPLETION_ORDER` (needs s0 and signal_per_conc; without them decay and depletion cannot be told
  apart from one curve and DECAY is not assessed); on wells flagged LAG, from the lag clock instead
  (:func:`vzero.plugins.rates.lagfit.decay_after_lag`: a first-order decay fitted from the lag's end takes the
  still rising activity for a steady one and missed the decay after a lag).

A method that does not model what was found adds UNMODELLED: its rate is not the initial rate, and the fit
stage leaves the well out by default, with the reason in fits.csv.
"""

from __future__ import annotations

import dataclasses

import numpy as np
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.rates.lagdecay import lag_decay, mark_lags
from vzero.plugins.rates.lagfit import decay_after_lag

#: Order of the fastest fall of the rate, ``(1 - x)^n`` at conversion x, that substrate depletion is allowed
#: to explain before a falling rate is called decay. Michaelis–Menten gives at most n = 1 and a Hill enzyme
#: n = h; 3 covers the Hill coefficients the benchmark simulates (h up to 3) and stays sensitive at low
#: conversion, where any order fails to explain a fast fall (measured in docs/rates.md, "Flags: measured").
DEPLETION_ORDER = 3.0


def mark_decay(time: np.ndarray, signal: np.ndarray, result: RateResult, *, s0: np.ndarray | None,
               signal_per_conc: float | None, modelled: bool, min_points: int = 8,
               depletion_order: float = DEPLETION_ORDER) -> RateResult:
    """DECAY where the rate falls faster than depletion explains (module text), and UNMODELLED as well where
    the method does not model decay (``modelled`` False). Wells without a rate are not checked, except those whose
    fit failed (a decay is then the likely reason). Returns a new
    result (the same one when nothing is found or s0/signal_per_conc are unknown)."""
    if s0 is None or signal_per_conc is None:
        return result
    v0 = np.asarray(result.v0, dtype=float)
    t = np.asarray(time, dtype=float)
    y_all = np.array(signal, dtype=float, ndmin=2)
    s_all = np.broadcast_to(np.asarray(s0, dtype=float), v0.shape)
    rated = np.isfinite(v0) | ((np.asarray(result.flags) & int(Flag.FIT_FAILED)) != 0)
    # after a lag the rate first rises: those wells are judged on the lag clock (lagfit.decay_after_lag)
    lagged = rated & ((np.asarray(result.flags) & int(Flag.LAG)) != 0)
    rows = np.flatnonzero(rated & ~lagged & _falling(t, y_all, s_all, float(signal_per_conc), depletion_order,
                                                     min_points))
    hit_rows = np.zeros(0, np.int64)
    if rows.size:
        ld = lag_decay(time, y_all[rows], s0=s_all[rows], signal_per_conc=signal_per_conc, min_points=min_points,
                       fail_ratio=np.inf, depletion_order=depletion_order)
        hit_rows = rows[(np.asarray(ld.flags) & int(Flag.DECAY)) != 0]
    lag_rows = np.flatnonzero(lagged)
    if lag_rows.size:
        late = decay_after_lag(t, y_all[lag_rows], s_all[lag_rows], float(signal_per_conc), min_points=min_points)
        hit_rows = np.concatenate([hit_rows, lag_rows[late]])
    if hit_rows.size == 0:
        return result
    flags = np.asarray(result.flags, dtype=np.int64).copy()
    flags[hit_rows] |= int(Flag.DECAY)
    if not modelled:
        flags[hit_rows] |= int(Flag.UNMODELLED)
    return dataclasses.replace(result, flags=flags)


#: Margin of the quick pre-screen in :func:`_falling`: the first block's slope is the rate near the block's
#: middle (n_time/16 reads in), below v0 by k·t there when the enzyme decays at k; 1.1 keeps decays up to
#: k ≈ 0.1 / (n_time/16 read intervals), e.g. 3e-3 /s at 120 reads of 5 s (our choice; the tests check that
#: the flags are the same with and without the pre-screen on decaying and clean plates).
PRESCREEN_MARGIN = 1.1


def _falling(t: np.ndarray, y: np.ndarray, s0: np.ndarray, spc: float, order: float, min_points: int) -> np.ndarray:
    """Wells worth the decay fit: the last block's slope (lines over n_time/8 reads) below ``PRESCREEN_MARGIN``
    times the first block's times ``(1 - x_end)^order`` plus three standard errors, where that depletion bound
    is itself more than three standard errors from zero. A well above it falls no faster than depletion
    explains, and near full conversion decay and depletion cannot be told apart, whatever the fit would say;
    the fit is several times the cost of a rate method, so most wells are spared it."""
    from vzero.plugins.rates.lagdecay import _block_lines
    from vzero.plugins.rates.noise import conversion_scale, screen

    n_w, n_t = y.shape
    width = max(4, n_t // 8)
    if n_t < 3 * width:
        return np.ones(n_w, dtype=bool)
    sc = screen(y, min_points=min_points, time=t)
    slope, _, _, inv_sxx = _block_lines(t, y, sc.valid, width)
    d = np.sign(sc.change)
    with np.errstate(invalid="ignore", divide="ignore"):
        first, last = d * slope[:, 0], d * slope[:, -1]
        se = sc.sigma * np.hypot(np.sqrt(inv_sxx[:, 0]), np.sqrt(inv_sxx[:, -1]))
        full = conversion_scale(s0, spc, n_w)
        x_end = np.clip(np.abs(sc.change) / full, 0.0, 1.0)
        allowed = first * (1.0 - x_end) ** order  # the slowest end rate depletion explains
        # below it, and that bound itself clear of zero (near full conversion nothing can be told apart)
        return (last < PRESCREEN_MARGIN * allowed + 3.0 * se) & (allowed > 3.0 * se)


def shared_checks(time: np.ndarray, signal: np.ndarray, result: RateResult, *, s0: np.ndarray | None,
                  signal_per_conc: float | None, finds_lags: bool, models_decay: bool,
                  min_points: int = 8) -> RateResult:
    """Both checks of the module text on a kernel's ``result``: the lag check where the kernel did not look
    for lags itself (``finds_lags`` False), the decay check where it does not model decay."""
    if not finds_lags:
        result = mark_lags(time, signal, result, modelled=False, min_points=min_points)
    if not models_decay:
        result = mark_decay(time, signal, result, s0=s0, signal_per_conc=signal_per_conc, modelled=False,
                            min_points=min_points)
    return result
