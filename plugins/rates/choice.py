"""Model choice per well by evidence: the whole-curve model that describes the curve, else an early quadratic.

Per well, all wells at once:

1. single-read spikes are found by a robust test and masked (:mod:`vzero.plugins.rates.spikes`; SPIKE);
2. the model-free estimate: the slope at t = 0 of a quadratic through the reads up to ``window_conversion``
   of the substrate (at least ``min_points`` reads; :func:`early_quadratic`);
3. wells where no whole-curve model can improve on it are left with it, unfitted (:func:`_skippable`: the
   window already holds every usable read, so a three-parameter curve would use the same reads, and the
   quadratic's third-order bias, predicted from its own curvature, is below 0.3 of its standard error);
4. the other wells get the integrated Michaelis–Menten curve fitted to all usable reads
   (:func:`vzero.plugins.rates.progress.progress_curve`), kept when its residual RMS is at most
   ``lof_ratio`` times the read noise (it describes the curve within the noise);
5. where it is not kept, or its order ``u = Km/(Km + S0)`` ends within :data:`U_EDGE` of 0 or 1 (the curve
   may need an order Michaelis–Menten cannot take), or its v0 differs from the quadratic's by more than
   ``agree_z`` standard errors of the difference, the power-law curve ``v = v0 (1 - x)^n`` is fitted too;
   where its residual RMS is smaller by more than ``tie`` it is the better description, and it is kept when
   within ``lof_ratio`` and its v0 agrees with the quadratic's within ``agree_z`` of the quadratic's
   standard errors, else the well keeps the quadratic (as it does when neither curve describes it);
6. where the power law needed an order above ``1 + HILL_ORDER`` (faster than depletion under
   Michaelis–Menten kinetics gives), the integrated Hill curve (:mod:`vzero.plugins.rates.hillcurve`,
   four parameters, nesting both curves) is fitted too and kept by an extra-sum-of-squares F-test against
   the best three-parameter curve (:func:`_hill_step`): the order of a cooperative enzyme's rate rises as
   the substrate falls, which neither three-parameter curve can follow;
6c. where the kept Michaelis–Menten or power-law curve leaves a smooth misfit in its residuals (the part a
   cubic in time explains, :func:`smooth_misfit`, above :data:`MISFIT_TRY`), the Hill curve is fitted from
   the Michaelis–Menten solution and replaces the kept curve where its v0 differs from it significantly
   (:func:`_shape_step`): a curve of the wrong shape can fit within the noise and still be off at t = 0;
6d. where the quadratic's window holds every read, a kept power-law curve of order above 1 goes back to the
   quadratic unless its variance is below the quadratic's variance plus its squared third-order bias
   (predicted from its own curvature, :func:`_same_reads_step`): with the same reads and as many
   parameters, the curve can gain only by that bias;
6e. (run right after 6b) where the power law's order is below
   :data:`vzero.plugins.rates.sicurve.SI_ORDER` (near or below zero, as under substrate inhibition), the
   integrated substrate-inhibition curve (four parameters, nesting Michaelis–Menten) is fitted and kept by
   an extra-sum-of-squares F-test against the Michaelis–Menten curve (:func:`_inhibition_hook`): a constant
   order cannot follow an inhibited rate's, which passes through zero as the substrate falls;
7. wells that no whole-curve model describes and whose rate falls faster than depletion explains (DECAY,
   :func:`vzero.plugins.rates.lagdecay.lag_decay`) get the first-order decay model when it describes them;
8. wells with a lag (:func:`vzero.plugins.rates.lagdecay.detect_lag`, LAG) are fitted with the
   Michaelis–Menten curve on the enzyme's active time (:mod:`vzero.plugins.rates.lagfit`): v0 is the rate
   with fully active enzyme at t = 0 and ``lag_s`` the fitted lag time; the decay constant is shared, and
   the lag carried to wells whose lag the detector missed, within a pool of wells (``pool_groups`` below;
   :func:`_lag_clock_step`) (without s0 and signal_per_conc: :func:`vzero.plugins.rates.lagdecay.lag_decay`);
9. where at least one well kept the Hill (step 6b/6c) or the substrate-inhibition curve (6e), or the pool's
   own rates show cooperativity (a Hill law fitted to them puts ``h`` 3 SE above 1:
   :func:`vzero.plugins.rates.poolshape.rates_hill_z`), one shape is fitted for each pool of wells (one
   ``h`` and ``K0.5``, or one ``Km`` and ``Ki``; per well a baseline and v0) and given to the wells it
   describes (:func:`_pool_hook`, :mod:`vzero.plugins.rates.poolshape`; codes 6 and 7): one enzyme has one
   rate law. ``pool_shape=False`` turns the step off.

``blank_sets`` (an integer per well, the same for wells corrected by the same blank wells, -1 for none) and
``blank_share`` (the blank's share of each well's read variance) let step 9's shape covariance include the
read noise that such wells share (:func:`vzero.plugins.rates.poolshape.fit_pooled`); the rates stage passes
them from the blank stage's ``blanks`` and ``blank_share`` columns.

``pool_groups`` (an integer per well; negative: the well is in no pool of step 9) says which wells hold the
same enzyme at the same inhibitor level: the rates stage passes the layout's sample wells numbered by
``group`` and ``inhibitor``; without it the whole plate is one pool.

Reads next to a block of missing reads at the start or end of a well (saturation) are masked first
(``censored_reads``, see :data:`CENSORED_READS`).

Needs ``s0`` and ``signal_per_conc``; without them the Michaelis–Menten curve is fitted in signal units,
the quadratic window is the first third of the reads, and a well left with the quadratic because the curve's
residual RMS passed ``lof_ratio`` read noises gets the quadratic's SE times that ratio (the larger of the read
noise and the curve's residual RMS: a low read-noise estimate, not a misfit, is the common cause).
``extra['model']`` says which estimate each well got
(0 Michaelis–Menten curve, 1 power-law curve, 2 early quadratic, 3 lag model, 4 Hill curve, 5
substrate-inhibition curve, 6 Hill curve with the plate's shape, 7 substrate-inhibition curve with the plate's
shape);
``extra['shape_pool']`` the pool whose shape a well took (step 9; NaN elsewhere) and ``extra['shape_load_1']``,
``extra['shape_load_2']`` the shape's share of its ln v0 error as loadings on two independent unit factors
(the covariance of ln v0 between two wells of one pool through the shape is the dot product of their
loadings; the fit stage uses them, :mod:`vzero.plugins.fit.shared`);
``extra['rate_t']`` is
v0 over its standard error; ``extra['misfit']`` the smooth misfit statistic of step 6c (read variances, NaN
where no kept curve was tested). NOISY as for every method (relative SE above 10 %; includes every rate not
significantly different from zero).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, fields
from typing import Any

import numpy as np
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.rates.lagdecay import detect_lag, lag_decay
from vzero.plugins.rates.lagfit import lag_clock_fit, plate_clock
from vzero.plugins.rates.noise import Screen, conversion_scale, flag_noisy, screen
from vzero.plugins.rates.polynomial import inv3_hankel
from vzero.plugins.rates.progress import QUICK_BLOCKS, block_means, integrated_mm, power_conversion, progress_curve
from vzero.plugins.rates.spikes import find_spikes

MODEL_CODES = {"michaelis-menten": 0, "power": 1, "quadratic": 2, "lag-decay": 3, "hill": 4,
               "substrate-inhibition": 5, "plate-hill": 6, "plate-substrate-inhibition": 7}


#: Reads masked next to a block of missing reads at the start or the end of a well (saturated reads: the
#: reads beside them are near the ceiling, and only those that noise kept below it were recorded, so they
#: run low). Measured on the benchmark (docs/rates.md, "Saturation"): the bias stayed within ±0.3 % for 0-4
#: reads (the signal there crosses the ceiling's noise band within one read), RMSE lowest for 0 or 1; one read
#: is kept as the guard for wells that cross it more slowly.
CENSORED_READS = 1


def trim_censored(y: np.ndarray, k: int) -> np.ndarray:
    """Mask (in place, and return) the ``k`` reads after a leading block of missing reads and the ``k``
    before a trailing one."""
    if k <= 0 or y.size == 0:
        return y
    n_t = y.shape[1]
    valid = np.isfinite(y)
    if valid.all():  # no missing read: nothing to mask
        return y
    first = np.argmax(valid, axis=1)
    last = n_t - 1 - np.argmax(valid[:, ::-1], axis=1)
    idx = np.arange(n_t)[None, :]
    lead = (first > 0)[:, None] & (idx >= first[:, None]) & (idx < (first + k)[:, None])
    trail = (last < n_t - 1)[:, None] & (idx <= last[:, None]) & (idx > (last - k)[:, None])
    y[(lead | trail) & valid.any(axis=1)[:, None]] = np.nan
    return y


@dataclass(frozen=True)
class EarlyQuadratic:
    """:func:`early_quadratic` per well: ``v0`` (signal/s) and ``se`` its standard error from the read noise;
    ``curvature`` the quadratic's second derivative at ``t[0]`` (signal/s²); ``end_s`` the time of the last
    read used (s); ``n`` reads used; ``rmse_over_noise`` the residual RMS over the read noise; ``goodness``
    R² over the reads used."""

    v0: np.ndarray
    se: np.ndarray
    curvature: np.ndarray
    end_s: np.ndarray
    n: np.ndarray
    rmse_over_noise: np.ndarray
    goodness: np.ndarray


def early_quadratic(
    t: np.ndarray, y: np.ndarray, full: np.ndarray | None, *, frac: float, min_points: int, sigma: np.ndarray
) -> EarlyQuadratic:
    """Slope at ``t[0]`` of a quadratic through each well's reads up to ``frac`` of ``full`` (the signal
    change at full conversion; the first third of the reads when None), at least ``min_points`` reads.
    SE from the read noise ``sigma``."""
    n_t = y.shape[1]
    valid = np.isfinite(y)
    every = bool(valid.all()) and n_t > 0  # every read finite (the common case): plain slices, no ranks
    yz = y if every else np.where(valid, y, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        if every:
            rank = None
            y0 = yz[:, :3].sum(axis=1) / min(n_t, 3)
        else:
            rank = np.cumsum(valid, axis=1)
            first3 = valid & (rank <= 3)
            y0 = (yz * first3).sum(axis=1) / first3.sum(axis=1)
        if full is None:
            beyond = np.broadcast_to(np.arange(n_t) >= max(n_t // 3, min_points), y.shape)
        else:
            beyond = np.abs(y - y0[:, None]) > frac * full[:, None]
            if not every:
                beyond &= valid
    stop = np.where(beyond.any(axis=1), np.argmax(beyond, axis=1), n_t)
    # at least min_points finite reads: the index just after the min_points-th finite read
    if every:
        enough = np.full(y.shape[0], min_points if n_t >= min_points else n_t)
    else:
        enough = np.where(rank[:, -1] >= min_points, np.argmax(rank >= min_points, axis=1) + 1, n_t)
    end = np.maximum(stop, enough)
    inside = np.arange(n_t)[None, :] < end[:, None]
    w = (inside if every else valid & inside).astype(float)
    span = max(float(t[-1] - t[0]), 1e-300)
    u = (t - t[0]) / span
    pw = u[:, None] ** np.arange(5)[None, :]
    m = w @ pw
    wy = w * yz
    xy = wy @ pw[:, :3]
    inv = inv3_hankel(m)
    coef = np.einsum("npq,nq->np", inv, xy)
    n_used = np.minimum(end, n_t)  # with every read finite, the reads counted: all before ``end``
    n_in = n_used.astype(float) if every else w.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        ok = n_in >= 4
        v0 = np.where(ok, coef[:, 1] / span, np.nan)
        se = sigma * np.sqrt(np.abs(inv[:, 1, 1])) / span
        curv = np.where(ok, 2.0 * coef[:, 2] / span**2, np.nan)
        yy = (wy * yz).sum(axis=1)
        rss = np.fmax(yy - np.einsum("np,np->n", coef, xy), 0.0)
        tss = yy - xy[:, 0] ** 2 / np.fmax(n_in, 1.0)
        ratio = np.where(n_in > 3, np.sqrt(rss / np.fmax(n_in - 3, 1.0)) / sigma, np.nan)
        good = np.where(ok, 1.0 - rss / tss, np.nan)
    last = n_used - 1 if every else n_t - 1 - np.argmax(w[:, ::-1] > 0, axis=1)
    return EarlyQuadratic(v0, se, curv, t[last], n_in.astype(np.int64), ratio, good)


#: Order of the power-law curve ``v0 (1 - x)^n`` from which a falling rate is taken for loss of activity
#: rather than substrate depletion: Michaelis–Menten gives n <= 1 and Hill kinetics n <= h (Hill coefficients
#: above 4 are rare), so a rate that falls as the sixth power of the substrate left or faster is not depletion.
#: Without it, cooperative wells were taken for decay on the benchmark (h within 5 % on 23 % of draws instead
#: of 67 %).
DECAY_ORDER = 6.0


def _decay_model(t: np.ndarray, y: np.ndarray, s0: np.ndarray, spc: float, code: np.ndarray, v0: np.ndarray,
                 se: np.ndarray, flags: np.ndarray, extra: dict[str, np.ndarray], w_start: np.ndarray,
                 order: np.ndarray, *, lof_ratio: float, min_points: int) -> None:
    """Wells left with the early quadratic (no whole-curve model describes them) whose rate falls faster than
    any substrate-driven law explains (the power-law curve's order at least :data:`DECAY_ORDER`, and DECAY of
    :func:`vzero.plugins.rates.lagdecay.lag_decay`) get the
    first-order decay model when it describes the reads within ``lof_ratio`` read noises or better than the
    whole-curve model: v0 at the first
    read, code 3, DECAY, ``k_decay``. In place. Measured (tests/plugins/rates/test_se_calibration.py,
    "inactivating": enzyme half-life 6 min, 5 % conversion): the quadratic over the reads ran 9 % low with
    an SE a third of its error; the decay model is unbiased with a calibrated SE."""
    with np.errstate(invalid="ignore"):
        rows = np.flatnonzero((code == 2.0) & (order >= DECAY_ORDER))
    if rows.size == 0:
        return
    s0_rows = np.broadcast_to(np.asarray(s0, float), (y.shape[0],))[rows]
    ld = lag_decay(t, y[rows], s0=s0_rows, signal_per_conc=spc, min_points=min_points, fail_ratio=np.inf)
    with np.errstate(invalid="ignore"):
        fit_ratio = ld.extra["rmse_over_noise"]
        # within the noise, or closer to the reads than the whole-curve model (the noise estimate from 60
        # reads scatters by about 15 %, so a describing model exceeds lof_ratio on a few % of wells)
        take = (((ld.flags & int(Flag.DECAY)) != 0) & np.isfinite(ld.v0)
                & ((fit_ratio <= lof_ratio) | (fit_ratio < extra["rmse_over_noise"][rows])))
    r = rows[take]
    v0[r], se[r], code[r] = ld.v0[take], ld.stderr[take], 3.0
    flags[r] |= int(Flag.DECAY)
    extra["k_decay"][r] = ld.extra["k_decay"][take]
    extra["rmse_over_noise"][r] = ld.extra["rmse_over_noise"][take]
    w_start[r] = ld.window_start_s[take]


#: Standard errors of the early quadratic's v0 within which a power-law curve's v0 must agree with it.
AGREE_Z = 2.0

#: Least standard error of the difference between a whole-curve v0 and the quadratic's, as a share of the
#: quadratic's: where the curve is no more precise (the window holds nearly every read), the two still
#: differ by the curve's own third-order terms and its block-mean fit, so a zero would call every well
#: into doubt.
DIFF_FLOOR = 0.3

#: Michaelis–Menten fits whose ``u = Km/(Km + S0)`` (the order of the rate in the substrate at t = 0) ends
#: within this of 0 or 1 are fitted with the power-law curve too: there the curve may need an order outside
#: the range Michaelis–Menten allows (below 0 under substrate inhibition, above 1 for a cooperative enzyme
#: far below K0.5 or a decaying one).
U_EDGE = 0.1


def _rows(obj: Any, rows: np.ndarray) -> Any:
    """The same per-well dataclass (:class:`Screen`, :class:`EarlyQuadratic`) for the wells ``rows``."""
    return type(obj)(*(np.asarray(getattr(obj, f.name))[rows] for f in fields(obj)))


def _skippable(q: EarlyQuadratic, sc: Screen, s0: np.ndarray, spc: float, bias_share: float) -> np.ndarray:
    """Wells for which neither whole-curve model can improve on the early quadratic, so none is fitted.

    The quadratic holds every usable read (the run stays within the conversion window), so a three-parameter
    curve would use the same reads as the three-parameter quadratic and could gain only by removing the
    quadratic's third-order bias: the least-squares quadratic over ``[0, T]`` of a curve with third
    derivative ``d3`` has a slope at 0 off by ``-d3 T²/10`` (the cubic's shifted Legendre remainder). For a
    rate that falls with local order ``n`` (``v ∝ (1 - x)^n``; ``n = -P'' S0 / v0²`` from the quadratic's own
    curvature), that is ``-n (2n - 1) x²/10`` of v0 with a constant order and ``-n (3n - 2) x²/10`` under
    Michaelis–Menten kinetics (``x`` the conversion over the run; checked against numpy.polyfit in
    tests/plugins/rates/test_model_choice.py). A well is skipped where the larger of the
    two is at most ``bias_share`` of the quadratic's standard error and ``0 <= n <= 1.5`` (depletion explains
    the fall; a faster or rising rate is fitted, so that cooperative, inhibited or decaying wells still reach
    their models).
    """
    n, bias = quadratic_bias(q, np.abs(sc.change), s0, spc)
    with np.errstate(invalid="ignore"):
        return (sc.usable & (q.n >= sc.n_valid) & (n >= 0.0) & (n <= 1.5)
                & (bias * np.abs(q.v0) <= bias_share * q.se))


def quadratic_bias(q: EarlyQuadratic, change: np.ndarray, s0: np.ndarray,
                   spc: float) -> tuple[np.ndarray, np.ndarray]:
    """The early quadratic's local order ``n = -P'' S0 / v0²`` (from its own curvature) and the share of v0 by
    which its slope at t = 0 may be off from third-order terms, the larger of ``|n (2n - 1)| x²/10`` (constant
    order) and ``|n (3n - 2)| x²/10`` (Michaelis–Menten kinetics), ``x`` = ``change`` (signal) over the signal
    at full conversion (see :func:`_skippable`)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        n = -q.curvature * s0 * spc / q.v0**2
        x = change / (np.abs(spc) * s0)
        return n, 0.1 * np.fmax(np.abs(n * (2 * n - 1)), np.abs(n * (3 * n - 2))) * x**2


