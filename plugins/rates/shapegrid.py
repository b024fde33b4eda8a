"""Standard error of v0 from a signal-unit progress curve by a profile over its shape.

Without the substrate concentration the Michaelis–Menten curve is fitted in signal units with four
parameters (:func:`vzero.plugins.rates.progress.progress_curve`): baseline, ln v0, the initial curvature
``c1 = -(dv/dP)/v0`` and the shape ``r = A/(Km + A)`` (A the apparent amplitude), through the integrated rate
law ``v0 t = r P + (1 - r)(-ln(1 - a P))/a`` with ``a = c1/(1 - r)``. Far from completion the shape is barely
determined by the curve, and v0 does not follow it linearly, so the delta method over all four parameters
describes an unbounded, linearised estimate and overstates v0's scatter (docs/rates.md, "Do the standard
errors mean what they say?").

Here the shape is profiled instead: the curve is fitted again at a few fixed shapes (:data:`SHAPE_GRID`), each
a three-parameter fit (baseline, ln v0, c1 with c1 >= 0), all wells and shapes in one batch; at each shape
v0's variance allows for the curvature's bound at zero (a straight line) as
:func:`vzero.plugins.rates.progress.bounded_ln_v0_var` does for known S0; and the variances are mixed with
weights from each shape's likelihood, ``exp(-(RSS_r - RSS_min)/(2 sigma^2))`` (every shape in [0, 1) equally
likely beforehand, as with known S0 every curvature is): the mean squared distance of ln v0 at the shapes the
curve allows from the reported ln v0. Simulated calibration only (research use; defer to the lab's own
validated procedures).
"""

from __future__ import annotations

import numpy as np
from vzero.plugins.kinetics import lsq
from vzero.plugins.rates.progress import (
    QUICK_BLOCKS,
    QUICK_FTOL,
    block_means,
    bounded_ln_v0_var,
    fit_wells,
    free_curvature,
    wright_omega,
)

SHAPE_GRID = (0.0, 0.25, 0.5, 0.75, 0.95)
"""Fixed shapes r = A/(Km + A) of the profile, equally weighted beforehand: first order (r = 0; a curve whose
enzyme is being lost also fits best there), three points between, and nearly zero order (r = 1 itself is
degenerate at any curvature: a straight line that stops at the amplitude). Measured against the midpoints
(0.1, 0.3, ..., 0.9) on 500 wells per condition: the same SE ratios within 0.04, coverage on inactivating
wells 0.964 against 0.952."""

_SERIES_TAU = 1e-5
"""Below this scaled time ``tau`` the conversion comes from its series (three terms, error below tau^3)."""


