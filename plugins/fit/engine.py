"""Nonlinear least-squares engine: one result shape for every model, honest uncertainties.

Two entry points share :class:`FitResult`:

* :func:`fit` fits one data set with :func:`scipy.optimize.least_squares` (trust-region reflective,
  analytic Jacobian, tolerances 1e-15), used for single fits, for profile likelihood and as the fallback.
* :func:`fit_batch` fits many groups of the same model at once with the batched Levenberg-Marquardt solver
  the rates methods share (:mod:`vzero.plugins.kinetics.lsq`; numpy arrays ``[n_groups, n_points]``,
  padding masked out); a group it cannot bring to a clean minimum is refitted by :func:`fit`.

Model functions take ``(params, x)`` where ``params`` is a sequence of arrays (one per parameter, each
broadcastable against the arrays of ``x``, a mapping of independent variables) and return the predicted
values; Jacobians return one array of partial derivatives per parameter, in the same order.

Uncertainty: standard errors from s²(JᵀJ)⁻¹ with s² = RSS/(n − p) (the Gauss-Newton covariance NIST uses
for its certified standard deviations), Wald intervals with Student's t on n − p degrees of freedom, and
profile-likelihood intervals where RSS rises to RSS·(1 + F(1, n − p)/(n − p)) (Bates & Watts 1988, ch. 6 —
memory for the chapter) for parameters whose sampling distribution is skewed (Km, K0.5, h, Ki).
When an uncertainty cannot be given, ``errorbars`` is False and ``note`` says why.
"""

from __future__ import annotations

import functools
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import special  # t and F quantiles without importing scipy.stats
from vzero.plugins.kinetics import lsq

Func = Callable[[Sequence[Any], Mapping[str, np.ndarray]], np.ndarray]
Jac = Callable[[Sequence[Any], Mapping[str, np.ndarray]], Sequence[np.ndarray]]

TOL = 1e-15
"""ftol = xtol = gtol for the single-fit path (tight: REFERENCES section 1.4 shows 1e-8 stops early)."""


@dataclass(frozen=True)
class ParamEstimate:
    """One parameter: value, standard error and confidence interval (NaN where not determined)."""

    name: str
    value: float
    stderr: float = float("nan")
    ci_low: float = float("nan")
    ci_high: float = float("nan")
    ci_method: str = "wald-t"
    unit: str = ""
    fixed: bool = False
    note: str = ""


@dataclass
class FitResult:
    """The outcome of one fit, the same shape for every model.

    ``covariance`` and ``correlation`` are over all parameters in ``names`` order (rows and columns of
    fixed parameters are zero / NaN). ``aicc`` is the small-sample Akaike criterion for Gaussian errors,
    n·ln(RSS/n) + 2k + 2k(k+1)/(n − k − 1) with k = free parameters + 1 (the variance).
    """

    names: tuple[str, ...]
    params: dict[str, ParamEstimate]
    success: bool
    message: str
    nfev: int
    rss: float
    dof: int
    n_points: int
    aicc: float
    r_squared: float
    covariance: np.ndarray
    correlation: np.ndarray
    errorbars: bool
    note: str = ""
    values: np.ndarray = field(default_factory=lambda: np.empty(0))
    free: np.ndarray = field(default_factory=lambda: np.empty(0, dtype=bool))

    def value(self, name: str) -> float:
        return self.params[name].value


def _as_bounds(names: Sequence[str], bounds: Mapping[str, tuple[float, float]] | None) -> tuple[np.ndarray, np.ndarray]:
    lo = np.full(len(names), -np.inf)
    hi = np.full(len(names), np.inf)
    for i, n in enumerate(names):
        if bounds and n in bounds:
            lo[i], hi[i] = bounds[n]
    return lo, hi


def _jacobian(jac: Jac, p: np.ndarray, x: Mapping[str, np.ndarray], shape: tuple[int, ...]) -> np.ndarray:
    """Jacobian as an array [..., n_points, n_params] (derivatives broadcast to the data shape)."""
    cols = jac(list(p.T) if p.ndim == 1 else [p[:, j, None] for j in range(p.shape[1])], x)
    return np.stack([np.broadcast_to(c, shape) for c in cols], axis=-1)


