"""One rate-law shape per pool of wells: the Hill or substrate-inhibition curve fitted jointly over wells.

A pool (a plate, or in a run the sample wells of one layout group and inhibitor level) holds one enzyme, so
its rate law ``v(S)`` has one shape for every well; what differs per well is
the substrate at the start ``S0`` (known from the recipe) and the scale (the enzyme in the well). The
per-well curves of :mod:`vzero.plugins.rates.choice` (steps 6b, 6c, 6e) must find the shape in each well
alone, from a few percent of conversion, where a constant-order power law or a Michaelis–Menten curve of
the wrong shape can fit within the noise and still be off at t = 0. Here the shape is fitted once from all
the wells that carry it:

* **Hill** (``v = Vmax S^h/(K0.5^h + S^h)``, Hill 1910): one ``h`` and one ``K0.5`` for the plate;
* **substrate inhibition** (``v = Vmax S/(Km + S + S²/Ki)``, Haldane 1930): one ``Km`` and one ``Ki``;

with per well only a baseline (signal) and ``v0`` (the rate at t = 0): each well's curve is the integrated
law (:func:`vzero.plugins.rates.hillcurve.hill_model`, :func:`vzero.plugins.rates.sicurve.si_model`, whose
Jacobians are reused) with the plate's shape and its own scale. The joint least-squares fit is a
Levenberg–Marquardt iteration on the bordered normal equations: two shape parameters shared by every well
and two per well, solved by the Schur complement (all wells at once, no loop over wells), each well's
residuals weighted by its own read variance. The standard error of each well's v0 includes the shape's
uncertainty (delta method through the joint covariance: the well's own block plus the shape block carried
through its cross terms).

This module fits and judges; :func:`vzero.plugins.rates.choice.model_choice` decides which plates reach it
(see :func:`pool_shape`), once per pool of wells (the layout's ``group`` and ``inhibitor`` level in a run).
The assumption that a pool holds one enzyme under one set of conditions is the user's: a group that mixes
enzymes or conditions that change the shape must be split in the layout, or run with ``pool_shape: false``
in the recipe. Results are for research use; a lab's own validated procedure takes precedence.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from vzero.plugins.rates.hillcurve import hill_model
from vzero.plugins.rates.sicurve import si_model

#: Shape families: name -> model code of the wells that take the plate's shape (``extra['model']``).
POOLED_CODES = {"hill": 6.0, "substrate-inhibition": 7.0}

#: Least number of wells with evidence of the family's shape from the per-well steps (a Hill curve kept,
#: model 4, or a substrate-inhibition curve kept, model 5) for the plate to be fitted jointly. One is enough
#: to try: a well may keep a shape by chance (the F-tests run at 1-5 %), so the joint fit must itself place
#: the shape :data:`SHAPE_WALD_Z` standard errors from Michaelis–Menten's before any well takes it. The gate
#: keeps the joint fit off plates that do not need it (no well of the Michaelis–Menten speed plates reaches
#: model 4 or 5).
MIN_EVIDENCE = 1

#: Standard errors by which the Hill coefficient of the pool's own rates (the Hill law fitted to v0 against S0,
#: :func:`rates_hill_z`) must lie above 1 for the joint Hill fit to be tried without per-well evidence. A
#: cooperative enzyme's curves at low signal fit a Michaelis–Menten curve within the noise, so no well keeps
#: the Hill curve alone, while the rates across its substrate levels show the cooperativity plainly (the demo
#: plate: its Michaelis–Menten v0 ran 2-4 % low below K0.5, docs/rates.md). The joint fit must then still pass
#: :data:`SHAPE_WALD_Z` on the reads themselves; this gate only decides whether it is tried.
RATES_HILL_Z = 3.0

#: Least substrate levels for :func:`rates_hill_z` (the Hill law has three parameters).
RATES_MIN_LEVELS = 4

#: Least number of wells in the joint fit (two shape parameters must be determined by more than one well).
MIN_WELLS = 3

#: Standard errors by which the plate's shape must differ from Michaelis–Menten's (Wald test on ``ln h``
#: for Hill, on ``1/Ki`` for substrate inhibition) for it to be used: a plate of Michaelis–Menten wells
#: keeps its per-well choices.
SHAPE_WALD_Z = 3.0

#: Hill coefficients the plate's shape may take (positive cooperativity only: the per-well evidence comes
#: from orders above Michaelis–Menten's; a plate whose wells differ in their apparent Km, an inhibitor
#: matrix, can look negatively cooperative when pooled). Above 4 Hill coefficients are rare (common
#: practice); 6 leaves room for noise.
H_POOL_RANGE = (1.0, 6.0)

#: Iterations of the joint Levenberg–Marquardt fit and its relative chi-square change for convergence.
POOL_ITER = 40
POOL_FTOL = 1e-7

#: Largest change of any log-parameter in one step (keeps the first steps from a rough start in range).
MAX_LOG_STEP = 1.0


@dataclass(frozen=True)
class PooledShape:
    """The joint fit of one family over the wells given.

    ``family`` (``hill`` or ``substrate-inhibition``); ``shape`` the two plate parameters (``h`` and
    ``K0.5`` in concentration, or ``Km`` and ``Ki``), ``shape_cov`` the covariance of their logarithms;
    per well: ``v0`` and ``se`` (signal/s, the SE including the shape's uncertainty), ``rss`` (signal²,
    counted reads), ``ratio`` (residual RMS over the read noise, two parameters per well), ``baseline``
    (signal at t = 0), ``load`` ``[n, 2]`` (the shape's share of each well's ln v0 error: two loadings on
    independent unit factors, so that the covariance of ln v0 between wells i and j through the shape is
    ``load[i] · load[j]``); ``chi2`` the plate's sum of rss over read variances, ``dof`` its degrees of
    freedom, ``converged``."""

    family: str
    shape: np.ndarray
    shape_cov: np.ndarray
    v0: np.ndarray
    se: np.ndarray
    rss: np.ndarray
    ratio: np.ndarray
    baseline: np.ndarray
    load: np.ndarray
    chi2: float
    dof: float
    converged: bool

    def wald_z(self) -> float:
        """How many standard errors the shape lies from Michaelis–Menten's: ``ln h`` for Hill, ``1/Ki``
        (``Km/Ki`` on the log scale: ``1/se(ln Ki)``) for substrate inhibition."""
        if self.family == "hill":
            return float(np.log(self.shape[0]) / np.sqrt(max(self.shape_cov[0, 0], 1e-300)))
        return float(1.0 / np.sqrt(max(self.shape_cov[1, 1], 1e-300)))


Evaluator = Callable[[np.ndarray, np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray, np.ndarray]]


def _hill_eval(t: np.ndarray, s0: np.ndarray, spc: float) -> Evaluator:
    """Curves and Jacobians of the Hill family: ``f(g, base, ln_v0)`` with ``g = (ln h, ln K0.5)`` gives the
    model ``[n, n_t]``, the per-well Jacobian ``[n, 2, n_t]`` (baseline, ln v0) and the shape Jacobian
    ``[n, 2, n_t]`` (ln h, ln K0.5), by the chain rule through :func:`hill_model`'s parameters ``n0 = h u``
    and ``logit u = h (ln K0.5 - ln S0)``."""
    model = hill_model(t, s0[:, None], spc)
    rows = np.arange(s0.size)
    ln_s0 = np.log(s0)

    def f(g: np.ndarray, base: np.ndarray, ln_v0: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        h = np.exp(g[0])
        logit = np.clip(h * (g[1] - ln_s0), -30.0, 30.0)
        u = 1.0 / (1.0 + np.exp(-logit))
        n0 = h * u
        pred, jac = model(np.stack([base, ln_v0, n0, logit], axis=1), rows)
        du = u * (1.0 - u)
        d_n0 = np.stack([h * u + h * du * logit, h * h * du], axis=1)  # d n0 / d (ln h, ln K)
        d_logit = np.stack([logit, np.full_like(u, h)], axis=1)
        glob = jac[:, 2:3] * d_n0[:, :, None] + jac[:, 3:4] * d_logit[:, :, None]
        return pred, jac[:, :2], glob

    return f


def _si_eval(t: np.ndarray, s0: np.ndarray, spc: float) -> Evaluator:
    """As :func:`_hill_eval` for the substrate-inhibition family, ``g = (ln Km, ln Ki)``, through
    :func:`si_model`'s shares ``p = Km/(S0 D)`` and ``q = S0/(Ki D)``, ``D = 1 + Km/S0 + S0/Ki``."""
    model = si_model(t, s0[:, None], spc)
    rows = np.arange(s0.size)

    def f(g: np.ndarray, base: np.ndarray, ln_v0: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        a, c = np.exp(g[0]) / s0, s0 / np.exp(g[1])
        d = 1.0 + a + c
        p, q = a / d, c / d
        pred, jac = model(np.stack([base, ln_v0, p, q], axis=1), rows)
        d_p = np.stack([p * (1.0 - p), p * q], axis=1)  # d p / d (ln Km, ln Ki)
        d_q = np.stack([-p * q, -q * (1.0 - q)], axis=1)
        glob = jac[:, 2:3] * d_p[:, :, None] + jac[:, 3:4] * d_q[:, :, None]
        return pred, jac[:, :2], glob

    return f


def _normal_blocks(r: np.ndarray, w: np.ndarray, jl: np.ndarray,
                   jg: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Blocks of the weighted normal equations: per well ``C [n,2,2]`` (own parameters), ``B [n,2,2]``
    (own x shape), the shape block ``A [2,2]`` summed over wells, and the gradients ``gl [n,2]``,
    ``gg [2]``."""
    c = np.einsum("nit,nt,njt->nij", jl, w, jl)
    b = np.einsum("nit,nt,njt->nij", jl, w, jg)
    a = np.einsum("nit,nt,njt->ij", jg, w, jg)
    gl = np.einsum("nit,nt->ni", jl, w * r)
    gg = np.einsum("nit,nt->i", jg, w * r)
    return c, b, a, gl, gg


def _bordered_solve(c: np.ndarray, b: np.ndarray, a: np.ndarray, gl: np.ndarray, gg: np.ndarray,
                    lam: float) -> tuple[np.ndarray, np.ndarray]:
    """Damped Gauss–Newton step (Marquardt's diagonal scaling by ``1 + lam``) of the bordered system, by the
    Schur complement of the per-well blocks: returns the shape step ``[2]`` and the per-well steps
    ``[n, 2]``."""
    eye = np.eye(2)
    cd = c + lam * c * eye
    ad = a + lam * a * eye
    ci = np.linalg.inv(cd + 1e-300 * eye)
    bt_ci = np.einsum("nji,njk->nik", b, ci)  # B^T C^-1
    schur = ad - np.einsum("nik,nkj->ij", bt_ci, b)
    rhs = gg - np.einsum("nik,nk->i", bt_ci, gl)
    dg = np.linalg.solve(schur + 1e-12 * np.trace(schur) * eye, rhs)
    dl = np.einsum("nij,nj->ni", ci, gl - np.einsum("nij,j->ni", b, dg))
    return dg, dl


def shared_read_score(u: np.ndarray, sets: np.ndarray, share: np.ndarray) -> np.ndarray:
    """The part of the shape score's covariance that wells sharing a blank add: ``sum over i != j of one
    set of sqrt(b_i b_j) u_i u_jᵀ`` (``u`` ``[n, k, n_t]`` each well's shape Jacobian with its own
    parameters profiled out, divided by its read SD, 0 on reads not counted; ``sets`` ``[n]`` blank sets, -1
    for none; ``share`` ``[n]`` the blank's share of each well's read variance, NaN as 0). The reads of one
    set carry the same blank noise, of variance ``sqrt(b_i σ_i² b_j σ_j²)`` between two of its wells."""
    b = np.sqrt(np.clip(np.nan_to_num(np.asarray(share, float), nan=0.0), 0.0, 1.0))
    ok = np.asarray(sets) >= 0
    k = u.shape[1]
    if not ok.any():
        return np.zeros((k, k))
    ids = np.unique(np.asarray(sets)[ok], return_inverse=True)[1]
    summed = np.zeros((ids.max() + 1, k, u.shape[2]))
    np.add.at(summed, ids, b[ok, None, None] * u[ok])
    whole = np.einsum("skt,slt->kl", summed, summed)
    own = np.einsum("n,nkt,nlt->kl", b[ok] ** 2, u[ok], u[ok])
    return whole - own


def fit_pooled(family: str, t: np.ndarray, y: np.ndarray, valid: np.ndarray, s0: np.ndarray, spc: float,
               sigma: np.ndarray, shape0: np.ndarray, v0_start: np.ndarray,
               base_start: np.ndarray, blank_sets: np.ndarray | None = None,
               blank_share: np.ndarray | None = None) -> PooledShape:
    """Fit one shape (``family``) jointly to the wells' reads ``y [n, n_t]`` (signal; ``valid`` the reads
    counted, ``sigma [n]`` each well's read noise, ``s0 [n]`` concentration, ``spc`` signal per
    concentration), from the plate shape ``shape0`` (``h, K0.5`` or ``Km, Ki``) and per-well ``v0_start``
    (signal/s) and ``base_start`` (signal). Returns :class:`PooledShape`.

    ``blank_sets`` / ``blank_share`` (per well: which blank wells corrected it, -1 for none, and the blank's
    share of its read variance): wells corrected by the same blanks share that part of their read noise,
    which the least-squares fit takes as independent; the shape's covariance is then the sandwich
    ``S⁻¹ (S + X) S⁻¹`` (``S`` the profiled normal matrix, ``X`` :func:`shared_read_score`), so that it and
    the wells' SEs and loadings include the shared part."""
    make = _hill_eval if family == "hill" else _si_eval
    f = make(t, s0, spc)
    w = valid / sigma[:, None] ** 2
    yz = np.where(valid, y, 0.0)
    g = np.log(np.asarray(shape0, float))
    base, lv = base_start.astype(float).copy(), np.log(v0_start / spc)
    if family == "hill":
        g_lo = np.array([np.log(H_POOL_RANGE[0] * 0.5), np.log(s0.min()) - 6.0])
        g_hi = np.array([np.log(H_POOL_RANGE[1] * 1.5), np.log(s0.max()) + 6.0])
    else:
        g_lo = np.array([np.log(s0.min()) - 8.0, np.log(s0.min()) - 6.0])
        g_hi = np.array([np.log(s0.max()) + 6.0, np.log(s0.max()) + 12.0])
    g = np.clip(g, g_lo, g_hi)

    def chi(g_: np.ndarray, b_: np.ndarray, l_: np.ndarray) -> tuple[float, np.ndarray, np.ndarray, np.ndarray]:
        pred, jl, jg = f(g_, b_, l_)
        r = np.where(valid, yz - pred, 0.0)
        total = float(np.nansum(w * r * r))
        return (total if np.isfinite(total) else np.inf), r, jl, jg

    cost, r, jl, jg = chi(g, base, lv)
    lam, converged = 1e-3, False
    for _ in range(POOL_ITER):
        blocks = _normal_blocks(r, w, jl, jg)
        while True:
            dg, dl = _bordered_solve(*blocks, lam)
            big = max(float(np.max(np.abs(dg))), float(np.max(np.abs(dl[:, 1]))), MAX_LOG_STEP)
            dg, dl = dg * MAX_LOG_STEP / big, dl * np.array([1.0, MAX_LOG_STEP / big])
            g1 = np.clip(g + dg, g_lo, g_hi)
            new = chi(g1, base + dl[:, 0], lv + dl[:, 1])
            if new[0] <= cost:
                break
            lam *= 4.0
            if lam > 1e8:
                break
        if new[0] > cost:
            converged = True  # no step lowers the cost: at the optimum within the solver's precision
            break
        drop = (cost - new[0]) / max(cost, 1e-300)
        g, base, lv = g1, base + dl[:, 0], lv + dl[:, 1]
        cost, r, jl, jg = new
        lam = max(lam / 3.0, 1e-7)
        if drop < POOL_FTOL:
            converged = True
            break
    c, b, a, _, _ = _normal_blocks(r, w, jl, jg)
    ci = np.linalg.inv(c + 1e-300 * np.eye(2))
    bt_ci = np.einsum("nji,njk->nik", b, ci)
    schur = a - np.einsum("nik,nkj->ij", bt_ci, b)
    n_reads = valid.sum(axis=1).astype(float)
    dof = float(n_reads.sum() - 2.0 * s0.size - 2.0)
    scale = max(cost / max(dof, 1.0), 1.0)
    cov_g = np.linalg.pinv(schur) * scale
    if blank_sets is not None and blank_share is not None:
        # the shape Jacobian with each well's own parameters profiled out, over its read SD
        u = (jg - np.einsum("nmt,nmk->nkt", jl, ci @ b)) * np.sqrt(w)[:, None, :]
        s_inv = np.linalg.pinv(schur)
        cov_g = s_inv @ (schur + shared_read_score(u, blank_sets, blank_share)) @ s_inv * scale
    rss = np.sum(valid * r * r, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.sqrt(rss / np.fmax(n_reads - 2.0, 1.0)) / sigma
    # per-well covariance of (baseline, ln v0): C^-1 + C^-1 B Cov_g B^T C^-1 (the bordered inverse); the
    # well's own block scaled by the larger of its own residual variance and its read variance (as the
    # per-well curves' SEs are), the shape's by the plate's
    ci_b = np.einsum("nij,njk->nik", ci, b)
    own = np.fmax(np.nan_to_num(ratio, nan=1.0) ** 2, 1.0)
    var_lv = own * ci[:, 1, 1] + np.einsum("ni,ij,nj->n", ci_b[:, 1], cov_g, ci_b[:, 1])
    v0 = spc * np.exp(lv)
    # the shape's part of each well's ln v0 error as loadings on two independent unit factors: with
    # cov_g = V diag(e) V^T, load = -C^-1 B V sqrt(e) (its sign is immaterial: only load_i . load_j is used)
    e, vec = np.linalg.eigh((cov_g + cov_g.T) / 2.0)
    load = -ci_b[:, 1] @ (vec * np.sqrt(np.fmax(e, 0.0)))
    return PooledShape(family, np.exp(g), cov_g, v0, np.abs(v0) * np.sqrt(np.abs(var_lv)), rss, ratio, base,
                       load, cost, dof, converged and bool(np.all(np.isfinite(lv))))


def _rate_law(family: str, s: np.ndarray, p: np.ndarray) -> np.ndarray:
    """Rate law ``v(S)`` of ``family`` with ``p = (scale, shape_a, shape_b)`` (scale = Vmax)."""
    if family == "hill":
        return p[0] * s ** p[1] / (p[2] ** p[1] + s ** p[1])
    return p[0] * s / (p[1] + s + s * s / p[2])


def shape_from_rates(family: str, s0: np.ndarray, v0: np.ndarray, se: np.ndarray) -> np.ndarray | None:
    """A start for the plate's shape from the wells' own rates: the rate law fitted to ``v0`` against ``s0``
    (weighted by ``se``; scipy's least_squares on log parameters). Returns ``(h, K0.5)`` or ``(Km, Ki)``, or
    None where the fit fails."""
    from scipy.optimize import least_squares

    v = np.abs(v0)
    sig = np.fmax(np.abs(se), 1e-3 * np.max(v))
    s_mid = float(np.exp(np.mean(np.log(s0))))
    p0 = np.log([np.max(v) * 1.5, 2.0, s_mid] if family == "hill" else [np.max(v) * 2.0, s_mid / 3.0, s_mid * 3.0])

    def res(lp: np.ndarray) -> np.ndarray:
        return (_rate_law(family, s0, np.exp(lp)) - v) / sig

    try:
        with np.errstate(all="ignore"):
            sol = least_squares(res, p0, method="lm", max_nfev=400)
    except (ValueError, np.linalg.LinAlgError):
        return None
    p = np.exp(sol.x)
    if not np.all(np.isfinite(p)):
        return None
    if family == "hill":
        return np.array([float(np.clip(p[1], *H_POOL_RANGE)), float(p[2])])
    return p[1:].copy()


#: Smooth misfit (:func:`vzero.plugins.rates.choice.smooth_misfit`, read variances) up to which a well's
#: curve with the plate's shape describes it: the 99th percentile of chi² with two degrees of freedom (the
#: cubic's three beyond a constant, less the one the well's own v0 takes up). A well whose curve with the
#: plate's shape leaves more keeps its per-well choice: its shape may differ from the plate's.
POOL_MISFIT = 9.21


#: The smooth-misfit statistic: ``misfit(t, y, valid, curve, sigma)`` per well, ``curve(tb)`` the fitted curve
#: at block times up to a constant (:func:`vzero.plugins.rates.choice.smooth_misfit`, passed in by the caller).
Misfit = Callable[[np.ndarray, np.ndarray, np.ndarray, Callable[[np.ndarray], np.ndarray], np.ndarray], np.ndarray]


def pooled_misfit(fit: PooledShape, t: np.ndarray, y: np.ndarray, valid: np.ndarray, s0: np.ndarray,
                  spc: float, sigma: np.ndarray, smooth_misfit: Misfit) -> np.ndarray:
    """Per well of ``fit``, the smooth misfit of its curve with the plate's shape (read variances)."""
    make = _hill_eval if fit.family == "hill" else _si_eval
    lv = np.log(fit.v0 / spc)

    def curve(tb: np.ndarray) -> np.ndarray:
        return make(tb, s0, spc)(np.log(fit.shape), np.zeros(s0.size), lv)[0]

    return smooth_misfit(t, y, valid, curve, sigma)


@dataclass(frozen=True)
class PoolChoice:
    """What :func:`pool_shape` decided: ``take`` (wells ``[n]`` that take the plate's shape), ``code`` the
    model code they get (:data:`POOLED_CODES`), and per well ``v0``, ``se`` (signal/s) and ``ratio`` (NaN
    outside the joint fit), ``load`` ``[n, 2]`` (:attr:`PooledShape.load`, NaN outside); ``fit`` the joint fit
    used (None where no plate shape was used)."""

    take: np.ndarray
    code: float
    v0: np.ndarray
    se: np.ndarray
    ratio: np.ndarray
    load: np.ndarray
    fit: PooledShape | None


def _no_pool(n: int) -> PoolChoice:
    """Nothing pooled."""
    nan = np.full(n, np.nan)
    return PoolChoice(np.zeros(n, bool), np.nan, nan, nan.copy(), nan.copy(), np.full((n, 2), np.nan), None)


def rates_hill_z(s0: np.ndarray, v0: np.ndarray, se: np.ndarray) -> float:
    """How many standard errors the Hill coefficient of the wells' own rates lies above 1: the Hill rate law
    fitted to ``v0`` against ``s0`` (weighted by ``se``, scipy's least_squares on log parameters with the
    analytic Jacobian), ``ln h`` over its standard error (covariance from the Jacobian, scaled by the reduced
    chi-square when above 1). 0 where fewer than :data:`RATES_MIN_LEVELS` substrate levels or the fit fails."""
    from scipy.optimize import least_squares

    v = np.abs(v0)
    if np.unique(s0).size < RATES_MIN_LEVELS or not np.any(v > 0):
        return 0.0
    sig = np.fmax(np.abs(se), 1e-3 * np.max(v))
    s_mid = float(np.exp(np.mean(np.log(s0))))
    p0 = np.log([np.max(v) * 1.5, 2.0, s_mid])
    ln_s = np.log(s0)

    def res(lp: np.ndarray) -> np.ndarray:
        return (_rate_law("hill", s0, np.exp(lp)) - v) / sig

    def jac(lp: np.ndarray) -> np.ndarray:
        # v = Vmax sigma(r), r = h (ln S - ln K0.5): d/d ln Vmax = v, d/d ln h = Vmax sigma' r, d/d ln K0.5 =
        # -Vmax sigma' h, with sigma' = sigma (1 - sigma)
        h = np.exp(lp[1])
        r = h * (ln_s - lp[2])
        sg = 1.0 / (1.0 + np.exp(-r))
        d = np.exp(lp[0]) * sg * (1.0 - sg)
        return np.stack([np.exp(lp[0]) * sg, d * r, -d * h], axis=1) / sig[:, None]

    try:
        with np.errstate(all="ignore"):
            sol = least_squares(res, p0, jac=jac, method="lm", max_nfev=400)
            dof = max(s0.size - 3, 1)
            cov = np.linalg.pinv(sol.jac.T @ sol.jac) * max(float(sol.cost * 2.0 / dof), 1.0)
    except (ValueError, np.linalg.LinAlgError):
        return 0.0
    sd = float(np.sqrt(cov[1, 1])) if cov[1, 1] > 0 else np.inf
    z = float(sol.x[1]) / sd
    return z if np.isfinite(z) else 0.0


def pool_shape(t: np.ndarray, y: np.ndarray, valid: np.ndarray, s0: np.ndarray, spc: float, sigma: np.ndarray,
               code: np.ndarray, v0: np.ndarray, se: np.ndarray, base0: np.ndarray, q_v0: np.ndarray,
               q_se: np.ndarray, *, lof_ratio: float, agree_z: float, min_reads: int,
               smooth_misfit: Misfit, blank_sets: np.ndarray | None = None,
               blank_share: np.ndarray | None = None) -> PoolChoice:
    """Decide whether the plate's wells share a Hill or substrate-inhibition shape, and which wells take it.

    Per well (arrays ``[n]``): reads ``y`` / ``valid``, ``s0`` (concentration; NaN where unknown), read noise
    ``sigma``, the per-well choice so far (model ``code``, ``v0``, ``se`` signal/s, start baseline
    ``base0``), the early quadratic's ``q_v0`` and ``q_se``; ``min_reads`` the least counted reads;
    ``smooth_misfit`` the statistic of point 4 (:data:`Misfit`); ``blank_sets`` and ``blank_share`` the
    wells' blanks, for the shape's covariance (:func:`fit_pooled`).

    1. The plate is a candidate for a family when at least :data:`MIN_EVIDENCE` wells kept that family's
       per-well curve (model 4 Hill, 5 substrate inhibition), and for Hill also when the pooled wells' own
       rates show cooperativity (:func:`rates_hill_z` at least :data:`RATES_HILL_Z`); otherwise nothing is
       fitted.
    2. The wells pooled: substrate known, positive rate, at least ``min_reads`` reads, and a per-well choice
       among the curves and the quadratic (models 0, 1, 2, 4, 5: lag and decay models are left alone); at
       least :data:`MIN_WELLS`.
    3. The shape is started from the rate law fitted to the wells' own rates (:func:`shape_from_rates`)
       and fitted jointly (:func:`fit_pooled`). It is used where the fit converged, its shape lies
       :data:`SHAPE_WALD_Z` standard errors or more from Michaelis–Menten's (for Hill, with ``h`` within
       :data:`H_POOL_RANGE`), and, of two candidate families, it has the smaller chi-square.
    4. A well takes the plate's shape where its curve describes its reads within ``lof_ratio`` read noises,
       leaves no smooth misfit above :data:`POOL_MISFIT` (:func:`pooled_misfit`), and its v0 agrees with
       the quadratic's within ``agree_z`` of the quadratic's standard errors (as every
       curve of :mod:`vzero.plugins.rates.choice` must); elsewhere it keeps its per-well choice.
    """
    n = y.shape[0]
    families = [fam for fam, c in (("hill", 4.0), ("substrate-inhibition", 5.0)) if np.sum(code == c) >= MIN_EVIDENCE]
    with np.errstate(invalid="ignore", divide="ignore"):
        pool = (np.isfinite(s0) & (s0 > 0) & np.isfinite(v0) & (v0 / spc > 0) & np.isfinite(se)
                & (valid.sum(axis=1) >= min_reads) & np.isin(code, (0.0, 1.0, 2.0, 4.0, 5.0)) & np.isfinite(base0))
    rows = np.flatnonzero(pool)
    if rows.size < MIN_WELLS:
        return _no_pool(n)
    if "hill" not in families and rates_hill_z(s0[rows], v0[rows] / spc, se[rows] / abs(spc)) >= RATES_HILL_Z:
        families.insert(0, "hill")
    if not families:
        return _no_pool(n)
    best: PooledShape | None = None
    for fam in families:
        start = shape_from_rates(fam, s0[rows], v0[rows] / spc, se[rows] / abs(spc))
        if start is None:
            continue
        fit = fit_pooled(fam, t, y[rows], valid[rows], s0[rows], spc, sigma[rows], start, v0[rows], base0[rows],
                         None if blank_sets is None else blank_sets[rows],
                         None if blank_share is None else blank_share[rows])
        ok = fit.converged and np.all(np.isfinite(fit.shape_cov)) and fit.wald_z() >= SHAPE_WALD_Z
        if fam == "hill":
            ok = ok and H_POOL_RANGE[0] < fit.shape[0] <= H_POOL_RANGE[1]
        if ok and (best is None or fit.chi2 < best.chi2):
            best = fit
    if best is None:
        return _no_pool(n)
    out = _no_pool(n)
    out.v0[rows], out.se[rows], out.ratio[rows], out.load[rows] = best.v0, best.se, best.ratio, best.load
    misfit = pooled_misfit(best, t, y[rows], valid[rows], s0[rows], spc, sigma[rows], smooth_misfit)
    with np.errstate(invalid="ignore"):
        take = (np.isfinite(best.v0) & np.isfinite(best.se) & (best.ratio <= lof_ratio) & (misfit <= POOL_MISFIT)
                & (np.abs(best.v0 - q_v0[rows]) <= agree_z * q_se[rows]))
    out.take[rows] = take
    return PoolChoice(out.take, POOLED_CODES[best.family], out.v0, out.se, out.ratio, out.load, best)