def shape_conversion(tau: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Fraction ``x = a P`` of the apparent amplitude converted, solving ``r x - (1 - r) ln(1 - x) = tau``
    (the integrated Michaelis–Menten law scaled by ``a = c1/(1 - r)``, ``tau = a v0 t``), broadcasting.

    For ``r = 0`` ``x = 1 - exp(-tau)``; otherwise with ``k = r/(1 - r)`` and ``s = 1 - x``,
    ``k s = omega(ln k + (r - tau)/(1 - r))`` (Wright omega), then two Newton steps on ``x`` where ``x <
    1/2`` (there ``1 - s`` loses digits; ``h(x) - tau`` with ``log1p`` keeps them). Below
    :data:`_SERIES_TAU` the series ``x = tau (1 - b tau/2 + (b^2/2 - b/3) tau^2)``, ``b = 1 - r``.
    """
    tau = np.asarray(tau, dtype=float)
    r = np.broadcast_to(np.asarray(r, dtype=float), tau.shape)
    b = 1.0 - r
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        k = r / b
        first = -np.expm1(-tau)
        x = np.where(r > 0, 1.0 - wright_omega(np.log(np.where(r > 0, k, 1.0)) + (r - tau) / b)
                     / np.where(r > 0, k, 1.0), first)
        x = np.where(r > 0, x, first)
        for _ in range(2):
            near = (r > 0) & (x < 0.5)
            h = r * x - b * np.log1p(-x) - tau
            step = h / (r + b / (1.0 - x))
            x = np.where(near, x - step, x)
        small = tau < _SERIES_TAU
        series = tau * (1.0 - b * tau / 2.0 + (b * b / 2.0 - b / 3.0) * tau * tau)
        return np.clip(np.where(small, series, x), 0.0, 1.0 - 1e-16)


def _drop_term(x: np.ndarray) -> np.ndarray:
    """``j(x) = (x + (1 - x) ln(1 - x))/x²`` for ``0 <= x < 1`` (``dP/dc1 = -P² j(x)/(1 - r x)``), by its
    series ``sum x^(n-2)/(n (n - 1))`` (n >= 2, five terms) below 1e-3, where the closed form loses digits."""
    small = x < 1e-3
    xs = np.where(small, 0.5, x)
    closed = (xs + (1.0 - xs) * np.log1p(-xs)) / (xs * xs)
    series = 0.5 + x * (1 / 6 + x * (1 / 12 + x * (1 / 20 + x / 30)))
    return np.where(small, series, closed)


def fixed_shape_model(t: np.ndarray, d: np.ndarray, r: np.ndarray) -> lsq.Model:
    """``baseline + d P(t)`` at the fixed shape ``r`` per problem, as a batched least-squares model with
    parameters (baseline, ln v0, c1), c1 >= 0 (``c1 = 0`` is the straight line ``P = v0 t``).

    ``t`` ``[n]`` shared or ``[problems, n]`` one grid per problem (block means); ``d`` (+1/-1) and ``r``
    ``[problems]``. With ``x = a P`` (:func:`shape_conversion`), by implicit differentiation of the rate law:
    ``dP/d ln v0 = v0 t (1 - x)/(1 - r x)`` (the rate times t) and ``dP/dc1 = -P² j(x)/(1 - r x)``
    (:func:`_drop_term`), both finite at ``c1 = 0``.
    """
    def model(p: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        tt = t[None, :] if t.ndim == 1 else t[rows]
        rr = r[rows, None]
        v0t = np.exp(p[:, 1:2]) * tt
        a = np.fmax(p[:, 2:3], 0.0) / (1.0 - rr)
        tau = a * v0t
        x = shape_conversion(tau, rr)
        with np.errstate(divide="ignore", invalid="ignore"):
            g = np.where(tau > 0, x / tau, 1.0)  # P/(v0 t)
        prod = v0t * g
        slow = 1.0 / (1.0 - rr * x)
        jac = np.empty((rows.size, 3, tt.shape[-1]))
        jac[:, 0] = 1.0
        jac[:, 1] = d[rows, None] * v0t * (1.0 - x) * slow
        jac[:, 2] = -d[rows, None] * prod * prod * _drop_term(x) * slow
        return p[:, 0:1] + d[rows, None] * prod, jac

    return model


def shape_profile(t: np.ndarray, y: np.ndarray, w: np.ndarray, d: np.ndarray, start: np.ndarray,
                  scale2: np.ndarray, grid: tuple[float, ...] = SHAPE_GRID,
                  max_iter: int = 40) -> dict[str, np.ndarray]:
    """Fit every well at every fixed shape of ``grid``: ``ln_v0``, ``var`` (ln v0's variance with the
    curvature bounded, :func:`vzero.plugins.rates.progress.bounded_ln_v0_var`), ``rss`` and ``converged``,
    each ``[wells, shapes]``.

    ``t`` ``[n]`` times (s); ``y`` ``[wells, n]`` reads with 0/1 weights ``w``; ``d`` the direction per
    well; ``start`` ``[wells, 4]`` the four-parameter fit (baseline, ln v0, ln c1, logit r: start values);
    ``scale2`` the residual variance per well (signal²). The fits run on block means of about
    :data:`vzero.plugins.rates.progress.QUICK_BLOCKS` blocks (a linear compression of the reads, enough for
    a smooth three-parameter curve, at a fraction of the work) and stop at
    :data:`vzero.plugins.rates.progress.QUICK_FTOL`; ``rss`` is the block fit's (its differences between
    shapes are those of the reads up to the neglected curvature within a block). The curvature lies in
    [0, (1 - r)/P_last] (from a straight line to an amplitude A no smaller than the product formed by the
    last block): its posterior about the fit, normal in the linear approximation and truncated to that
    range, replaces its unbounded variance.
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
    shape = (n_g, n_w)
    return {"ln_v0": fit.params[:, 1].reshape(shape).T, "var": var.reshape(shape).T,
            "rss": fit.rss.reshape(shape).T, "converged": fit.converged.reshape(shape).T}


def mixed_ln_v0_var(profile: dict[str, np.ndarray], ln_v0: np.ndarray, scale2: np.ndarray) -> np.ndarray:
    """Variance of the reported ``ln_v0`` ``[wells]`` over the shapes of a :func:`shape_profile`: ``sum_r
    w_r (var_r + (ln v0_r - ln_v0)²)`` with ``w_r`` proportional to ``exp(-(RSS_r - RSS_min)/(2 scale2))``
    (each shape's likelihood; a flat prior over the grid). Shapes whose fit failed take no weight; NaN where
    none is left."""
    rss, var, lv = profile["rss"], profile["var"], profile["ln_v0"]
    ok = np.isfinite(rss) & np.isfinite(var) & np.isfinite(lv) & profile["converged"]
    with np.errstate(invalid="ignore"):
        best = np.min(np.where(ok, rss, np.inf), axis=1)
        lw = np.where(ok, -(rss - best[:, None]) / (2.0 * scale2[:, None]), -np.inf)
        wt = np.exp(lw)
        wt /= wt.sum(axis=1, keepdims=True)
        terms = np.where(ok, var + (lv - ln_v0[:, None]) ** 2, 0.0)
        return np.where(ok.any(axis=1), (wt * terms).sum(axis=1), np.nan)
