"""Automatic initial-rate window: the longest early stretch that a straight line (or, when the curve bends
measurably, a quadratic) describes within the read noise, then the slope at the window start.

How a well's window is chosen (all wells at once):

1. Screen the well (:func:`vzero.plugins.rates.noise.screen`) and find any lag (:func:`vzero.plugins.rates.lagdecay.
   detect_lag`); the window starts where the steady state begins (the first read without lag).
2. Candidate windows end at a geometric grid of read offsets after the start. For every well and candidate a
   quadratic ``a + b u + c u²`` is solved from cumulative sums of the reads (no per-window pass over the
   data). Its curvature is judged statistically: ``t_c = c / SE(c)`` with ``SE(c)`` from the read noise of
   second differences (not from R²).
3. A candidate fails when the curvature is significant (``|t_c| > t_crit``) *and* the fitted slope falls
   (towards flat, in the direction of the well's total change) by more than ``max_rate_drop`` across it,
   or (s0 and signal_per_conc known) when the fitted change exceeds ``max_conversion`` of the substrate
   (10 %, common practice). The window is the last passing candidate before the first two failures in a
   row.
4. v0 is the slope of the window's quadratic at the window start (``estimate="quadratic"``, the default);
   its SE from the larger of the read noise and the window fit's residual RMS.
   CURVATURE is set where the quadratic term is significant (a straight line would run low there). With
   ``estimate="select"`` the straight line's slope is used where the quadratic term is not significant:
   about 4x smaller standard error, but a low bias of up to ``t_crit`` standard errors of the curvature,
   which on 30 %-conversion test plates left the median 0.3-2 % low.

The quadratic extrapolation removes the few-percent low bias of a straight line over a curving window (the
DESIGN science note); its remaining bias is of order (rate drop)², about 0.1-0.3 % at a 10 % drop.
"""

from __future__ import annotations

import numpy as np
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.rates.lagdecay import detect_lag
from vzero.plugins.rates.noise import blank_result, check_inputs, conversion_scale, finish, flag_noisy, screen
from vzero.plugins.rates.polynomial import inv3_hankel as _inv3_sym


