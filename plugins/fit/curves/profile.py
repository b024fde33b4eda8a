"""Profile-likelihood intervals of the curve fit: every profiled parameter, both sides, all groups at once.

The limit of parameter θj on one side is where the profile RSS_p(t) = min over the other parameters of
RSS(θj = t) reaches RSS_min·(1 + F(confidence; 1, dof)/dof), the same level as the rate fits (Venzon &
Moolgavkar 1988; Bates & Watts 1988, ch. 6). The search exploits what every evaluation of the curves
already gives, the residuals r and the Jacobian J (exact sensitivities), so that each profile point costs one
evaluation instead of one inner least-squares run:

* the inner minimisation over the other free parameters θo is one Gauss-Newton step, δ = −A⁻¹Joᵀr with
  A = JoᵀJo, and RSS_p(t) is estimated by the Gauss-Newton minimum RSS − rᵀJo·A⁻¹·Joᵀr;
* the slope of the profile comes from the envelope theorem: dRSS_p/dt = 2·Jjᵀ(r + Jo·δ);
* the next point is a Newton step on s(t) = √(RSS_p(t) − RSS_min), nearly linear in t (exactly so where the
  profile is quadratic), towards √(target − RSS_min); the first point is the Wald limit;
* the other parameters start each point where the linearised problem puts them: θo + δ + D·Δt with
  D = −A⁻¹JoᵀJj (the path of the conditional optimum), so the Gauss-Newton step at the next point is small.

As the search converges the step Δt and the inner step δ both go to zero, and the accepted limit is a point
at the level where the inner problem is solved (remaining Gauss-Newton decrease below :data:`INNER_TOL` of
the rise) and the Newton correction is below :data:`STEP_TOL` of the limit's distance from the estimate (or
from the bound, where that is smaller). Steps are safeguarded by a bracket (bisection when a Newton step
leaves it, at most a four-fold widening before a crossing is seen) and by the bounds (open: a step never
lands on one). A side that stays below the level up to a bound (to within :data:`NEAR_BOUND` of the
estimate's distance from it), or beyond 2¹¹ Wald half-widths, is open (NaN); so is the side of an estimate
that sits on its bound. A search that does not converge within :data:`MAX_STEPS` points is handed to the
general profile search (:func:`.solver.profile`, an inner Levenberg-Marquardt run per point), so the result
never depends on the shortcut having worked.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np
from scipy import special
from vzero.plugins.fit.curves import solver

Evaluate = Callable[[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]
"""``evaluate(params [k, p], groups [k]) -> (curves [k, n], jacobian [k, n, p])``, curves and Jacobian
centred per well as the fit sees them."""

MAX_STEPS = 30
"""Profile points per side before the search is handed to the general profile search."""

STEP_TOL = 1e-7
"""A limit is accepted when the Newton correction is below this fraction of its distance from the estimate
(or from the bound, where that is smaller)..."""

INNER_TOL = 1e-8
"""... and the inner Gauss-Newton step would lower the RSS by less than this fraction of target − RSS_min."""

TO_BOUND = 0.9
"""Fraction of the way to a bound that a step crossing it moves instead (bounds are open)."""

NEAR_BOUND = 1e-12
"""A side still below the level this close to its bound (as a fraction of the estimate's distance from it),
with the next step beyond the bound, is open. Each step there goes TO_BOUND of the way, so the distance
shrinks tenfold per step: a parameter that spans decades (Km from 1e11 down to about 100, where a poorly
saturated design puts its profile) is followed down that far, in about a dozen steps."""

FAR = 2.0**11
"""Wald half-widths beyond which a side still below the level is taken as open."""


def intervals(evaluate: Evaluate, general: Callable[[str, np.ndarray], list[tuple[float, float, str]]],
              y: np.ndarray, w: np.ndarray, results: Sequence[solver.FitResult], profiled: Sequence[str],
              lo: np.ndarray, hi: np.ndarray, confidence: float) -> dict[str, list[tuple[float, float, str]]]:
    """(low, high, note) per group for every parameter in ``profiled``.

    ``y`` [g, n] the centred reads (0 where unused), ``w`` [g, n] 1 on used reads and 0 elsewhere; ``lo``,
    ``hi`` [p] the bounds; ``general(name, groups)`` is the fallback search for the groups given (all groups'
    results in order, the fallback only fills the rows asked for).
    """
    nan = float("nan")
    g = len(results)
    out = {name: [(nan, nan, "no profile: fit failed, parameter fixed or no degrees of freedom")] * g
           for name in profiled}
    if g == 0:
        return out
    names = results[0].names
    best = np.array([r.values for r in results], float)
    free = np.array([r.free for r in results], bool)
    dof = np.array([r.dof for r in results], float)
    rss_min = np.array([r.rss for r in results], float)
    with np.errstate(all="ignore"):
        quantile = special.fdtri(1, np.maximum(dof, 1), confidence)
        rise = rss_min * quantile / dof
    # searches: q = (group, parameter, side)
    grp, par, sgn = [], [], []
    for name in profiled:
        j = names.index(name)
        for r, res in enumerate(results):
            if res.success and res.dof > 0 and res.params[name].stderr > 0 and not res.params[name].fixed \
                    and np.all(np.isfinite(res.values)) and rise[r] > 0:
                for side in (-1.0, 1.0):
                    grp.append(r)
                    par.append(j)
                    sgn.append(side)
    if not grp:
        return out
    grp_a, par_a, sgn_a = np.array(grp), np.array(par), np.array(sgn)
    q_n = grp_a.size
    centre = best[grp_a, par_a]
    wald = np.sqrt(quantile[grp_a]) * np.array([results[r].params[names[j]].stderr for r, j in zip(grp, par,
                                                                                                   strict=True)])
    room = np.where(sgn_a < 0, centre - lo[par_a], hi[par_a] - centre)  # distance to the bound, > 0
    s_target = np.sqrt(rise[grp_a])
    # state per search: distance d >= 0 from the estimate, the full parameter vector at the point
    dist = np.zeros(q_n)
    theta = best[grp_a].copy()
    inside_d, outside_d = np.zeros(q_n), np.full(q_n, np.inf)
    limit = np.full(q_n, nan)
    state = np.where(room > 0, 0, 2)  # 0 searching, 1 converged, 2 open (an estimate on its bound), 3 handed on
    fresh = np.ones(q_n, bool)  # not evaluated yet: the first evaluation is at the estimate itself
    hold = ~free[grp_a]
    hold[np.arange(q_n), par_a] = True
    with np.errstate(all="ignore"):
        for _ in range(MAX_STEPS + 1):
            rows = np.flatnonzero(state == 0)
            if rows.size == 0:
                break
            gr = grp_a[rows]
            vals, jac = evaluate(theta[rows], gr)
            wr = w[gr]
            res = wr * (vals - y[gr])
            jw = np.where(np.isfinite(jac), jac, 0.0) * wr[:, :, None]
            jj = jw[np.arange(rows.size), :, par_a[rows]]  # [m, n]
            held = hold[rows]
            delta, slope, gain, ok = _inner(jw, res, jj, held)
            # an inner parameter whose step would cross its bound moves TO_BOUND of the way to it and is held
            # there; the others take the Gauss-Newton step for what remains (the rule of the batched solver)
            th = theta[rows]
            blocked = ~held & ((th + delta <= lo) | (th + delta >= hi)) & ok[:, None]
            if blocked.any():
                again = blocked.any(axis=1)
                held = held | blocked
                move = np.where(blocked, np.where(th + delta <= lo, lo - th, hi - th) * TO_BOUND, 0.0)[again]
                moved = res[again] + np.einsum("mnp,mp->mn", jw[again], move)
                d2, s2, g2, ok2 = _inner(jw[again], moved, jj[again], held[again])
                delta[again], slope[again], ok[again] = d2 + move, s2, ok2
                gain[again] = np.einsum("mn,mn->m", res[again], res[again]) - (
                    np.einsum("mn,mn->m", moved, moved) - g2)
            sol = np.stack([delta, slope], axis=2)
            rss0 = np.einsum("mn,mn->m", res, res)
            rss = rss0 - gain  # the Gauss-Newton estimate of the profile RSS
            lin = res + np.einsum("mnp,mp->mn", jw, delta)  # δ is 0 for the profiled and fixed parameters
            d_rss = 2 * np.einsum("mn,mn->m", jj, lin) * sgn_a[rows]  # along the side's direction
            excess = np.sqrt(np.maximum(rss - rss_min[gr], 0.0))
            d_now = dist[rows]
            first = fresh[rows]
            fresh[rows] = False
            good = ok & np.isfinite(rss) & np.isfinite(d_rss) & np.all(np.isfinite(sol), axis=(1, 2))
            # the bracket takes a point only where its side is certain: the true profile RSS lies between the
            # Gauss-Newton estimate and the start's RSS, up to the estimate's error (at most about the gain)
            level = rss_min[gr] + rise[gr]
            below = good & ((rss0 < level) | (rss + gain < level))
            above = good & (rss - gain >= level)
            inside_d[rows] = np.where(below & ~first, np.maximum(inside_d[rows], d_now), inside_d[rows])
            outside_d[rows] = np.where(above, np.minimum(outside_d[rows], d_now), outside_d[rows])
            lo_b, hi_b = inside_d[rows], outside_d[rows]
            step = (s_target[rows] - excess) * 2 * excess / d_rss  # Newton on s: ds/dd = d_rss / (2 s)
            newton = d_now + step
            # the scale of the limit: its distance from the estimate, or from the bound where that is smaller
            scale = np.minimum(d_now, room[rows] - d_now)
            converged = good & ~first & (np.abs(step) <= STEP_TOL * scale) & (gain <= INNER_TOL * rise[gr]) \
                & (np.abs(excess - s_target[rows]) <= 1e-3 * s_target[rows]) \
                & (newton >= lo_b - STEP_TOL * scale) & (newton <= hi_b + STEP_TOL * scale)
            # the bracket itself has closed on the limit
            tight = ~converged & ~first & np.isfinite(hi_b) \
                & (hi_b - lo_b <= STEP_TOL * np.minimum(hi_b, room[rows] - lo_b))
            newton = np.where(tight, 0.5 * (lo_b + hi_b), newton)
            converged |= tight
            bracketed = np.isfinite(hi_b)
            usable = good & (d_rss > 0) & (excess > 0) & np.isfinite(newton) & (newton > lo_b) \
                & np.where(bracketed, newton < hi_b, newton <= 4 * np.maximum(d_now, lo_b))
            fallback = np.where(bracketed, 0.5 * (lo_b + hi_b), 2 * np.maximum(d_now, lo_b))
            d_new = np.where(first, wald[rows], np.where(usable, newton, fallback))
            # bounds are open: a step reaching one goes TO_BOUND of the way from the last point inside
            beyond = d_new >= room[rows]
            d_new = np.where(beyond, lo_b + TO_BOUND * (room[rows] - lo_b), d_new)
            is_open = (~bracketed & ~first & beyond & (room[rows] - lo_b <= NEAR_BOUND * room[rows])) \
                | (~bracketed & (d_new > FAR * wald[rows]))
            failed = ~good  # the curves or the linear algebra not finite here: the general search takes over
            limit[rows[converged]] = (centre[rows] + sgn_a[rows] * newton)[converged]
            state[rows[converged]] = 1
            state[rows[~converged & is_open]] = 2
            state[rows[~converged & ~is_open & failed]] = 3
            moving = ~converged & ~is_open & ~failed
            dt = (d_new - d_now) * sgn_a[rows]
            nxt = theta[rows] + np.where(good[:, None], delta + slope * dt[:, None], 0.0)
            nxt[np.arange(rows.size), par_a[rows]] = centre[rows] + sgn_a[rows] * d_new
            floor = np.where(np.isfinite(lo), lo + (1 - TO_BOUND) * (theta[rows] - lo), -np.inf)
            ceiling = np.where(np.isfinite(hi), hi - (1 - TO_BOUND) * (hi - theta[rows]), np.inf)
            nxt = np.clip(nxt, floor, ceiling)
            nxt = np.where(hold[rows], theta[rows], nxt)  # fixed parameters stay; blocked ones took their move
            nxt[np.arange(rows.size), par_a[rows]] = centre[rows] + sgn_a[rows] * d_new
            theta[rows[moving]], dist[rows[moving]] = nxt[moving], d_new[moving]
    state[state == 0] = 3
    for name in profiled:
        j = names.index(name)
        mine = par_a == j
        handed = np.unique(grp_a[mine & (state == 3)])
        fallback_rows = dict(zip(handed.tolist(), general(name, handed), strict=True)) if handed.size else {}
        for r in np.unique(grp_a[mine]):
            if r in fallback_rows:
                out[name][r] = fallback_rows[r]
                continue
            low_high, notes = [], []
            for side, label in ((-1.0, "lower"), (1.0, "upper")):
                q = np.flatnonzero(mine & (grp_a == r) & (sgn_a == side))[0]
                low_high.append(limit[q] if state[q] == 1 else nan)
                if state[q] == 2:
                    notes.append(f"{label} limit not reached (open interval)")
            out[name][r] = (float(low_high[0]), float(low_high[1]), "; ".join(notes))
    return out


def _inner(jw: np.ndarray, res: np.ndarray, jj: np.ndarray, held: np.ndarray
           ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The Gauss-Newton step of the inner problem at each point: δ = −A⁻¹Joᵀr, the conditional slope
    D = −A⁻¹JoᵀJj and the decrease rᵀJo·A⁻¹·Joᵀr (A = JoᵀJo over the parameters not ``held``), and whether
    the system was finite. ``jw`` [m, n, p] weighted Jacobian, ``res`` [m, n] weighted residuals, ``jj``
    [m, n] the profiled parameter's column."""
    p = jw.shape[2]
    eye = np.eye(p)
    jo = jw * ~held[:, None, :]
    a = np.einsum("mnp,mnq->mpq", jo, jo) + held[:, :, None] * eye
    rhs = np.stack([np.einsum("mnp,mn->mp", jo, res), np.einsum("mnp,mn->mp", jo, jj)], axis=2)
    ok = np.all(np.isfinite(a), axis=(1, 2)) & np.all(np.isfinite(rhs), axis=(1, 2))
    a[~ok], rhs[~ok] = eye, 0.0
    try:
        sol = -np.linalg.solve(a, rhs)
    except np.linalg.LinAlgError:
        sol = np.full(rhs.shape, np.nan)
    delta, slope = sol[:, :, 0], sol[:, :, 1]
    gain = -np.einsum("mp,mp->m", rhs[:, :, 0], delta)
    return delta, slope, gain, ok & np.all(np.isfinite(sol), axis=(1, 2))
