"""Lag and inactivation as a clock: the integrated Michaelis–Menten curve run on the enzyme's active time.

When the active enzyme fraction ``a(t)`` changes but the rate law does not, ``dS/dt = -a(t) f(S)`` and the
substrate follows the ordinary progress curve in the active time ``theta(t) = integral of a from 0 to t``:
``S(t) = S_MM(theta(t))``. For a hysteretic lag followed by irreversible first-order inactivation of the
active enzyme (an inactive form p turns active, ``dp/dt = -p/tau``, ``p(0) = 1``; the active form is lost,
``da/dt = p/tau - k a``, ``a(0) = 0``), ``a = (exp(-k t) - exp(-t/tau)) / (1 - k tau)`` and

    theta(t) = ((1 - exp(-k t))/k - tau (1 - exp(-t/tau))) / (1 - k tau)

(``theta = tau (1 - exp(-t/tau) (1 + t/tau))`` at ``k tau = 1``, ``t - tau (1 - exp(-t/tau))`` without
inactivation, ``(1 - exp(-k t))/k`` without a lag, ``t`` with neither). The inactive form is taken as stable:
only the active enzyme is lost, as in first-order inactivation without a lag.

The fit (:func:`lag_clock_fit`), all wells at once:

1. a start: the curve with ``k = 0`` fitted on the active-time axis for every lag time of :data:`TAU_GRID`
   (the lag time with the smallest residual sum of squares, and that fit's baseline, v0 and Km);
2. a joint fit of all five parameters (baseline, v0, ``u = Km/(Km + S0)``, ``tau``, ``k``) by the batched
   Levenberg–Marquardt solver, the Jacobian's lag and decay columns being ``dP/dtheta`` (the rate of the
   active enzyme) times ``dtheta/dtau`` and ``dtheta/dk`` (:func:`clock`). Lag time and decay constant must
   be fitted together: the fit with ``k = 0`` takes a decaying curve for a shorter lag (on the benchmark's
   lag plate 8-18 s instead of 60 s), and any ``k`` tried at that lag time then stays 10 % low;
3. the decay constant is shared by the wells of one plate (they hold one enzyme), so a plate value
   ``k_plate`` is taken where the plate's chi-square, every well fitted again with ``k`` held (four
   parameters), is least (:func:`_profile_decay`), and every well is fitted with ``k`` held there. From one
   well alone inactivation and depletion bend the curve alike (at low conversion a smaller or larger Km
   absorbs the decay), so a well's own ``k`` runs along a ridge with its Km and scatters widely. A well
   keeps its own ``k`` only where it differs from the plate's by more than :data:`K_SPLIT_Z` standard errors
   of the difference (a well that really decays otherwise, e.g. an enzyme that the substrate protects).
   ``k_plate`` is 0 unless it is at least :data:`K_PLATE_Z` of its standard errors above zero;
4. (:func:`plate_clock`) wells of the same plate where the lag detector saw no lag (low signal) get the
   plate's lag time and decay constant when enough wells show the lag and the reads do not reject it.

v0 is then the rate at t = 0 with fully active enzyme, and ``tau`` is the lag time in the usual sense (where
the steady-state line meets the baseline, depletion and inactivation aside).
"""

from __future__ import annotations

import numpy as np
from vzero.plugins.kinetics import lsq
from vzero.plugins.rates.noise import screen
from vzero.plugins.rates.progress import LMFit, _concentration_model, fit_wells, integrated_mm, progress_curve