@functools.lru_cache(maxsize=256)
def t_quantile(confidence: float, dof: int) -> float:
    """Two-sided Student-t quantile for ``confidence`` on ``dof`` degrees of freedom (NaN without dof)."""
    return float(special.stdtrit(dof, 0.5 + confidence / 2)) if dof > 0 else float("nan")


def summarize(
    names: Sequence[str],
    values: np.ndarray,
    free: np.ndarray,
    jmat: np.ndarray,
    resid: np.ndarray,
    y: np.ndarray,
    w: np.ndarray,
    *,
    success: Sequence[bool] | bool,
    message: Sequence[str] | str,
    nfev: Sequence[int] | int,
    confidence: float,
    units: Mapping[str, str] | None = None,
) -> list[FitResult]:
    """Build :class:`FitResult` objects from solutions, vectorised over a leading group axis.

    ``values`` [g, p]; weighted residuals ``resid`` [g, n]; weighted Jacobian ``jmat`` [g, n, p] (rows of
    unused points zero); weights ``w`` [g, n] (0 for unused points); ``y`` [g, n]. A single fit may pass
    arrays without the group axis and gets a one-element list.
    """
    values, resid, y, w = (np.atleast_2d(np.asarray(a, float)) for a in (values, resid, y, w))
    jmat = np.asarray(jmat, float).reshape((*resid.shape, len(names)))
    g = values.shape[0]
    success = np.broadcast_to(np.asarray(success, bool), (g,))
    message = [message] * g if isinstance(message, str) else list(message)
    nfev = np.broadcast_to(np.asarray(nfev, int), (g,))
    used = w > 0
    n = used.sum(axis=1)
    k = int(free.sum())
    dof = n - k
    with np.errstate(all="ignore"):
        rss = np.sum(np.where(used, resid**2, 0.0), axis=1)
        yw = np.where(used, y * w, 0.0)
        # R² of the (weighted) fit against the weighted mean (the usual definition)
        wm = np.sum(w * yw, axis=1) / np.sum(w**2, axis=1)
        tss = np.sum(np.where(used, (yw - w * wm[:, None]) ** 2, 0.0), axis=1)
        r2 = np.where(tss > 0, 1.0 - rss / tss, np.nan)
        kk = k + 1
        aicc = np.where((n - kk - 1 > 0) & (rss > 0),
                        n * np.log(rss / n) + 2 * kk + 2 * kk * (kk + 1) / (n - kk - 1), np.nan)
        jf = jmat[:, :, free]
        finite = np.all(np.isfinite(jf), axis=(1, 2))
        if k:
            _, sv, vt = np.linalg.svd(np.where(finite[:, None, None], jf, 0.0), full_matrices=False)
        else:
            sv, vt = np.ones((g, 0)), np.ones((g, 0, 0))
        tiny = sv[:, -1:].ravel() <= sv[:, :1].ravel() * max(jf.shape[1], k) * np.finfo(float).eps if k else 0
        s2 = rss / np.where(dof > 0, dof, np.nan)
        cf = np.einsum("gji,gj,gjl->gil", vt, 1.0 / sv**2, vt) * s2[:, None, None]
    p = len(names)
    out = []
    for gi in range(g):
        cov = np.full((p, p), np.nan)
        note = ""
        errorbars = False
        if dof[gi] <= 0:
            note = f"no degrees of freedom left ({n[gi]} points for {k} free parameters): no standard errors"
        elif not success[gi]:
            note = "the fit did not converge: no standard errors"
        elif k and (not finite[gi] or bool(np.asarray(tiny)[gi]) or not np.all(np.isfinite(cf[gi]))):
            note = "parameters not separately determined by these data (singular Jacobian): no standard errors"
        else:
            cov[np.ix_(free, free)] = cf[gi]
            cov[~free, :] = 0.0
            cov[:, ~free] = 0.0
            errorbars = True
        se = np.sqrt(np.clip(np.diag(cov), 0, None))
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = cov / np.outer(se, se)
        tq = t_quantile(confidence, int(dof[gi]))
        v = values[gi]
        params = {}
        for i, name in enumerate(names):
            fixed = not free[i]
            params[name] = ParamEstimate(
                name, float(v[i]), 0.0 if fixed else float(se[i]),
                float(v[i]) if fixed else float(v[i] - tq * se[i]), float(v[i]) if fixed else float(v[i] + tq * se[i]),
                "fixed" if fixed else "wald-t", (units or {}).get(name, ""), fixed, "" if fixed or errorbars else note,
            )
        out.append(FitResult(
            tuple(names), params, bool(success[gi]), message[gi], int(nfev[gi]), float(rss[gi]), int(dof[gi]),
            int(n[gi]), float(aicc[gi]), float(r2[gi]), cov, corr, errorbars, note, v.copy(), free.copy(),
        ))
    return out


