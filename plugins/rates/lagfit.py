"""Lag and inactivation as a clock: the integrated Michaelis–Menten curve run on the enzyme's active time.

When the active enzyme fraction ``a(t)`` changes but the rate law does not, ``dS/dt = -a(t) f(S)`` and the
substrate follows the ordinary progress curve in the active time ``theta(t) = integral of a from 0 to t``:
``S(t) = S_MM(theta(t))``. For a hysteretic lag followed by irreversible first-order inactivation of the
active enzyme (an inactive form p turns active, ``dp/dt = -p/tau``, ``p(0) = 1``; the active form is lost,
``da/dt = p/tau - k a``, ``a(0) = 0``), ``a = (exp(-k t) - exp(-t/tau)) / (1 - k tau)`` and

    theta(t) = ((1 - exp(-k t))/k - tau (1 - exp(-t/tau))) / (1 - k tau)

(``theta = tau (1 - exp(-t/tau) (1 + t/tau))`` at ``k tau = 1``, ``t - tau (1 - exp(-t/tau))`` without
inactivation, ``(1 - exp(-k t))/k`` without a lag, ``t`` with neither). The inactive form is taken as stable:
only the active enzyme is lost, as in first-order inactivation without a lag. Each well's curve is fitted with
:func:`vzero.plugins.rates.progress.progress_curve` on the time axis ``theta`` for every ``(tau, k)`` of a
small grid, and the pair with the smallest residual sum of squares is kept (the parabola through the three
best lag times refines ``tau``). v0 is then the rate at t = 0 with fully active enzyme, and ``tau`` is the lag
time in the usual sense (where the steady-state line meets the baseline, depletion aside).
"""

from __future__ import annotations

import numpy as np
from vzero.plugins.rates.progress import progress_curve

#: Lag times tried, in read intervals.
TAU_GRID = (0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.5, 8.0, 10.0, 13.0, 17.0, 22.0, 28.0, 36.0, 46.0)
#: Inactivation rate constants tried, times the run length.
K_GRID = (0.0, 0.1, 0.2, 0.35, 0.5, 0.7, 1.0, 1.4, 2.0)
#: Fall of the residual sum of squares, in residual variances, that an inactivation constant
#: must bring (an F-like test against the fit without inactivation).
K_EVIDENCE = 12.0


def active_time(t: np.ndarray, tau: float, k: float) -> np.ndarray:
    """``theta(t)`` of the module text (seconds of fully active enzyme); ``t`` from the reaction start."""
    t = np.asarray(t, dtype=float)
    if tau <= 0:
        return t if k <= 0 else -np.expm1(-k * t) / k
    lagged = -tau * np.expm1(-t / tau)  # tau (1 - exp(-t/tau)): the active time the lag takes away
    if k <= 0:
        return t - lagged
    gap = 1.0 - k * tau
    if abs(gap) < 1e-6:  # k tau = 1: the limit of the general form (which loses digits next to it)
        x = t / tau
        return -tau * (np.expm1(-x) + x * np.exp(-x))
    return (-np.expm1(-k * t) / k - lagged) / gap


def _fit(t: np.ndarray, y: np.ndarray, s0: np.ndarray, spc: float, tau: np.ndarray, k: np.ndarray,
         min_points: int) -> dict[str, np.ndarray]:
    """Progress-curve fits on the active-time axis, each well with its own ``(tau, k)`` (wells sharing a pair
    are fitted together). ``rss`` is the residual sum of squares (from R², comparable across clocks)."""
    n_w = y.shape[0]
    out = {"v0": np.full(n_w, np.nan), "stderr": np.full(n_w, np.nan), "rss": np.full(n_w, np.inf),
           "ratio": np.full(n_w, np.nan)}
    yc = y - np.nanmean(y, axis=1, keepdims=True)
    tss = np.nansum(yc * yc, axis=1)
    pairs = np.stack([tau, k], axis=1)
    for pair in np.unique(pairs, axis=0):
        rows = np.flatnonzero(np.all(pairs == pair, axis=1))
        theta = active_time(t, float(pair[0]), float(pair[1]))
        if not np.all(np.diff(theta) > 0):
            continue
        r = progress_curve(theta, y[rows], s0=s0[rows], signal_per_conc=spc, min_points=min_points,
                           fail_ratio=np.inf)
        good = np.isfinite(r.v0) & np.isfinite(r.goodness)
        out["v0"][rows] = r.v0
        out["stderr"][rows] = r.stderr
        out["rss"][rows] = np.where(good, (1.0 - r.goodness) * tss[rows], np.inf)
        out["ratio"][rows] = r.extra["rmse_over_noise"]
    return out