#: Share of the early quadratic's standard error up to which its third-order bias counts as negligible
#: (:func:`_skippable`): a bias of 0.3 SE adds at most 4.4 % to the root-mean-square error.
BIAS_SHARE = 0.3


#: Power-law order above 1 by more than this (Michaelis–Menten allows at most 1) sends a well to the
#: integrated Hill curve (:func:`_hill_step`): its rate falls faster than depletion under Michaelis–Menten
#: kinetics explains. None: the Hill curve is never tried.
HILL_ORDER: float | None = 0.1

#: Significance level of the extra-sum-of-squares F-test that replaces a kept Michaelis–Menten curve by the
#: Hill curve (one extra parameter).
HILL_ALPHA = 0.01

#: The same where the power law was kept or the well fell back to the quadratic (no kept Michaelis–Menten
#: curve to protect). Measured on the benchmark's Hill plate (docs/rates.md): at 20 % the four-parameter
#: fit took wells far below K0.5 where it is less precise than the power law (0.15 mM: 0.81 -> 1.12, 40 draws).
HILL_ALPHA_CURVE = 0.05

#: Iterations of the Hill fit (it starts from the power law's solution, which it nests).
HILL_ITER = 30


@dataclass(frozen=True)
class _Estimates:
    """The per-well arrays :func:`model_choice` fills (the same arrays, changed in place): ``v0`` and ``se``
    (signal/s), the model ``code``, ``ratio`` (residual RMS over the read noise), ``goodness``, the window
    ``w_start`` and ``w_end`` (s) and ``n_pts`` reads used."""

    v0: np.ndarray
    se: np.ndarray
    code: np.ndarray
    ratio: np.ndarray
    goodness: np.ndarray
    w_start: np.ndarray
    w_end: np.ndarray
    n_pts: np.ndarray


