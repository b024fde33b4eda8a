"""Start values for the curve fit: the rate law fitted to the groups' initial rates first.

The model's own guess (:meth:`start`, built from rates by rules of thumb) can be far from the optimum in a
parameter the rates barely show: substrate inhibition starts with Ksi = 10 × the highest substrate level.
From there the curve fit spends most of its iterations finding the right region, each iteration one
integration of every curve. Fitting the rate law to the initial rates first (the two-step route, all
groups in one batched Levenberg-Marquardt run over a few points per group: about a hundredth of the cost of
one curve iteration) moves the start into the right region; the curve fit then only refines it. A group
whose rate fit fails or leaves the bounds keeps the guess; the optimum the curve fit reaches does not depend
on this step, only the number of iterations to reach it.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
from vzero.plugins.fit.curves import solver


def from_rates(model: Any, groups: Sequence[Any], p0: np.ndarray, free: np.ndarray, lo: np.ndarray,
               hi: np.ndarray) -> np.ndarray:
    """``p0`` [n_groups, n_params] with the model's parameters (the first ``len(model.params)`` columns)
    replaced by a batched fit of the rate law to each group's ``rates`` where that fit succeeds."""
    k = len(model.params)
    g = len(groups)
    nw = max((len(c.rates) for c in groups), default=0)
    if g == 0 or nw == 0:
        return p0
    xs = {v: np.zeros((g, nw)) for v in ("substrate", "inhibitor", "enzyme")}
    y = np.zeros((g, nw))
    w = np.zeros((g, nw))
    for r, c in enumerate(groups):
        n = len(c.rates)
        cols = {"substrate": c.wells.s0, "inhibitor": c.wells.inhibitor, "enzyme": c.wells.enzyme}
        for v, a in cols.items():
            xs[v][r, :n] = np.where(np.isfinite(a), a, 0.0)
            xs[v][r, n:] = xs[v][r, 0] if n else 0.0
        ok = np.isfinite(c.rates) & np.isfinite(c.wells.s0)
        y[r, :n] = np.where(ok, c.rates, 0.0)
        w[r, :n] = ok
    enough = np.array([len(np.unique(xs["substrate"][r][w[r] > 0])) > k for r in range(g)])
    if not enough.any():
        return p0
    rows = np.flatnonzero(enough)
    x = {v: a[rows] for v, a in xs.items() if v in model.variables}
    with np.errstate(all="ignore"):
        vals, _, _, converged, _ = solver.levenberg_marquardt(
            model.evaluate, model.jacobian, x, y[rows], w[rows], p0[rows, :k], free[:k], (lo[:k], hi[:k]), 100)
    good = converged & np.all(np.isfinite(vals), axis=1) & np.all((vals > lo[:k]) & (vals < hi[:k]), axis=1)
    out = p0.copy()
    out[rows[good], :k] = vals[good]
    return out