def lag_clock_fit(
    t: np.ndarray, y: np.ndarray, s0: np.ndarray | None, signal_per_conc: float | None, *, min_points: int = 8
) -> dict[str, np.ndarray]:
    """Best ``(tau, k)`` per well and the v0 (signal/s), stderr and residual RMS over noise of that fit.

    First the lag time alone (k = 0) on :data:`TAU_GRID`, refined by the parabola through the best grid
    point and its neighbours and fitted again there, then by a second parabola half a read interval either
    side; then inactivation constants (:data:`K_GRID`) at that
    lag time, kept only where one lowers the residual sum of squares by :data:`K_EVIDENCE` residual variances.
    """
    n_w = y.shape[0]
    s0 = np.broadcast_to(np.asarray(s0, dtype=float), (n_w,))
    dt = float(np.median(np.diff(t))) if t.size > 1 else 1.0
    span = float(t[-1]) if t.size and t[-1] > 0 else 1.0
    dof = np.fmax(np.isfinite(y).sum(axis=1) - 3.0, 1.0)
    taus = np.array(TAU_GRID) * dt
    zeros = np.zeros(n_w)
    rss = np.stack([_fit(t, y, s0, signal_per_conc, np.full(n_w, tau), zeros, min_points)["rss"] for tau in taus],
                   axis=1)
    j = np.argmin(rss, axis=1)
    tau = taus[j].copy()
    inner = (j > 0) & (j < taus.size - 1)
    rows = np.flatnonzero(inner)
    if rows.size:
        jj = j[rows]
        x0, x1, x2 = taus[jj - 1], taus[jj], taus[jj + 1]
        f0, f1, f2 = rss[rows, jj - 1], rss[rows, jj], rss[rows, jj + 1]
        with np.errstate(invalid="ignore", divide="ignore"):
            num = (x1 - x0) ** 2 * (f1 - f2) - (x1 - x2) ** 2 * (f1 - f0)
            den = (x1 - x0) * (f1 - f2) - (x1 - x2) * (f1 - f0)
            vertex = x1 - 0.5 * num / den
        ok = np.isfinite(vertex) & (vertex > x0) & (vertex < x2)
        tau[rows[ok]] = np.round(vertex[ok], 3)
    best = _fit(t, y, s0, signal_per_conc, tau, zeros, min_points)
    # a second, local parabola (half a read interval either side) for the wells with a lag
    h = 0.5 * dt
    lagged = tau > h
    if lagged.any():
        lo = _fit(t, y, s0, signal_per_conc, np.where(lagged, tau - h, tau), zeros, min_points)["rss"]
        hi = _fit(t, y, s0, signal_per_conc, np.where(lagged, tau + h, tau), zeros, min_points)["rss"]
        with np.errstate(invalid="ignore", divide="ignore"):
            step = 0.5 * h * (lo - hi) / (lo - 2.0 * best["rss"] + hi)
        move = lagged & np.isfinite(step) & (np.abs(step) < h) & (lo + hi > 2.0 * best["rss"])
        if move.any():
            tau = np.where(move, np.round(tau + step, 3), tau)
            again = _fit(t, y, s0, signal_per_conc, tau, zeros, min_points)
            best = {key: np.where(move, again[key], best[key]) for key in best}
    best["tau"], best["k"] = tau, zeros.copy()
    base_rss = best["rss"].copy()
    for k_rel in K_GRID[1:]:
        trial = _fit(t, y, s0, signal_per_conc, tau, np.full(n_w, k_rel / span), min_points)
        with np.errstate(invalid="ignore", divide="ignore"):
            evidence = (base_rss - trial["rss"]) / (trial["rss"] / dof)
        better = (trial["rss"] < best["rss"]) & (evidence > K_EVIDENCE)
        for key in ("v0", "stderr", "rss", "ratio"):
            best[key] = np.where(better, trial[key], best[key])
        best["k"] = np.where(better, k_rel / span, best["k"])
    return best