def _use_quadratic(t: np.ndarray, q: EarlyQuadratic, rows: np.ndarray, out: _Estimates, first: np.ndarray) -> None:
    """The wells ``rows`` go back to the early quadratic (code 2); in place."""
    out.v0[rows], out.se[rows], out.code[rows] = q.v0[rows], q.se[rows], 2.0
    out.ratio[rows], out.goodness[rows] = q.rmse_over_noise[rows], q.goodness[rows]
    out.w_start[rows], out.w_end[rows], out.n_pts[rows] = t[first[rows]], q.end_s[rows], q.n[rows]


def _keep_hill(t: np.ndarray, sc: Screen, rows: np.ndarray, hf: dict[str, np.ndarray], keep: np.ndarray,
               out: _Estimates, first: np.ndarray) -> None:
    """The wells ``rows[keep]`` take the Hill curve's fit ``hf``
    (:func:`vzero.plugins.rates.hillcurve.fit_hill_curve`, code 4); in place."""
    r = rows[keep]
    out.v0[r], out.se[r], out.code[r], out.ratio[r] = hf["v0"][keep], hf["se"][keep], 4.0, hf["ratio"][keep]
    out.goodness[r] = np.nan
    last = t.size - 1 - np.argmax(sc.valid[r][:, ::-1], axis=1)
    out.w_start[r], out.w_end[r], out.n_pts[r] = t[first[r]], t[last], sc.n_valid[r]


