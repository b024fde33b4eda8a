"""Low-order polynomial over the early curve; v0 is its derivative at the window start.

One weighted least-squares solve for the whole plate: each well's design matrix is built in its own scaled
time ``u = (t - t_start) / L`` (0 at the window start, 1 at its end) so the normal equations stay well
conditioned, missing reads and reads outside the window get weight 0, and ``numpy.linalg.solve`` runs on the
stacked ``[n_wells, p, p]`` systems at once.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.rates.noise import blank_result, check_inputs, conversion_scale, finish, flag_noisy, screen


def inv3_hankel(m: np.ndarray) -> np.ndarray:
    """Inverse of the symmetric Hankel matrices ``[[m0, m1, m2], [m1, m2, m3], [m2, m3, m4]]`` by cofactors.

    ``m`` is ``[..., 5]``; returns ``[..., 3, 3]`` (NaN/inf where singular). Closed-form cofactors avoid the
    per-matrix overhead of ``numpy.linalg.inv`` on many 3x3 systems.
    """
    m0, m1, m2, m3, m4 = np.moveaxis(m, -1, 0)
    cof = np.empty((*m.shape[:-1], 3, 3))
    cof[..., 0, 0] = m2 * m4 - m3 * m3
    cof[..., 0, 1] = cof[..., 1, 0] = m2 * m3 - m1 * m4
    cof[..., 0, 2] = cof[..., 2, 0] = m1 * m3 - m2 * m2
    cof[..., 1, 1] = m0 * m4 - m2 * m2
    cof[..., 1, 2] = cof[..., 2, 1] = m1 * m2 - m0 * m3
    cof[..., 2, 2] = m0 * m2 - m1 * m1
    with np.errstate(all="ignore"):
        det = m0 * cof[..., 0, 0] + m1 * cof[..., 0, 1] + m2 * cof[..., 0, 2]
        cof /= det[..., None, None]
    return cof


@dataclass(frozen=True)
class PolyFit:
    """Batched polynomial fit in scaled time; arrays over wells.

    ``coef[:, k]`` multiplies ``u**k``; ``cov_unit`` is ``(X' W X)^-1`` (multiply by a variance);
    ``rss`` the weighted residual sum of squares; ``n`` reads used; ``r2`` the coefficient of determination.
    """

    coef: np.ndarray
    cov_unit: np.ndarray
    rss: np.ndarray
    n: np.ndarray
    r2: np.ndarray


def masked_polyfit(u: np.ndarray, y: np.ndarray, w: np.ndarray, degree: int) -> PolyFit:
    """Fit ``y ≈ sum_k coef_k u**k`` per well with 0/1 weights ``w`` (all arrays ``[n_wells, n_time]``).

    ``y`` may hold NaN where ``w`` is 0. Wells with no more reads than coefficients get NaN coefficients.
    """
    p = degree + 1
    w = np.where(np.isfinite(y), w, 0.0)
    u0 = np.where(w > 0, u, 0.0)
    y0 = np.where(w > 0, y, 0.0)
    n = w.sum(axis=1)
    ref = (w * y0).sum(axis=1) / np.fmax(n, 1.0)
    yc = (y0 - ref[:, None]) * w
    x = u0[:, :, None] ** np.arange(p)
    xt = x.transpose(0, 2, 1)
    a = (xt * w[:, None, :]) @ x  # batched matmul: the normal matrix of every well at once
    b = (xt @ yc[:, :, None])[:, :, 0]
    ok = n > p
    a[~ok] = np.eye(p)
    with np.errstate(invalid="ignore", over="ignore"):
        try:
            inv = np.linalg.inv(a)
        except np.linalg.LinAlgError:
            inv = np.linalg.pinv(a)
    coef = np.einsum("wpq,wq->wp", inv, b)
    resid = (yc - (x @ coef[:, :, None])[:, :, 0]) * w
    rss = (resid**2).sum(axis=1)
    tss = (yc**2).sum(axis=1)
    coef[:, 0] += ref
    bad = ~ok | ~np.all(np.isfinite(coef), axis=1)
    coef[bad] = np.nan
    inv[bad] = np.nan
    with np.errstate(invalid="ignore", divide="ignore"):
        r2 = np.where(bad, np.nan, 1.0 - rss / tss)
    return PolyFit(coef, inv, np.where(bad, np.nan, rss), n, r2)


def window_mask(time: np.ndarray, start_s: np.ndarray, end_s: np.ndarray) -> np.ndarray:
    """0/1 weights ``[n_wells, n_time]`` for reads with ``start_s <= t <= end_s`` per well."""
    t = time[None, :]
    return ((t >= start_s[:, None]) & (t <= end_s[:, None])).astype(float)


def slope_at_start(fit: PolyFit, length_s: np.ndarray, sigma: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Derivative at ``u = 0`` in signal/s and its standard error from the read noise ``sigma``."""
    v0 = fit.coef[:, 1] / length_s
    se = sigma * np.sqrt(fit.cov_unit[:, 1, 1]) / length_s
    return v0, se


def polynomial(
    time: np.ndarray,
    signal: np.ndarray,
    *,
    degree: int = 2,
    window_s: float | None = None,
    start_s: np.ndarray | float | None = None,
    min_points: int = 5,
    s0: np.ndarray | None = None,
    signal_per_conc: float | None = None,
    max_conversion: float = 0.10,
) -> RateResult:
    """Initial rate as the slope at the window start of a degree-``degree`` polynomial.

    Parameters
    ----------
    time, signal : seconds ``[n_time]`` and reads ``[n_wells, n_time]`` (NaN = missing).
    degree : polynomial order (2 = quadratic; 1 = straight line).
    window_s : window length in seconds from the start (None = all reads).
    start_s : window start per well in seconds (None = first read; e.g. the end of a lag phase).
    min_points : reads needed in the window (at least ``degree + 2``).
    s0, signal_per_conc : when both are given, HIGH_CONVERSION is set where the fitted change over the
        window exceeds ``max_conversion`` of the substrate.

    The standard error comes from the read noise (second differences), not from the residuals, so a
    polynomial that misses real curvature does not look more precise than it is; ``extra['rmse_over_noise']``
    shows lack of fit (about 1 when the polynomial describes the window).
    """
    t, y = check_inputs(time, signal)
    n_w = y.shape[0]
    min_points = max(min_points, degree + 2)
    sc = screen(y, min_points=min_points, time=t)
    out = blank_result(n_w, sc.flags)
    if t.size == 0:
        return finish(out)
    t_first = np.where(sc.n_valid > 0, t[np.argmax(sc.valid, axis=1)], np.nan)
    start = t_first if start_s is None else np.fmax(np.broadcast_to(start_s, (n_w,)).astype(float), t_first)
    end = np.full(n_w, t[-1]) if window_s is None else start + float(window_s)
    w = window_mask(t, start, end)
    w *= sc.valid
    n_in = w.sum(axis=1)
    few = sc.usable & (n_in < min_points)
    out["flags"][few] |= int(Flag.TOO_FEW_POINTS)
    last_in = np.where(n_in > 0, t[np.clip(t.size - 1 - np.argmax(w[:, ::-1] > 0, axis=1), 0, None)], np.nan)
    length = np.where(last_in > start, last_in - start, np.nan)
    u = (t[None, :] - start[:, None]) / length[:, None]
    fit = masked_polyfit(np.nan_to_num(u), y, w, degree)
    v0, se = slope_at_start(fit, length, sc.sigma)
    out.update(v0=v0, stderr=se, window_start_s=start, window_end_s=last_in, goodness=fit.r2,
               n_points=n_in.astype(np.int64))
    full = conversion_scale(s0, signal_per_conc, n_w)
    if full is not None:
        delta = np.abs(np.polynomial.polynomial.polyval(1.0, fit.coef.T) - fit.coef[:, 0])
        out["flags"][delta / full > max_conversion] |= int(Flag.HIGH_CONVERSION)
    flag_noisy(v0, se, out["flags"])
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.sqrt(fit.rss / np.fmax(n_in - degree - 1, 1)) / sc.sigma
    return finish(out, {"rmse_over_noise": ratio, "read_noise": sc.sigma})
