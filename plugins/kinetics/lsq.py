"""One batched Levenberg–Marquardt solver for many small least-squares problems that share one model.

Used by the rates methods (one problem per well: progress-curve and lag-decay fits) and by the fit stage
(one problem per group of wells, and the inner fits of profile-likelihood intervals), so that both packages
handle damping, bounds and convergence the same way.

Each problem ``i`` minimises ``sum_j (w_ij (f_ij(p_i) - y_ij))^2``; weights ``w`` are ``1/sigma`` (0 on
points that do not count: padding, missing reads). The model is one function for all problems::

    model(params [m, n_params], rows [m]) -> (values [m, n_points], jacobian [m, n_params, n_points])

evaluating the problems ``rows`` (so that problems that have finished drop out of later iterations). The
Jacobian is of the unweighted values; non-finite entries are taken as 0.

Damping: Marquardt's, scaled by the diagonal of JᵀJ (plus 1e-12 of its largest entry), one damping factor
per problem, started at ``lam0``, divided by 3 after an accepted step (not below 1e-12) and multiplied by 4
after a refused one. A step is accepted when the cost is finite and not higher than before.

Bounds (the one rule for every caller): bounds are *open*. A start value outside ``[lower, upper]`` is
clipped onto the bound; after that a step that would cross a bound moves the parameter 90 % of the way from
where it is to the bound instead (the other parameters' step is solved again for that shorter move, under
the same rule), so no step lands on a bound (models such as v = Vmax·S/(Km + S) or the
logistic in IC50 degenerate there, with a vanishing gradient that would hold the fit at a false point). A
parameter on a bound (from a clipped start, or closer to it than the ``xtol`` step test below) while the
descent direction points outward is held for that step: it leaves the linear system, so that the other
parameters still move, and the problem can converge with it there.
Parameters held by the caller (``free`` False) never move.

Convergence, per problem, whichever comes first:

* an accepted step lowers the cost by less than ``ftol`` relatively, or changes every parameter by at most
  ``xtol·(|p| + xtol)`` (MINPACK's ftol and xtol tests);
* the scaled gradient (the largest cosine between the residual vector and a Jacobian column) is below
  ``gtol``;
* :data:`STALL_REFUSALS` steps in a row are refused while the scaled gradient is below
  :data:`STALL_GRADIENT` (at a minimum to working precision trial steps only add rounding noise).

A problem whose damping exceeds :data:`MAX_DAMPING` is *stalled*: no step lowers its cost. It is reported
apart from the converged ones; the caller decides (a rates method accepts the point and judges the fit by
its residuals, the fit stage refits the group with scipy).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

Model = Callable[[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]
"""``model(params [m, p], rows [m]) -> (values [m, n], jacobian [m, p, n])``."""

TO_BOUND = 0.9
"""Fraction of the distance to a bound that a step crossing it moves instead (bounds are open)."""

STALL_GRADIENT = 1e-8
"""Scaled gradient below which refused steps end the iteration as converged: MINPACK's gtol test (scipy's
default gtol is 1e-8), applied when no step can be verified."""

STALL_REFUSALS = 3
"""Steps refused in a row (the damping grown 64-fold) before :data:`STALL_GRADIENT` may end the iteration."""

MAX_DAMPING = 1e10
"""Damping factor beyond which a problem counts as stalled (steps of relative size below about 1e-10)."""


@dataclass(frozen=True)
class Solution:
    """The outcome of :func:`solve`, arrays over problems.

    ``params [g, p]``; ``resid [g, n]`` the weighted residuals ``w (f - y)`` (0 where ``w`` is 0);
    ``jac [g, p, n]`` the weighted Jacobian at ``params`` (rows of parameters the caller held are 0);
    ``cost [g]`` the sum of squared weighted residuals; ``converged`` and ``stalled`` per problem (neither:
    the iteration limit was reached or the start was not finite); ``nfev [g]`` model evaluations per problem;
    ``n_iter`` iterations run (for all problems together).
    """

    params: np.ndarray
    resid: np.ndarray
    jac: np.ndarray
    cost: np.ndarray
    converged: np.ndarray
    stalled: np.ndarray
    nfev: np.ndarray
    n_iter: int


def solve(
    model: Model,
    p0: np.ndarray,
    y: np.ndarray,
    w: np.ndarray,
    *,
    lower: np.ndarray | None = None,
    upper: np.ndarray | None = None,
    free: np.ndarray | None = None,
    max_iter: int = 100,
    lam0: float = 1e-3,
    ftol: float = 1e-10,
    xtol: float = 1e-10,
    gtol: float = 1e-12,
) -> Solution:
    """Fit every problem of the batch (see the module docstring for the method and its rules).

    ``p0 [g, p]`` start values; ``y [g, n]`` data (any value where ``w`` is 0, NaN included); ``w [g, n]``
    weights; ``lower``/``upper`` bounds broadcasting against ``[g, p]`` (default none); ``free`` ``[p]`` or
    ``[g, p]``, False for parameters held at their start value; ``lam0`` the initial damping (small for a
    warm start next to the solution).
    """
    p = np.array(p0, dtype=float)
    g, n_p = p.shape
    w = np.asarray(w, dtype=float)
    y0 = np.where(w > 0, y, 0.0)
    lo = np.broadcast_to(-np.inf if lower is None else np.asarray(lower, float), p.shape)
    hi = np.broadcast_to(np.inf if upper is None else np.asarray(upper, float), p.shape)
    held = ~np.broadcast_to(np.ones(n_p, bool) if free is None else np.asarray(free, bool), p.shape)
    p = np.clip(p, lo, hi)
    eye = np.eye(n_p)
    diag_idx = np.arange(n_p)
    all_rows = np.arange(g)
    unit = bool(np.all(w == 1.0))  # every point counts with weight 1: no weighting to apply
    zero = None if unit else w == 0  # points that do not count
    if zero is not None and not zero.any():
        zero = None
    any_held = bool(held.any())

    def evaluate(v: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Weighted residuals [m, n] and weighted Jacobian [m, p, n] (held rows zero) of problems ``rows``."""
        f, jac = model(v, rows)
        whole = rows.size == g
        r = np.subtract(f, y0 if whole else y0[rows])
        if unit:
            jw = np.array(jac, dtype=float)  # a copy: the model's array is left alone
        else:
            wr = w if whole else w[rows]
            r *= wr
            if zero is not None:  # a point that does not count, even where the model is not finite
                np.copyto(r, 0.0, where=zero if whole else zero[rows])
            jw = np.multiply(jac, wr[:, None, :])  # a new array: the model's is left alone
        if not np.isfinite(jw.sum()):
            jw[~np.isfinite(jw)] = 0.0
        if any_held:
            jw *= ~(held if whole else held[rows])[:, :, None]
        return r, jw

    # one errstate for the whole run: trial steps may overflow; they are refused, not reported
    with np.errstate(all="ignore"):
        r, jac = evaluate(p, all_rows)
        cost = np.einsum("ij,ij->i", r, r)
        lam = np.full(g, float(lam0))
        active = np.isfinite(cost)
        converged = np.zeros(g, bool)
        stalled = np.zeros(g, bool)
        refused = np.zeros(g, int)  # steps refused in a row
        nfev = np.ones(g, int)
        it = 0
        for it in range(1, max_iter + 1):
            act = np.flatnonzero(active)
            if act.size == 0:
                it -= 1
                break
            whole = act.size == g
            # while every problem is active, plain views instead of gathered copies
            sel = slice(None) if whole else act
            ja, ra, pa = (jac, r, p.copy()) if whole else (jac[act], r[act], p[act])
            lo_a, hi_a, cost_a, lam_a = lo[sel], hi[sel], cost[sel], lam[sel]
            a = ja @ ja.transpose(0, 2, 1)
            grad = (ja @ ra[:, :, None])[:, :, 0]  # gradient of cost/2
            diag = np.diagonal(a, axis1=1, axis2=2)
            scale = diag + 1e-12 * diag.max(axis=1, keepdims=True) + 1e-300
            gnorm = np.max(np.abs(grad) / np.sqrt(scale), axis=1) / np.sqrt(np.fmax(cost_a, 1e-300))
            # held: by the caller, or on a bound with the descent direction (-grad) pointing outward
            near = xtol * (np.abs(pa) + xtol)  # closer than this to a bound counts as on it
            hold = held[sel] | ((pa - lo_a <= near) & (grad > 0)) | ((hi_a - pa <= near) & (grad < 0))
            # a + lam * diag(scale), written on a's diagonal in place (a is not used again)
            damp = a
            damp[:, diag_idx, diag_idx] += lam_a[:, None] * scale
            if hold.any():
                keep = ~hold
                damp *= keep[:, :, None] & keep[:, None, :]
                damp += hold[:, :, None] * eye
                rhs = np.where(hold, 0.0, grad)
            else:
                rhs = grad
            bad = ~(np.isfinite(damp).all(axis=(1, 2)) & np.isfinite(rhs).all(axis=1))
            if bad.any():
                damp[bad] = eye
                rhs = np.where(bad[:, None], 0.0, rhs)
            step = -np.linalg.solve(damp, rhs[:, :, None])[:, :, 0]
            trial = pa + step
            # open bounds: a parameter whose step would cross a bound goes TO_BOUND of the way to it instead,
            # and the step of the others is solved again for that shorter move (else the cut step is often
            # refused and the damping grows while the parameter creeps towards its bound)
            cut = (trial < lo_a) | (trial > hi_a)
            if cut.any():
                moved = np.where(cut, _toward_bounds(pa, trial, lo_a, hi_a) - pa, 0.0)
                rest = ~cut
                again = damp * (rest[:, :, None] & rest[:, None, :]) + cut[:, :, None] * eye
                rhs2 = np.where(cut, 0.0, rhs + (damp @ moved[:, :, None])[:, :, 0])
                step = np.where(cut, moved, -np.linalg.solve(again, rhs2[:, :, None])[:, :, 0])
                trial = _toward_bounds(pa, pa + step, lo_a, hi_a)
            rt, jt = evaluate(trial, act)
            ct = np.einsum("ij,ij->i", rt, rt)
            nfev[sel] += 1
            better = np.isfinite(ct) & (ct <= cost_a) & ~bad
            rel_cost = (cost_a - ct) / np.fmax(cost_a, 1e-300)
            tiny_step = np.all(np.abs(trial - pa) <= near, axis=1)  # near: xtol * (|p| + xtol), as above
            if whole and better.all():  # every step accepted: take the new arrays as they are
                p, r, jac, cost = trial, rt, jt, ct
            else:
                acc = act[better]
                p[acc], r[acc], jac[acc], cost[acc] = trial[better], rt[better], jt[better], ct[better]
            lam[sel] = np.where(better, np.fmax(lam_a / 3.0, 1e-12), lam_a * 4.0)
            refused[sel] = np.where(better, 0, refused[sel] + 1)
            done = ((better & ((rel_cost < ftol) | tiny_step)) | (gnorm < gtol)
                    | ((refused[sel] >= STALL_REFUSALS) & (gnorm < STALL_GRADIENT)))
            stuck = ~done & (lam[sel] > MAX_DAMPING)
            converged[act[done]] = True
            stalled[act[stuck]] = True
            active[act[done | stuck]] = False
    return Solution(p, r, jac, cost, converged & np.isfinite(cost), stalled, nfev, it)


