"""Lag phases and inactivation: detect them, and report the rate they hide.

Lag (hysteresis, temperature equilibration): the curve starts slow and accelerates. :func:`detect_lag`
fits straight lines to sliding blocks of reads (all wells and blocks at once from cumulative sums) and calls
a lag when the first block's slope is clearly below the steepest block's. The lag time is the standard one:
the time at which the steady-state line (the steepest block's line) meets the baseline.

Decay (inactivation, Selwyn-type): after the lag, :func:`lag_decay` fits
``y = y0 + v0 * (1 - exp(-k (t - ts))) / k`` (first-order loss of rate) to every well with one batched
Levenberg–Marquardt solve, and reports ``v0``, the rate extrapolated to the start ``ts``. A rate that falls is
not yet inactivation: substrate depletion also slows the reaction. Under Michaelis–Menten depletion the rate
at conversion x is at least ``v0 (1 - x)`` (because ``S/(Km + S) * (Km + S0)/S0 >= S/S0``), so DECAY is set
only when, with s0 and signal_per_conc known, the fitted rate at the last read is significantly below that
bound. Without them decay and depletion cannot be told apart from one curve and DECAY is not assessed
(``k_decay`` is still reported).
"""

from __future__ import annotations

import dataclasses

import numpy as np
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.rates.earlylag import early_lag
from vzero.plugins.rates.noise import (
    Screen,
    blank_result,
    check_inputs,
    conversion_scale,
    finish,
    flag_noisy,
    screen,
)
from vzero.plugins.rates.polynomial import masked_polyfit
from vzero.plugins.rates.progress import fit_wells
from vzero.plugins.rates.spikes import find_spikes


