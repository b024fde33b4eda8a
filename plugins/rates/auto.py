"""Automatic initial-rate window: the longest early stretch that a straight line (or, when the curve bends
measurably, a quadratic) describes within the read noise, then the slope at the window start.

How a well's window is chosen (all wells at once):

1. Screen the well (:func:`plugins.rates.noise.screen`) and find any lag (:func:`plugins.rates.lagdecay.
   detect_lag`); the window starts where the steady state begins (the first read without lag).
2. Candidate windows end at a geometric grid of read offsets after the start. For every well and candidate a
   quadratic ``a + b u + c u²`` is solved from cumulative sums of the reads (no per-window pass over the
   data). Its curvature is judged statistically: ``t_c = c / SE(c)`` with ``SE(c)`` from the read noise of
   second differences (not from R²).
3. A candidate fails when the curvature is significant (``|t_c| > t_crit``) *and* the fitted slope changes
   by more than ``max_rate_drop`` across it, or (s0 and signal_per_conc known) when the fitted change exceeds
   ``max_conversion`` of the substrate (10 %, common practice). The window is the last passing candidate
   before the first two failures in a row.
4. The chosen window is refitted directly. If its quadratic term is significant, v0 is the quadratic's slope
   at the window start (CURVATURE is set: the straight line would run low); otherwise v0 is the straight
   line's slope, which has the smaller variance.

The quadratic extrapolation removes the few-percent low bias of a straight line over a curving window (the
DESIGN science note); its remaining bias is of order (rate drop)², about 0.1-0.3 % at a 10 % drop.
"""

from __future__ import annotations

import numpy as np

from plugins.flags import Flag
from plugins.rates.lagdecay import detect_lag
from plugins.rates.noise import blank_result, check_inputs, conversion_scale, finish, flag_noisy, screen
from plugins.rates.polynomial import masked_polyfit, slope_at_start
from plugins.rates.result import RateResult


