"""Whole-progress-curve fit of the integrated Michaelis–Menten equation, all wells at once.

Closed form (Schnell & Mendoza 1997, J. Theor. Biol. 187:207-212), written with the Wright omega function
so that it stays finite for S0/Km above ~700 where ``exp`` overflows::

    S(t) = Km * W((S0/Km) * exp((S0 - Vmax t)/Km)) = Km * omega(ln(S0/Km) + (S0 - Vmax t)/Km),  P = S0 - S

Jacobian by implicit differentiation of ``Vmax t = (S0 - S) + Km ln(S0/S)``:
``dP/dVmax = t S/(S + Km)``, ``dP/dKm = -S ln(S0/S)/(S + Km)``, ``dP/dS0 = 1 - S (S0 + Km)/(S0 (S + Km))``.

The fit is the shared batched Levenberg–Marquardt solver (:mod:`vzero.plugins.kinetics.lsq`, through
:func:`fit_wells`): one ``[n_wells, n_params, n_time]`` Jacobian per iteration and a stacked
``numpy.linalg.solve``, instead of one optimiser call per well.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from vzero.errors import StageError
from vzero.plugins.kinetics import lsq
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.rates.noise import NOISY_MIN_T, Screen, blank_result, check_inputs, finish, flag_noisy, screen
from vzero.plugins.rates.polynomial import inv3_hankel
from vzero.plugins.rates.shapegrid import (
    SHAPE_GRID,
    bend_factor,
    fixed_shape_model,
    mixed_ln_v0_var,
    profile_bend,
)


@dataclass(frozen=True)
class LMFit:
    """Result of :func:`fit_wells`, arrays over wells: ``params [n, p]``, ``rss``, ``tss`` (about the
    weighted mean), ``cov_unit = (J' W J)^-1`` at the solution, ``converged``, ``n_iter`` (plate-wide),
    ``fitted`` the model's values at the points counted (NaN elsewhere; None where not kept)."""

    params: np.ndarray
    rss: np.ndarray
    tss: np.ndarray
    cov_unit: np.ndarray
    converged: np.ndarray
    n_iter: int
    fitted: np.ndarray | None = None


WELL_TOLERANCES = {"ftol": 1e-6, "xtol": 1e-9, "gtol": 1e-12}
"""Convergence tolerances of the per-well curve fits: a relative change of cost of 1e-6 is a change of chi²
far below 1 for plate-sized curves, so stopping there costs no accuracy in v0."""


def fit_wells(
    fun: lsq.Model,
    p0: np.ndarray,
    y: np.ndarray,
    w: np.ndarray,
    *,
    lower: np.ndarray | None = None,
    upper: np.ndarray | None = None,
    max_iter: int = 60,
    lam0: float = 1e-3,
    ftol: float | None = None,
) -> LMFit:
    """Fit one curve per well with the shared batched solver (:func:`vzero.plugins.kinetics.lsq.solve`: its
    bound handling and convergence rules) and :data:`WELL_TOLERANCES`.

    ``fun(params[m, p], rows[m]) -> (model [m, t], jacobian [m, p, t])`` evaluates the wells ``rows``;
    ``y`` ``[n, t]`` (NaN allowed where ``w == 0``); ``w`` 0/1 weights. A well whose damping grew without a
    step lowering its cost (stalled) sits at a stationary point: it counts as converged here, and the
    caller judges the fit by its residuals against the read noise. ``lam0``: the initial damping (small for
    a start next to the solution); ``ftol`` replaces the relative cost change of :data:`WELL_TOLERANCES`.
    """
    tol = WELL_TOLERANCES if ftol is None else {**WELL_TOLERANCES, "ftol": ftol}
    sol = lsq.solve(fun, p0, y, w, lower=lower, upper=upper, max_iter=max_iter, lam0=lam0, **tol)
    with np.errstate(invalid="ignore", divide="ignore"):
        if np.all(w > 0):  # every point counts: no masks needed
            fitted = sol.resid / w + y
        else:
            fitted = np.where(w > 0, sol.resid / w + np.where(w > 0, y, 0.0), np.nan)
    return LMFit(sol.params, sol.cost, fit_wells_tss(y, w), lsq.unit_covariance(sol.jac),
                 (sol.converged | sol.stalled) & np.isfinite(sol.cost), sol.n_iter, fitted)


#: Below this argument Wright omega is exp(x) to double precision (relative error e^x); the iteration would
#: take logs of subnormal numbers there.
_OMEGA_TAIL = -700.0


def wright_omega(x: np.ndarray | float) -> np.ndarray:
    """Wright omega function for real ``x``: the solution ``w > 0`` of ``w + ln w = x`` (``W(e^x)``).

    The same values as ``scipy.special.wrightomega`` (within a few 1e-15 relative; checked against it and
    against ``scipy.special.lambertw`` in the tests) for less work on large arrays (bench/COSTS.md): a start
    from Winitzki's approximation of Lambert W (2003, relative error below 2 %) applied to ``ln(1 + e^x)``,
    then three Newton steps ``w <- w (1 + x - ln w) / (1 + w)``, each squaring the relative error
    (2e-2 -> 1e-4 -> 1e-8 -> 1e-16). Every step works in place on whole arrays. Finite ``x`` expected.
    """
    xa = np.asarray(x, dtype=float)
    shape = xa.shape
    x1 = np.atleast_1d(xa)
    with np.errstate(all="ignore"):
        # softplus y = ln(1 + e^x) without overflow: max(x, 0) + ln(1 + e^-|x|)
        y = np.abs(x1)
        np.negative(y, out=y)
        np.exp(y, out=y)
        np.log1p(y, out=y)
        y += np.fmax(x1, 0.0)
        # Winitzki: W(z) ~ L (1 - ln(1 + L) / (2 + L)) with L = ln(1 + z), here z = e^x
        w = np.log1p(y)
        w /= y + 2.0
        np.subtract(1.0, w, out=w)
        w *= y
        for _ in range(3):
            step = np.log(w)
            np.subtract(x1, step, out=step)
            step += 1.0
            step /= w + 1.0  # divide before multiplying: no overflow for huge x
            w *= step
        low = x1 < _OMEGA_TAIL
        if low.any():
            w[low] = np.exp(x1[low])
    return w.reshape(shape) if shape else w[0]


def integrated_mm(t: np.ndarray, s0: np.ndarray, km: np.ndarray, vmax: np.ndarray) -> np.ndarray:
    """Substrate left at time ``t`` under Michaelis–Menten kinetics (closed form, broadcasting).

    ``S = Km * omega(ln(S0/Km) + (S0 - Vmax t)/Km)`` (Wright omega = Lambert W of ``exp`` of the argument).
    """
    arg = np.log(s0 / km) + (s0 - vmax * t) / km
    return km * wright_omega(arg)


def _substrate_left(
    t: np.ndarray, s0: np.ndarray, km: np.ndarray, vmax: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Substrate left ``S`` (clipped to [1e-300, S0]) and ``Vmax t``, each ``[n, t]``."""
    vt = vmax * t
    arg = np.subtract(s0, vt)
    arg /= km
    arg += np.log(s0 / km)
    s = wright_omega(arg)
    s *= km
    np.maximum(s, 1e-300, out=s)  # np.clip's values, without its per-call overhead
    np.minimum(s, s0, out=s)
    return s, vt


def _mm_terms(
    t: np.ndarray, s0: np.ndarray, km: np.ndarray, vmax: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Product ``P``, ``q = S/(S + Km)`` and ``Vmax t`` (each ``[n, t]``): the pieces of every derivative.

    With the implicit equation ``Km ln(S0/S) = Vmax t - P`` (no second logarithm needed), the derivatives of
    P with respect to ln S0, ln Km and ln Vmax are ``S0 - (S0 + Km) q``, ``-(Vmax t - P) q`` and
    ``Vmax t q`` (:func:`_mm_curve`).
    """
    s, vt = _substrate_left(t, s0, km, vmax)
    q = s + km
    np.divide(s, q, out=q)
    np.subtract(s0, s, out=s)
    return s, q, vt


def _mm_terms_with_s(
    t: np.ndarray, s0: np.ndarray, km: np.ndarray, vmax: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """:func:`_mm_terms` and the substrate left ``S`` itself (at least 1e-300): ``ln(S/S0)`` taken from ``P``
    would be ``log1p(-P/S0)``, which is ``-inf`` once a curve has run to completion (P/S0 rounds to 1)."""
    s, vt = _substrate_left(t, s0, km, vmax)
    q = s + km
    np.divide(s, q, out=q)
    return np.subtract(s0, s), q, vt, s


def _mm_curve(
    t: np.ndarray, s0: np.ndarray, km: np.ndarray, vmax: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Product P and its derivatives with respect to ln S0, ln Km and ln Vmax (each ``[n, t]``)."""
    p, q, vt = _mm_terms(t, s0, km, vmax)
    return p, s0 - (s0 + km) * q, (p - vt) * q, vt * q


Model = lsq.Model


def _times(t: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """The time grid of the wells ``rows``: ``t [n]`` shared by every well (``[1, n]``), or ``t [wells, n]``
    one grid per well (block means, :func:`block_means`)."""
    return t[None, :] if t.ndim == 1 else t[rows]


COARSE_BLOCKS = 40
"""Blocks of consecutive reads the whole-curve fits iterate on (:func:`fit_coarse_to_fine`); curves with
fewer than twice as many reads are fitted read by read."""


QUICK_BLOCKS = 20
"""Blocks of the ``quick`` fits (:func:`progress_curve`), which end on the block means."""

QUICK_FTOL = 1e-4
"""Relative change of cost at which the ``quick`` fits stop: on about :data:`QUICK_BLOCKS` block means, whose
cost is about that many read variances, a change of 1e-4 of it is a change of chi² near 0.002, which moves the
parameters by a few hundredths of a standard error."""


def _blocked(t: np.ndarray, y: np.ndarray, w: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Times ``[blocks, k]``, weights and reads (0 where not counted) ``[wells, blocks, k]`` in blocks of ``k``
    consecutive reads (the last block padded with uncounted reads)."""
    n_w, n_t = y.shape
    n_b = -(-n_t // k)
    pad = n_b * k - n_t
    yz = np.where(w > 0, y, 0.0)
    if pad:
        t, w, yz = np.pad(t, (0, pad), mode="edge"), np.pad(w, ((0, 0), (0, pad))), np.pad(yz, ((0, 0), (0, pad)))
    return t.reshape(n_b, k), w.reshape(n_w, n_b, k), yz.reshape(n_w, n_b, k)


def block_means(
    t: np.ndarray, y: np.ndarray, w: np.ndarray, k: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Means of each well's counted reads (``w`` 0/1) in blocks of ``k`` consecutive reads.

    Returns block times ``[wells, blocks]`` (the mean time of the reads counted in each block, so a missing
    read moves the block's time rather than biasing its value), block means and their least-squares
    weights ``sqrt(reads counted)`` (the mean of m reads has 1/m of the read variance; 0 for an empty
    block). A smooth curve's mean over a block equals its value at the block's mean time up to the curvature
    times the spread of the times, ``f'' var(t)/2``, which is tiny for a few reads.
    """
    return _block_means(*_blocked(t, y, w, k))


def _block_means(tp: np.ndarray, wp: np.ndarray, yp: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`block_means` of the blocks of :func:`_blocked`."""
    k = tp.shape[1]
    if wp.size and bool(wp.all()):  # every read counted: the same sums without the weights
        n_w, n_b = wp.shape[:2]
        with np.errstate(invalid="ignore"):
            tb = np.broadcast_to(tp.sum(axis=1) / k, (n_w, n_b)).copy()
            yb = yp.sum(axis=2) / k
        return tb, yb, np.full((n_w, n_b), np.sqrt(k))
    cnt = wp.sum(axis=2)
    with np.errstate(invalid="ignore", divide="ignore"):
        tb = np.where(cnt > 0, (wp * tp).sum(axis=2) / cnt, tp.mean(axis=1))
        yb = np.where(cnt > 0, (wp * yp).sum(axis=2) / cnt, 0.0)
    return tb, yb, np.sqrt(cnt)


def fit_wells_tss(y: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Sum of squares of each well's counted reads (``w`` 0/1) about their mean."""
    y0 = np.where(w > 0, y, 0.0)
    mean = (y0 * w).sum(axis=1) / np.fmax(w.sum(axis=1), 1.0)
    return (((y0 - mean[:, None]) * w) ** 2).sum(axis=1)


def read_rss(blocks: tuple[np.ndarray, np.ndarray, np.ndarray], tb: np.ndarray, yb: np.ndarray,
             f_blocks: np.ndarray, block_rss: np.ndarray) -> np.ndarray:
    """Residual sum of squares over every counted read of a curve fitted to block means.

    ``blocks`` from :func:`_blocked`; ``tb``, ``yb`` the block times and means; ``f_blocks`` the curve at the
    block times. Within a block the curve is taken as a straight line through its value ``f_b`` with the
    curve's local slope ``s_b`` (central differences of ``f_blocks`` over ``tb``), so ``sum (y - f)^2 =
    m (ybar - f_b)^2 + sum (y - ybar - s_b (t - tbar))^2`` per block: the block fit's weighted residual
    (``block_rss``, weights ``sqrt(m)``) plus the scatter of the reads about that line, which needs no
    evaluation of the model. The neglected curvature within a block of a few reads changes the sum by about
    ``f'' var(t)`` per read, far below the read noise for a smooth progress curve.
    """
    tp, wp, yp = blocks
    n_b = tb.shape[1]
    dy = yp - yb[:, :, None]
    if n_b > 1:
        dy -= _local_slope(f_blocks, tb)[:, :, None] * (tp[None] - tb[:, :, None])
    dy *= dy
    dy *= wp
    return block_rss + dy.sum(axis=(1, 2))


def _local_slope(f: np.ndarray, x: np.ndarray) -> np.ndarray:
    """``numpy.gradient(f, axis=1) / numpy.gradient(x, axis=1)`` for ``[n, m]`` arrays (``m >= 2``): central
    differences inside, one-sided at the ends. Written out, the same arithmetic (the halves of the central
    differences cancel exactly) without numpy.gradient's per-call overhead."""
    out = np.empty(f.shape)
    out[:, 1:-1] = (f[:, 2:] - f[:, :-2]) / (x[:, 2:] - x[:, :-2])
    out[:, 0] = (f[:, 1] - f[:, 0]) / (x[:, 1] - x[:, 0])
    out[:, -1] = (f[:, -1] - f[:, -2]) / (x[:, -1] - x[:, -2])
    return out


def fit_coarse_to_fine(
    make: Callable[[np.ndarray], Model],
    t: np.ndarray,
    p0: np.ndarray,
    y: np.ndarray,
    w: np.ndarray,
    *,
    lower: np.ndarray,
    upper: np.ndarray,
    max_iter: int,
    refit: Callable[[Model, LMFit, np.ndarray, np.ndarray], LMFit] | None = None,
    refine: bool = True,
    blocks: int = COARSE_BLOCKS,
    ftol: float | None = None,
) -> LMFit:
    """:func:`fit_wells` of the model ``make(t)`` iterated on block means of about :data:`COARSE_BLOCKS`
    blocks, then judged read by read.

    The iterations (four to six model evaluations) run on the block means of ``k = n_reads //
    COARSE_BLOCKS`` reads each, a k-th of the work; from the block fit's parameters one Gauss–Newton step
    is taken on every read (two evaluations), and the residual sum of squares, the covariance and the total
    sum of squares are those of every read, so that the residual RMS, the lack-of-fit decisions and the
    standard errors mean what they meant read by read. The block fit lies next to the read-by-read optimum
    (the block means follow the same smooth curve), so one step reaches it: within a twentieth of v0's
    standard error of scipy's least_squares in tests/plugins/rates/test_progress_optimum.py. Two whole
    evaluations and the block iterations cost about half of the read-by-read fit's five or six evaluations
    (bench/rates_bench.py). ``refit(model, fit, y, w)``: a second pass on the block means (plateau restarts).

    ``refine=False`` skips the read-by-read step: the parameters and covariance are the block fit's, and the
    residual sum of squares is that of every read, taken from the block fit without evaluating the model
    read by read (:func:`read_rss`). The block means are a linear compression of the reads, so the block fit
    is unbiased; it lies within a fraction of a standard error of the read-by-read optimum (measured in
    tests/plugins/rates/test_progress_optimum.py).
    """
    k = t.size // blocks
    if k < 2:
        fit = fit_wells(make(t), p0, y, w, lower=lower, upper=upper, max_iter=max_iter, ftol=ftol)
        return refit(make(t), fit, y, w) if refit else fit
    blocks = _blocked(t, y, w, k)
    tb, yb, wb = _block_means(*blocks)
    coarse_model = make(tb)
    fit = fit_wells(coarse_model, p0, yb, wb, lower=lower, upper=upper, max_iter=max_iter, ftol=ftol)
    if refit:
        fit = refit(coarse_model, fit, yb, wb)
    if not refine:
        f_blocks = fit.fitted
        if f_blocks is None or not np.all(np.isfinite(f_blocks)):  # an empty block: no fitted value kept
            f_blocks, _ = coarse_model(fit.params, np.arange(y.shape[0]))
        rss = read_rss(blocks, tb, yb, f_blocks, fit.rss)
        tss = fit_wells_tss(y, w)
        return LMFit(fit.params, rss, tss, fit.cov_unit, fit.converged & np.isfinite(rss), fit.n_iter)
    # one nearly undamped (Gauss-Newton) step read by read from there, kept where it lowers the cost
    fine = fit_wells(make(t), fit.params, y, w, lower=lower, upper=upper, max_iter=1, lam0=1e-9)
    return LMFit(fine.params, fine.rss, fine.tss, fine.cov_unit, fit.converged & np.isfinite(fine.rss),
                 fit.n_iter + 1)


def _concentration_model(t: np.ndarray, s0: np.ndarray, spc: float) -> Model:
    """``baseline + spc * P(t)`` for the wells' known ``s0`` (``[n, 1]``), as a :func:`fit_wells` model.

    Parameters (baseline, ln v0, u) with ``u = Km/(Km + S0)`` in (0, 1), the curvature of the curve
    (``-(dv/dP)/v0 = u/S0``): ``Km = S0 u/(1 - u)``, ``Vmax = v0/(1 - u)``. P is smooth in u over the whole
    range, from the straight line of zero order (u -> 0) to first order (u -> 1), so a fit is not trapped at
    either end as it was in logit coordinates, where the gradient vanishes on both plateaus. With the terms
    of :func:`_mm_terms` the Jacobian columns are 1, ``spc Vmax t q`` and
    ``spc q (Vmax t + S0 ln(S/S0)/(1 - u))/(1 - u)`` (``d ln Km/du = 1/(u (1 - u))``,
    ``d ln Vmax/du = 1/(1 - u)``, and ``Km ln(S0/S) = Vmax t - P`` written without that difference, which
    loses digits when u is small; ``ln(S/S0)`` from S itself, which stays finite when a curve has run to
    completion).
    """
    def model(p: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        tt = _times(t, rows)
        u = p[:, 2:3]
        stay = 1.0 - u
        sub = s0[rows]
        prod, q, vt, left = _mm_terms_with_s(tt, sub, sub * u / stay, np.exp(p[:, 1:2]) / stay)
        q *= spc
        jac = np.empty((rows.size, 3, t.shape[-1]))
        jac[:, 0] = 1.0
        np.multiply(vt, q, out=jac[:, 1])
        col = np.divide(left, sub, out=jac[:, 2])
        np.log(col, out=col)
        col *= sub / stay
        col += vt
        col *= q / stay
        prod *= spc
        prod += p[:, 0:1]
        return prod, jac

    return model


#: Bounds of u = Km/(Km + S0) in the fit with known S0: Km from 1e-9 S0 to 1e9 S0, past both limits a
#: curve can show (a straight line, first order).
U_BOUNDS = (1e-9, 1.0 - 1e-9)


def _signal_model(t: np.ndarray, d: np.ndarray) -> Model:
    """``baseline + d * P(t)`` in signal units with an apparent amplitude A, as a :func:`fit_wells` model.

    Parameters (baseline, ln v0, ln c1, logit r) with ``c1 = Km/(A (Km + A))`` and ``r = A/(Km + A)``: then
    ``A = (1 - r)/c1``, ``Km = A (1 - r)/r``, ``Vmax = v0/r``. With the derivatives of :func:`_mm_terms`
    (``d ln A``, ``d ln Km``, ``d ln Vmax`` per parameter: (0, 0, 1), (-1, -1, 0), (-r, -(1 + r), -(1 - r)))
    the columns are 1, ``d Vmax t q``, ``-d (A - q (A + Km + Vmax t - P))`` and
    ``-d (r A - q (r (A + Km) + 2 r Vmax t - (1 + r) P))``. ``d`` is the direction (+1 or -1) per well.
    """
    def model(p: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        tt = _times(t, rows)
        dd = d[rows, None]
        r = 1.0 / (1.0 + np.exp(-p[:, 3:4]))
        a = (1.0 - r) / np.exp(p[:, 2:3])
        km = a * (1.0 - r) / r
        prod, q, vt = _mm_terms(tt, a, km, np.exp(p[:, 1:2]) / r)
        jac = np.empty((rows.size, 4, t.shape[-1]))
        jac[:, 0] = 1.0
        np.multiply(vt, q, out=jac[:, 1])
        jac[:, 1] *= dd
        col = np.subtract(vt, prod, out=jac[:, 2])
        col += a + km
        col *= q
        np.subtract(col, a, out=col)
        col *= dd  # -d (A - q (...)) = d (q (...) - A)
        col = np.multiply(vt, 2.0 * r, out=jac[:, 3])
        col -= (1.0 + r) * prod
        col += r * (a + km)
        col *= q
        col -= r * a
        col *= dd
        prod *= dd
        prod += p[:, 0:1]
        return prod, jac

    return model


def power_conversion(u: np.ndarray, m: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Fraction converted when the rate falls as a power of the substrate left, with its derivatives.

    Integrated rate law of order ``n = 1 + m`` in the substrate (standard chemical kinetics): with
    ``dx/dt = k (1 - x)^n`` and ``x(0) = 0``, ``x = 1 - (1 + m u)^(-1/m)`` where ``u = k t`` (``k = v0/S0``);
    ``n = 1`` gives ``1 - exp(-u)``, ``n = 2`` gives ``u/(1 + u)``, ``n = 0`` gives ``min(u, 1)``. Written as
    ``x = -expm1(-g)`` with ``g = ln(1 + m u)/m`` (a series in ``m`` when ``|m| < 1e-4``). Returns ``x``,
    ``dx/d ln k`` and ``dx/dm`` (broadcasting ``u`` against ``m``); where ``1 + m u <= 0`` (``n < 1``: the
    substrate is used up at a finite time) ``x = 1`` and both derivatives are 0.
    """
    small = np.abs(m) < 1e-4
    ms = np.where(small, 1.0, m)
    z = 1.0 + m * u
    used_up = z <= 0.0
    zc = np.where(used_up, 1.0, z)
    with np.errstate(divide="ignore", invalid="ignore"):
        g = np.where(small, u * (1.0 - m * u / 2.0 + (m * u) ** 2 / 3.0), np.log(zc) / ms)
        dg_dm = np.where(small, u * u * (-0.5 + 2.0 * m * u / 3.0), (u / zc - g) / ms)
    left = np.where(used_up, 0.0, np.exp(-g))
    return 1.0 - left, left * u / zc, left * np.where(used_up, 0.0, dg_dm)


def _power_model(t: np.ndarray, s0: np.ndarray, spc: float) -> Model:
    """``baseline + spc * S0 * x(t)`` of :func:`power_conversion`, as a :func:`fit_wells` model.

    Parameters (baseline, ln v0, m) with v0 in concentration per second and the order ``n = 1 + m``.
    """
    def model(p: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        tt = _times(t, rows)
        amp = spc * s0[rows]
        x, dx_lk, dx_m = power_conversion(tt * (np.exp(p[:, 1:2]) / s0[rows]), p[:, 2:3])
        jac = np.empty((rows.size, 3, t.shape[-1]))
        jac[:, 0] = 1.0
        np.multiply(amp, dx_lk, out=jac[:, 1])
        np.multiply(amp, dx_m, out=jac[:, 2])
        return p[:, 0:1] + amp * x, jac

    return model


PLATEAU_LOGIT = 8.0
"""|logit r| beyond which a Michaelis–Menten progress fit sits on one of its two plateaus (r = S0/(Km + S0)
near 0 or 1: the curve is a straight line there and the cost hardly changes with r)."""

RESTART_LOGIT = 2.0
"""logit r from which wells on the r -> 1 plateau are fitted again (r = 0.88)."""


def _restart_plateaus(fun: Model, fit: LMFit,
                      y: np.ndarray, w: np.ndarray, lo: np.ndarray, hi: np.ndarray, max_iter: int) -> LMFit:
    """Fit again the wells whose fit ended on the zero-order plateau (r near 1, Km far below S0), from
    logit r = 2, and keep whichever fit has the lower cost. Used by the fit in signal units (unknown S0), which
    works in logit r; the fit with known S0 works in u = 1 - r, where there is no plateau to be caught on.

    On a plateau the gradient in r vanishes, so Levenberg–Marquardt can stop there although the curve has a
    better, curved fit. Measured on the 384-well bench plate against scipy's ``least_squares`` from several
    starts: from a start at the early curvature a sixth of the wells ended on a plateau, v0 off by 1.4 %
    (median; up to 13 % on noisy wells); from r = 1/2 two wells still did, both on the r -> 1 side (v0 off
    by 2-3 %), none with this restart. A well that really is zero order returns to the plateau and keeps it."""
    edge = np.flatnonzero(fit.params[:, -1] > PLATEAU_LOGIT)
    if edge.size == 0:
        return fit
    start = fit.params[edge].copy()
    start[:, -1] = RESTART_LOGIT

    def sub(p: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return fun(p, edge[rows])

    again = fit_wells(sub, start, y[edge], w[edge], lower=lo[edge], upper=hi[edge], max_iter=max_iter)
    take = again.converged & (again.rss < fit.rss[edge])
    if not take.any():
        return fit
    rows = edge[take]
    params, rss, cov, converged = fit.params.copy(), fit.rss.copy(), fit.cov_unit.copy(), fit.converged.copy()
    params[rows], rss[rows], cov[rows], converged[rows] = (again.params[take], again.rss[take],
                                                           again.cov_unit[take], again.converged[take])
    return LMFit(params, rss, fit.tss, cov, converged, max(fit.n_iter, again.n_iter))


PAST_BOUND_Z = 2.0
"""Standard errors of u beyond which a free optimum past a bound of u = Km/(Km + S0) (past 1: a rate that
falls faster than first order, as a cooperative enzyme's below K0.5; past 0: a rate that rises, as after a
lag) means the curve asks for a shape Michaelis–Menten cannot take. The bound is then the model's limit, not
a fact about the enzyme, and :func:`bounded_ln_v0_var`, which takes it as one, is not applied: the larger,
unbounded SE is kept (:func:`progress_curve`; on the demo plate's cooperative wells u's free optimum lies up
to 4.7 SE past 1, where the bounded SE would be 0.4-0.55x the unbounded one, docs/rates.md). The bounded SE is
used too only where it is within the NOISY limit (a tenth of v0): beyond it the linear approximation behind it
fails (measured where `model-choice`'s quick fits were given the bounded SE in a trial: 0.43x the scatter on
the low-signal plate's lowest substrates)."""


def truncated_mse(u_free: np.ndarray, sd: np.ndarray, u_hat: np.ndarray) -> np.ndarray:
    """Mean squared distance ``E[(U - u_hat)²]`` of ``U ~ N(u_free, sd²)`` truncated to [0, 1] from
    ``u_hat``: the truncated normal's variance plus the square of its mean's distance from ``u_hat``.

    With ``a = -u_free/sd``, ``b = (1 - u_free)/sd``, ``Z = Phi(b) - Phi(a)`` and ``Phi``, ``phi`` the
    standard normal cdf and pdf: mean ``u_free + sd (phi(a) - phi(b))/Z``, variance
    ``sd² (1 + (a phi(a) - b phi(b))/Z - ((phi(a) - phi(b))/Z)²)`` (the moments of the truncated normal;
    checked against ``scipy.stats.truncnorm`` in the tests). Evaluated on the side of 1/2 where ``u_free``
    lies mirrored to the lower half (the distance is unchanged by ``u -> 1 - u``), with ``Z`` in logarithms,
    so that it stays finite when ``u_free`` lies many ``sd`` outside [0, 1]. NaN where ``sd`` is not
    positive and finite.
    """
    from scipy.special import log_ndtr  # here: scipy stays out of the import of the rates plugins

    upper = np.asarray(u_free, dtype=float) > 0.5
    m = np.where(upper, 1.0 - np.asarray(u_free, dtype=float), u_free)
    est = np.where(upper, 1.0 - np.asarray(u_hat, dtype=float), u_hat)
    sd = np.asarray(sd, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        a, b = -m / sd, (1.0 - m) / sd  # b > a, b >= 1/(2 sd) > 0
        la, lb = log_ndtr(-a), log_ndtr(-b)  # Phi(b) - Phi(a) = Phi(-a) - Phi(-b)
        log_z = la + np.log(-np.expm1(lb - la))
        log_phi_a, log_phi_b = -0.5 * a * a - 0.5 * np.log(2 * np.pi), -0.5 * b * b - 0.5 * np.log(2 * np.pi)
        ra, rb = np.exp(log_phi_a - log_z), np.exp(log_phi_b - log_z)
        mean = m + sd * (ra - rb)
        var = sd * sd * (1.0 + a * ra - b * rb - (ra - rb) ** 2)
        out = np.fmax(var, 0.0) + (mean - est) ** 2
    return np.where((sd > 0) & np.isfinite(sd), out, np.nan)


def bounded_ln_v0_var(cov: np.ndarray, u_hat: np.ndarray, u_free: np.ndarray) -> np.ndarray:
    """Variance of ln v0 from the Michaelis–Menten fit with known S0 when its curvature ``u = Km/(Km + S0)``
    is confined to (0, 1): ``cov`` ``[wells, 3, 3]`` over (baseline, ln v0, u), already scaled by the
    residual variance; ``u_hat`` the fitted u (within its bounds), ``u_free`` the optimum without bounds
    (:func:`free_curvature`; the same as ``u_hat`` where no bound is active).

    The delta-method variance ``C_ll`` splits into the part with ``u`` held, ``C_ll - C_lu²/C_uu``, and the
    part carried through ``u``, ``b² C_uu`` with ``b = C_lu/C_uu``: to first order ``ln v0`` moves by ``b``
    per unit of ``u`` with the other parameters re-fitted. On a curve far from completion ``u`` is barely
    determined (its standard error ``sd_u = sqrt(C_uu)`` can exceed the whole range, and the true curvature
    may lie within a fraction of ``sd_u`` of a bound), so ``C_uu``, which describes an unbounded estimate,
    overstated v0's scatter (up to 3.4x, docs/rates.md). Here ``C_uu`` is replaced by how far the true
    ``u`` may be from the reported one, given the curve: the likelihood of ``u`` is ``N(u_free, sd_u²)``
    in the linear approximation; with every curvature in (0, 1) equally likely beforehand (nothing else is
    known of Km) the true u follows that normal truncated to [0, 1], and :func:`truncated_mse` is its mean
    squared distance from ``u_hat`` (the posterior mean squared error of the reported curvature). For a
    clearly bending curve the truncation removes nothing and this is ``C_uu``. Never above ``C_ll``;
    non-finite terms fall back to ``C_ll``.
    """
    cll, clu, cuu = cov[:, 1, 1], cov[:, 1, 2], cov[:, 2, 2]
    with np.errstate(divide="ignore", invalid="ignore"):
        b = clu / cuu
        held = cll - clu * b
        out = held + b * b * truncated_mse(u_free, np.sqrt(cuu), u_hat)
    good = np.isfinite(out) & (cuu > 0) & (held >= 0)
    return np.where(good, np.minimum(out, cll), cll)


def free_curvature(model: Model, params: np.ndarray, y: np.ndarray, w: np.ndarray) -> np.ndarray:
    """The last parameter (the curvature u) at the fit's optimum without bounds: one Gauss–Newton step from
    ``params`` (``[wells, p]``) on the reads ``y`` with 0/1 weights ``w``. Where no bound is active the fit
    sits at a stationary point and the step is nil; where u stopped on a bound the step goes to where the
    sum of squares, quadratic in the linear approximation, is least. NaN where the normal equations are
    singular."""
    fitted, jac = model(params, np.arange(params.shape[0]))
    resid = np.where(w > 0, y - fitted, 0.0) * w
    jw = jac * w[:, None, :]
    a = jw @ jw.transpose(0, 2, 1)
    g = np.einsum("wpt,wt->wp", jw, resid)
    ok = np.all(np.isfinite(a), axis=(1, 2)) & np.all(np.isfinite(g), axis=1)
    ok[ok] &= np.abs(np.linalg.det(a[ok])) > 0
    step = np.full(params.shape, np.nan)
    if ok.any():
        step[ok] = np.linalg.solve(a[ok], g[ok][..., None])[..., 0]
    return params[:, -1] + step[:, -1]


def _rate_drop_terms(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``k(x) = (x/(1 - x) + ln(1 - x))/x²`` and ``m(x) = 1 + 2 ln(1 - x)/x + 1/(1 - x)`` for ``0 <= x < 1``
    (:func:`signal_ln_v0_var`), by their series ``sum (1 - 1/n) x^(n-2)`` and ``sum (n - 1)/(n + 1) x^n``
    (n >= 2) below 1e-3, where the closed forms lose digits (there the series, cut after four terms, are
    exact to 1e-12 relative)."""
    small = x < 1e-3
    xs = np.where(small, 0.5, x)
    lg = np.log1p(-xs)
    k = np.where(small, 0.5 + x * (2 / 3 + x * (0.75 + 0.8 * x)), (xs / (1.0 - xs) + lg) / (xs * xs))
    m = np.where(small, x * x * (1 / 3 + x * (0.5 + x * (0.6 + x * 2 / 3))), 1.0 + 2.0 * lg / xs + 1.0 / (1.0 - xs))
    return k, m


def signal_ln_v0_var(t: np.ndarray, params: np.ndarray, fitted: np.ndarray, w: np.ndarray, d: np.ndarray,
                     scale2: np.ndarray) -> np.ndarray:
    """Delta-method variance of ln v0 from the Michaelis–Menten fit in signal units (:func:`_signal_model`):
    ``params`` ``[wells, 4]`` (baseline, ln v0, ln c1, logit r), ``fitted`` the model at the reads
    ``[wells, t]``, ``w`` the 0/1 weights of the reads, ``d`` the direction, ``scale2`` the residual
    variance per well.

    Not taken from the fit's own coordinates: on a curve far from completion the best curvature ``c1 =
    -(dv/dP)/v0`` is often zero (a straight line; a quarter to half of such wells), where ``ln c1`` runs to
    its bound with ``r -> 0``. There the Jacobian columns of ``ln c1`` and ``logit r`` vanish (and are
    differences of numbers of order ``1/c1``), so the inverse held the curvature at zero: a straight line's
    standard error for a v0 that carries a straight line's bias, and 95 % intervals that held the truth 5-58
    % of the time on those wells (docs/rates.md). Here the columns are those of (baseline, ln v0, c1, r), by
    implicit differentiation of the integrated rate law ``v0 t = r P + (1 - r) (-ln(1 - a P))/a`` with
    ``a = 1/A = c1/(1 - r)`` (A the amplitude, ``r = A/(Km + A)``): with ``x = a P`` and ``v/v0 = (1 -
    x)/(1 - r x)``, ``dP/d ln v0 = v t``, ``dP/dc1 = -P² k(x) v/v0``, ``dP/dr = -P m(x) v/v0``
    (:func:`_rate_drop_terms`). Each column is scaled to unit length before the inverse, so that where the
    curve is straight (``m(x) ~ x²/3``, r's column of order ``x²``) its direction (``P³``, the cubic term)
    still counts: the curvature and the shape stay estimated, as they are. NaN where the normal equations
    are singular or not finite.
    """
    n = params.shape[0]
    v0, c1 = np.exp(params[:, 1:2]), np.exp(params[:, 2:3])
    r = 1.0 / (1.0 + np.exp(-params[:, 3:4]))
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        prod = np.fmax(np.where(w > 0, d[:, None] * (fitted - params[:, 0:1]), 0.0), 0.0)
        x = np.clip(c1 / (1.0 - r) * prod, 0.0, 1.0 - 1e-12)
        k, m = _rate_drop_terms(x)
        ratio = (1.0 - x) / (1.0 - r * x)
        jac = np.empty((n, 4, t.size))
        jac[:, 0] = 1.0
        jac[:, 1] = v0 * t[None, :] * ratio
        jac[:, 2] = -prod * prod * k * ratio
        jac[:, 3] = -prod * m * ratio
        jac *= w[:, None, :]  # the direction d multiplies every column but the baseline's: no change to Var
        norm = np.sqrt(np.einsum("wpt,wpt->wp", jac, jac))
        jac /= norm[:, :, None]
        cov = lsq.unit_covariance(jac)
        return cov[:, 1, 1] / norm[:, 1] ** 2 * scale2


def shape_profile(t: np.ndarray, y: np.ndarray, w: np.ndarray, d: np.ndarray, start: np.ndarray,
                  scale2: np.ndarray, grid: tuple[float, ...] = SHAPE_GRID,
                  max_iter: int = 40) -> dict[str, np.ndarray]:
    """Fit every well without S0 at every fixed shape of ``grid`` (:mod:`vzero.plugins.rates.shapegrid`):
    ``ln_v0``, ``var`` (ln v0's variance with the curvature bounded, :func:`bounded_ln_v0_var`), ``rss`` and
    ``converged``, each ``[wells, shapes]``; the profile behind the standard error of the fit in signal units.

    ``t`` ``[n]`` times (s); ``y`` ``[wells, n]`` reads with 0/1 weights ``w``; ``d`` the direction per
    well; ``start`` ``[wells, 4]`` the four-parameter fit (baseline, ln v0, ln c1, logit r: start values);
    ``scale2`` the residual variance per well (signal²). The fits run on block means of about
    :data:`QUICK_BLOCKS` blocks (a linear compression of the reads, enough for a smooth three-parameter
    curve, at a fraction of the work) and stop at :data:`QUICK_FTOL`; ``rss`` is the block fit's (its
    differences between shapes are those of the reads up to the neglected curvature within a block). The
    curvature lies in [0, (1 - r)/P_last] (from a straight line to an amplitude A no smaller than the
    product formed by the last block): its posterior about the fit, normal in the linear approximation and
    truncated to that range, replaces its unbounded variance.
    """
    n_w, n_g = y.shape[0], len(grid)
    tb, yb, wb = block_means(t, y, w, max(t.size // QUICK_BLOCKS, 1))
    r = np.repeat(np.asarray(grid, dtype=float), n_w)
    well = np.tile(np.arange(n_w), n_g)
    p0 = np.stack([start[well, 0], start[well, 1], np.exp(start[well, 2])], axis=1)
    lo = np.stack([np.full(r.size, -np.inf), p0[:, 1] - 12.0, np.zeros(r.size)], axis=1)
    hi = np.stack([np.full(r.size, np.inf), p0[:, 1] + 12.0, np.full(r.size, np.inf)], axis=1)
    model = fixed_shape_model(tb[well], d[well], r)
    yy, ww = yb[well], wb[well]
    fit = fit_wells(model, p0, yy, ww, lower=lo, upper=hi, max_iter=max_iter, ftol=QUICK_FTOL)
    fitted = fit.fitted if fit.fitted is not None else model(fit.params, np.arange(r.size))[0]
    last = np.where(ww > 0, d[well, None] * (fitted - fit.params[:, 0:1]), -np.inf).max(axis=1)
    c_max = (1.0 - r) / np.where(last > 0, last, np.nan)
    c_free = free_curvature(model, fit.params, yy, ww)
    cov = fit.cov_unit * scale2[well, None, None]
    cov[:, 2, :] /= c_max[:, None]
    cov[:, :, 2] /= c_max[:, None]
    var = bounded_ln_v0_var(cov, fit.params[:, 2] / c_max, c_free / c_max)
    with np.errstate(divide="ignore", invalid="ignore"):
        bend = c_free / c_max / np.sqrt(cov[:, 2, 2])
    shape = (n_g, n_w)
    return {"ln_v0": fit.params[:, 1].reshape(shape).T, "var": var.reshape(shape).T,
            "rss": fit.rss.reshape(shape).T, "converged": fit.converged.reshape(shape).T,
            "bend": bend.reshape(shape).T}


def start_quadratic(u: np.ndarray, y: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Coefficients ``[wells, 3]`` of ``y ≈ c0 + c1 u + c2 u²`` per well over the reads with ``w`` 1 (``u``
    the shared scaled time, in [0, 1]), from the moment sums (two matrix products and a closed-form 3x3
    inverse): start values, where :func:`vzero.plugins.rates.polynomial.masked_polyfit`'s centring and
    residuals are not needed. NaN for wells with fewer than four reads."""
    pw = u[:, None] ** np.arange(5)[None, :]
    m = w @ pw
    xy = (w * np.where(w > 0, y, 0.0)) @ pw[:, :3]
    coef = np.einsum("npq,nq->np", inv3_hankel(m), xy)
    coef[w.sum(axis=1) < 4] = np.nan
    return coef


def progress_curve(
    time: np.ndarray,
    signal: np.ndarray,
    *,
    s0: np.ndarray | None = None,
    signal_per_conc: float | None = None,
    min_points: int = 8,
    fail_ratio: float = 3.0,
    max_iter: int = 80,
    model: str = "michaelis-menten",
    screened: Screen | None = None,
    quick: bool = False,
) -> RateResult:
    """Initial rate from a fit of the integrated Michaelis–Menten equation to the whole curve.

    With ``s0`` and ``signal_per_conc`` both given the model is ``baseline + signal_per_conc * P(t)`` with
    fitted baseline, Km and Vmax (concentration units of ``s0``); otherwise it is fitted in signal units,
    ``baseline ± P(t)`` with an apparent amplitude A (the signal change at full conversion) in place of
    ``S0``, direction from the data. ``v0 = Vmax S0/(Km + S0)`` converted to signal/s; its standard error by
    the delta method from the fit covariance scaled by ``max(residual variance, read noise²)``.

    The reaction is taken to start at ``t = 0`` of the time axis (reads may start later) with no lag and a
    stable enzyme; use :func:`vzero.plugins.rates.lagdecay.lag_decay` for curves with lag or inactivation.
    FIT_FAILED marks wells where the fit did not converge or its residual RMS exceeds ``fail_ratio`` times
    the read noise (the model does not describe the curve). Wells flagged by the screen (NO_SIGNAL, ...) are
    never fitted. ``extra``: ``km``, ``vmax`` (per second), ``s0_fit`` (A in signal units when s0 is unknown),
    ``rmse_over_noise``. Km and Vmax are weakly determined when the curve is far from completion; v0 is
    a fitted parameter itself, so its value stays sound there. With known S0 its standard error allows for
    the curvature's bounds (:func:`bounded_ln_v0_var`; only where that SE is within a tenth of v0 and the
    curve's free optimum of u lies within :data:`PAST_BOUND_Z` SE of its bounds, else the larger SE is
    kept): SE 1.00-1.19x the scatter and 95 % intervals holding the truth 94-97 % of the time on curves far
    from completion (2000 wells per condition), except
    S0 = Km with 12 % converted (98.6 %; docs/rates.md). Without S0 the standard error comes from a profile
    over the curve's shape (:mod:`vzero.plugins.rates.shapegrid`: fits at five fixed shapes mixed by their
    likelihood; :func:`signal_ln_v0_var` only where none converges), times an empirical factor at how clearly
    the curve bends (:data:`vzero.plugins.rates.shapegrid.BEND_KNOTS`, measured on simulated wells by
    ``python -m bench.se_calibration``): calibrated on curving and moderately curving wells, still on the
    large side where the curve is nearly straight (up to 1.45x the scatter, since nothing bounds the
    curvature from above without S0; docs/rates.md, "Do the standard errors mean what they say?").

    ``model="power"`` fits instead a rate that falls as a power of the substrate left, ``v = v0 (1 -
    x)^n`` (:func:`power_conversion`; needs ``s0`` and ``signal_per_conc``), with fitted baseline, v0 and
    order n (``extra['order']``). It is exact for Michaelis–Menten kinetics far below Km (n = 1) or far
    above it (n -> 0), and for Hill kinetics far below K0.5 (n = h); elsewhere the local order drifts as the
    substrate falls and v0 is slightly high (a few percent at S0 = K0.5 over 40 % conversion, measured).
    For cooperative enzymes at low signal it gives much steadier rates than any early window (docs/rates.md).

    ``screened``: the :func:`vzero.plugins.rates.noise.screen` of these reads with this ``min_points`` and
    time, when the caller has it already (it is not computed again).

    ``quick``: the fit iterates on :data:`QUICK_BLOCKS` block means, stops at :data:`QUICK_FTOL` and ends
    there (``refine=False`` of :func:`fit_coarse_to_fine`); with
    known S0, the Michaelis–Menten fit starts from the curvature of the early reads (``u`` from
    ``-(dv/dP)/v0 = u/S0``) instead of ``u = 1/2``: about half the work (bench/rates_bench.py), for
    :func:`vzero.plugins.rates.choice.model_choice`, which checks each whole-curve v0 against a model-free
    estimate anyway.
    """
    if model not in ("michaelis-menten", "power"):
        raise StageError(f"progress curve: unknown model {model!r}; use 'michaelis-menten' or 'power'.")
    t, y = check_inputs(time, signal)
    n_w = y.shape[0]
    sc = screen(y, min_points=min_points, time=t) if screened is None else screened
    out = blank_result(n_w, sc.flags)
    power = model == "power"
    names = ("s0_fit", "rmse_over_noise", "order") if power else ("km", "vmax", "s0_fit", "rmse_over_noise")
    extra = {k: np.full(n_w, np.nan) for k in names}
    extra["read_noise"] = sc.sigma
    known = s0 is not None and signal_per_conc is not None
    if power and not known:
        raise StageError(
            "progress curve: model 'power' needs the substrate per well and signal_per_conc (or epsilon and "
            "pathlength), because its order is defined by the fraction of substrate converted.",
            hint="Give substrate concentrations in the layout and signal_per_conc, or use the "
                 "Michaelis-Menten model.",
        )
    todo = np.flatnonzero(sc.usable)
    if known:
        s0_arr = np.broadcast_to(np.asarray(s0, dtype=float), (n_w,))
        # a changing well without a substrate concentration (0 or missing) does not fit this model: say so
        out["flags"][todo[~(s0_arr[todo] > 0)]] |= int(Flag.FIT_FAILED)
        todo = todo[s0_arr[todo] > 0]
    if todo.size == 0 or t.size == 0:
        return finish(out, extra)
    yy = y[todo]
    ww = sc.valid[todo].astype(float)
    d = np.sign(sc.change[todo])
    # start values: slope and curvature at the first read from a quadratic over the first half of the reads
    first_half = ww * (np.arange(t.size) < max(t.size // 2, min_points))[None, :]
    span = t[-1] - t[0]
    q = start_quadratic((t - t[0]) / span, yy, first_half)
    # the floor (where the early quadratic's slope is tiny or has the wrong sign, e.g. the first reads are
    # missing) is a thousandth of the mean rate: ln v0's bounds (start +- 12) then run from 6e-9 to 160
    # times the mean rate, which holds the initial rate of any curve that slows down (at least the mean)
    v_init = np.fmax(d * q[:, 1] / span, 1e-3 * np.abs(sc.change[todo]) / span)
    base0 = q[:, 0]
    c_init = -2.0 * d * q[:, 2] / span**2 / v_init**2  # -(dv/dP)/v0 at the start, 1/signal
    c_floor = 1e-3 / np.abs(sc.change[todo])
    c_init = np.where(np.isfinite(c_init), np.fmax(c_init, c_floor), c_floor)
    free = np.full(todo.size, np.inf)
    if known:
        # parameters: baseline, ln v0 (conc/s), u = Km/(Km + S0) (_concentration_model)
        spc = float(signal_per_conc)  # type: ignore[arg-type]
        s0w = s0_arr[todo][:, None]
        vc = v_init / abs(spc)
        # u = Km/(Km + S0) starts at 1/2 (S0 = Km), mid-range, or (quick) at the early curvature
        u0 = np.clip(c_init * abs(spc) * s0w[:, 0], 0.05, 0.95) if quick else np.full(todo.size, 0.5)
        p0 = np.stack([base0, np.log(vc), u0], axis=1)
        lo = np.stack([-free, np.log(vc) - 12, np.full(todo.size, U_BOUNDS[0])], axis=1)
        hi = np.stack([free, np.log(vc) + 12, np.full(todo.size, U_BOUNDS[1])], axis=1)

        if power:
            # parameters: baseline, ln v0 (conc/s), m = n - 1; -(dv/dP)/v0 = n/S0 gives the start order
            n0 = np.clip(c_init * abs(spc) * s0w[:, 0], 0.0, 6.0)
            p0 = np.stack([base0, np.log(vc), n0 - 1.0], axis=1)
            lo[:, 2], hi[:, 2] = -1.5, 9.0
            def make(tg: np.ndarray) -> Model:
                return _power_model(tg, s0w, spc)
        else:
            def make(tg: np.ndarray) -> Model:
                return _concentration_model(tg, s0w, spc)
    else:
        # parameters: baseline, ln v0 (signal/s), ln c1 with c1 = -(dv/dP)/v0 = Km/(A (Km + A)), logit r
        # with r = A/(Km + A); then A = (1 - r)/c1, Km = A (1 - r)/r, Vmax = v0/r. Both v0 and c1 stay
        # identifiable when the curve is far from completion, where A and Km alone are not.
        p0 = np.stack([base0, np.log(v_init), np.log(c_init), np.zeros(todo.size)], axis=1)
        lo = np.stack([-free, np.log(v_init) - 12, np.log(c_floor) - 30, np.full(todo.size, -30.0)], axis=1)
        hi = np.stack([free, np.log(v_init) + 12, np.log(c_floor) + 20, np.full(todo.size, 30.0)], axis=1)

        def make(tg: np.ndarray) -> Model:
            return _signal_model(tg, d)

    def restart(fun: Model, first: LMFit, yr: np.ndarray, wr: np.ndarray) -> LMFit:
        return _restart_plateaus(fun, first, yr, wr, lo, hi, max_iter)

    fit = fit_coarse_to_fine(make, t, p0, yy, ww, lower=lo, upper=hi, max_iter=max_iter,
                             refit=None if known else restart, refine=not quick,
                             blocks=QUICK_BLOCKS if quick else COARSE_BLOCKS, ftol=QUICK_FTOL if quick else None)
    n_par = p0.shape[1]
    dof = np.fmax(ww.sum(axis=1) - n_par, 1.0)
    rmse = np.sqrt(fit.rss / dof)
    ratio = rmse / sc.sigma[todo]
    scale2 = np.fmax(rmse, sc.sigma[todo]) ** 2
    r_fit = 1.0 - fit.params[:, -1] if known else 1.0 / (1.0 + np.exp(-fit.params[:, -1]))
    if power:
        sub = s0_arr[todo]
        v0 = spc * np.exp(fit.params[:, 1])
        extra["order"][todo] = 1.0 + fit.params[:, 2]
    elif known:
        sub = s0_arr[todo]
        v0 = spc * np.exp(fit.params[:, 1])
        km, vm = sub * (1.0 - r_fit) / r_fit, np.exp(fit.params[:, 1]) / r_fit
    else:
        v0 = d * np.exp(fit.params[:, 1])
        sub = (1.0 - r_fit) / np.exp(fit.params[:, 2])
        km, vm = sub * (1.0 - r_fit) / r_fit, np.abs(v0) / r_fit
    grad = np.zeros_like(fit.params)
    grad[:, 1] = v0
    var = np.einsum("wp,wpq,wq->w", grad, fit.cov_unit, grad) * scale2
    if known and not power and not quick:
        u_free = free_curvature(make(t), fit.params, yy, ww)
        cov = fit.cov_unit * scale2[:, None, None]
        bounded = v0**2 * bounded_ln_v0_var(cov, fit.params[:, 2], u_free)
        with np.errstate(invalid="ignore", divide="ignore"):
            past = np.fmax(np.fmax(u_free - 1.0, -u_free), 0.0) / np.sqrt(cov[:, 2, 2])
            var = np.where((past <= PAST_BOUND_Z) & (bounded * NOISY_MIN_T**2 <= v0**2), bounded, var)
    elif not known:
        fitted, _ = make(t)(fit.params, np.arange(todo.size))
        profile = shape_profile(t, yy, ww, d, fit.params, scale2)
        # the profile's SE times the empirical factor at how clearly the curve bends (shapegrid.BEND_KNOTS)
        ln_var = mixed_ln_v0_var(profile, fit.params[:, 1], scale2) * bend_factor(profile_bend(profile)) ** 2
        # where no shape's fit converged: the four-parameter delta method (on the large side far from completion)
        lost = ~np.isfinite(ln_var)
        if lost.any():
            ln_var[lost] = signal_ln_v0_var(t, fit.params[lost], fitted[lost], ww[lost], d[lost], scale2[lost])
        var = v0**2 * ln_var
    failed = ~fit.converged | ~(ratio <= fail_ratio) | ~np.isfinite(v0)
    out["v0"][todo], out["stderr"][todo] = v0, np.sqrt(np.abs(var))
    with np.errstate(invalid="ignore", divide="ignore"):
        out["goodness"][todo] = 1.0 - fit.rss / fit.tss
    out["flags"][todo[failed]] |= int(Flag.FIT_FAILED)
    first = np.argmax(sc.valid[todo], axis=1)
    last = t.size - 1 - np.argmax(sc.valid[todo][:, ::-1], axis=1)
    out["window_start_s"][todo], out["window_end_s"][todo] = t[first], t[last]
    out["n_points"][todo] = sc.n_valid[todo]
    if not power:
        extra["km"][todo], extra["vmax"][todo] = km, vm
    extra["s0_fit"][todo] = sub
    extra["rmse_over_noise"][todo] = ratio
    flag_noisy(out["v0"], out["stderr"], out["flags"])
    return finish(out, extra)