#: Lag times tried for the start of the joint fit, in read intervals.
TAU_GRID = (0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.5, 8.0, 10.0, 13.0, 17.0, 22.0, 28.0, 36.0, 46.0)
#: Bounds of the fitted lag time, in read intervals (open bounds of the solver).
TAU_BOUNDS = (0.0, 60.0)
#: Bounds of the fitted decay constant, times the run length: down to -1 (activity still rising e-fold over
#: the run, so that a well without decay scatters about 0 instead of piling on a bound, and the plate's pooled
#: value is not pushed up), up to 5 (less than 1 % of the active enzyme left at the end).
K_BOUNDS = (-1.0, 5.0)
#: Standard errors above zero from which the pooled plate decay constant counts (one-sided; below it the
#: plate's wells are fitted with ``k = 0``).
K_PLATE_Z = 3.0
#: Standard errors of the difference beyond which a well's own decay constant replaces the plate's.
K_SPLIT_Z = 3.0
#: Iterations of the joint fit.
MAX_ITER = 40
#: Within this of ``k tau = 1`` the closed form of :func:`clock` loses digits; the clock there is the
#: straight-line interpolation between ``k tau = 1 - CLOCK_GAP`` and ``1 + CLOCK_GAP`` (a second-order error,
#: below 1e-6 of theta).
CLOCK_GAP = 1e-3


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


