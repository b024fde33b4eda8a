"""Whole-progress-curve fit of the integrated Hill rate law, all wells at once.

For a rate ``v = Vmax S^h/(K^h + S^h)`` (Hill 1910) the substrate left obeys, with ``z = S/S0``,
``tau = Vmax t/S0`` and ``kappa = (K/S0)^h``::

    tau = (1 - z) + kappa (z^(1 - h) - 1)/(h - 1)        (-kappa ln z at h = 1: integrated Michaelis–Menten)

There is no closed form for ``z(t)``: it is solved per read by Newton's method in ``ln z``, kept inside a
bracket (bisection where a step leaves it). The curve nests both three-parameter curves of
:func:`vzero.plugins.rates.progress.progress_curve`: ``h = 1`` is integrated Michaelis–Menten and
``kappa -> infinity`` the power law of order ``h``. In between, the local order of the rate in the substrate,
``h kappa/(kappa + z^h)``, rises as the substrate falls — what a cooperative enzyme near K0.5 does and
neither nested curve can follow (docs/rates.md, ``model-choice``).

Parameters (baseline in signal units, ``ln v0`` with v0 in concentration per second, ``n0 = h u`` the order
of the rate at t = 0, ``logit u`` with ``u = kappa/(1 + kappa)``): ``v0 = Vmax (1 - u)``. The order at
t = 0 is what the early curvature fixes, so (n0, u) are far less correlated than (u, h): from the same
starts the fit converged in under 30 iterations instead of about 80.
Jacobian by implicit differentiation of ``G(z) = (1 - z) + kappa f(z, h) - tau = 0``: ``dz/dp = -(dG/dp)/
(dG/dz)`` with ``dG/dz = -1 - kappa z^-h``; ``dG/dh`` by a central difference in h at fixed z (no new solve).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from vzero.plugins.kinetics import lsq
from vzero.plugins.rates.progress import QUICK_BLOCKS, QUICK_FTOL, _times, fit_coarse_to_fine

#: Least ln z the solver goes to (z = 2e-22 of S0: the substrate is used up for any signal).
LN_Z_FLOOR = -50.0

#: Bounds of the order at t = 0, ``n0 = h u``, and of ``logit u`` in the fit.
N0_BOUNDS = (1e-3, 8.0)
LOGIT_U_BOUNDS = (-10.0, 14.0)

#: Hill coefficients a fit may end with: a fit outside is started again, then not kept (Hill coefficients
#: above 4 are rare; 8 leaves room for noise).
H_RANGE = (0.3, 8.0)


def _plausible(params: np.ndarray) -> np.ndarray:
    """Fits (parameters ``[n, 4]``) whose Hill coefficient ``n0/u`` lies within :data:`H_RANGE`."""
    h = params[:, 2] * (1.0 + np.exp(-params[:, 3]))
    return (h >= H_RANGE[0]) & (h <= H_RANGE[1])


#: The Hill coefficient the model evaluates is kept in this range (a guard: ``(1 - h) ln z`` stays within the
#: range of ``exp``); the fit's own bounds on n0 and u keep it there at any sensible solution.
H_CLIP = (0.05, 12.0)

_NEWTON_STEPS = 40
_H_STEP = 1e-5


def _f(w: np.ndarray, h: np.ndarray) -> np.ndarray:
    """``(z^(1 - h) - 1)/(h - 1)`` at ``ln z = w``, written ``-w expm1(a)/a`` with ``a = (1 - h) w`` so that
    it stays exact through ``h = 1`` (where it is ``-ln z``)."""
    a = (1.0 - h) * w
    small = np.abs(a) < 1e-8
    a_safe = np.where(small, 1.0, a)
    return -w * np.where(small, 1.0 + a / 2.0, np.expm1(a_safe) / a_safe)


def hill_left(tau: np.ndarray, kappa: np.ndarray, h: np.ndarray, start: np.ndarray | None = None) -> np.ndarray:
    """``ln z`` (z = S/S0, the substrate left as a share of S0) at scaled times ``tau = Vmax t/S0`` under Hill
    kinetics with ``kappa = (K/S0)^h`` (broadcasting). ``tau <= 0`` gives 0; where the substrate runs out at a
    finite time (``h < 1``) the result is :data:`LN_Z_FLOOR`. ``start``: a guess of ``ln z`` (the solution for
    nearby parameters saves most of the Newton steps)."""
    tau, kappa, h = np.broadcast_arrays(np.asarray(tau, float), np.asarray(kappa, float), np.asarray(h, float))
    tau = np.fmax(tau, 0.0)

    def g_and_slope(w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        z = np.exp(w)
        return (1.0 - z) + kappa * _f(w, h) - tau, -z - kappa * np.exp((1.0 - h) * w)  # G - tau, dG/d ln z

    # start: the initial slope dz/dtau = -1/(1 + kappa), at most half the substrate used
    w = np.log1p(-np.fmin(tau / (1.0 + kappa), 0.5)) if start is None else np.clip(start, LN_Z_FLOOR, 0.0)
    return newton_ln_left(g_and_slope, w)


def newton_ln_left(g_and_slope: Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]],
                   w: np.ndarray) -> np.ndarray:
    """Root in ``w = ln z`` of an integrated rate law ``g(w) = G(e^w) - tau``, decreasing in ``w``, from the
    start ``w`` (every element within [:data:`LN_Z_FLOOR`, 0]): Newton's method kept inside the bracket the
    iterates have established (bisection where a step leaves it or is not finite), at most
    :data:`_NEWTON_STEPS` steps, stopping when no element moves by more than 1e-13 relatively.
    ``g_and_slope(w)`` returns ``g`` and ``dg/dw``. Shared by the Hill and substrate-inhibition curves."""
    lo = np.full(w.shape, LN_Z_FLOOR)
    hi = np.zeros(w.shape)
    with np.errstate(over="ignore", invalid="ignore"):
        for _ in range(_NEWTON_STEPS):
            g, dg = g_and_slope(w)
            pos = g > 0.0
            lo = np.where(pos, w, lo)
            hi = np.where(pos, hi, w)
            nxt = w - g / dg
            out = ~((nxt >= lo) & (nxt <= hi)) | ~np.isfinite(nxt)
            nxt = np.where(out, 0.5 * (lo + hi), nxt)
            if np.all(np.abs(nxt - w) <= 1e-13 * (1.0 + np.abs(w))):
                return nxt
            w = nxt
    return w


def warm_solve(last: dict[str, np.ndarray], rows: np.ndarray, n_wells: int, tau: np.ndarray,
               solve: Callable[[np.ndarray | None], np.ndarray]) -> np.ndarray:
    """``ln z`` of the wells ``rows`` at scaled times ``tau`` by ``solve(start)``, started from the latest
    solution of those wells kept in ``last`` (no start until they all have one; a model's successive
    evaluations move the parameters little, so this saves most of the Newton steps); keeps the result."""
    if "w" not in last:
        last["w"] = np.full((n_wells, tau.shape[-1]), np.nan)
    guess = last["w"][rows]
    w = solve(None if np.isnan(guess).any() else guess)
    last["w"][rows] = w
    return w


def hill_model(t: np.ndarray, s0: np.ndarray, spc: float) -> lsq.Model:
    """``baseline + spc * S0 * (1 - z(t))`` for the wells' known ``s0`` (``[n, 1]``, concentration) and the
    signal per concentration ``spc``, as a :func:`vzero.plugins.rates.progress.fit_wells` model with
    parameters (baseline, ln v0, n0, logit u); ``t`` the shared time grid ``[n_t]`` or one per well (s)."""

    last: dict[str, np.ndarray] = {}  # the latest solution per well: the next call starts from it

    def model(p: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        tt = _times(t, rows)
        sub = s0[rows]
        u = 1.0 / (1.0 + np.exp(-p[:, 3:4]))
        h = np.clip(p[:, 2:3] / u, *H_CLIP)
        kappa = u / (1.0 - u)
        tau = np.exp(p[:, 1:2]) / (1.0 - u) * tt / sub
        w = warm_solve(last, rows, s0.shape[0], tau, lambda start: hill_left(tau, kappa, h, start))
        z = np.exp(w)
        f = _f(w, h)
        dg_dz = -1.0 - kappa * np.exp(-h * w)
        amp = spc * sub
        scale = amp / dg_dz  # dy/dp = amp (dG/dp)/(dG/dz)
        jac = np.empty((rows.size, 4, tt.shape[-1]))
        jac[:, 0] = 1.0
        jac[:, 1] = -tau * scale
        j_u = (f / (1.0 - u) ** 2 - tau / (1.0 - u)) * scale
        j_h = kappa * (_f(w, h + _H_STEP) - _f(w, h - _H_STEP)) / (2.0 * _H_STEP) * scale
        # to (n0 = h u, logit u): dh/dn0 = 1/u, dh/dlogit u = -h (1 - u), du/dlogit u = u (1 - u)
        jac[:, 2] = j_h / u
        jac[:, 3] = j_u * (u * (1.0 - u)) - j_h * (h * (1.0 - u))
        return p[:, 0:1] + amp * (1.0 - z), jac

    return model


def fit_hill_curve(t: np.ndarray, y: np.ndarray, valid: np.ndarray, s0: np.ndarray, spc: float,
                   sigma: np.ndarray, start: np.ndarray, *, max_iter: int = 80,
                   restart: bool = True) -> dict[str, np.ndarray]:
    """Fit the integrated Hill curve to each well's reads ``y [n, n_t]`` (signal; ``valid`` the reads
    counted) with known ``s0 [n]`` (concentration) and ``spc`` (signal per concentration), from ``start
    [n, 4]`` (baseline, ln v0, n0, logit u; :func:`hill_model`), on block means as the quick whole-curve fits are
    (:func:`vzero.plugins.rates.progress.fit_coarse_to_fine`, ``refine=False``).

    ``restart``: fits that end outside :data:`H_RANGE` or unconverged are started again once from ``u = 1/2``
    (False: they are returned unconverged, for callers that would not keep them anyway).

    Returns per well ``v0`` (signal/s), ``se`` (its standard error by the delta method, the covariance scaled
    by the larger of the residual variance and ``sigma²``), ``rss`` (over every counted read, signal²),
    ``ratio`` (residual RMS over ``sigma``, four parameters), ``h``, ``u`` and ``converged``.
    """
    n = y.shape[0]
    s0w = np.asarray(s0, float).reshape(n, 1)
    ww = valid.astype(float)
    lo = np.stack([np.full(n, -np.inf), start[:, 1] - 12, np.full(n, N0_BOUNDS[0]),
                   np.full(n, LOGIT_U_BOUNDS[0])], 1)
    hi = np.stack([np.full(n, np.inf), start[:, 1] + 12, np.full(n, N0_BOUNDS[1]), np.full(n, LOGIT_U_BOUNDS[1])], 1)
    p0 = np.clip(start, lo, hi)

    def make(tg: np.ndarray) -> lsq.Model:
        return hill_model(tg, s0w, spc)

    def make_rows(rows: np.ndarray) -> Callable[[np.ndarray], lsq.Model]:
        def make_sub(tg: np.ndarray) -> lsq.Model:
            return hill_model(tg, s0w[rows], spc)
        return make_sub

    fit = fit_coarse_to_fine(make, t, p0, y, ww, lower=lo, upper=hi, max_iter=max_iter, refine=False,
                             blocks=QUICK_BLOCKS, ftol=QUICK_FTOL)
    params, rss, cov, conv = fit.params.copy(), fit.rss.copy(), fit.cov_unit.copy(), fit.converged.copy()
    # a fit that ran to a Hill coefficient outside H_RANGE (where the model holds h at H_CLIP, a flat valley)
    # or did not converge starts again halfway: u = 1/2 (K0.5 = S0), half the order; the lower cost is kept
    again = np.flatnonzero(~_plausible(params) | ~conv) if restart else np.zeros(0, np.int64)
    if again.size:
        p1 = p0[again].copy()
        p1[:, 2], p1[:, 3] = np.clip(p1[:, 2] / 2.0, *N0_BOUNDS), 0.0
        sub = make_rows(again)
        fit2 = fit_coarse_to_fine(sub, t, p1, y[again], ww[again], lower=lo[again], upper=hi[again],
                                  max_iter=max_iter, refine=False, blocks=QUICK_BLOCKS, ftol=QUICK_FTOL)
        better = fit2.converged & _plausible(fit2.params) & ~(fit2.rss >= np.where(conv[again] & _plausible(
            params[again]), rss[again], np.inf))
        r = again[better]
        params[r], rss[r], cov[r], conv[r] = fit2.params[better], fit2.rss[better], fit2.cov_unit[better], True
    conv &= _plausible(params)
    dof = np.fmax(ww.sum(axis=1) - 4.0, 1.0)
    with np.errstate(invalid="ignore"):
        rmse = np.sqrt(rss / dof)
    v0 = spc * np.exp(params[:, 1])
    var = cov[:, 1, 1] * v0**2 * np.fmax(rmse, sigma) ** 2
    u = 1.0 / (1.0 + np.exp(-params[:, 3]))
    return {"v0": v0, "se": np.sqrt(np.abs(var)), "rss": rss, "ratio": rmse / sigma,
            "h": params[:, 2] / u, "u": u, "converged": conv}
