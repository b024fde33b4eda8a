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
    nfev). ``x``, ``y``, ``w`` are [n_groups, n_points] (weight 0 on unused points)."""
    return engine._lm(func, jac, x, y, w, p0, free, bounds[0], bounds[1], max_iter)


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