def _clock_raw(t: np.ndarray, tau: np.ndarray, k: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``theta``, ``dtheta/dtau`` and ``dtheta/dk`` away from ``k tau = 1`` (any sign of k; ``tau >= 0``)."""
    kt = k * t
    small = np.abs(kt) < 1e-6
    kts = np.where(small, 1.0, kt)
    # (1 - exp(-k t))/k = t phi(k t), phi(x) = -expm1(-x)/x; d/dk = t² phi'(k t)
    phi = np.where(small, 1.0 - kt / 2.0, -np.expm1(-kts) / kts)
    dphi = np.where(small, -0.5 + kt / 3.0, (np.exp(-kts) * kts + np.expm1(-kts)) / kts**2)
    a_k, da_k = t * phi, t * t * dphi
    ts = np.fmax(tau, 1e-300)
    x = t / ts
    ex = np.exp(-x)
    lag = -ts * np.expm1(-x)  # tau (1 - exp(-t/tau))
    dlag = -np.expm1(-x) - x * ex
    gap = 1.0 - k * tau
    num = a_k - lag
    theta = num / gap
    return theta, (num * k / gap - dlag) / gap, (da_k + num * tau / gap) / gap


def clock(t: np.ndarray, tau: np.ndarray, k: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``theta(t)`` of the module text with its derivatives in ``tau`` and ``k``, broadcasting (``t``
    ``[1, n]`` or ``[m, n]``, ``tau`` and ``k`` ``[m, 1]``, seconds and 1/s). Exact (to rounding) except
    within :data:`CLOCK_GAP` of ``k tau = 1``, where it interpolates."""
    tau = np.fmax(np.asarray(tau, dtype=float), 0.0)
    k = np.asarray(k, dtype=float)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        near = np.abs(1.0 - k * tau) < CLOCK_GAP
        if not near.any():
            return _clock_raw(t, tau, k)
        ts = np.fmax(tau, 1e-300)
        k_lo, k_hi = (1.0 - CLOCK_GAP) / ts, (1.0 + CLOCK_GAP) / ts
        share = np.clip((k - k_lo) / (k_hi - k_lo), 0.0, 1.0)
        lo, hi = _clock_raw(t, tau, np.where(near, k_lo, k)), _clock_raw(t, tau, np.where(near, k_hi, k))
        mixed = [np.where(near, a + share * (b - a), a) for a, b in zip(lo, hi, strict=True)]
    return mixed[0], mixed[1], mixed[2]


def _clock_model(t: np.ndarray, s0: np.ndarray, spc: float) -> lsq.Model:
    """``baseline + spc * P(theta(t))`` with parameters (baseline, ln v0, u, tau, k) as a
    :func:`vzero.plugins.rates.progress.fit_wells` model: the Michaelis–Menten model of
    :func:`vzero.plugins.rates.progress._concentration_model` on the active-time axis, and the columns of
    tau and k by the chain rule, ``spc dP/dtheta`` (= ``spc Vmax S/(Km + S)``) times ``dtheta/dtau`` and
    ``dtheta/dk``."""

    def model(p: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        th, d_tau, d_k = clock(t[None, :], p[:, 3:4], p[:, 4:5])
        f, jac3 = _concentration_model(th, s0[rows], spc)(p[:, :3], np.arange(rows.size))
        # jac3[:, 1] = spc Vmax theta q; at theta = 0 the rate is the initial one, spc v0
        with np.errstate(invalid="ignore", divide="ignore"):
            rate = np.where(th > 0, jac3[:, 1] / np.where(th > 0, th, 1.0), spc * np.exp(p[:, 1:2]))
        jac = np.empty((rows.size, 5, t.size))
        jac[:, :3] = jac3
        jac[:, 3] = rate * d_tau
        jac[:, 4] = rate * d_k
        return f, jac

    return model


def _grid_fit(t: np.ndarray, y: np.ndarray, s0: np.ndarray, spc: float, tau: float,
              min_points: int) -> dict[str, np.ndarray]:
    """Michaelis–Menten fits on the active-time axis of lag ``tau`` (k = 0) for every well: residual sum of
    squares and the start values (baseline, ln v0 in concentration per second, u) of the joint fit."""
    n_w = y.shape[0]
    theta = active_time(t, tau, 0.0)
    r = progress_curve(theta, y, s0=s0, signal_per_conc=spc, min_points=min_points, fail_ratio=np.inf)
    yc = y - np.nanmean(y, axis=1, keepdims=True)
    tss = np.nansum(yc * yc, axis=1)
    good = np.isfinite(r.v0) & np.isfinite(r.goodness) & (r.v0 / spc > 0)
    km, vmax = r.extra["km"], r.extra["vmax"]
    with np.errstate(invalid="ignore", divide="ignore"):
        prod = s0[:, None] - integrated_mm(theta[None, :], s0[:, None], km[:, None], vmax[:, None])
        base = np.nanmean(y - spc * prod, axis=1)
        start = np.stack([base, np.log(r.v0 / spc), km / (km + s0)], axis=1)
    return {"rss": np.where(good, (1.0 - r.goodness) * tss, np.inf), "start": start,
            "ok": good & np.all(np.isfinite(start), axis=1) & (n_w > 0)}


def _joint(t: np.ndarray, y: np.ndarray, s0: np.ndarray, spc: float, p0: np.ndarray, sigma: np.ndarray,
           dt: float, span: float, k_se: float | None = None) -> dict[str, np.ndarray]:
    """The five-parameter fit of the module text (step 2) from ``p0`` ``[n, 5]``; with ``k_se`` given (step 3)
    the decay constant stays at its start value, a plate value with that standard error. v0 in signal/s, with
    its standard error from the covariance of all five parameters at the solution, scaled by the larger of
    the residual variance and the read noise squared: with k held, the variance of v0 given k plus the
    spread that the plate value's standard error carries into it (``(C_vk/C_kk)² k_se²``)."""
    n_w = y.shape[0]
    w = np.isfinite(y).astype(float)
    hold = k_se is not None
    lo = np.stack([np.full(n_w, -np.inf), p0[:, 1] - 12.0, np.full(n_w, 1e-9), np.full(n_w, TAU_BOUNDS[0] * dt),
                   np.full(n_w, K_BOUNDS[0] / span)], axis=1)
    hi = np.stack([np.full(n_w, np.inf), p0[:, 1] + 12.0, np.full(n_w, 1.0 - 1e-9),
                   np.full(n_w, TAU_BOUNDS[1] * dt), np.full(n_w, K_BOUNDS[1] / span)], axis=1)
    model = _clock_model(t, s0[:, None], spc)
    if hold:  # k held at its start: the first four parameters fitted
        k_held = p0[:, 4:5]

        def given_k(p: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
            f, jac = model(np.concatenate([p, k_held[rows]], axis=1), rows)
            return f, jac[:, :4]

        fit4 = fit_wells(given_k, p0[:, :4], y, w, lower=lo[:, :4], upper=hi[:, :4], max_iter=MAX_ITER)
        fit = LMFit(np.concatenate([fit4.params, k_held], axis=1), fit4.rss, fit4.tss, fit4.cov_unit,
                    fit4.converged, fit4.n_iter)
    else:
        fit = fit_wells(model, p0, y, w, lower=lo, upper=hi, max_iter=MAX_ITER)
    n_par = 4.0 if hold else 5.0
    dof = np.fmax(w.sum(axis=1) - n_par, 1.0)
    rmse = np.sqrt(fit.rss / dof)
    scale2 = np.fmax(rmse, sigma) ** 2
    with np.errstate(invalid="ignore", over="ignore"):
        cov = (lsq.unit_covariance(model(fit.params, np.arange(n_w))[1] * w[:, None, :]) if hold else fit.cov_unit)
        cov = cov * scale2[:, None, None]
        var = np.diagonal(cov, axis1=1, axis2=2).copy()
        if hold:  # given k: the conditional variances, plus what the plate value's error carries in
            slope = cov[:, 1, 4] / cov[:, 4, 4]
            var[:, 1] += slope * slope * (k_se * k_se - cov[:, 4, 4])
            var[:, 3] -= cov[:, 3, 4] ** 2 / cov[:, 4, 4]
            var[:, 4] = k_se * k_se
    v0 = spc * np.exp(fit.params[:, 1])
    ok = fit.converged & np.all(np.isfinite(fit.params), axis=1) & np.isfinite(fit.rss)
    nan = np.full(n_w, np.nan)
    sd = np.sqrt(np.abs(var))
    return {"v0": np.where(ok, v0, nan), "stderr": np.where(ok, np.abs(v0) * sd[:, 1], nan),
            "rss": np.where(ok, fit.rss, np.inf), "ratio": np.where(ok, rmse / sigma, nan),
            "tau": np.where(ok, fit.params[:, 3], nan), "k": np.where(ok, fit.params[:, 4], nan),
            "k_se": np.where(ok, sd[:, 4], nan), "tau_se": np.where(ok, sd[:, 3], nan), "params": fit.params}


def pooled(x: np.ndarray, se: np.ndarray) -> tuple[float, float]:
    """Inverse-variance mean of the finite estimates ``x`` (standard errors ``se``) and its standard error;
    NaN for both when there is none."""
    ok = np.isfinite(x) & np.isfinite(se) & (se > 0)
    if not ok.any():
        return np.nan, np.nan
    w = 1.0 / se[ok] ** 2
    return float(np.sum(w * x[ok]) / np.sum(w)), float(1.0 / np.sqrt(np.sum(w)))


def plate_decay(k: np.ndarray, k_se: np.ndarray) -> tuple[float, float]:
    """The plate's decay constant (1/s) and its standard error from the wells' own estimates
    (:func:`pooled`): 0 where the pooled value is less than :data:`K_PLATE_Z` standard errors above zero."""
    mean, se = pooled(k, k_se)
    return (mean if mean >= K_PLATE_Z * se else 0.0), se


def _profile_decay(t: np.ndarray, y: np.ndarray, s0: np.ndarray, spc: float, p: np.ndarray, sigma: np.ndarray,
                   dt: float, span: float, k0: float, se0: float) -> tuple[float, float]:
    """The plate's decay constant (1/s) and its standard error from the profile of the plate's chi-square
    ``X(k)``: the sum over its wells of the residual sum of squares over the read variance, each well fitted
    with k held (step 3). ``X`` is minimised by Brent's bounded method (``scipy.optimize.minimize_scalar``)
    within ``k0 ± 4 se0`` (``k0``, ``se0``: the inverse-variance mean of the wells' own estimates,
    :func:`pooled`), and the standard error is ``sqrt(2/X'')`` (X rises by 1 one standard error away), from a
    central second difference. The profile rather than the mean itself: an inverse-variance mean of
    nonlinear estimates is pulled towards wells whose estimate came out low along with its standard error
    (on the benchmark's lag plate it was 9 % low), and one well's standard error can be several times too
    large where its Km and k are nearly confounded. 0 when the minimum is less than :data:`K_PLATE_Z`
    standard errors above zero (:func:`plate_decay`)."""
    from scipy.optimize import minimize_scalar

    if not (np.isfinite(k0) and np.isfinite(se0) and se0 > 0):
        return np.nan, np.nan

    def chi(k: float) -> float:
        q = p.copy()
        q[:, 4] = k
        x = _joint(t, y, s0, spc, q, sigma, dt, span, k_se=0.0)["rss"] / sigma**2
        finite = np.isfinite(x)
        return float(np.sum(np.where(finite, x, np.max(x[finite]) if finite.any() else 1e300)))

    best = minimize_scalar(chi, bounds=(k0 - 4.0 * se0, k0 + 4.0 * se0), method="bounded",
                           options={"xatol": se0 / 100.0, "maxiter": 30})
    k_min, x_min = float(best.x), float(best.fun)
    step = se0 / 4.0
    for _ in range(2):  # the second difference over about one standard error either side
        curve = (chi(k_min - step) - 2.0 * x_min + chi(k_min + step)) / (step * step)
        if not curve > 0:
            return plate_decay(np.array([k0]), np.array([se0]))
        se = float(np.sqrt(2.0 / curve))
        if step <= 2.0 * se:
            break
        step = se
    return plate_decay(np.array([k_min]), np.array([se]))


def lag_clock_fit(
    t: np.ndarray, y: np.ndarray, s0: np.ndarray | None, signal_per_conc: float | None, *, min_points: int = 8,
    sigma: np.ndarray | None = None,
) -> dict[str, np.ndarray]:
    """v0 (signal/s), stderr, residual RMS over the read noise (``ratio``), lag time ``tau`` (s) and decay
    constant ``k`` (1/s) per well, by the three steps of the module text; the wells are those of one plate
    (they share the decay constant). ``sigma``: the read noise per well (from
    :func:`vzero.plugins.rates.noise.screen` when None). ``own_k``: where the well kept its own decay
    constant; ``tau_se``, ``k_se``: standard errors of the lag time (s) and of the decay constant used (the
    plate's where the well uses the plate's); ``k_plate``: the plate's decay constant (a
    scalar array; NaN when no well was fitted)."""
    n_w = y.shape[0]
    spc = float(signal_per_conc)  # type: ignore[arg-type]
    s0 = np.broadcast_to(np.asarray(s0, dtype=float), (n_w,)).copy()
    sigma = screen(y, min_points=min_points, time=t).sigma if sigma is None else np.asarray(sigma, float)
    dt = float(np.median(np.diff(t))) if t.size > 1 else 1.0
    span = float(t[-1]) if t.size and t[-1] > 0 else 1.0
    grids = [_grid_fit(t, y, s0, spc, tau * dt, min_points) for tau in TAU_GRID]
    rss = np.stack([g["rss"] for g in grids], axis=1)
    j = np.argmin(rss, axis=1)
    rows = np.arange(n_w)
    start = np.stack([g["start"] for g in grids], axis=1)[rows, j]
    ok = np.stack([g["ok"] for g in grids], axis=1)[rows, j]
    p0 = np.column_stack([start, np.array(TAU_GRID)[j] * dt, np.zeros(n_w)])
    nan = np.full(n_w, np.nan)
    out = {"v0": nan.copy(), "stderr": nan.copy(), "rss": np.full(n_w, np.inf), "ratio": nan.copy(),
           "tau": nan.copy(), "tau_se": nan.copy(), "k": nan.copy(), "k_se": nan.copy(), "own_k": np.zeros(n_w, bool),
           "k_plate": np.array(np.nan)}
    todo = np.flatnonzero(ok)
    if todo.size == 0:
        return out
    yy, sg = y[todo], sigma[todo]
    own = _joint(t, yy, s0[todo], spc, p0[todo], sg, dt, span)
    p1 = np.where(np.isfinite(own["params"]), own["params"], p0[todo])
    k_plate, se_plate = _profile_decay(t, yy, s0[todo], spc, p1, sg, dt, span, *pooled(own["k"], own["k_se"]))
    p1[:, 4] = np.nan_to_num(k_plate)
    out["k_plate"] = np.array(k_plate)
    shared = _joint(t, yy, s0[todo], spc, p1, sg, dt, span, k_se=se_plate)
    with np.errstate(invalid="ignore"):
        split = np.abs(own["k"] - k_plate) > K_SPLIT_Z * np.hypot(own["k_se"], se_plate)
    keep_own = (split | ~np.isfinite(shared["v0"])) & np.isfinite(own["v0"])
    for key in ("v0", "stderr", "rss", "ratio", "tau", "tau_se", "k", "k_se"):
        out[key][todo] = np.where(keep_own, own[key], shared[key])
    out["own_k"][todo] = keep_own
    weak = ~(peak_activity(t, out["tau"], out["k"]) >= MIN_PEAK_ACTIVITY)
    for key in ("v0", "stderr"):
        out[key][weak] = np.nan
    return out


#: Least peak active fraction of the enzyme over the reads for which a lag clock's v0 is reported. v0 is the
#: rate of the fully active enzyme at t = 0; where the fitted lag and decay keep the active fraction below
#: this at every read, v0 is an extrapolation by more than twice what any read shows (a false lag on a
#: curve the detector misread, such as a top-substrate well running into the detector ceiling: on the
#: accuracy benchmark's substrate-inhibition plate one 20-mM well in 200 came out 15 times too high). Such
#: a well keeps the estimate it had before the lag step, with its LAG flag. On the lag-and-decay plate
#: (60-s lag, k = 8e-4 /s) the active fraction peaks at 0.86. Our bound.
MIN_PEAK_ACTIVITY = 0.5


def peak_activity(t: np.ndarray, tau: np.ndarray, k: np.ndarray) -> np.ndarray:
    """Largest active fraction d theta/dt of each well's clock (lag ``tau`` s, decay ``k`` 1/s) between
    reads (differences of :func:`clock` over the read times); NaN where tau or k is NaN."""
    tau = np.asarray(tau, float)[:, None]
    k = np.asarray(k, float)[:, None]
    if t.size < 2:
        return np.full(tau.shape[0], np.nan)
    with np.errstate(invalid="ignore"):
        theta = clock(np.asarray(t, float)[None, :], np.nan_to_num(tau), np.nan_to_num(k))[0]
        rate = np.diff(theta, axis=1) / np.diff(t)[None, :]
    peak = np.max(rate, axis=1)
    return np.where(np.isfinite(tau[:, 0]) & np.isfinite(k[:, 0]), peak, np.nan)


#: Least number of lag wells, and least share of a plate's usable wells, from which the plate's lag and decay
#: are carried to its other wells (:func:`plate_clock`); below them a lag is taken for a property of the few
#: wells that show it.
PLATE_MIN_WELLS = 3
PLATE_MIN_SHARE = 1.0 / 3.0
#: Residual variances by which the plate's clock may fit a well worse than the curve without lag or decay
#: before the well is taken to differ from the plate (:func:`plate_clock`).
PLATE_REJECT = 9.0


def plate_clock(t: np.ndarray, y: np.ndarray, s0: np.ndarray, spc: float, fitted: dict[str, np.ndarray],
                n_usable: int, *, sigma: np.ndarray, min_points: int = 8) -> dict[str, np.ndarray]:
    """The plate's lag and decay for its wells where no lag was seen (step 4 of the module text).

    The wells of a plate share the enzyme, so where the lag detector fired on at least
    :data:`PLATE_MIN_WELLS` wells and :data:`PLATE_MIN_SHARE` of the usable ones (``fitted``: their
    :func:`lag_clock_fit`), the other wells (``y``) are fitted with the plate's clock: the lag time pooled from
    the lag wells (inverse-variance mean) and the plate's decay constant, held, with baseline, v0 and Km
    free (three parameters, as the curve without lag). At low signal the lag detector cannot see a lag of a
    few read intervals, yet the curve without it is then 10-45 % low. A well keeps the plate's clock unless
    the curve without lag or decay fits it better by more than :data:`PLATE_REJECT` read variances (the well
    then differs from the plate). Returns ``take`` (bool per well), ``v0`` (signal/s), ``stderr``, ``ratio``,
    ``tau`` and ``k`` (the plate's values)."""
    n_w = y.shape[0]
    nan = np.full(n_w, np.nan)
    out = {"take": np.zeros(n_w, bool), "v0": nan.copy(), "stderr": nan.copy(), "ratio": nan.copy(),
           "tau": nan.copy(), "k": nan.copy()}
    n_lag = int(np.isfinite(fitted["v0"]).sum())
    k_plate = float(fitted["k_plate"])
    if n_w == 0 or n_lag < PLATE_MIN_WELLS or n_lag < PLATE_MIN_SHARE * n_usable or not np.isfinite(k_plate):
        return out
    tau, _ = pooled(fitted["tau"], fitted["tau_se"])
    if not np.isfinite(tau):
        return out
    theta = active_time(t, max(tau, 0.0), k_plate)
    if not np.all(np.diff(theta) > 0) or not peak_activity(t, np.array([tau]), np.array([k_plate]))[0] >= \
            MIN_PEAK_ACTIVITY:
        return out
    yc = y - np.nanmean(y, axis=1, keepdims=True)
    tss = np.nansum(yc * yc, axis=1)
    fits = [progress_curve(axis, y, s0=s0, signal_per_conc=spc, min_points=min_points, fail_ratio=np.inf)
            for axis in (theta, t)]
    rss_clock, rss_plain = ((1.0 - f.goodness) * tss for f in fits)
    with np.errstate(invalid="ignore"):
        take = np.isfinite(fits[0].v0) & ~(rss_clock - rss_plain > PLATE_REJECT * sigma**2)
    out["take"] = take
    out["v0"], out["stderr"], out["ratio"] = fits[0].v0, fits[0].stderr, fits[0].extra["rmse_over_noise"]
    out["tau"], out["k"] = np.full(n_w, tau), np.full(n_w, k_plate)
    return out


#: Order of the fall ``(1 - x)^n`` that depletion may explain before a decay after a lag counts
#: (:func:`decay_after_lag`): 1, as under Michaelis–Menten kinetics, because the lag clock's fit holds
#: Michaelis–Menten depletion itself and the decay constant is the plate's, which a cooperative well's
#: faster fall does not move. Measured (20 draws each, the benchmark's plates with a 60-s lag, reads as in
#: ``bench.accuracy``): on the lag-and-decay plate (k = 8e-4 /s) 70 % of the lag wells flagged with n = 1,
#: 39 % with 2, 29 % with 3 (only where conversion stays low: S0 >= 2 mM); without decay, 0 % of
#: Michaelis–Menten wells with any of them and 2.8 % of Hill wells (h = 2.5; one plate of the 20) with each.
DECAY_ORDER_AFTER_LAG = 1.0


def decay_after_lag(t: np.ndarray, y: np.ndarray, s0: np.ndarray, spc: float, *,
                    order: float = DECAY_ORDER_AFTER_LAG, z: float = 3.0, min_points: int = 8) -> np.ndarray:
    """Wells (with a lag) whose active enzyme is lost faster than substrate depletion explains: the decay
    constant of :func:`lag_clock_fit`, less ``z`` standard errors, still above zero, and the activity left at
    the last read at that lower bound, ``exp(-k_low (t_end - tau))``, below ``(1 - x)^order`` at the well's
    conversion x (the rule of :func:`vzero.plugins.rates.lagdecay.lag_decay`, on the lag clock: a decay fitted
    after the lag with a model that starts at full activity takes the rising activity for a steady one).
    Needs ``s0`` and ``spc``."""
    if y.shape[0] == 0:
        return np.zeros(0, bool)
    fit = lag_clock_fit(t, y, s0, spc, min_points=min_points)
    with np.errstate(invalid="ignore", over="ignore"):
        k_low = fit["k"] - z * fit["k_se"]
        valid = np.isfinite(y)
        first = np.nanmean(np.where(valid & (np.cumsum(valid, axis=1) <= 3), y, np.nan), axis=1)
        last = np.nanmean(np.where(valid & (np.cumsum(valid[:, ::-1], axis=1)[:, ::-1] <= 3), y, np.nan), axis=1)
        x_end = np.clip(np.abs(last - first) / (abs(spc) * np.asarray(s0, float)), 0.0, 1.0)
        left = np.exp(-k_low * (t[-1] - np.fmax(fit["tau"], 0.0)))
        return (k_low > 0) & (left < (1.0 - x_end) ** order)
