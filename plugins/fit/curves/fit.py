"""The joint fit of a group's progress curves: shared kinetic parameters, one baseline per well.

Each group's reads y_wj (concentration, after calibration and conversion) are modelled as
y_wj = b_w + P_w(t_j; θ) with P from :func:`.curve.progress`: θ (the model's parameters, optionally the
inactivation constant ``kinact`` and the product's inhibition constant ``Kp``) is shared by the group's
wells, the baselines b_w are one per well. With enzyme lots, a well of lot L runs f_L times as fast as the
reference lot's (f of the reference lot fixed to 1; the limiting rate refers to that lot): the activity
factors f_L are shared parameters too, entering through the well's rate scale. The
baselines enter linearly, so they are projected out (variable projection, Golub & Pereyra 1973): for given θ
the best b_w is the mean of y − P over the well's used reads, and the least-squares problem in θ alone has
residuals and Jacobian centred per well. Standard errors of θ from the projected problem are those of the
full problem (the Schur complement); the degrees of freedom count the baselines (n − p − n_wells), and so
do AICc and the profile-likelihood threshold.

All groups of one model are fitted at once by a Levenberg-Marquardt iteration vectorised over groups
(:mod:`.solver`), each iteration one call of the integrator for every well of every group.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from scipy import special
from vzero.plugins.fit.curves import solver, start
from vzero.plugins.fit.curves.curve import Wells, progress
from vzero.plugins.fit.curves.product import KP
from vzero.plugins.fit.curves.profile import intervals as profile_intervals

KINACT = "kinact"
"""Name of the first-order inactivation constant (1/s) when the recipe asks for it."""

LAG = "lag_time"
"""Name of the hysteretic lag's time constant λ (s) when the recipe asks for it: the active fraction of the
enzyme rises as 1 − e^{−t/λ} from the reaction start."""


def activity_name(lot: str) -> str:
    """Name of the relative activity factor of enzyme lot ``lot`` (dimensionless)."""
    return f"activity[{lot}]"


@dataclass(frozen=True)
class CurveGroup:
    """One group's wells: ``wells`` (see :class:`.curve.Wells`), reads ``y`` [n_wells, n_time] in the
    substrate's unit, ``used`` [n_wells, n_time] the reads to fit, ``rates`` [n_wells] initial rates (start
    values only), ``ids`` (plate, well) per row, ``enzyme_ref`` the enzyme level Vmax refers to; ``lots``
    the enzyme lots of the group, reference first (empty: lots not modelled), ``lot`` [n_wells] each well's
    index into ``lots``."""

    name: str
    wells: Wells
    y: np.ndarray
    used: np.ndarray
    rates: np.ndarray
    ids: list[tuple[str, str]]
    enzyme_ref: float = float("nan")
    lots: tuple[str, ...] = ()
    lot: np.ndarray | None = None


@dataclass(frozen=True)
class CurveFit:
    """The outcome for one group: the :class:`FitResult` over θ, and per well the fitted curve (baseline
    included) and the baseline."""

    result: solver.FitResult
    fitted: np.ndarray
    baseline: np.ndarray


def _pad(groups: Sequence[CurveGroup]) -> dict[str, np.ndarray]:
    """Stack groups into arrays [n_groups, max_wells, max_time]; padded wells have S0 = 0 and no used read."""
    g = len(groups)
    nw = max(len(c.y) for c in groups)
    nt = max(c.y.shape[1] for c in groups)
    out = {k: np.zeros((g, nw)) for k in ("s0", "inhibitor", "enzyme", "scale")}
    out["time"] = np.zeros((g, nw, nt))
    out["y"] = np.zeros((g, nw, nt))
    out["used"] = np.zeros((g, nw, nt), bool)
    out["lot"] = np.zeros((g, nw), int)
    for r, c in enumerate(groups):
        if c.lot is not None:
            out["lot"][r, :len(c.lot)] = c.lot
        w, t = c.y.shape
        out["s0"][r, :w], out["inhibitor"][r, :w] = c.wells.s0, c.wells.inhibitor
        out["enzyme"][r, :w], out["scale"][r, :w] = c.wells.enzyme, c.wells.rate_scale
        out["scale"][r, w:] = 1.0
        out["time"][r, :w, :t] = c.wells.time
        out["time"][r, :w, t:] = c.wells.time[:, -1:]
        out["time"][r, w:] = out["time"][r, :1] if w else 0.0
        out["used"][r, :w, :t] = c.used & np.isfinite(c.y)
        out["y"][r, :w, :t] = np.where(out["used"][r, :w, :t], c.y, 0.0)
    for k in ("inhibitor", "enzyme"):
        out[k] = np.where(np.isfinite(out[k]), out[k], 0.0)
    return out


def _centre(a: np.ndarray, used: np.ndarray, count: np.ndarray) -> np.ndarray:
    """``a`` [k, W, T] minus its mean over each well's used reads (zero on unused reads)."""
    mean = np.sum(np.where(used, a, 0.0), axis=2, keepdims=True) / count
    return np.where(used, a - mean, 0.0)