#: The budget of one :func:`fit`: at most this many model evaluations per algorithm, and this many seconds in
#: all. Far above what a rate law on a plate's points needs (tens of evaluations, milliseconds); a data set
#: that reaches it (one absurd read among ordinary ones, say) gets ``success=False`` and a message saying so,
#: instead of holding up the run for minutes.
FIT_MAX_NFEV = 5_000
FIT_SECONDS = 2.0


class _OverBudget(Exception):
    """Raised inside the residual function when a fit has used up its time."""


def fit(
    func: Func,
    jac: Jac,
    x: Mapping[str, np.ndarray],
    y: np.ndarray,
    p0: Sequence[float],
    names: Sequence[str],
    *,
    sigma: np.ndarray | None = None,
    fixed: Mapping[str, float] | None = None,
    bounds: Mapping[str, tuple[float, float]] | None = None,
    confidence: float = 0.95,
    units: Mapping[str, str] | None = None,
    method: str = "trf",
    tol: float = TOL,
    max_nfev: int = FIT_MAX_NFEV,
    seconds: float = FIT_SECONDS,
) -> FitResult:
    """Fit one data set by least squares; ``sigma`` gives per-point standard deviations (weights 1/σ).

    The fit stops at its budget (``max_nfev`` evaluations per algorithm, ``seconds`` in all) with
    ``success=False`` and a message naming the budget.

    Minimises Σ((f − y)/σ)². ``fixed`` holds parameters at given values; ``bounds`` maps a name to
    (low, high). A fit that converges to a point no better than a constant (R² ≤ 1e-9 while y varies) is
    retried from the start with the other algorithm (``lm`` ↔ ``trf``) and the lower RSS kept: this is the
    trap NIST BoxBOD start 1 sets for Levenberg-Marquardt (REFERENCES section 1.4).
    """
    y = np.asarray(y, float)
    w = np.ones_like(y) if sigma is None else 1.0 / np.asarray(sigma, float)
    names = tuple(names)
    values = np.array(p0, float)
    free = np.ones(len(names), bool)
    for i, n in enumerate(names):
        if fixed and n in fixed:
            values[i] = float(fixed[n])
            free[i] = False
    lo, hi = _as_bounds(names, bounds)
    start = np.clip(values, lo, hi)

    def full(q: np.ndarray) -> np.ndarray:
        v = values.copy()
        v[free] = q
        return v

    import time

    deadline = time.monotonic() + seconds
    last = [start[free]]

    def res(q: np.ndarray) -> np.ndarray:
        if time.monotonic() > deadline:
            raise _OverBudget
        last[0] = q
        return w * (func(list(full(q)), x) - y)

    def jj(q: np.ndarray) -> np.ndarray:
        return (_jacobian(jac, full(q), x, y.shape) * w[:, None])[:, free]

    def run(meth: str) -> Any:
        from scipy import optimize  # here, not at the top: a batched fit that needs no fallback never pays its
        # import

        kw: dict[str, Any] = {"method": meth, "ftol": tol, "xtol": tol, "gtol": tol, "max_nfev": max_nfev}
        if meth != "lm":
            kw["bounds"] = (lo[free], hi[free])
        with np.errstate(all="ignore"):
            try:
                sol = optimize.least_squares(res, start[free], jac=jj, **kw)
            except ValueError as exc:  # residuals not finite at the start, e.g. a parameter on a pole
                return optimize.OptimizeResult(x=start[free], success=False, cost=np.inf, nfev=0, message=str(exc))
            except _OverBudget:
                return optimize.OptimizeResult(x=last[0], success=False, cost=np.inf, nfev=0,
                                               message=f"stopped at the fit's time budget ({seconds:g} s)")
        if sol.status == 0:  # scipy's code for "the number of function evaluations is exceeded"
            sol.success = False
            sol.message = f"stopped at the fit's budget of {max_nfev} model evaluations"
        return sol

    boxed = np.any(np.isfinite(lo[free]) | np.isfinite(hi[free]))
    first = "trf" if boxed else method
    sol = run(first)
    tss = float(np.sum((w * (y - y.mean())) ** 2))
    if not boxed and (not sol.success or not np.isfinite(sol.cost) or (tss > 0 and 2 * sol.cost >= tss * (1 - 1e-9))):
        other = run("lm" if first == "trf" else "trf")
        if np.isfinite(other.cost) and (not np.isfinite(sol.cost) or other.cost < sol.cost or not sol.success):
            sol = other
    v = full(sol.x)
    ok = bool(sol.success and np.all(np.isfinite(v)) and np.isfinite(sol.cost))
    with np.errstate(all="ignore"):
        jmat = _jacobian(jac, v, x, y.shape) * w[:, None]
        resid = w * (func(list(v), x) - y)
    return summarize(
        names, v, free, jmat, resid, y, w, success=ok, message=str(sol.message), nfev=int(sol.nfev),
        confidence=confidence, units=units,
    )[0]


