"""The narrow seam between the curve fit and the batched least-squares engine.

Everything the curve fit needs from :mod:`vzero.plugins.fit.engine` goes through these three functions, so
that the engine can be replaced (the batched solvers are being unified) by changing this file only.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np
from vzero.plugins.fit import engine

FitResult = engine.FitResult
ParamEstimate = engine.ParamEstimate
t_quantile = engine.t_quantile


def levenberg_marquardt(func: Callable[..., Any], jac: Callable[..., Any], x: Mapping[str, np.ndarray],
                        y: np.ndarray, w: np.ndarray, p0: np.ndarray, free: np.ndarray,
                        bounds: tuple[np.ndarray, np.ndarray], max_iter: int = 200
                        ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Batched Levenberg-Marquardt over groups: (values, weighted residuals, weighted Jacobian, converged,
    nfev). ``x``, ``y``, ``w`` are [n_groups, n_points] (weight 0 on unused points).

    A group the engine leaves unconverged (stalled: no step, however short, lowers its cost) counts as
    converged where it is a minimum to the curves' own precision: every Jacobian column is orthogonal to
    the residuals within :data:`CURVE_GTOL` (first-order optimality)."""
    vals, resid, jm, converged, nfev = engine._lm(func, jac, x, y, w, p0, free, bounds[0], bounds[1], max_iter)
    return vals, resid, jm, converged | (stationary(resid, jm) & np.all(np.isfinite(vals), axis=1)), nfev


#: Largest cosine between the weighted residuals and a weighted Jacobian column at which a stalled curve fit
#: counts as converged. Integrated curves (Newton-solved or integrated numerically, checked to about 1e-9
#: relative) make the cost noisy at that level, so the engine's test for stalling (cosine 1e-8) is not
#: always reached at a true minimum: on the demo plate a Hill curve fit stalled at a cosine of 1.9e-8 with
#: its estimates within 0.3 % of the truth, beside converged groups at up to 4.4e-8. 1e-6 is our margin.
CURVE_GTOL = 1e-6


def stationary(resid: np.ndarray, jm: np.ndarray) -> np.ndarray:
    """Per group, whether the largest |cosine| between the residuals [g, n] and a Jacobian column [g, n, p]
    is below :data:`CURVE_GTOL` (zero columns, fixed parameters, left out)."""
    num = np.abs(np.einsum("gn,gnp->gp", resid, jm))
    den = np.linalg.norm(jm, axis=1) * np.linalg.norm(resid, axis=1)[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        cos = np.where(den > 0, num / den, 0.0)
    return np.nan_to_num(cos, nan=np.inf).max(axis=1, initial=0.0) < CURVE_GTOL


def summarize(names: Sequence[str], values: np.ndarray, free: np.ndarray, jmat: np.ndarray, resid: np.ndarray,
              y: np.ndarray, w: np.ndarray, converged: np.ndarray, nfev: np.ndarray, confidence: float,
              units: Mapping[str, str]) -> list[FitResult]:
    """One :class:`FitResult` per group (standard errors from s²(JᵀJ)⁻¹)."""
    return engine.summarize(names, values, free, jmat, resid, y, w, success=converged,
                            message=["converged (batched Levenberg-Marquardt on progress curves)" if c else
                                     "did not converge within the iteration limit" for c in converged],
                            nfev=nfev, confidence=confidence, units=units)


def profile(func: Callable[..., Any], jac: Callable[..., Any], x: Mapping[str, np.ndarray], y: np.ndarray,
            w: np.ndarray, results: Sequence[FitResult], name: str, bounds: Mapping[str, tuple[float, float]],
            confidence: float) -> list[tuple[float, float, str]]:
    """Profile-likelihood intervals of ``name`` for every group (weights 0 mark unused points)."""
    with np.errstate(divide="ignore"):
        sigma = np.where(w > 0, 1.0 / np.where(w > 0, w, 1.0), np.inf)
    return engine.profile_batch(func, jac, x, y, np.ones(y.shape, bool), results, name, sigma=sigma,
                                bounds=bounds, confidence=confidence)