def _toward_bounds(p: np.ndarray, trial: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """``trial`` with each value beyond a bound replaced by the point :data:`TO_BOUND` of the way from ``p``
    to that bound."""
    trial = np.where(trial < lo, lo + (1 - TO_BOUND) * (p - lo), trial)
    return np.where(trial > hi, hi - (1 - TO_BOUND) * (hi - p), trial)


def unit_covariance(jac: np.ndarray) -> np.ndarray:
    """``(J Jᵀ)⁻¹`` per problem from a weighted Jacobian ``[g, p, n]`` (NaN where singular or not finite): the
    covariance of the parameters for unit residual variance; multiply by the residual variance. Three
    parameters (every rate curve with known substrate) by :func:`sym3_inverse`, others by numpy.linalg."""
    a = jac @ jac.transpose(0, 2, 1)
    eye = np.eye(a.shape[1])
    finite = np.all(np.isfinite(a), axis=(1, 2))
    if a.shape[1] == 3:
        cov = sym3_inverse(np.where(finite[:, None, None], a, eye))
        cov[~finite | ~np.all(np.isfinite(cov), axis=(1, 2))] = np.nan
        return cov
    bad = ~finite | (np.abs(np.linalg.det(np.where(finite[:, None, None], a, eye))) == 0)
    a[bad] = eye
    cov = np.linalg.inv(a)
    cov[bad] = np.nan
    return cov


def sym3_inverse(a: np.ndarray) -> np.ndarray:
    """Inverses ``[m, 3, 3]`` of symmetric 3x3 matrices ``a`` ``[m, 3, 3]`` (the lower triangle is not read)
    by cofactors, in closed form: for the many small systems of a batched fit, ``numpy.linalg.inv`` spends
    most of its time on per-matrix overhead.

    Each matrix is first scaled to unit diagonal, ``S = D a D`` with ``D = diag(a)^-1/2`` (the inverse is
    ``D S⁻¹ D``), so that parameters of very different scales (a baseline in signal units beside a log-rate)
    lose no digits to the scaling. Not finite (inf or NaN) where the matrix is singular or a diagonal entry
    is not positive: the caller checks. Checked against ``numpy.linalg.inv`` in tests/plugins/kinetics.
    """
    with np.errstate(all="ignore"):
        d = 1.0 / np.sqrt(np.diagonal(a, axis1=1, axis2=2))  # [m, 3]; NaN/inf where a diagonal entry <= 0
        d0, d1, d2 = d[:, 0], d[:, 1], d[:, 2]
        s01, s02, s12 = a[:, 0, 1] * d0 * d1, a[:, 0, 2] * d0 * d2, a[:, 1, 2] * d1 * d2
        c00, c11, c22 = 1.0 - s12 * s12, 1.0 - s02 * s02, 1.0 - s01 * s01
        c01, c02, c12 = s02 * s12 - s01, s01 * s12 - s02, s01 * s02 - s12
        inv_det = 1.0 / (c00 + s01 * c01 + s02 * c02)
        out = np.empty(a.shape)
        out[:, 0, 0] = c00 * inv_det * d0 * d0
        out[:, 1, 1] = c11 * inv_det * d1 * d1
        out[:, 2, 2] = c22 * inv_det * d2 * d2
        out[:, 0, 1] = out[:, 1, 0] = c01 * inv_det * d0 * d1
        out[:, 0, 2] = out[:, 2, 0] = c02 * inv_det * d0 * d2
        out[:, 1, 2] = out[:, 2, 1] = c12 * inv_det * d1 * d2
    return out