def _start_baseline(t: np.ndarray, y: np.ndarray, valid: np.ndarray, v0: np.ndarray) -> np.ndarray:
    """Baseline at t = t[0] (signal) from the mean of each well's first three counted reads and its rate
    ``v0`` (signal/s): a start for the whole-curve fits."""
    yz = np.where(valid, y, 0.0)
    first3 = valid & (np.cumsum(valid, axis=1) <= 3)
    t3 = (first3 * t[None, :]).sum(axis=1) / first3.sum(axis=1)
    return (yz * first3).sum(axis=1) / first3.sum(axis=1) - v0 * (t3 - t[0])


def _hill_step(t: np.ndarray, y: np.ndarray, sc: Screen, q: EarlyQuadratic, rows: np.ndarray, pw_v0: np.ndarray,
               pw_order: np.ndarray, r_best: np.ndarray, mm_kept: np.ndarray, s0_all: np.ndarray, spc: float,
               v0: np.ndarray, se: np.ndarray, code: np.ndarray, ratio: np.ndarray, goodness: np.ndarray,
               w_start: np.ndarray,
               w_end: np.ndarray, n_pts: np.ndarray, first: np.ndarray, *, lof_ratio: float,
               agree_z: float) -> None:
    """The integrated Hill curve (:mod:`vzero.plugins.rates.hillcurve`) for the wells ``rows``, whose
    power-law fit (``pw_v0`` signal/s, ``pw_order``) needed an order above 1; in place.

    The Hill curve nests both three-parameter curves (h = 1 is Michaelis–Menten, K0.5 far above S0 the power
    law), so its residual sum of squares is at most theirs at the optimum. It is kept when it describes the
    reads within ``lof_ratio`` read noises, its v0 agrees with the early quadratic's within ``agree_z`` of the
    quadratic's standard errors (as for the power law), and: where Michaelis–Menten was kept (``mm_kept``),
    the extra-sum-of-squares F-test of the fourth parameter rejects Michaelis–Menten at :data:`HILL_ALPHA`
    (a kept, describing curve gives way only to evidence); elsewhere (the power law was kept or the well fell
    back to the quadratic) the same test at :data:`HILL_ALPHA_CURVE`. ``r_best`` is the residual RMS (read
    noises) of the better three-parameter curve: the power law holds the order constant, the Hill curve
    lets it rise as the substrate falls, as it does for a cooperative enzyme.
    """
    from scipy.stats import f as f_dist
    from vzero.plugins.rates.hillcurve import fit_hill_curve

    with np.errstate(invalid="ignore", divide="ignore"):
        sel = np.isfinite(pw_v0) & np.isfinite(r_best) & (pw_v0 / spc > 0)
    rows, r_best, mm_kept = rows[sel], r_best[sel], mm_kept[sel]
    if rows.size == 0:
        return
    valid = sc.valid[rows]
    b0 = _start_baseline(t, y[rows], valid, pw_v0[sel])
    # start at the power law: u = 0.95 (K0.5 well above S0), n0 = the power law's order
    n0 = np.clip(pw_order[sel], 1e-2, 7.5)
    start = np.stack([b0, np.log(pw_v0[sel] / spc), n0, np.full(rows.size, np.log(0.95 / 0.05))], axis=1)
    hf = fit_hill_curve(t, y[rows], valid, s0_all[rows], spc, sc.sigma[rows], start, max_iter=HILL_ITER)
    n = sc.n_valid[rows].astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        rss3 = r_best**2 * sc.sigma[rows] ** 2 * (n - 3.0)
        f_stat = (rss3 - hf["rss"]) / (hf["rss"] / (n - 4.0))
        evidence = f_stat > f_dist.ppf(1.0 - np.where(mm_kept, HILL_ALPHA, HILL_ALPHA_CURVE), 1, n - 4.0)
        keep = (hf["converged"] & np.isfinite(hf["v0"]) & evidence & (hf["ratio"] <= lof_ratio)
                & (np.abs(hf["v0"] - q.v0[rows]) <= agree_z * q.se[rows]))
    _keep_hill(t, sc, rows, hf, keep, _Estimates(v0, se, code, ratio, goodness, w_start, w_end, n_pts), first)


#: Degree of the Legendre polynomial in time onto which :func:`smooth_misfit` projects a kept curve's
#: residuals. A curve of the wrong shape (a Michaelis–Menten curve through a cooperative enzyme's reads)
#: leaves a smooth residual that a low-degree polynomial catches, while the read noise spreads over every
#: read: a cubic holds most of such a misfit with three degrees of freedom (the fitted curve takes up about
#: two of them), so the test is far more sensitive than the residual RMS over all reads.
MISFIT_DEGREE = 3

#: The smooth lack-of-fit statistic above which a kept Michaelis–Menten or power-law curve may have the wrong
#: shape, so the Hill curve is fitted too (:func:`_shape_step`): the 95th percentile of chi² with one degree
#: of freedom, which the statistic follows for a curve of the right shape (measured on the benchmark's
#: Michaelis–Menten plates: median 0.5, docs/rates.md, step 6c).
MISFIT_TRY = 3.84

#: Standard errors of their difference by which the Hill curve's v0 must differ from the kept curve's to
#: replace it (:func:`_shape_step`).
SHAPE_Z = 2.0

#: Largest Hill coefficient with which the Hill curve may replace a kept curve (:func:`_shape_step`): Hill
#: coefficients above 4 are rare (common practice), and on Michaelis–Menten wells whose noise happened to
#: leave a smooth misfit the Hill fit ran to h = 5-12 with a v0 1-7 % low (measured on the benchmark).
SHAPE_H_MAX = 4.0

#: Iterations of the Hill fit of :func:`_shape_step`, from :data:`SHAPE_H_START`: on the benchmark's Hill plate
#: at 0.6 mM, 8 gave the same rates as 12 (6: most fits not yet converged; from h = 1, 12 were needed).
SHAPE_HILL_ITER = 8

#: Hill coefficient at which the fit of :func:`_shape_step` starts, with the order at t = 0 of the
#: Michaelis–Menten fit (``n0 = h u``) and its v0: a smooth misfit of a Michaelis–Menten curve points to an
#: order that changes faster than Michaelis–Menten allows, so the fit starts away from h = 1, where the
#: misfit's direction is flat.
SHAPE_H_START = 2.0

#: Screen of :func:`_shape_step`: one Gauss–Newton step of the Hill curve from its start must move v0 by more
#: than this many of its standard errors for the full fit to run (its cost is mostly fixed per call, so the
#: screen keeps it off plates whose curves have the right shape). Measured: on the Michaelis–Menten speed
#: plate (384 wells) 3 of the 19 wells above :data:`MISFIT_TRY` moved more than 0.7 SE (at most 0.96); on the
#: benchmark's Hill plate at 0.6 mM a screen at 1.0 kept a third of the wells from the Hill curve (RMS error
#: ratio 1.22 against 0.82 at 0.5 and 0.7, 60 draws).
SHAPE_SCREEN = 1.0