def _candidate_sums(
    u: np.ndarray, yc: np.ndarray, w: np.ndarray, start: np.ndarray, offs: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Sums over the candidate windows ``[start, start + offs[k]]`` (clipped to the last read), every well.

    Time is local to each window start, ``v = u - u[start]`` (so the slope at the start is a coefficient
    and the normal equations stay well conditioned). Returns ``m`` (``sum w v^p``, p = 0..4, ``[n, K, 5]``),
    ``xy`` (``sum v^p y``, p = 0..2, ``[n, K, 3]``), ``yy`` (``sum y²``, ``[n, K]``) and the window end
    index ``[n, K]``. ``yc`` must be 0 where ``w`` is 0. Wells sharing a start share one design, so each
    group is one matrix product ``[wells, reads] @ [reads, K x 3]``; with no missing read the time moments
    are the same for the whole group.
    """
    n_w, n_t = yc.shape
    k = offs.size
    m = np.empty((n_w, k, 5))
    xy = np.empty((n_w, k, 3))
    yy = np.empty((n_w, k))
    ends = np.minimum(start[:, None] + offs[None, :], n_t - 1)
    for s in np.unique(start):
        g = np.flatnonzero(start == s)
        v = u[s:] - u[s]
        inside = np.arange(n_t - s)[:, None] <= (ends[g[0]] - s)[None, :]  # [reads, K]
        pw = v[:, None] ** np.arange(5)[None, :]  # [reads, 5]
        design = inside[:, :, None] * pw[:, None, :]  # [reads, K, 5]
        ys = yc[g, s:] if g.size < n_w else yc[:, s:]
        xy[g] = (ys @ design[:, :, :3].reshape(n_t - s, 3 * k)).reshape(g.size, k, 3)
        yy[g] = (ys * ys) @ inside
        ws = w[g, s:]
        if ws.all():
            m[g] = design.sum(axis=0)
        else:
            m[g] = (ws @ design.reshape(n_t - s, 5 * k)).reshape(g.size, k, 5)
    return m, xy, yy, ends


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
    max_rate_drop : largest relative fall of the fitted slope across a window whose curvature is
        significant (0.10: the rate may fall by 10 % before the window stops). A slope that rises (noise
        early in a low-signal well, an undetected lag) does not stop the window; on simulated cooperative
        wells counting it as a failure cut windows short and left some rates of the wrong sign.
    t_crit : |t| of the quadratic coefficient above which curvature counts as significant (3: about 0.3 %
        false alarms per window on pure noise).
    min_points : reads in the shortest window.
    find_lag : start after a detected lag (LAG flag, ``lag_s``); False starts at the first read.
    estimate : "quadratic" (default) or "select" (see step 4 of the module text).

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
    m, xy, yyw, ends = _candidate_sums(u, yc, w, start, offs.astype(np.int64))
    count = m[..., 0]
    inv = _inv3_sym(m)
    inv[count < 4] = np.nan
    coef = np.einsum("nkpq,nkq->nkp", inv, xy)
    length = u[ends] - u[start][:, None]  # window length in local time
    b, c = coef[..., 1], coef[..., 2]
    direction = np.sign(sc.change[todo])[:, None]
    with np.errstate(all="ignore"):
        t_c = c / (sigma[:, None] * np.sqrt(inv[..., 2, 2]))
        enough = count >= min_points
        # the slope falls (towards flat, in the direction of the well's total change) by more than
        # max_rate_drop of its start value; a rising slope is not depletion (lags are found beforehand)
        falls = 2.0 * direction * c * length < -max_rate_drop * np.abs(b)
        fails = enough & (np.abs(t_c) > t_crit) & falls
    full = conversion_scale(s0, signal_per_conc, n_w)
    if full is not None:
        with np.errstate(all="ignore"):
            conv = np.abs(b * length + c * length**2) / full[todo][:, None]
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
    rows = np.arange(todo.size)
    end_idx = ends[rows, k]

    # the chosen window: quadratic from the candidate solve, straight line from the same sums
    mk, xk, yy_k = m[rows, k], xy[rows, k], yyw[rows, k]
    cq, iq = coef[rows, k], inv[rows, k]
    n_in = mk[:, 0]
    with np.errstate(all="ignore"):
        tq = t_c[rows, k]
        det = mk[:, 0] * mk[:, 2] - mk[:, 1] ** 2
        il11 = mk[:, 0] / det
        bl = (mk[:, 0] * xk[:, 1] - mk[:, 1] * xk[:, 0]) / det
        al = (xk[:, 0] - mk[:, 1] * bl) / mk[:, 0]
        vq = cq[:, 1] / span
        sq = sigma * np.sqrt(iq[:, 1, 1]) / span
        vl, sl = bl / span, sigma * np.sqrt(il11) / span
        rss_q = np.fmax(yy_k - np.einsum("wp,wp->w", cq, xk), 0.0)
        rss_l = np.fmax(yy_k - al * xk[:, 0] - bl * xk[:, 1], 0.0)
        tss = yy_k - xk[:, 0] ** 2 / n_in
    curved = np.abs(tq) > t_crit
    use_q = curved | (estimate == "quadratic")
    v0 = np.where(use_q, vq, vl)
    se = np.where(use_q, sq, sl)
    rss = np.where(use_q, rss_q, rss_l)
    with np.errstate(all="ignore"):
        rmse_ratio = np.sqrt(rss / np.fmax(n_in - np.where(use_q, 3, 2), 1)) / sigma
        r2 = 1.0 - rss / tss
    # the SE is scaled by the larger of the read noise and the window fit's residual RMS (as in progress and
    # lag-decay): lack of fit inside the window, or a read-noise estimate that came out low (its robust
    # estimate scatters by about 18 % over 60 reads), widens the interval instead of leaving it too narrow.
    # Measured on 2000 inactivating replicate wells: 95 % coverage 0.9295 with the read noise alone, 0.945
    # with the larger of the two (docs/rates.md, "measured").
    se = se * np.fmax(np.nan_to_num(rmse_ratio, nan=1.0), 1.0)
    t_start, t_end = t[start], t[end_idx]
    flags = out["flags"][todo]
    flags[curved] |= int(Flag.CURVATURE)
    flags[n_in < min_points] |= int(Flag.TOO_FEW_POINTS)
    if full is not None:
        x_end = conv[rows, k]
        flags[x_end > max_conversion * 1.0001] |= int(Flag.HIGH_CONVERSION)
        extra["conversion"][todo] = x_end
    out["flags"][todo] = flags
    out["v0"][todo], out["stderr"][todo] = v0, se
    out["window_start_s"][todo], out["window_end_s"][todo] = t_start, t_end
    out["goodness"][todo] = r2
    out["n_points"][todo] = n_in.astype(np.int64)
    extra["curvature_t"][todo] = tq
    extra["rmse_over_noise"][todo] = rmse_ratio
    flag_noisy(out["v0"], out["stderr"], out["flags"])
    return finish(out, extra)
