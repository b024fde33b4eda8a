"""Errors that wells share (through a common blank, or a plate shape), and the fit's uncertainties widened.

The blank stage subtracts, read by read, the mean of a well's matching blank wells. Their read noise then
enters every well corrected by the same blanks, and the rates of those wells (three replicates at one
substrate level, say, with one substrate blank per level) share that part of their error. A fit that takes
the rates as independent counts the shared part once per well and reports intervals too narrow: on the demo
plate, with one blank per level, the 95 % intervals of h held the truth in 62 % of 40 simulated plates and
in 90 % when the blanks had no read noise (docs/fitting.md).

Model of the rates' errors (``rate-error`` weighting, whose σ_i models each rate's SD): rate i has variance
σ_i² = SE_i² + (share · rate_i)², of which ``b_i SE_i²`` comes from its blank (``b_i``: the rates table's
``blank_share``, the blank's share of the corrected trace's read-noise variance; the rate's SE is a linear
function of the reads, so the blank's share of its variance is the same). Two wells corrected by the same
blank wells on the same plate have correlation ``sqrt(a_i a_j)``, ``a_i = b_i SE_i²/σ_i²`` (exactly so when
their rate estimators weight the reads alike, as replicates at one level do; an upper bound otherwise).
The rates of wells that took one plate shape in the default rates method (``model-choice`` step 9) share
that shape's error too: the rates table gives each such well its pool (``shape_pool``) and the shape's
loadings on its ln v0 (``shape_load_1``, ``shape_load_2``), so that two wells of one pool have the extra
covariance ``rate_i rate_j (load_i · load_j)``, correlation ``u_i · u_j`` with ``u_i = rate_i load_i/σ_i``.

The point estimates stay those of the weighted fit. Their covariance is the sandwich for a weighted fit
under correlated errors: with the weighted Jacobian ``J`` (rows ``∂f/∂θ / σ_i``), ``A = JᵀJ`` and the
correlation matrix ``R``, ``Cov = s² A⁻¹ (Jᵀ R J) A⁻¹``, where ``s² = rᵀ R⁻¹ r / (n − p)`` estimates the scale
from the weighted residuals ``r`` as generalised least squares does (Seber & Wild 1989, Nonlinear Regression,
ch. 2 and 6; memory for the chapters). With ``R = I`` it is the engine's ``s² A⁻¹``. Each parameter's
standard error and interval (Wald or profile) is widened by ``sqrt(Cov_kk / Cov0_kk)`` about the estimate
(the profile's own asymmetry kept), on the same t quantile. Model comparison (AICc, F-test) is left as it is.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import replace

import numpy as np
from vzero.plugins.fit.engine import FitResult, ParamEstimate, t_quantile

#: Relative change of every standard error below which the result is left as it was (and no note added).
NO_CHANGE = 1e-3


def shape_pools(plate: np.ndarray, pool: np.ndarray) -> np.ndarray:
    """An integer per well: the same for wells of one plate that took one pool's plate shape
    (``shape_pool``), -1 for the others (NaN)."""
    pool = np.asarray(pool, float)
    key = np.char.add(np.char.add(np.asarray(plate, dtype=str), "\x00"),
                      np.where(np.isfinite(pool), pool, -1).astype(int).astype(str))
    _, ids = np.unique(key, return_inverse=True)
    return np.where(np.isfinite(pool), ids, -1)


def correlation(sets: np.ndarray, a: np.ndarray, pools: np.ndarray | None = None,
                u: np.ndarray | None = None) -> np.ndarray:
    """The rates' correlation matrix, 1 on the diagonal: ``sqrt(a_i a_j)`` for two wells of one blank set
    (``a``: each rate's share of its variance from the blank; NaN counts as 0), plus ``u_i · u_j`` for two
    wells of one shape pool (``pools``, -1 for none; ``u`` [n, k] each rate's loadings on the pool's shared
    factors, in units of its SD; NaN counts as 0). Each well's shares are capped at 1 in all."""
    a = np.clip(np.nan_to_num(np.asarray(a, float), nan=0.0), 0.0, 1.0)
    same = (sets[:, None] == sets[None, :]) & (sets[:, None] >= 0)
    r = np.where(same, np.sqrt(np.outer(a, a)), 0.0)
    if pools is not None and u is not None:
        u = np.nan_to_num(np.asarray(u, float), nan=0.0)
        s = np.sum(u * u, axis=1)
        cap = np.where(a + s > 1.0, np.sqrt(np.fmax(1.0 - a, 0.0) / np.fmax(s, 1e-300)), 1.0)
        u = u * cap[:, None]
        pooled = (pools[:, None] == pools[None, :]) & (pools[:, None] >= 0)
        r = r + np.where(pooled, u @ u.T, 0.0)
    np.fill_diagonal(r, 1.0)
    return r


def sandwich(jw: np.ndarray, rw: np.ndarray, r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(Cov0, Cov)``: the weighted fit's covariance ``s0² A⁻¹`` (``s0² = rᵀr/(n − p)``) and the sandwich
    under correlation ``r`` (see the module text); ``jw`` [n, p] weighted Jacobian of the free parameters,
    ``rw`` [n] weighted residuals."""
    n, p = jw.shape
    dof = max(n - p, 1)
    a_inv = np.linalg.pinv(jw.T @ jw)
    s0 = float(rw @ rw) / dof
    s = float(rw @ np.linalg.solve(r, rw)) / dof
    return s0 * a_inv, s * a_inv @ (jw.T @ r @ jw) @ a_inv


def widen(res: FitResult, factors: Mapping[str, float], cov: np.ndarray, confidence: float,
          note: str) -> FitResult:
    """``res`` with each free parameter's SE and interval widened by its factor about the estimate, the
    covariance ``cov`` (free parameters) put in, and ``note`` added to the result's note."""
    tq = t_quantile(confidence, res.dof)
    params: dict[str, ParamEstimate] = {}
    for name, est in res.params.items():
        f = factors.get(name)
        if f is None or est.fixed or not np.isfinite(f):
            params[name] = est
            continue
        if est.ci_method == "wald-t":
            lo, hi = est.value - tq * est.stderr * f, est.value + tq * est.stderr * f
        else:  # a profile interval: its distances from the estimate, each side, times the factor
            lo, hi = est.value - f * (est.value - est.ci_low), est.value + f * (est.ci_high - est.value)
        params[name] = replace(est, stderr=est.stderr * f, ci_low=lo, ci_high=hi)
    full = np.array(res.covariance, dtype=float, copy=True)
    free = np.asarray(res.free, bool)
    full[np.ix_(free, free)] = cov
    se = np.sqrt(np.clip(np.diag(full), 0, None))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = full / np.outer(se, se)
    return replace(res, params=params, covariance=full, correlation=corr,
                   note="; ".join(x for x in (res.note, note) if x))


def _shared_groups(ids: np.ndarray) -> int:
    """How many ids (>= 0) occur more than once."""
    ids = np.asarray(ids)
    return int(np.sum(np.unique(ids[ids >= 0], return_counts=True)[1] > 1))


def adjust(res: FitResult, jac: Sequence[np.ndarray] | np.ndarray, resid: np.ndarray, sigma: np.ndarray,
           sets: np.ndarray, a: np.ndarray, confidence: float, pools: np.ndarray | None = None,
           u: np.ndarray | None = None) -> tuple[FitResult, str]:
    """Widen ``res``'s uncertainties for errors its rates share (the module text). ``jac`` [n, p] the model's
    Jacobian at the estimate (all parameters, unweighted), ``resid`` [n] the unweighted residuals, ``sigma``
    [n] the weighting SDs, ``sets`` [n] the blank sets
    (:func:`~vzero.plugins.kinetics.rates_table.blank_set_ids`), ``a`` [n] each rate's share of its variance
    from its blank; ``pools`` and ``u`` the shape pools and loadings of :func:`correlation`.
    Returns the result (unchanged where no two of its wells share a blank or a pool, or without error bars)
    and a note naming the factor per free parameter ('' where unchanged)."""
    sets = np.asarray(sets)
    n_sets = _shared_groups(sets)
    n_pools = 0 if pools is None else _shared_groups(pools)
    if not res.errorbars or n_sets + n_pools == 0:
        return res, ""
    free = np.asarray(res.free, bool)
    jw = (np.asarray(jac, float)[:, free]) / sigma[:, None]
    cov0, cov = sandwich(jw, np.asarray(resid, float) / sigma, correlation(sets, a, pools, u))
    names = [n for n, f in zip(res.names, free, strict=True) if f]
    with np.errstate(invalid="ignore", divide="ignore"):
        factors = {n: float(np.sqrt(cov[k, k] / cov0[k, k])) for k, n in enumerate(names)}
    if all(abs(f - 1.0) < NO_CHANGE for f in factors.values()):
        return res, ""  # nothing shared in effect (no blank noise measured, say): the result as it was
    shown = ", ".join(f"{n} ×{f:.2f}" for n, f in factors.items())
    through = [w for w, k in ((f"{n_sets} common blank sets", n_sets),
                              (f"the plate shape of {n_pools} pool(s) of the rates method", n_pools)) if k]
    note = f"uncertainties include errors the rates share through {' and '.join(through)} ({shown})"
    return widen(res, factors, cov, confidence, note), note