def smooth_misfit(t: np.ndarray, y: np.ndarray, valid: np.ndarray, curve: Callable[[np.ndarray], np.ndarray],
                  sigma: np.ndarray) -> np.ndarray:
    """Per well, the squared norm (in read variances) of the part of the residuals ``y - curve`` that a
    polynomial of degree :data:`MISFIT_DEGREE` in time explains beyond a constant.

    Computed on the means of :data:`vzero.plugins.rates.progress.QUICK_BLOCKS` blocks of consecutive reads
    (each weighted by its read count, so the statistic is the one of every read for any residual that is
    smooth within a block). ``curve(tb)`` gives the fitted curve at block times ``tb [wells, blocks]`` up to
    an additive constant (the baseline drops out). For a curve of the right shape fitted to the reads, about
    chi² with one degree of freedom; ``y``, ``valid`` ``[wells, reads]``, ``sigma`` the read noise.
    """
    k = max(t.size // QUICK_BLOCKS, 1)
    tb, yb, wb = block_means(t, y, valid.astype(float), k)
    m = wb**2
    e = np.where(m > 0, yb - curve(tb), 0.0)
    span = max(float(t[-1] - t[0]), 1e-300)
    basis = np.polynomial.legendre.legvander(2.0 * (tb - t[0]) / span - 1.0, MISFIT_DEGREE)
    gram = np.einsum("wb,wbi,wbj->wij", m, basis, basis)
    proj = np.einsum("wb,wb,wbi->wi", m, e, basis)
    with np.errstate(invalid="ignore", divide="ignore"):
        coef = np.linalg.solve(gram + 1e-12 * np.eye(MISFIT_DEGREE + 1) * np.trace(gram, axis1=1, axis2=2)[:, None,
                               None], proj[..., None])[..., 0]
        explained = np.einsum("wi,wi->w", coef, proj) - (m * e).sum(axis=1) ** 2 / m.sum(axis=1)
        return explained / sigma**2


def _shape_step(t: np.ndarray, y: np.ndarray, sc: Screen, q: EarlyQuadratic, s0_all: np.ndarray, spc: float,
                mm_fit: dict[str, np.ndarray], pw_v0: np.ndarray, order: np.ndarray, out: _Estimates, first: np.ndarray,
                *, lof_ratio: float, agree_z: float) -> np.ndarray:
    """Wells that kept the Michaelis–Menten (code 0) or the power-law curve (code 1) although the curve may
    have the wrong shape: their residuals hold a smooth misfit (:func:`smooth_misfit` above
    :data:`MISFIT_TRY`). Such a curve can fit within the read noise and still be a few percent off at
    t = 0: a cooperative enzyme near K0.5, whose order in the substrate rises as the substrate falls, read
    as a Michaelis–Menten curve (2.6 % high at S0 = 2 K0.5, h = 2.5, on the benchmark). These wells get the
    integrated Hill curve, started from the Michaelis–Menten fit (``h = 1``, which it nests). It replaces
    the kept curve where it describes the reads within ``lof_ratio`` read noises, its Hill coefficient is at
    most :data:`SHAPE_H_MAX`, its v0 agrees with the early quadratic's within ``agree_z`` of the
    quadratic's standard errors, and its v0 differs from the kept curve's by more than :data:`SHAPE_Z`
    standard errors of their difference (the nested curve is unbiased under both, the kept one more precise
    if it is right: Hausman 1978, Econometrica 46:1251). ``mm_fit``: per well ``v0`` (signal/s), ``km`` and
    ``vmax`` (concentration, per second) of the Michaelis–Menten fit; ``pw_v0`` (signal/s) and ``order`` of
    the power-law fit (NaN where not fitted). In place; returns the misfit statistic per well (NaN where not
    tested)."""
    from vzero.plugins.rates.hillcurve import fit_hill_curve

    misfit = np.full(y.shape[0], np.nan)
    s0c = s0_all[:, None]
    rows = np.flatnonzero((out.code == 0.0) & np.isfinite(mm_fit["km"]))
    if rows.size:
        km, vm, s = mm_fit["km"][rows, None], mm_fit["vmax"][rows, None], s0c[rows]
        misfit[rows] = smooth_misfit(t, y[rows], sc.valid[rows], lambda tb: -spc * integrated_mm(tb, s, km, vm),
                                     sc.sigma[rows])
    rows = np.flatnonzero((out.code == 1.0) & np.isfinite(order))
    if rows.size:
        k, m, amp = (pw_v0[rows] / spc)[:, None] / s0c[rows], order[rows, None] - 1.0, spc * s0c[rows]
        misfit[rows] = smooth_misfit(t, y[rows], sc.valid[rows], lambda tb: amp * power_conversion(tb * k, m)[0],
                                     sc.sigma[rows])
    with np.errstate(invalid="ignore"):
        bad = np.flatnonzero(misfit > MISFIT_TRY)
    if bad.size == 0:
        return misfit
    with np.errstate(invalid="ignore", divide="ignore"):
        start_ok = np.isfinite(mm_fit["km"][bad]) & (mm_fit["v0"][bad] / spc > 0)
    hill_rows = bad[start_ok]
    if hill_rows.size:
        u = np.clip(mm_fit["km"][hill_rows] / (mm_fit["km"][hill_rows] + s0_all[hill_rows]), 1e-3, 1.0 - 1e-3)
        start = np.stack([_start_baseline(t, y[hill_rows], sc.valid[hill_rows], mm_fit["v0"][hill_rows]),
                          np.log(mm_fit["v0"][hill_rows] / spc), u, np.log(u / (SHAPE_H_START - u))], axis=1)
        one = fit_hill_curve(t, y[hill_rows], sc.valid[hill_rows], s0_all[hill_rows], spc, sc.sigma[hill_rows],
                             start, max_iter=1, restart=False)
        with np.errstate(invalid="ignore"):
            moves = np.abs(one["v0"] - mm_fit["v0"][hill_rows]) > SHAPE_SCREEN * one["se"]
        hill_rows, start = hill_rows[moves], start[moves]
    if hill_rows.size:
        hf = fit_hill_curve(t, y[hill_rows], sc.valid[hill_rows], s0_all[hill_rows], spc, sc.sigma[hill_rows],
                            start, max_iter=SHAPE_HILL_ITER, restart=False)
        with np.errstate(invalid="ignore"):
            describes = (hf["converged"] & np.isfinite(hf["v0"]) & (hf["ratio"] <= lof_ratio)
                         & (hf["h"] <= SHAPE_H_MAX)
                         & (np.abs(hf["v0"] - q.v0[hill_rows]) <= agree_z * q.se[hill_rows]))
            # the Hill curve nests the kept one, so both estimate v0 alike where the kept curve is right: it
            # replaces it only where the two differ by more than SHAPE_Z standard errors of their difference
            # (Hausman 1978, as in model_choice); elsewhere the kept curve's more precise v0 stands
            cur_v0, cur_se = out.v0[hill_rows], out.se[hill_rows]
            room = np.sqrt(np.fmax(hf["se"] ** 2 - cur_se**2, (DIFF_FLOOR * hf["se"]) ** 2))
            keep = describes & (np.abs(hf["v0"] - cur_v0) > SHAPE_Z * room)
        _keep_hill(t, sc, hill_rows, hf, keep, out, first)
    return misfit


#: Power-law order above 1 by more than this (what Michaelis–Menten depletion allows), and below
#: :data:`DECAY_ORDER`, makes a well whose quadratic window holds every read a candidate for
#: :func:`_same_reads_step`: an order a cooperative enzyme can have. Elsewhere the power law's standard
#: error does not measure its error: at orders of 0-1 it is conservative, and on the benchmark's
#: substrate-inhibition plate at 20 mM (late saturation leaves 40 reads) the fit ran to its order bound of 10
#: with errors a third of its SE, so the comparison sent accurate wells back (RMS error ratio there 0.42 ->
#: 0.56, seed 2, 100 draws, before the upper limit).
SAME_READS_ORDER = 0.1


def _same_reads_step(t: np.ndarray, q: EarlyQuadratic, sc: Screen, s0_all: np.ndarray, spc: float,
                     order: np.ndarray, out: _Estimates, first: np.ndarray) -> None:
    """Wells that kept the power-law curve (code 1) with an order above ``1 +`` :data:`SAME_READS_ORDER` (and
    below :data:`DECAY_ORDER`) although the quadratic's window already holds every usable read go back to the
    quadratic where the curve's v0 is not the more accurate estimate; in place.

    Both then use the same reads with three parameters, so the curve can gain only by removing the quadratic's
    third-order bias (:func:`_skippable`). Its expected squared error is taken as its variance (it is fitted
    to its own shape), the quadratic's as its variance plus the square of that bias as step 5 predicts it
    from the quadratic's own curvature (:func:`quadratic_bias`): the curve is kept only where
    ``SE_curve² < SE_q² + bias²``. Without this, the well's choice between the two turned on noise that moves
    both: on the benchmark's Hill plate at S0 = K0.5/3 (every read within 20 % conversion) the wells that
    step 5 left unfitted, because their curvature looked low, ran 8.8 % low, the others 1.6 % high, with the
    power law's SE above the quadratic's on every well (docs/rates.md, step 6d). The bias is not taken from
    the curve's own order: the wells whose power law ran to orders of 4-5 there kept it through the large
    bias that order predicts, and were 14 % high (5 wells in 200).
    """
    with np.errstate(invalid="ignore"):
        rows = np.flatnonzero((out.code == 1.0) & (q.n >= sc.n_valid) & (order > 1.0 + SAME_READS_ORDER)
                              & (order < DECAY_ORDER))
    if rows.size == 0:
        return
    qr = _rows(q, rows)
    _, share = quadratic_bias(qr, np.abs(sc.change[rows]), s0_all[rows], spc)
    with np.errstate(invalid="ignore"):
        bias = share * np.abs(qr.v0)
        back = ~(out.se[rows] ** 2 < qr.se**2 + bias**2) & np.isfinite(qr.v0)
    _use_quadratic(t, q, rows[back], out, first)


#: Step 6e: the integrated substrate-inhibition curve (:mod:`vzero.plugins.rates.sicurve`) for wells whose
#: power-law order is low (:func:`_inhibition_hook`; docs/rates.md, model-choice step 6e). False: never tried.
SI_STEP = True


def _inhibition_hook(t: np.ndarray, y: np.ndarray, sc: Screen, q: EarlyQuadratic, rows: np.ndarray, pw: RateResult,
                     r_mm: np.ndarray, s0_all: np.ndarray, spc: float, out: _Estimates,
                     first: np.ndarray, *, lof_ratio: float, agree_z: float) -> None:
    """The wells ``rows`` (power law ``pw`` fitted; ``r_mm`` the Michaelis–Menten fit's residual RMS over the
    read noise) that are not on the Hill curve take the substrate-inhibition curve where
    :func:`vzero.plugins.rates.sicurve.inhibition_step` keeps it (code 5; it tries only wells whose power-law
    order is below :data:`vzero.plugins.rates.sicurve.SI_ORDER`); in place."""
    from vzero.plugins.rates.sicurve import inhibition_step

    sub = out.code[rows] != 4.0
    rows, r_mm = rows[sub], r_mm[sub]
    if rows.size == 0:
        return
    pw_v0 = pw.v0[sub]
    keep, fit = inhibition_step(t, y[rows], sc.valid[rows], s0_all[rows], spc, sc.sigma[rows],
                                _start_baseline(t, y[rows], sc.valid[rows], pw_v0), pw_v0, pw.extra["order"][sub],
                                r_mm, q.v0[rows], q.se[rows],
                                lof_ratio=lof_ratio, agree_z=agree_z)
    r = rows[keep]
    out.v0[r], out.se[r], out.code[r], out.ratio[r] = fit["v0"][keep], fit["se"][keep], 5.0, fit["ratio"][keep]
    out.goodness[r] = np.nan
    last = t.size - 1 - np.argmax(sc.valid[r][:, ::-1], axis=1)
    out.w_start[r], out.w_end[r], out.n_pts[r] = t[first[r]], t[last], sc.n_valid[r]


def _pool_keys(groups: np.ndarray, n_w: int) -> np.ndarray:
    """``pool_groups`` checked: one integer per well (negative: a well in no pool)."""
    key = np.asarray(groups, dtype=np.int64)
    if key.shape != (n_w,):
        raise ValueError(f"pool_groups has {key.size} entries for {n_w} wells: give one integer per well")
    return key


def _lag_clock_step(t: np.ndarray, y: np.ndarray, s0_all: np.ndarray, spc: float, sc: Screen, sigma: np.ndarray,
                    lagged: np.ndarray, usable: np.ndarray, v0: np.ndarray, se: np.ndarray, code: np.ndarray,
                    lag_s: np.ndarray, extra: dict[str, np.ndarray], w_start: np.ndarray, flags: np.ndarray, *,
                    min_points: int) -> None:
    """Step 8 for one pool of wells (``usable``, of which ``lagged`` showed a lag): the lag wells on the
    enzyme's active time, sharing the decay constant, then the pool's lag and decay for its other usable wells
    (:func:`vzero.plugins.rates.lagfit.plate_clock`). In place."""
    rows = np.flatnonzero(lagged)
    lf = lag_clock_fit(t, y[rows], s0_all[rows], spc, min_points=min_points, sigma=sigma[rows])
    ok = np.isfinite(lf["v0"])
    r = rows[ok]
    v0[r], se[r], code[r] = lf["v0"][ok], lf["stderr"][ok], 3.0
    lag_s[r], extra["k_decay"][r] = lf["tau"][ok], lf["k"][ok]
    extra["rmse_over_noise"][r] = lf["ratio"][ok]
    w_start[r] = t[0]
    flags[r[lf["k"][ok] > 0]] |= int(Flag.DECAY)
    # the pool's lag and decay for its wells where the detector saw no lag (too little signal)
    others = np.flatnonzero(usable & ~lagged)
    pc = plate_clock(t, y[others], s0_all[others], spc, lf, int(usable.sum()), sigma=sigma[others],
                     min_points=min_points)
    r = others[pc["take"]]
    v0[r], se[r], code[r] = pc["v0"][pc["take"]], pc["stderr"][pc["take"]], 3.0
    lag_s[r], extra["k_decay"][r] = pc["tau"][pc["take"]], pc["k"][pc["take"]]
    extra["rmse_over_noise"][r], w_start[r] = pc["ratio"][pc["take"]], t[0]
    flags[r] |= int(Flag.LAG)
    flags[r[pc["k"][pc["take"]] > 0]] |= int(Flag.DECAY)


def _pool_hook(t: np.ndarray, y: np.ndarray, sc: Screen, q: EarlyQuadratic, s0_all: np.ndarray, spc: float,
               flags: np.ndarray, out: _Estimates, first: np.ndarray, groups: np.ndarray | None,
               shared: dict[str, np.ndarray], *, lof_ratio: float, agree_z: float, min_points: int,
               blanks: tuple[np.ndarray, np.ndarray] | None = None) -> None:
    """Step 9: the plate's shape (:func:`vzero.plugins.rates.poolshape.pool_shape`, which decides whether a
    group needs one) for the wells that take it (codes 6 Hill, 7 substrate inhibition), one shape per pooling
    group (``groups``: an integer per well, negative for wells never pooled; None: the whole plate is one
    group); wells flagged LAG or DECAY are left out. ``shared`` gets, for the wells that take a shape, their
    pool (``shape_pool``) and the shape's loadings on their ln v0 (``shape_load_1``, ``shape_load_2``,
    :attr:`vzero.plugins.rates.poolshape.PooledShape.load`): the error those wells share. ``blanks``: the
    wells' blank sets and blank shares, for the shape's covariance. In place."""
    from vzero.plugins.rates.poolshape import pool_shape

    n_w = y.shape[0]
    code = np.where((flags & int(Flag.LAG | Flag.DECAY)) != 0, np.nan, out.code)
    key = np.zeros(n_w, dtype=np.int64) if groups is None else groups
    code = np.where(key >= 0, code, np.nan)
    shaped = np.isin(code, (0.0, 1.0, 2.0, 4.0, 5.0))  # the models pool_shape pools (its point 2)
    if not shaped.any():
        return
    with np.errstate(invalid="ignore"):
        base0 = np.full(n_w, np.nan)
        ok = sc.usable & np.isfinite(out.v0)
        base0[ok] = _start_baseline(t, y[ok], sc.valid[ok], out.v0[ok])
    # one enzyme (and one inhibitor level) per group: the shape is fitted within each group that shows it;
    # a loop over the few groups of the layout, never over wells
    for g in np.unique(key[shaped]):
        code_g = np.where(key == g, code, np.nan)
        pc = pool_shape(t, y, sc.valid, s0_all, spc, sc.sigma, code_g, out.v0, out.se, base0, q.v0, q.se,
                        lof_ratio=lof_ratio, agree_z=agree_z, min_reads=min_points, smooth_misfit=smooth_misfit,
                        blank_sets=None if blanks is None else blanks[0],
                        blank_share=None if blanks is None else blanks[1])
        r = np.flatnonzero(pc.take)
        if r.size == 0:
            continue
        out.v0[r], out.se[r], out.code[r], out.ratio[r] = pc.v0[r], pc.se[r], pc.code, pc.ratio[r]
        shared["shape_pool"][r] = float(g)
        shared["shape_load_1"][r], shared["shape_load_2"][r] = pc.load[r, 0], pc.load[r, 1]
        out.goodness[r] = np.nan
        last = t.size - 1 - np.argmax(sc.valid[r][:, ::-1], axis=1)
        out.w_start[r], out.w_end[r], out.n_pts[r] = t[first[r]], t[last], sc.n_valid[r]


def model_choice(
    time: np.ndarray,
    signal: np.ndarray,
    *,
    s0: np.ndarray | None = None,
    signal_per_conc: float | None = None,
    min_points: int = 8,
    lof_ratio: float = 1.4,
    tie: float = 0.01,
    window_conversion: float = 0.20,
    agree_z: float = AGREE_Z,
    censored_reads: int = CENSORED_READS,
    find_lag: bool = True,
    pool_shape: bool = True,
    pool_groups: np.ndarray | None = None,
    blank_sets: np.ndarray | None = None,
    blank_share: np.ndarray | None = None,
) -> RateResult:
    """Initial rate (signal/s) per well by the model the well's own reads support; see the module text."""
    t = np.asarray(time, dtype=float)
    y = trim_censored(np.array(signal, dtype=float, ndmin=2), censored_reads)
    sc0 = screen(y, min_points=min_points, time=t)
    spikes = find_spikes(t, y, sc0.sigma)
    y[spikes] = np.nan
    known = s0 is not None and signal_per_conc is not None
    n_w = y.shape[0]
    if pool_groups is not None:
        pool_groups = _pool_keys(pool_groups, n_w)
    sc = screen(y, min_points=min_points, time=t) if spikes.any() else sc0  # the same reads: the same screen
    sigma = sc.sigma
    full = conversion_scale(s0, signal_per_conc, n_w) if known else None
    q = early_quadratic(t, y, full, frac=window_conversion, min_points=min_points, sigma=sigma)
    v0, se = np.where(sc.usable, q.v0, np.nan), np.where(sc.usable, q.se, np.nan)
    code = np.where(np.isfinite(v0), 2.0, np.nan)
    ratio, goodness = q.rmse_over_noise.copy(), q.goodness.copy()
    first = np.argmax(sc.valid, axis=1)
    w_start = np.where(sc.usable, t[first], np.nan)
    w_end, n_pts = np.where(sc.usable, q.end_s, np.nan), np.where(sc.usable, q.n, 0)
    order, pw_v0 = np.full(n_w, np.nan), np.full(n_w, np.nan)  # of the power-law curve, where fitted
    misfit = np.full(n_w, np.nan)
    est = _Estimates(v0, se, code, ratio, goodness, w_start, w_end, n_pts)
    s0_all = np.broadcast_to(np.asarray(s0 if known else np.nan, float), (n_w,))
    spc = float(signal_per_conc) if known else np.nan  # type: ignore[arg-type]
    skip = _skippable(q, sc, s0_all, spc, BIAS_SHARE) if known else np.zeros(n_w, bool)
    fit_rows = np.flatnonzero(sc.usable & ~skip)
    fit_flags = np.zeros(n_w, np.int64)

    def take(rows: np.ndarray, res: RateResult, code_value: float, sel: np.ndarray) -> None:
        r = rows[sel]
        v0[r], se[r], code[r] = res.v0[sel], res.stderr[sel], code_value
        ratio[r], goodness[r] = res.extra["rmse_over_noise"][sel], res.goodness[sel]
        w_start[r], w_end[r], n_pts[r] = res.window_start_s[sel], res.window_end_s[sel], res.n_points[sel]

    if fit_rows.size:
        mm = progress_curve(t, y[fit_rows], s0=s0_all[fit_rows] if known else None,
                            signal_per_conc=signal_per_conc, min_points=min_points, fail_ratio=np.inf,
                            screened=_rows(sc, fit_rows), quick=True)
        fit_flags[fit_rows] = mm.flags
        r_mm = mm.extra["rmse_over_noise"]
        with np.errstate(invalid="ignore"):
            ok_mm = np.isfinite(mm.v0) & (r_mm <= lof_ratio)
            u = mm.extra["km"] / (mm.extra["km"] + s0_all[fit_rows])
            # the power law can win only where Michaelis–Menten leaves more than the noise, sits at the edge
            # of the orders it can take, or its v0 disagrees with the model-free quadratic's beyond
            # agree_z standard errors of their difference (sqrt(SE_q² - SE²) when both are unbiased, the
            # curve using the same reads and more: Hausman 1978, Econometrica 46:1251), allowing for the
            # quadratic's own third-order bias under this curve (|n (3n - 2)| x²/10 of v0, :func:`_skippable`,
            # with n = u and x the conversion over the quadratic's window)
            room = np.sqrt(np.fmax(q.se[fit_rows] ** 2 - mm.stderr**2, (DIFF_FLOOR * q.se[fit_rows]) ** 2))
            x_w = np.abs(mm.v0) * (q.end_s[fit_rows] - t[0]) / (np.abs(spc) * s0_all[fit_rows]) if known else 0.0
            q_bias = 0.1 * np.abs(u * (3 * u - 2)) * x_w**2 * np.abs(mm.v0)
            doubt = np.abs(mm.v0 - q.v0[fit_rows]) > agree_z * room + q_bias
            try_pw = ~ok_mm | ~(u > U_EDGE) | ~(u < 1.0 - U_EDGE) | doubt
        take(fit_rows, mm, 0.0, ok_mm)
        if not known:
            # a well left with the quadratic because the curve's residual RMS passed lof_ratio read noises: the
            # robust read-noise estimate scatters (0.74-1.33 of the true noise over 60 reads), and where it
            # is low the curve fits yet fails, and the quadratic's SE from that noise is too small
            # (docs/rates.md); its SE is scaled to the larger of the noise and the curve's residual RMS
            back = fit_rows[~ok_mm & (r_mm > 1.0)]
            se[back] *= r_mm[~ok_mm & (r_mm > 1.0)]
        rows = fit_rows[try_pw]
        if known and rows.size:
            pw = progress_curve(t, y[rows], s0=s0_all[rows], signal_per_conc=spc, min_points=min_points,
                                fail_ratio=np.inf, model="power", screened=_rows(sc, rows), quick=True)
            order[rows] = pw.extra["order"]
            r_pw, r_old = pw.extra["rmse_over_noise"], r_mm[try_pw]
            with np.errstate(invalid="ignore"):
                better = np.isfinite(pw.v0) & (~np.isfinite(r_old) | (r_pw < r_old - tie))
                # the better description is kept when it fits within the noise and, for the power law, its v0
                # agrees at t = 0 with the model-free quadratic within agree_z of its standard errors: the
                # power law's order drifts with conversion for cooperative enzymes, a bias the residuals
                # barely show
                win = better & (r_pw <= lof_ratio) & ~(np.abs(pw.v0 - q.v0[rows]) > agree_z * q.se[rows])
            take(rows, pw, 1.0, win)
            pw_v0[rows] = pw.v0
            back = (better & ~win) | (~better & ~ok_mm[try_pw])
            lost = rows[back]  # back to the quadratic
            _use_quadratic(t, q, lost, est, first)
            # as without S0: where neither curve describes the reads within lof_ratio read noises, a low
            # read-noise estimate is the common cause, and the quadratic's SE from it is too small (SE 0.71x
            # the scatter on such wells, docs/rates.md); it is scaled to the better curve's residual RMS
            with np.errstate(invalid="ignore"):
                r_fit = np.fmin(np.where(np.isfinite(r_old), r_old, np.inf), np.where(np.isfinite(r_pw), r_pw, np.inf))
            misfit_back = back & np.isfinite(r_fit) & (r_fit > lof_ratio)
            se[rows[misfit_back]] *= r_fit[misfit_back]
            if HILL_ORDER is not None:
                with np.errstate(invalid="ignore"):
                    r_best = np.fmin(np.where(np.isfinite(r_old), r_old, np.inf),
                                     np.where(np.isfinite(r_pw), r_pw, np.inf))
                    rising = pw.extra["order"] > 1.0 + HILL_ORDER
                _hill_step(t, y, sc, q, rows[rising], pw.v0[rising], pw.extra["order"][rising], r_best[rising],
                           ok_mm[try_pw][rising] & (code[rows[rising]] == 0.0), s0_all, spc, v0, se, code, ratio,
                           goodness, w_start, w_end, n_pts, first, lof_ratio=lof_ratio, agree_z=agree_z)
            if SI_STEP:
                _inhibition_hook(t, y, sc, q, rows, pw, r_old, s0_all, spc, est, first,
                                 lof_ratio=lof_ratio, agree_z=agree_z)
        if known:
            mm_fit = {"v0": np.full(n_w, np.nan), "km": np.full(n_w, np.nan), "vmax": np.full(n_w, np.nan)}
            mm_fit["v0"][fit_rows], mm_fit["km"][fit_rows] = mm.v0, mm.extra["km"]
            mm_fit["vmax"][fit_rows] = mm.extra["vmax"]
            misfit = _shape_step(t, y, sc, q, s0_all, spc, mm_fit, pw_v0, order, est, first, lof_ratio=lof_ratio,
                                 agree_z=agree_z)
            _same_reads_step(t, q, sc, s0_all, spc, order, est, first)
    flags = np.asarray(sc.flags, dtype=np.int64) | (fit_flags & ~np.int64(int(Flag.FIT_FAILED | Flag.NOISY)))
    flags[spikes.any(axis=1)] |= int(Flag.SPIKE)
    lag_s = np.where(sc.usable, 0.0, np.nan)
    extra = {"rmse_over_noise": ratio, "read_noise": sigma, "k_decay": np.full(n_w, np.nan),
             "shape_pool": np.full(n_w, np.nan), "shape_load_1": np.full(n_w, np.nan),
             "shape_load_2": np.full(n_w, np.nan)}
    if find_lag:
        # no spike found: the reads are unchanged, and the lag detector's own search would find none either
        _, lag_all, has_lag = detect_lag(t, y, sc, spike_free=not spikes.any())
        lag_s = np.where(has_lag, lag_all, lag_s)
        flags[has_lag] |= int(Flag.LAG)
        if has_lag.any() and known:
            # one enzyme per pool (the layout's group and inhibitor level; the whole plate without them): the
            # lag and decay constant are shared within a pool only (a loop over the few pools, not wells)
            pools = np.zeros(n_w, dtype=np.int64) if pool_groups is None else pool_groups
            for g in np.unique(pools[has_lag]):
                _lag_clock_step(t, y, s0_all, spc, sc, sigma, has_lag & (pools == g), sc.usable & (pools == g),
                                v0, se, code, lag_s, extra, w_start, flags, min_points=min_points)
        elif has_lag.any():
            rows = np.flatnonzero(has_lag)
            ld = lag_decay(t, y[rows], min_points=min_points, fail_ratio=np.inf)
            v0[rows], se[rows], code[rows] = ld.v0, ld.stderr, 3.0
            w_start[rows], w_end[rows], n_pts[rows] = ld.window_start_s, ld.window_end_s, ld.n_points
            extra["rmse_over_noise"][rows] = ld.extra["rmse_over_noise"]
    if known:
        _decay_model(t, y, s0_all, spc, code, v0, se, flags, extra, w_start, order,
                     lof_ratio=lof_ratio, min_points=min_points)
        if pool_shape:
            blanks = None if blank_sets is None or blank_share is None else \
                (np.asarray(blank_sets), np.asarray(blank_share, float))
            _pool_hook(t, y, sc, q, s0_all, spc, flags, est, first, pool_groups, extra, lof_ratio=lof_ratio,
                       agree_z=agree_z, min_points=min_points, blanks=blanks)
    failed = sc.usable & ~np.isfinite(v0)
    flags[failed] |= int(Flag.FIT_FAILED)
    bad = (flags & int(Flag.ALL_MISSING | Flag.TOO_FEW_POINTS | Flag.NO_SIGNAL | Flag.FIT_FAILED)) != 0
    v0[bad], se[bad] = np.nan, np.nan
    flag_noisy(v0, se, flags)
    extra["model"], extra["misfit"] = code, misfit
    with np.errstate(invalid="ignore", divide="ignore"):
        extra["rate_t"] = v0 / se
    return RateResult(v0=v0, stderr=se, window_start_s=w_start, window_end_s=w_end,
                      goodness=goodness, flags=flags, n_points=n_pts, lag_s=lag_s,
                      goodness_name="r_squared", extra=extra)