def _block_lines(
    t: np.ndarray, y: np.ndarray, valid: np.ndarray, width: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Least-squares lines over every block of ``width`` consecutive reads.

    Returns slope, value of the line at the block's mean time, that mean time, and ``1/Sxx`` (so the slope's
    standard error is ``sigma * sqrt(1/Sxx)``); each ``[n_wells, n_blocks]`` (the last two read-only
    broadcast views when every read is finite), NaN for blocks with < 3 reads. Sums over blocks come
    from cumulative sums; the reads are taken relative to each well's first finite read and time relative
    to the first read, which keeps the cumulative sums small.
    """
    n_w, n_t = y.shape
    tc = t - t[0]
    every = bool(valid.all())
    ref = y[:, :1] if every else np.where(valid, y, 0.0)[np.arange(n_w), np.argmax(valid, axis=1)][:, None]
    yr = y - ref
    if not every:
        yr = np.where(valid, yr, 0.0)
    cum = np.empty((2, n_w, n_t + 1))  # not np.zeros: calloc'd pages would fault on first write
    cum[:, :, 0] = 0.0
    np.cumsum(yr, axis=1, out=cum[0, :, 1:])
    np.cumsum(yr * tc, axis=1, out=cum[1, :, 1:])
    sy, sty = cum[:, :, width:] - cum[:, :, :-width]
    if every:  # the time moments are the same for every well
        ct = np.zeros((3, n_t + 1))
        np.cumsum(tc[None, :] ** np.arange(3)[:, None], axis=1, out=ct[:, 1:])
        s0, s1, s2 = (ct[:, width:] - ct[:, :-width])[:, None, :]
    else:
        w = valid.astype(float)
        cw = np.zeros((3, n_w, n_t + 1))
        np.cumsum(w[None] * tc[None, None, :] ** np.arange(3)[:, None, None], axis=2, out=cw[:, :, 1:])
        s0, s1, s2 = cw[:, :, width:] - cw[:, :, :-width]
    with np.errstate(invalid="ignore", divide="ignore"):
        tbar = s1 / s0
        sxx = s2 - s1 * tbar
        inv_sxx = 1.0 / sxx
        slope = (sty - tbar * sy) * inv_sxx
        ybar = sy / s0 + ref
    if not every:
        few = s0 < 3
        for a in (slope, ybar, tbar, inv_sxx):
            a[few] = np.nan
    shape = slope.shape
    return slope, ybar, np.broadcast_to(tbar + t[0], shape), np.broadcast_to(inv_sxx, shape)


def detect_lag(
    t: np.ndarray,
    y: np.ndarray,
    sc: Screen,
    *,
    min_rise: float = 0.2,
    z: float = 6.0,
    settle: float = 0.02,
    early: bool = True,
    spike_free: bool = False,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Find lag phases. Returns ``(start_index, lag_s, has_lag)`` per well.

    A lag is called when the first block's slope is below ``(1 - min_rise)`` times the steepest block's and
    the difference exceeds ``z`` standard errors, or when the first reads lie significantly below the
    steady-rate line (:func:`vzero.plugins.rates.earlylag.early_lag`, for lags shorter than a block);
    ``early`` False leaves that test out. Single-read spikes are masked for both tests; ``spike_free`` True
    says the caller's :func:`vzero.plugins.rates.spikes.find_spikes` on these very reads with ``sc.sigma``
    found none, so the search is not run again (the same answer, for less work).

    ``start_index`` is the middle read of the first block whose slope is within ``max(settle * steepest,
    2 SE)`` of the steepest (where the steady state begins; 0 when no lag; at most ``n_time - 2 * width`` so
    that a window remains); for a lag only the early test finds, the knee's read. ``lag_s`` is where the
    steepest block's line meets the baseline (the first block's line at the first read), or for a short lag
    where the steady line meets the starting level; 0 without lag, NaN for unusable wells.
    """
    n_w, n_t = y.shape
    start = np.zeros(n_w, dtype=np.int64)
    lag_s = np.where(sc.usable, 0.0, np.nan)
    has = np.zeros(n_w, dtype=bool)
    width = max(4, n_t // 8)
    if n_t < 3 * width:
        return start, lag_s, has
    spikes = None if spike_free else find_spikes(t, y, sc.sigma)
    if spikes is not None and spikes.any():  # a lone outlier early on would look like a slow (or fast) first block
        y = np.where(spikes, np.nan, y)
        sc = dataclasses.replace(sc, valid=sc.valid & ~spikes)
    short = early_lag(t, y, sc.sigma, sc.change, sc.usable) if early else None
    slope, ybar, tbar, inv_sxx = _block_lines(t, y, sc.valid, width)
    d = np.sign(sc.change)[:, None]
    so = d * slope
    so_f = np.where(np.isfinite(so), so, -np.inf)
    jmax = np.argmax(so_f, axis=1)
    rows = np.arange(n_w)
    smax = so[rows, jmax]
    se = sc.sigma[:, None] * np.sqrt(inv_sxx)
    first = so[:, 0]
    with np.errstate(invalid="ignore"):
        has = (
            sc.usable
            & (jmax > 0)
            & (first < (1.0 - min_rise) * smax)
            & (smax - first > z * np.hypot(se[:, 0], se[rows, jmax]))
        )
        near = so_f >= (smax - np.fmax(settle * smax, 2.0 * se[rows, jmax]))[:, None]
    # a block's slope is the curve's slope near the block's middle: the steady state starts there
    start = np.where(has, np.minimum(np.argmax(near, axis=1) + width // 2, n_t - 2 * width), 0).astype(np.int64)
    first_read = t[np.argmax(sc.valid, axis=1)]
    base = ybar[:, 0] + slope[:, 0] * (first_read - tbar[:, 0])
    with np.errstate(invalid="ignore", divide="ignore"):
        lag = tbar[rows, jmax] - (ybar[rows, jmax] - base) / slope[rows, jmax]
    lag_s = np.where(has, lag, lag_s)
    if short is not None:
        only = short.has & ~has
        start[only] = np.minimum(short.knee[only], n_t - 2 * width)
        lag_s[only] = short.lag_s[only]
        has = has | short.has
    return start, lag_s, has


def mark_lags(time: np.ndarray, signal: np.ndarray, result: RateResult, *, modelled: bool,
              min_points: int = 8) -> RateResult:
    """The lag check every built-in rates method applies to its result: LAG where :func:`detect_lag` finds a
    lag (whether or not the method looked for one), and UNMODELLED as well where the method does not model
    it (``modelled`` False: its rate is then an average over the lag and the steady state, not the initial
    rate; the fit stage leaves such wells out by default and says so in fits.csv). Returns a new result;
    ``lag_s`` is filled where the method left it empty."""
    t = np.asarray(time, dtype=float)
    y = np.array(signal, dtype=float, ndmin=2)
    sc = screen(y, min_points=min_points, time=t)
    _, lag, has = detect_lag(t, y, sc)
    if not has.any():
        return result
    flags = np.asarray(result.flags, dtype=np.int64).copy()
    flags[has] |= int(Flag.LAG)
    if not modelled:
        flags[has] |= int(Flag.UNMODELLED)
    lag_s = np.asarray(result.lag_s, dtype=float).copy()
    fill = has & ~(lag_s > 0)
    lag_s[fill] = lag[fill]
    return dataclasses.replace(result, flags=flags, lag_s=lag_s)


def _selwyn(params: np.ndarray, tau: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Model ``y0 + v0 * (1 - exp(-k tau)) / k`` and its Jacobian; params ``[n, 3]`` = (y0, v0, k)."""
    y0, v0, k = params[:, 0:1], params[:, 1:2], params[:, 2:3]
    kt = k * tau
    small = np.abs(kt) < 1e-6
    kt_safe = np.where(small, 1.0, kt)
    # g = (1 - exp(-k tau)) / k written as tau * phi(k tau), phi(x) = -expm1(-x) / x
    phi = np.where(small, 1.0 - kt / 2.0, -np.expm1(-kt_safe) / kt_safe)
    dphi = np.where(small, -0.5 + kt / 3.0, (np.exp(-kt_safe) * kt_safe + np.expm1(-kt_safe)) / kt_safe**2)
    f = y0 + v0 * tau * phi
    jac = np.stack([np.ones_like(f), tau * phi, v0 * tau * tau * dphi], axis=1)
    return f, jac


def lag_decay(
    time: np.ndarray,
    signal: np.ndarray,
    *,
    s0: np.ndarray | None = None,
    signal_per_conc: float | None = None,
    min_points: int = 8,
    z: float = 3.0,
    fail_ratio: float = 3.0,
    max_iter: int = 60,
    depletion_order: float = 1.0,
) -> RateResult:
    """Steady-state rate after any lag, extrapolated back through any first-order decay.

    v0 is the rate at the start of the steady state (the first read after the lag; the first read when there
    is none), in signal/s, from the first-order-decay fit over all later reads. Flags: LAG (with ``lag_s``);
    DECAY (see module text; needs s0 and signal_per_conc); FIT_FAILED when the fit does not converge or its
    residual RMS exceeds ``fail_ratio`` times the read noise. ``extra``: ``k_decay`` (1/s),
    ``k_decay_stderr``, ``rmse_over_noise``. ``depletion_order`` n: the fastest fall that depletion is allowed
    to explain is ``(1 - x)^n`` (1: Michaelis–Menten; a Hill enzyme's rate falls up to ``(1 - x)^h``).
    """
    t, y = check_inputs(time, signal)
    n_w = y.shape[0]
    sc = screen(y, min_points=min_points, time=t)
    out = blank_result(n_w, sc.flags)
    extra = {"k_decay": np.full(n_w, np.nan), "k_decay_stderr": np.full(n_w, np.nan),
             "rmse_over_noise": np.full(n_w, np.nan), "read_noise": sc.sigma}
    if t.size == 0:
        return finish(out, extra)
    start, lag_s, has_lag = detect_lag(t, y, sc)
    out["lag_s"] = lag_s
    out["flags"][has_lag] |= int(Flag.LAG)
    ts = t[start]
    w = (sc.valid & (np.arange(t.size)[None, :] >= start[:, None])).astype(float)
    n_in = w.sum(axis=1)
    few = sc.usable & (n_in < min_points)
    out["flags"][few] |= int(Flag.TOO_FEW_POINTS)
    todo = np.flatnonzero(sc.usable & ~few)
    if todo.size:
        tau = np.maximum(t[None, :] - ts[todo, None], 0.0)
        yy, ww = y[todo], w[todo]
        # start values from a quadratic y ≈ a + b tau + c tau²  ->  v0 = b, k = -2c/b
        span = np.fmax(tau.max(axis=1), 1e-300)
        q = masked_polyfit(tau / span[:, None], yy, ww, 2)
        b, c = q.coef[:, 1] / span, q.coef[:, 2] / span**2
        k0 = np.clip(np.nan_to_num(-2.0 * c / b), -1.0 / span, 10.0 / span)
        p0 = np.stack([q.coef[:, 0], b, k0], axis=1)
        fit = fit_wells(lambda p, rows: _selwyn(p, tau[rows]), p0, yy, ww, max_iter=max_iter)
        dof = np.fmax(n_in[todo] - 3, 1)
        rmse = np.sqrt(fit.rss / dof)
        ratio = rmse / sc.sigma[todo]
        cov = fit.cov_unit * (np.fmax(rmse, sc.sigma[todo]) ** 2)[:, None, None]
        se = np.sqrt(np.abs(np.diagonal(cov, axis1=1, axis2=2)))
        failed = ~fit.converged | ~(ratio <= fail_ratio) | ~np.all(np.isfinite(fit.params), axis=1)
        v0 = fit.params[:, 1]
        k = fit.params[:, 2]
        out["v0"][todo], out["stderr"][todo] = v0, se[:, 1]
        with np.errstate(invalid="ignore", divide="ignore"):
            out["goodness"][todo] = 1.0 - fit.rss / fit.tss
        extra["k_decay"][todo], extra["k_decay_stderr"][todo] = k, se[:, 2]
        extra["rmse_over_noise"][todo] = ratio
        out["flags"][todo[failed]] |= int(Flag.FIT_FAILED)
        # a decay constant significantly below zero is a rate that rises: a lag the detector missed
        with np.errstate(invalid="ignore"):
            rising = (k + z * se[:, 2] < 0) & ~failed
        out["flags"][todo[rising]] |= int(Flag.LAG)
        full = conversion_scale(s0, signal_per_conc, n_w)
        if full is not None:
            span_t = t[-1] - ts[todo]
            f_end, _ = _selwyn(fit.params, span_t[:, None])
            x_end = np.abs(f_end[:, 0] - fit.params[:, 0]) / full[todo]
            k_low = k - z * se[:, 2]
            with np.errstate(invalid="ignore", over="ignore"):
                decay = (k_low > 0) & (np.exp(-k_low * span_t) < (1.0 - np.fmin(x_end, 1.0)) ** depletion_order)
            out["flags"][todo[decay & ~failed]] |= int(Flag.DECAY)
        out["window_start_s"][todo] = ts[todo]
        last = t.size - 1 - np.argmax(ww[:, ::-1] > 0, axis=1)
        out["window_end_s"][todo] = t[last]
        out["n_points"][todo] = n_in[todo].astype(np.int64)
    flag_noisy(out["v0"], out["stderr"], out["flags"])
    out["goodness_name"] = "r_squared"
    return finish(out, extra)