def _fill_value(used: np.ndarray) -> float:
    """A harmless value for padded points (their weight is zero): the mean of the finite used values."""
    finite = used[np.isfinite(used)]
    return float(finite.mean()) if finite.size else 1.0


LM_TOLERANCES = {"ftol": 1e-13, "xtol": 1e-9, "gtol": 1e-12}
"""Convergence tolerances of the batched fits (:func:`vzero.plugins.kinetics.lsq.solve`): tight, because a
group that ends short of its minimum shifts the parameters the report prints (NIST StRD certified values are
matched to 1e-6 in the tests)."""


def _lm(func: Func, jac: Jac, xs: Mapping[str, np.ndarray], yz: np.ndarray, w: np.ndarray, vals: np.ndarray,
        free: np.ndarray, lo: np.ndarray, hi: np.ndarray, max_iter: int, lam0: float = 1e-3,
        ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The shared batched Levenberg-Marquardt solver (:func:`vzero.plugins.kinetics.lsq.solve`, its bound
    handling and convergence rules) on a model given as ``func``/``jac`` of parameters and data mappings.

    ``xs``/``yz``/``w`` are [g, n] with padding weighted 0; ``vals`` [g, p] start values (fixed columns
    already set); ``free`` [p] or [g, p] (a per-group mask lets a profile fix one parameter per group);
    ``lam0`` the initial damping (small for a warm start near the solution, as in profiles).
    Returns (values, weighted residuals, weighted Jacobian [g, n, p] with fixed columns zeroed, converged,
    nfev); a stalled group counts as not converged (the caller refits it).
    """
    npts = yz.shape[1]
    n_par = vals.shape[1]

    def model(v: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        x = {k: a[rows] for k, a in xs.items()}
        params = [v[:, j, None] for j in range(n_par)]
        f = np.broadcast_to(func(params, x), (rows.size, npts))
        return f, np.moveaxis(_jacobian(jac, v, x, (rows.size, npts)), -1, 1)

    sol = lsq.solve(model, vals, yz, w, lower=lo, upper=hi, free=free, max_iter=max_iter, lam0=lam0,
                    **LM_TOLERANCES)
    return sol.params, sol.resid, np.moveaxis(sol.jac, 1, -1), sol.converged, sol.nfev


def fit_batch(
    func: Func,
    jac: Jac,
    x: Mapping[str, np.ndarray],
    y: np.ndarray,
    mask: np.ndarray,
    p0: np.ndarray,
    names: Sequence[str],
    *,
    sigma: np.ndarray | None = None,
    fixed: Mapping[str, float] | None = None,
    bounds: Mapping[str, tuple[float, float]] | None = None,
    confidence: float = 0.95,
    units: Mapping[str, str] | None = None,
    max_iter: int = 500,
) -> list[FitResult]:
    """Fit many groups of one model at once: ``y``, ``mask`` and each ``x`` array are [n_groups, n_points]
    (``mask`` False on padding), ``p0`` is [n_groups, n_params]. Returns one :class:`FitResult` per group.

    The shared batched Levenberg-Marquardt solver (:mod:`vzero.plugins.kinetics.lsq`: open bounds, damping
    and convergence rules documented there) with :data:`LM_TOLERANCES`. Groups that end elsewhere (stalled,
    or out of iterations), or fit no better than a constant, are refitted one by one with :func:`fit`.
    """
    y = np.asarray(y, float)
    mask = np.asarray(mask, bool)
    g = y.shape[0]
    names = tuple(names)
    p = len(names)
    w = np.where(mask, 1.0 if sigma is None else 1.0 / np.where(mask, sigma, 1.0), 0.0)
    yz = np.where(mask, y, 0.0)
    xs = {k: np.where(mask, v, _fill_value(np.asarray(v, float)[mask])) for k, v in x.items()}
    vals = np.array(p0, float).reshape(g, p).copy()
    free = np.ones(p, bool)
    for i, n in enumerate(names):
        if fixed and n in fixed:
            vals[:, i] = float(fixed[n])
            free[i] = False
    lo, hi = _as_bounds(names, bounds)
    vals = np.clip(vals, lo, hi)

    vals, r, jm, converged, nfev = _lm(func, jac, xs, yz, w, vals, free, lo, hi, max_iter)

    results = summarize(names, vals, free, jm, r, yz, w, success=True,
                        message="converged (batched Levenberg-Marquardt)", nfev=nfev, confidence=confidence,
                        units=units)
    r2 = np.array([res.r_squared for res in results])
    redo = ~converged | (r2 <= 1e-9) | ~np.all(np.isfinite(vals), axis=1)
    for gi in np.flatnonzero(redo):
        m = mask[gi]
        yy = y[gi][m]
        xi = {k: np.asarray(v[gi][m], float) for k, v in x.items()}
        sg = None if sigma is None else np.asarray(sigma[gi][m], float)
        results[gi] = fit(func, jac, xi, yy, p0[gi], names, sigma=sg, fixed=fixed, bounds=bounds,
                          confidence=confidence, units=units)
    return results


PROFILE_EXPAND = 12
"""Doublings of the step (from the Wald limit) allowed when looking for each side of a profile interval."""
PROFILE_ROOT = 30
"""Root-finding evaluations allowed per side once the limit is bracketed (the cost cap; a few suffice)."""


#: The time budget of one profile-likelihood search (all groups of a batch, one parameter): this many
#: seconds plus a little per group. Far above what ordinary data need (milliseconds per group).
PROFILE_SECONDS = 1.0
PROFILE_SECONDS_PER_GROUP = 0.05


def profile_batch(
    func: Func,
    jac: Jac,
    x: Mapping[str, np.ndarray],
    y: np.ndarray,
    mask: np.ndarray,
    results: Sequence[FitResult],
    name: str,
    *,
    sigma: np.ndarray | None = None,
    bounds: Mapping[str, tuple[float, float]] | None = None,
    confidence: float = 0.95,
    max_expand: int = PROFILE_EXPAND,
    max_root: int = PROFILE_ROOT,
    seconds: float | None = None,
) -> list[tuple[float, float, str]]:
    """Profile-likelihood intervals of parameter ``name`` for many groups at once.

    Data as in :func:`fit_batch` ([n_groups, n_points] arrays, ``mask`` False on padding); ``results`` are
    the groups' fits. The limits are the values where the RSS, minimised over the other free parameters,
    reaches RSS_min·(1 + F(confidence; 1, n − p)/(n − p)). Every evaluation is one vectorised
    Levenberg-Marquardt run over all groups still searching, warm-started from the last point inside the
    interval: the first try is the Wald limit (sqrt(F) standard errors from the estimate) and the step
    doubles from there (at most ``max_expand`` times) until the threshold is crossed, then an Illinois
    (modified regula falsi) iteration on sqrt(RSS - RSS_min), nearly linear in the parameter, locates the
    crossing to 1e-9 relative in RSS, with at most ``max_root`` evaluations per side (the cap that bounds
    the cost).

    Returns (low, high, note) per group. A side that never reaches the threshold before a bound or within
    2^(max_expand - 1) Wald half-widths is NaN (open interval); a limit still moving when the cap is hit is
    returned with a note saying it is approximate. The search also stops after ``seconds`` (default
    ``PROFILE_SECONDS`` plus ``PROFILE_SECONDS_PER_GROUP`` per group); the sides it had not finished then say
    so in their note (a side without a bracket yet is NaN).
    """
    import time

    budget = seconds if seconds is not None else PROFILE_SECONDS + PROFILE_SECONDS_PER_GROUP * len(results)
    deadline = time.monotonic() + budget
    timed_out = False
    nan = float("nan")
    g = len(results)
    out: list[tuple[float, float, str]] = [
        (nan, nan, "no profile: fit failed, parameter fixed or no degrees of freedom")] * g
    names = results[0].names if g else ()
    if name not in names:
        return out
    j = names.index(name)
    ok = np.array([r.success and r.dof > 0 and not r.params[name].fixed and bool(np.all(np.isfinite(r.values)))
                   for r in results], bool)
    sel = np.flatnonzero(ok)
    if sel.size == 0:
        return out
    mask = np.asarray(mask, bool)[sel]
    yv = np.asarray(y, float)[sel]
    w = np.where(mask, 1.0 if sigma is None else 1.0 / np.where(mask, np.asarray(sigma, float)[sel], 1.0), 0.0)
    yz = np.where(mask, yv, 0.0)
    xs = {k: np.where(mask, np.asarray(v, float)[sel], _fill_value(np.asarray(v, float)[sel][mask]))
          for k, v in x.items()}
    best = np.array([results[i].values for i in sel], float)
    free = np.array([results[i].free for i in sel], bool)
    free[:, j] = False
    dof = np.array([results[i].dof for i in sel])
    quantile = special.fdtri(1, dof, confidence)
    rss_min = np.array([results[i].rss for i in sel])
    target = rss_min * (1 + quantile / dof)
    se = np.array([results[i].params[name].stderr for i in sel])
    # the first try on each side is the Wald limit, sqrt(F) standard errors away: where the profile is
    # quadratic the limit itself
    step0 = np.where(np.isfinite(se) & (se > 0), np.sqrt(quantile) * se, 0.1 * np.maximum(np.abs(best[:, j]), 1e-12))
    lo, hi = _as_bounds(names, bounds)

    def root_scale(f: np.ndarray, rows: np.ndarray) -> np.ndarray:
        """The excess as ``sqrt(RSS - RSS_min) - sqrt(target - RSS_min)``: same sign, and nearly linear in the
        parameter (exactly so where the profile is quadratic), so that regula falsi converges in a few steps."""
        rise = target[rows] - rss_min[rows]
        with np.errstate(all="ignore"):
            return np.sqrt(np.maximum(f + rise, 0.0)) - np.sqrt(rise)  # NaN stays NaN (then: bisection)

    def excess(t: np.ndarray, start: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Profile RSS minus the threshold at ``t`` for groups ``rows``, and the inner solutions."""
        v = start.copy()
        v[:, j] = t
        vals, r, _, _, _ = _lm(func, jac, {k: a[rows] for k, a in xs.items()}, yz[rows], w[rows],
                               np.clip(v, lo, hi), free[rows], lo, hi, 200, lam0=1e-6)
        with np.errstate(all="ignore"):
            return np.sum(r**2, axis=1) - target[rows], vals

    # both sides of every group searched at once: search q is group grp[q], lower side for q < n, upper after
    n = sel.size
    grp = np.concatenate([np.arange(n), np.arange(n)])
    sign = np.repeat([-1.0, 1.0], n)
    bound = np.repeat([lo[j], hi[j]], n)
    a = best[grp, j].copy()
    fa = root_scale(rss_min[grp] - target[grp], grp)  # at the estimate itself
    b, fb = np.full(2 * n, nan), np.full(2 * n, nan)
    start = best[grp].copy()
    step = step0[grp].copy()
    searching = np.ones(2 * n, bool)
    for _ in range(max_expand):  # widen until the threshold is crossed (bracket [a, b])
        rows = np.flatnonzero(searching)
        if rows.size == 0:
            break
        if time.monotonic() > deadline:
            timed_out = True
            break
        t = best[grp[rows], j] + sign[rows] * step[rows]
        at_bound = np.where(sign[rows] < 0, t <= bound[rows], t >= bound[rows])
        t = np.where(at_bound, bound[rows], t)
        f, vals = excess(t, start[rows], grp[rows])
        hit = ~(f < 0)  # crossed, or not finite (treated as beyond the threshold)
        f = root_scale(f, grp[rows])
        b[rows[hit]], fb[rows[hit]] = t[hit], f[hit]
        a[rows[~hit]], fa[rows[~hit]], start[rows[~hit]] = t[~hit], f[~hit], vals[~hit]
        searching[rows[hit | at_bound]] = False
        step[rows] *= 2
    active = np.isfinite(b)
    last = np.zeros(2 * n, int)
    c = b.copy()
    for _ in range(max_root):  # Illinois iteration inside the bracket
        rows = np.flatnonzero(active)
        if rows.size == 0:
            break
        if time.monotonic() > deadline:
            timed_out = True
            break
        ar, br, far, fbr = a[rows], b[rows], fa[rows], fb[rows]
        with np.errstate(all="ignore"):
            cc = np.where(np.isfinite(fbr), br - fbr * (br - ar) / (fbr - far), 0.5 * (ar + br))
        cc = np.where((cc - ar) * (cc - br) < 0, cc, 0.5 * (ar + br))
        excess_rss, vals = excess(cc, start[rows], grp[rows])
        c[rows] = cc
        inside = excess_rss < 0
        f = root_scale(excess_rss, grp[rows])
        ri, ro = rows[inside], rows[~inside]
        a[ri], fa[ri], start[ri] = cc[inside], f[inside], vals[inside]
        b[ro], fb[ro] = cc[~inside], f[~inside]
        fb[ri[last[ri] == -1]] *= 0.5  # same side twice: halve the stale end (Illinois)
        fa[ro[last[ro] == 1]] *= 0.5
        last[rows] = np.where(inside, -1, 1)
        tiny = np.abs(b[rows] - a[rows]) <= 1e-12 * np.maximum(np.abs(best[grp[rows], j]), 1e-300)
        active[rows[(np.abs(excess_rss) <= 1e-9 * target[grp[rows]]) | tiny]] = False
    limits = c.reshape(2, n).T
    notes: list[list[str]] = [[] for _ in sel]
    for q in range(2 * n):  # per group: the lower side's notes, then the upper side's
        side = "lower" if q < n else "upper"
        if timed_out and (searching[q] or active[q]):
            notes[grp[q]].append(f"{side} limit {'approximate' if active[q] else 'not found'}: the search "
                                 f"stopped at its time budget ({budget:g} s)")
        elif not np.isfinite(b[q]) and np.isnan(c[q]):
            notes[grp[q]].append(f"{side} limit not reached (open interval)")
        elif active[q]:
            notes[grp[q]].append(f"{side} limit approximate: search stopped after {max_root} evaluations")
    for k, gi in enumerate(sel):
        out[gi] = (float(limits[k, 0]), float(limits[k, 1]), "; ".join(notes[k]))
    return out


def profile_interval(
    func: Func,
    jac: Jac,
    x: Mapping[str, np.ndarray],
    y: np.ndarray,
    result: FitResult,
    name: str,
    *,
    sigma: np.ndarray | None = None,
    bounds: Mapping[str, tuple[float, float]] | None = None,
    confidence: float = 0.95,
    max_expand: int = PROFILE_EXPAND,
) -> tuple[float, float, str]:
    """Profile-likelihood interval of parameter ``name`` for one data set: :func:`profile_batch` on a
    batch of one. Returns (low, high, note); see there for the method and the notes."""
    y = np.asarray(y, float)
    return profile_batch(func, jac, {k: np.asarray(v, float)[None] for k, v in x.items()}, y[None],
                         np.ones((1, y.size), bool), [result], name,
                         sigma=None if sigma is None else np.asarray(sigma, float)[None], bounds=bounds,
                         confidence=confidence, max_expand=max_expand)[0]