def _candidate_quadratics(
    u: np.ndarray, yc: np.ndarray, w: np.ndarray, start: np.ndarray, ends: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Quadratic coefficients, ``(X'X)^-1`` and read counts for windows ``[start, ends[:, k]]``.

    ``u`` is a shared scaled time ``[n_time]``; ``yc`` the reads minus a per-well reference with 0 where
    missing; ``w`` the 0/1 valid mask. Returns ``coef [n, K, 3]``, ``inv [n, K, 3, 3]``, ``count [n, K]``.
    """
    n_w = yc.shape[0]
    pw = u[None, :] ** np.arange(5)[:, None]  # [5, n_time]
    zero = np.zeros((n_w, 1))
    mu = [np.concatenate([zero, np.cumsum(w * pw[k], axis=1)], axis=1) for k in range(5)]
    my = [np.concatenate([zero, np.cumsum(w * yc * pw[k], axis=1)], axis=1) for k in range(3)]
    rows = np.arange(n_w)[:, None]
    lo, hi = start[:, None], ends + 1

    def win(c: np.ndarray) -> np.ndarray:
        return c[rows, hi] - c[rows, lo]

    m = [win(c) for c in mu]
    a = np.stack([np.stack([m[i + j] for j in range(3)], axis=-1) for i in range(3)], axis=-2)
    b = np.stack([win(c) for c in my], axis=-1)
    count = m[0]
    ok = count >= 4
    a[~ok] = np.eye(3)
    with np.errstate(all="ignore"):
        inv = np.linalg.inv(a)
    coef = np.einsum("wkpq,wkq->wkp", inv, b)
    coef[~ok] = np.nan
    return coef, inv, count


def auto(
    time: np.ndarray,
    signal: np.ndarray,
    *,
    s0: np.ndarray | None = None,
    signal_per_conc: float | None = None,
    max_conversion: float = 0.10,
    max_rate_drop: float = 0.10,
    t_crit: float = 3.0,
    min_points: int = 6,
    n_candidates: int = 16,
    find_lag: bool = True,
    estimate: str = "quadratic",
) -> RateResult:
    """Automatic initial rate (signal/s) per well; see the module text for the window rule.

    Parameters
    ----------
    s0, signal_per_conc : substrate per well and signal per unit product; with both, windows stop before
        ``max_conversion`` and HIGH_CONVERSION marks wells where even the shortest window passes it.
    max_rate_drop : largest relative change of the fitted slope across a window whose curvature is
        significant (0.10: the rate may fall by 10 % before the window stops).
    t_crit : |t| of the quadratic coefficient above which curvature counts as significant (3: about 0.3 %
        false alarms per window on pure noise).
    min_points : reads in the shortest window.
    find_lag : start after a detected lag (LAG flag, ``lag_s``); False starts at the first read.

    ``extra``: ``curvature_t`` (t of the quadratic term in the chosen window), ``rmse_over_noise`` (lack of
    fit of the reported line or quadratic; about 1 when it describes the window), ``conversion`` (fraction
    of substrate converted by the window end; NaN when unknown), ``read_noise``.
    """
    t, y = check_inputs(time, signal)
    n_w, n_t = y.shape
    sc = screen(y, min_points=min_points, time=t)
    out = blank_result(n_w, sc.flags)
    extra = {k: np.full(n_w, np.nan) for k in ("curvature_t", "rmse_over_noise", "conversion")}
    extra["read_noise"] = sc.sigma
    todo = np.flatnonzero(sc.usable)
    if todo.size == 0:
        return finish(out, extra)
    if find_lag:
        start_all, lag_all, has_lag = detect_lag(t, y, sc)
        out["lag_s"] = lag_all
        out["flags"][has_lag] |= int(Flag.LAG)
    else:
        start_all = np.zeros(n_w, dtype=np.int64)
    yy, valid, start, sigma = y[todo], sc.valid[todo], start_all[todo], sc.sigma[todo]
    w = valid.astype(float)
    ref = yy[np.arange(todo.size), np.argmax(valid, axis=1)]
    yc = np.where(valid, yy - ref[:, None], 0.0)
    span = t[-1] - t[0]
    u = (t - t[0]) / span

    # candidate window ends: a geometric grid of offsets after each well's start
    offs = np.unique(np.round(np.geomspace(min_points - 1, max(n_t - 1, min_points), n_candidates)))
    ends = np.minimum(start[:, None] + offs.astype(np.int64)[None, :], n_t - 1)
    coef, inv, count = _candidate_quadratics(u, yc, w, start, ends)
    us, ue = u[start][:, None], u[ends]
    b, c = coef[..., 1], coef[..., 2]
    with np.errstate(all="ignore"):
        t_c = c / (sigma[:, None] * np.sqrt(inv[..., 2, 2]))
        slope_s = b + 2 * c * us
        drop = 1.0 - (b + 2 * c * ue) / slope_s
        enough = count >= min_points
        fails = enough & (np.abs(t_c) > t_crit) & ~(np.abs(drop) <= max_rate_drop)
    full = conversion_scale(s0, signal_per_conc, n_w)
    if full is not None:
        with np.errstate(all="ignore"):
            conv = np.abs(b * (ue - us) + c * (ue**2 - us**2)) / full[todo][:, None]
        fails |= enough & (conv > max_conversion)
    # stop at the first of two failing candidates in a row (one chance excursion of the t-test does not end
    # the window), keep the last passing candidate before it
    nxt = np.concatenate([fails[:, 1:], np.ones((todo.size, 1), dtype=bool)], axis=1)
    both = fails & nxt
    stop = np.where(both.any(axis=1), np.argmax(both, axis=1), fails.shape[1])
    # candidates with fewer than min_points finite reads (masked reads) neither pass nor stop the search
    before = enough & ~fails & (np.arange(fails.shape[1])[None, :] < stop[:, None])
    k = np.where(before.any(axis=1), fails.shape[1] - 1 - np.argmax(before[:, ::-1], axis=1),
                 np.argmax(enough, axis=1))
    end_idx = ends[np.arange(todo.size), k]

    # refit the chosen window in its own scaled time: quadratic for the curvature test, line otherwise
    t_start, t_end = t[start], t[end_idx]
    length = t_end - t_start
    idx = np.arange(n_t)[None, :]
    win = w * ((idx >= start[:, None]) & (idx <= end_idx[:, None]))
    uw = np.nan_to_num((t[None, :] - t_start[:, None]) / length[:, None])
    quad = masked_polyfit(uw, yy, win, 2)
    line = masked_polyfit(uw, yy, win, 1)
    with np.errstate(all="ignore"):
        tq = quad.coef[:, 2] / (sigma * np.sqrt(quad.cov_unit[:, 2, 2]))
    curved = np.abs(tq) > t_crit
    vq, sq = slope_at_start(quad, length, sigma)
    vl, sl = slope_at_start(line, length, sigma)
    use_q = curved | (estimate == "quadratic")
    v0 = np.where(use_q, vq, vl)
    se = np.where(use_q, sq, sl)
    n_in = win.sum(axis=1)
    rss = np.where(use_q, quad.rss, line.rss)
    with np.errstate(all="ignore"):
        rmse_ratio = np.sqrt(rss / np.fmax(n_in - np.where(use_q, 3, 2), 1)) / sigma
    flags = out["flags"][todo]
    flags[curved] |= int(Flag.CURVATURE)
    flags[count[np.arange(todo.size), k] < min_points] |= int(Flag.TOO_FEW_POINTS)
    if full is not None:
        delta = quad.coef[:, 1] + quad.coef[:, 2]
        x_end = np.abs(delta) / full[todo]
        flags[x_end > max_conversion * 1.0001] |= int(Flag.HIGH_CONVERSION)
        extra["conversion"][todo] = x_end
    out["flags"][todo] = flags
    out["v0"][todo], out["stderr"][todo] = v0, se
    out["window_start_s"][todo], out["window_end_s"][todo] = t_start, t_end
    out["goodness"][todo] = np.where(use_q, quad.r2, line.r2)
    out["n_points"][todo] = n_in.astype(np.int64)
    extra["curvature_t"][todo] = tq
    extra["rmse_over_noise"][todo] = rmse_ratio
    flag_noisy(out["v0"], out["stderr"], out["flags"])
    return finish(out, extra)