class _Problem:
    """The projected least-squares problem of all groups of one model, in the shape the solver wants:
    ``func(params, x)`` and ``jac(params, x)`` on arrays [n_groups, n_wells·n_time]; ``x["group"]`` says
    which groups a call is about (the solver hands over subsets). The last curve and its sensitivities are
    kept, so that the Jacobian at an accepted step costs no second integration."""

    def __init__(self, model: Any, arrays: dict[str, np.ndarray], kinact: bool, route: str, product: bool = False,
                 n_lots: int = 1, lag: bool = False) -> None:
        self.model, self.a, self.kinact, self.route, self.lag = model, arrays, kinact, route, lag
        self.product, self.n_lots = product, n_lots
        self.shape = arrays["y"].shape
        self.count = np.maximum(arrays["used"].sum(axis=2, keepdims=True), 1)
        self._store: dict[tuple[int, bytes], tuple[np.ndarray, np.ndarray]] = {}
        self._last = np.zeros(self.shape)  # each group's latest curve: the next integration's first guess
        self._seen = np.zeros(self.shape[0], bool)

    def curves(self, params: Sequence[np.ndarray], rows: np.ndarray) -> tuple[np.ndarray, list[np.ndarray]]:
        """Uncentred P [k, W, T] and ∂P/∂θ for the groups ``rows``."""
        g, nw, nt = len(rows), self.shape[1], self.shape[2]
        a = self.a
        flat = [np.repeat(np.asarray(p, float).reshape(g), nw) for p in params]
        n_model = len(self.model.params)
        kq = flat[n_model] if self.product else None
        kin = flat[n_model + self.product] if self.kinact else None
        lag = flat[n_model + self.product + self.kinact] if self.lag else None
        first = n_model + self.product + self.kinact + self.lag  # the lots' activity factors after the reference
        lot = a["lot"][rows].ravel()
        factor = np.ones(g * nw)
        for j in range(1, self.n_lots):
            factor = np.where(lot == j, flat[first + j - 1], factor)
        wells = Wells(a["s0"][rows].ravel(), a["inhibitor"][rows].ravel(), a["enzyme"][rows].ravel(),
                      a["time"][rows].reshape(g * nw, nt), a["scale"][rows].ravel() * factor)
        # the curves at the group's last parameters start the closed forms' Newton iteration (nearby
        # parameters, nearby curves: fewer iterations; the result is the same to rounding)
        guess = self._last[rows].reshape(g * nw, nt) if self._seen[rows].all() else None
        p, grads = progress(self.model, flat[:n_model], wells, kin, self.route, kq, scale_grad=self.n_lots > 1,
                            start=guess, lag=lag)
        if self.n_lots > 1:
            vtau = grads.pop()  # ∂P/∂ln(rate scale); ∂P/∂f_L = v·τ/f_L on the wells of lot L
            with np.errstate(all="ignore"):
                grads += [np.where((lot == j)[:, None], vtau / factor[:, None], 0.0) for j in range(1, self.n_lots)]
        p = p.reshape(g, nw, nt)
        self._last[rows], self._seen[rows] = p, True
        return p, [d.reshape(g, nw, nt) for d in grads]

    def _eval(self, params: Sequence[np.ndarray], x: Mapping[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
        """Centred curves [k, n] and Jacobian [k, n, p] for the groups in ``x``. Each (group, parameters) pair
        computed is remembered (the solver asks for the Jacobian at the point whose residuals it has just
        computed); a call may name a group twice with different parameters (a profile searches both sides of
        an interval at once)."""
        rows = np.asarray(x["group"][:, 0], int)
        pv = np.stack([np.asarray(p, float).reshape(len(rows)) for p in params], axis=1)
        keys = [(int(r), pv[i].tobytes()) for i, r in enumerate(rows)]
        if len(self._store) > 8 * self.shape[0]:
            self._store.clear()  # bounded memory: the pairs of the last few iterations are all that recur
        first = {k: i for i, k in reversed(list(enumerate(keys)))}  # a pair asked for twice is computed once
        todo = [i for k, i in first.items() if k not in self._store]
        if todo:
            sel = np.array(todo)
            p, grads = self.curves(list(pv[sel].T), rows[sel])
            used, count = self.a["used"][rows[sel]], self.count[rows[sel]]
            with np.errstate(all="ignore"):
                val = _centre(p, used, count).reshape(len(sel), -1)
                jac = np.stack([_centre(d, used, count).reshape(len(sel), -1) for d in grads], axis=-1)
            for j, i in enumerate(todo):
                self._store[keys[i]] = (val[j], jac[j])
        return (np.stack([self._store[k][0] for k in keys]), np.stack([self._store[k][1] for k in keys]))

    def func(self, params: Sequence[np.ndarray], x: Mapping[str, np.ndarray]) -> np.ndarray:
        return self._eval(params, x)[0]

    def jac(self, params: Sequence[np.ndarray], x: Mapping[str, np.ndarray]) -> list[np.ndarray]:
        j = self._eval(params, x)[1]
        return [j[:, :, i] for i in range(j.shape[2])]


def _count_baselines(results: list[solver.FitResult], n_wells: np.ndarray, confidence: float) -> list[solver.FitResult]:
    """Results with the per-well baselines counted: dof n − p − n_wells, covariance rescaled by the new s²,
    Wald intervals and AICc (k = p + n_wells + 1) recomputed."""
    out = []
    for res, nb in zip(results, n_wells, strict=True):
        dof = res.n_points - int(res.free.sum()) - int(nb)
        k = int(res.free.sum()) + int(nb) + 1
        n = res.n_points
        scale = res.dof / dof if dof > 0 else np.nan
        cov = res.covariance * scale
        aicc = n * np.log(res.rss / n) + 2 * k + 2 * k * (k + 1) / (n - k - 1) if n - k - 1 > 0 and res.rss > 0 \
            else np.nan
        tq = solver.t_quantile(confidence, dof)
        params = {}
        for name, p in res.params.items():
            if p.fixed or not np.isfinite(p.stderr):
                params[name] = p
                continue
            se = p.stderr * np.sqrt(scale)
            params[name] = replace(p, stderr=float(se), ci_low=float(p.value - tq * se),
                                   ci_high=float(p.value + tq * se))
        errorbars = res.errorbars and dof > 0
        note = res.note if dof > 0 else f"no degrees of freedom left after {nb} baselines: no standard errors"
        out.append(replace(res, params=params, dof=dof, covariance=cov, aicc=float(aicc), errorbars=errorbars,
                           note=note))
    return out


def parameter_names(model: Any, *, product: bool = False, kinact: bool = False, lots: Sequence[str] = (),
                    lag: bool = False) -> tuple[str, ...]:
    """The fitted parameters, in order: the model's, ``Kp``, ``kinact``, ``lag_time``, then one activity
    factor per lot after the first (the reference)."""
    return (*model.params, *((KP,) if product else ()), *((KINACT,) if kinact else ()), *((LAG,) if lag else ()),
            *(activity_name(lot) for lot in lots[1:]))


def fit_groups(model: Any, groups: Sequence[CurveGroup], *, kinact: bool = False, product: bool = False,
               fixed: Mapping[str, float] | None = None, bounds: Mapping[str, tuple[float, float]] | None = None,
               starts: Mapping[str, float] | None = None, confidence: float = 0.95, profile: bool = True,
               units: Mapping[str, str] | None = None, route: str = "auto", max_iter: int = 200, lag: bool = False
               ) -> list[CurveFit]:
    """Fit ``model`` to the curves of every group at once; one :class:`CurveFit` per group, in order.

    ``product``: fit competitive inhibition by the product (constant ``Kp``, the substrate's unit); ``lag``:
    fit a hysteretic lag, the time constant ``lag_time`` (s, ≥ 0; 0 is no lag) shared by the group; the
    groups' ``lots`` (all groups of one call must have the same) add one activity factor per lot after the
    reference."""
    lots = groups[0].lots
    if any(c.lots != lots for c in groups):
        raise ValueError("groups fitted together must have the same enzyme lots, reference first")
    names = parameter_names(model, product=product, kinact=kinact, lots=lots, lag=lag)
    arrays = _pad(groups)
    g, nw, nt = arrays["y"].shape
    problem = _Problem(model, arrays, kinact, route, product, max(len(lots), 1), lag)
    used = arrays["used"]
    count = problem.count
    y = _centre(arrays["y"], used, count).reshape(g, -1)
    w = used.reshape(g, -1).astype(float)
    x = {"group": np.broadcast_to(np.arange(g, dtype=float)[:, None], (g, nw * nt)).copy()}
    all_bounds = {**model.bounds, KINACT: (0.0, np.inf), KP: (0.0, np.inf), LAG: (0.0, np.inf),
                  **{activity_name(lot): (0.0, np.inf) for lot in lots[1:]}, **(bounds or {})}
    lo = np.array([all_bounds.get(n, (-np.inf, np.inf))[0] for n in names], float)
    hi = np.array([all_bounds.get(n, (-np.inf, np.inf))[1] for n in names], float)
    free = np.array([n not in (fixed or {}) for n in names], bool)
    p0 = np.zeros((g, len(names)))
    for r, c in enumerate(groups):
        xv = {"substrate": c.wells.s0, "inhibitor": c.wells.inhibitor, "enzyme": c.wells.enzyme}
        ok = np.isfinite(c.rates)
        guess = model.start({k: v[ok] for k, v in xv.items() if k in model.variables}, c.rates[ok]) \
            if ok.sum() else [1.0] * len(model.params)
        # Kp starts at the largest substrate level (inhibition felt, not dominant); kinact at 0; the lag at
        # one read interval (inside its bound, where the fit can move either way); factors at 1
        guess = [*guess[:len(model.params)], *((float(np.max(c.wells.s0)),) if product else ()),
                 *((0.0,) if kinact else ()), *((_read_interval(c),) if lag else ()), *([1.0] * (len(lots) - 1))]
        p0[r] = [(fixed or {}).get(n, (starts or {}).get(n, guess[j] if j < len(guess) else 0.0))
                 for j, n in enumerate(names)]
    p0 = np.clip(p0, lo, hi)
    if not starts:  # start values the recipe gives are taken as they are
        p0 = start.from_rates(model, groups, p0, free, lo, hi)
    vals, resid, jm, converged, nfev = solver.levenberg_marquardt(problem.func, problem.jac, x, y, w, p0, free,
                                                                  (lo, hi), max_iter)
    role = {n: (units or {}).get(n, "") for n in names}
    results = solver.summarize(names, vals, free, jm, resid, y, w, converged, nfev, confidence, role)
    n_wells = used.any(axis=2).sum(axis=1)
    results = _count_baselines(results, n_wells, confidence)
    if profile:
        wanted = [*getattr(model, "profile", ()), *((KP,) if product else ()), *((KINACT,) if kinact else ()),
                  *((LAG,) if lag else ())]
        results = _profiles(problem, x, y, w, results, wanted, names, free, all_bounds, lo, hi, confidence)
    with np.errstate(all="ignore"):
        p, _ = problem.curves([vals[:, j] for j in range(len(names))], np.arange(g))
        base = np.sum(np.where(used, arrays["y"] - p, 0.0), axis=2) / count[:, :, 0]
    out = []
    for r, c in enumerate(groups):
        w_, t_ = c.y.shape
        out.append(CurveFit(results[r], p[r, :w_, :t_] + base[r, :w_, None], base[r, :w_]))
    return out


def _read_interval(group: CurveGroup) -> float:
    """The median interval between a group's reads (s), 1 s when it has none: the lag's start value."""
    dt = np.diff(group.wells.time, axis=1)
    dt = dt[np.isfinite(dt) & (dt > 0)]
    return float(np.median(dt)) if dt.size else 1.0


def _profiles(problem: _Problem, x: dict[str, np.ndarray], y: np.ndarray, w: np.ndarray,
              results: list[solver.FitResult], wanted: Sequence[str], names: Sequence[str], free: np.ndarray,
              all_bounds: Mapping[str, tuple[float, float]], lo: np.ndarray, hi: np.ndarray, confidence: float
              ) -> list[solver.FitResult]:
    """``results`` with profile-likelihood intervals (:mod:`.profile`) for the free parameters in ``wanted``."""
    profiled = [n for n in dict.fromkeys(wanted) if n in names and free[list(names).index(n)]]
    if not profiled:
        return results

    def evaluate(v: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return problem._eval([v[:, j] for j in range(v.shape[1])], {"group": rows[:, None].astype(float)})

    def general(name: str, rows: np.ndarray) -> list[tuple[float, float, str]]:
        sub = {k: a[rows] for k, a in x.items()}
        return solver.profile(problem.func, problem.jac, sub, y[rows], w[rows], [results[r] for r in rows], name,
                              all_bounds, confidence)

    limits = profile_intervals(evaluate, general, y, w, results, profiled, lo, hi, confidence)
    results = list(results)
    for name in profiled:
        for r, (low, high, note) in enumerate(limits[name]):
            if not (results[r].success and results[r].errorbars):
                continue
            params = dict(results[r].params)
            params[name] = replace(params[name], ci_low=low, ci_high=high, ci_method="profile",
                                   note="; ".join(filter(None, [params[name].note, note])))
            results[r] = replace(results[r], params=params)
    return results


def f_quantile(confidence: float, dfn: int, dfd: int) -> float:
    """Upper F quantile (for the Selwyn test and docs)."""
    return float(special.fdtri(dfn, dfd, confidence))
