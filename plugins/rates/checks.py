"""The checks every built-in rates method gets after its kernel: lags and loss of activity (decay).

A method's own kernel may or may not look for a lag or a falling rate. Whatever it did, the framework-side
kernel (:class:`vzero.plugins.rates.KernelRates` and the ``window`` method) runs these shared checks on the
same reads, so the flags mean the same on every method:

* LAG, from :func:`vzero.plugins.rates.lagdecay.detect_lag` (:func:`vzero.plugins.rates.lagdecay.mark_lags`);
* DECAY, from the first-order-decay fit of :func:`vzero.plugins.rates.lagdecay.lag_decay`: the fitted rate at
  the last read is below what substrate depletion can explain, ``(1 - x)^n`` with ``n`` =
  :data:`DEPLETION_ORDER` (needs s0 and signal_per_conc; without them decay and depletion cannot be told
  apart from one curve and DECAY is not assessed); on wells flagged LAG, from the lag clock instead
  (:func:`vzero.plugins.rates.lagfit.decay_after_lag`: a first-order decay fitted from the lag's end takes the
  still rising activity for a steady one and missed the decay after a lag).

A method that does not model what was found adds UNMODELLED: its rate is not the initial rate, and the fit
stage leaves the well out by default, with the reason in fits.csv.

* DISAGREES, from :func:`mark_disagreement`: the method's v0 differs from the model-free estimate (the slope
  at t = 0 of a quadratic through the reads up to 20 % conversion, :func:`vzero.plugins.rates.choice.
  early_quadratic`, the estimate ``model-choice`` starts from) by more than :data:`DISAGREE_Z` standard errors
  of the difference plus the quadratic's own third-order bias. It sees biased rates (curvature, depletion, a
  curve of the wrong shape) that NOISY, a precision flag, cannot. Needs s0 and signal_per_conc (the window is
  set in conversion); skipped quietly without them, and after ``model-choice``, which makes the same
  comparison while choosing its model.
* IMPRECISE, from :func:`mark_imprecision`: the method's rate is less precise than the model-free estimate of
  the same reads (its SE above :data:`IMPRECISE_SE_SHARE` of that estimate's tolerance, the larger of 5 % of
  v0 and twice SE_q: a careful analysis by hand gets within it) and lies further from that estimate than
  :data:`IMPRECISE_K` tolerances: a doubtful rate, off through the method's imprecision rather than a wrong
  model, where a careful analysis of the same reads does better (on the benchmark such rates are off by more
  than 5 % nearly always and run low as a group, so the fit leaves them out by default). Sample wells only
  (blanks, standards and empty wells never carry it); same conditions and exceptions as DISAGREES, with
  which it shares the estimate.
"""

from __future__ import annotations

import dataclasses

import numpy as np
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.rates.lagdecay import lag_decay, mark_lags
from vzero.plugins.rates.lagfit import decay_after_lag

#: Order of the fastest fall of the rate, ``(1 - x)^n`` at conversion x, that substrate depletion is allowed
#: to explain before a falling rate is called decay. Michaelis–Menten gives at most n = 1 and a Hill enzyme
#: n = h; 3 covers the Hill coefficients the benchmark simulates (h up to 3) and stays sensitive at low
#: conversion, where any order fails to explain a fast fall (measured in docs/rates.md, "Flags: measured").
DEPLETION_ORDER = 3.0


def mark_decay(time: np.ndarray, signal: np.ndarray, result: RateResult, *, s0: np.ndarray | None,
               signal_per_conc: float | None, modelled: bool, min_points: int = 8,
               depletion_order: float = DEPLETION_ORDER) -> RateResult:
    """DECAY where the rate falls faster than depletion explains (module text), and UNMODELLED as well where
    the method does not model decay (``modelled`` False). Wells without a rate are not checked, except those whose
    fit failed (a decay is then the likely reason). Returns a new
    result (the same one when nothing is found or s0/signal_per_conc are unknown)."""
    if s0 is None or signal_per_conc is None:
        return result
    v0 = np.asarray(result.v0, dtype=float)
    t = np.asarray(time, dtype=float)
    y_all = np.array(signal, dtype=float, ndmin=2)
    s_all = np.broadcast_to(np.asarray(s0, dtype=float), v0.shape)
    rated = np.isfinite(v0) | ((np.asarray(result.flags) & int(Flag.FIT_FAILED)) != 0)
    # after a lag the rate first rises: those wells are judged on the lag clock (lagfit.decay_after_lag)
    lagged = rated & ((np.asarray(result.flags) & int(Flag.LAG)) != 0)
    rows = np.flatnonzero(rated & ~lagged & _falling(t, y_all, s_all, float(signal_per_conc), depletion_order,
                                                     min_points))
    hit_rows = np.zeros(0, np.int64)
    if rows.size:
        ld = lag_decay(time, y_all[rows], s0=s_all[rows], signal_per_conc=signal_per_conc, min_points=min_points,
                       fail_ratio=np.inf, depletion_order=depletion_order)
        hit_rows = rows[(np.asarray(ld.flags) & int(Flag.DECAY)) != 0]
    lag_rows = np.flatnonzero(lagged)
    if lag_rows.size:
        late = decay_after_lag(t, y_all[lag_rows], s_all[lag_rows], float(signal_per_conc), min_points=min_points)
        hit_rows = np.concatenate([hit_rows, lag_rows[late]])
    if hit_rows.size == 0:
        return result
    flags = np.asarray(result.flags, dtype=np.int64).copy()
    flags[hit_rows] |= int(Flag.DECAY)
    if not modelled:
        flags[hit_rows] |= int(Flag.UNMODELLED)
    return dataclasses.replace(result, flags=flags)


#: Margin of the quick pre-screen in :func:`_falling`: the first block's slope is the rate near the block's
#: middle (n_time/16 reads in), below v0 by k·t there when the enzyme decays at k; 1.1 keeps decays up to
#: k ≈ 0.1 / (n_time/16 read intervals), e.g. 3e-3 /s at 120 reads of 5 s (our choice; the tests check that
#: the flags are the same with and without the pre-screen on decaying and clean plates).
PRESCREEN_MARGIN = 1.1


def _falling(t: np.ndarray, y: np.ndarray, s0: np.ndarray, spc: float, order: float, min_points: int) -> np.ndarray:
    """Wells worth the decay fit: the last block's slope (lines over n_time/8 reads) below ``PRESCREEN_MARGIN``
    times the first block's times ``(1 - x_end)^order`` plus three standard errors, where that depletion bound
    is itself more than three standard errors from zero. A well above it falls no faster than depletion
    explains, and near full conversion decay and depletion cannot be told apart, whatever the fit would say;
    the fit is several times the cost of a rate method, so most wells are spared it."""
    from vzero.plugins.rates.lagdecay import _block_lines
    from vzero.plugins.rates.noise import conversion_scale, screen

    n_w, n_t = y.shape
    width = max(4, n_t // 8)
    if n_t < 3 * width:
        return np.ones(n_w, dtype=bool)
    sc = screen(y, min_points=min_points, time=t)
    slope, _, _, inv_sxx = _block_lines(t, y, sc.valid, width)
    d = np.sign(sc.change)
    with np.errstate(invalid="ignore", divide="ignore"):
        first, last = d * slope[:, 0], d * slope[:, -1]
        se = sc.sigma * np.hypot(np.sqrt(inv_sxx[:, 0]), np.sqrt(inv_sxx[:, -1]))
        full = conversion_scale(s0, spc, n_w)
        x_end = np.clip(np.abs(sc.change) / full, 0.0, 1.0)
        allowed = first * (1.0 - x_end) ** order  # the slowest end rate depletion explains
        # below it, and that bound itself clear of zero (near full conversion nothing can be told apart)
        return (last < PRESCREEN_MARGIN * allowed + 3.0 * se) & (allowed > 3.0 * se)


def shared_checks(time: np.ndarray, signal: np.ndarray, result: RateResult, *, s0: np.ndarray | None,
                  signal_per_conc: float | None, finds_lags: bool, models_decay: bool,
                  min_points: int = 8, compares_model_free: bool = False,
                  samples: np.ndarray | None = None) -> RateResult:
    """The checks of the module text on a kernel's ``result``: the lag check where the kernel did not look
    for lags itself (``finds_lags`` False), the decay check where it does not model decay, and the agreement
    with the model-free estimate and the precision against it where the kernel did not make that comparison
    itself (``compares_model_free`` False). ``samples`` (bool per well; None: all) are the wells IMPRECISE
    may mark."""
    if not finds_lags:
        result = mark_lags(time, signal, result, modelled=False, min_points=min_points)
    if not models_decay:
        result = mark_decay(time, signal, result, s0=s0, signal_per_conc=signal_per_conc, modelled=False,
                            min_points=min_points)
    if compares_model_free:
        return result
    return compare_model_free(time, signal, result, s0=s0, signal_per_conc=signal_per_conc, min_points=min_points,
                              samples=samples)


def compare_model_free(time: np.ndarray, signal: np.ndarray, result: RateResult, *, s0: np.ndarray | None,
                       signal_per_conc: float | None, min_points: int = 8,
                       samples: np.ndarray | None = None) -> RateResult:
    """DISAGREES and IMPRECISE on ``result`` from one model-free estimate of the wells of :func:`compared_rows`
    (computing it is most of the two checks' cost). Skipped quietly without s0 or signal_per_conc."""
    if s0 is None or signal_per_conc is None:
        return result
    rows = compared_rows(result)
    if rows.size == 0:
        return result
    ref = model_free(time, np.array(signal, dtype=float, ndmin=2)[rows],
                     s0=np.broadcast_to(np.asarray(s0, dtype=float), np.shape(result.v0))[rows],
                     signal_per_conc=signal_per_conc, min_points=min_points)
    result = mark_disagreement(time, signal, result, s0=s0, signal_per_conc=signal_per_conc, min_points=min_points,
                               ref=ref)
    return mark_imprecision(time, signal, result, s0=s0, signal_per_conc=signal_per_conc, min_points=min_points,
                            samples=samples, ref=ref)


#: Standard errors of the difference (plus the quadratic's third-order bias) beyond which a method's v0 and
#: the model-free estimate disagree (DISAGREES). Chosen by a sweep on the benchmark (docs/rates.md, "Flags:
#: measured"): the flag should fire on fewer than 10 % of rates within tolerance and more than 80 % of bad ones.
#: 3 since `progress` 1.1: its curves' standard errors no longer err on the large side, and at 4 the flag saw 68 %
#: of its bad rates (93 % at 3, with at most 3.8 % of any method's rates within tolerance).
DISAGREE_Z = 3.0

#: Conversion up to which the model-free quadratic is fitted (as ``model-choice``'s ``window_conversion``).
MODEL_FREE_CONVERSION = 0.20


@dataclasses.dataclass(frozen=True)
class ModelFree:
    """The model-free estimate per well (:func:`model_free`): ``v0`` the slope at t = 0 of the early quadratic
    and ``se`` its standard error from the read noise (signal/s); ``bias`` the share of v0 by which the
    quadratic may be off from the curve's third-order terms (0 where unknown); ``usable`` the screen's verdict
    (enough finite reads, not constant)."""

    v0: np.ndarray
    se: np.ndarray
    bias: np.ndarray
    usable: np.ndarray


def model_free(time: np.ndarray, signal: np.ndarray, *, s0: np.ndarray, signal_per_conc: float,
               min_points: int = 8, window_conversion: float = MODEL_FREE_CONVERSION) -> ModelFree:
    """The slope at t = 0 of the quadratic through each well's reads up to ``window_conversion`` of the
    substrate (at least ``min_points`` reads; single-read spikes and the reads beside saturated blocks masked
    first), exactly as ``model-choice`` computes it, with its standard error ``SE_q`` from the read noise and
    its third-order bias share ``b`` predicted from its own curvature
    (:func:`vzero.plugins.rates.choice.quadratic_bias`). The estimate a careful analysis by hand makes; both
    DISAGREES and IMPRECISE are judged against it."""
    from vzero.plugins.rates.choice import CENSORED_READS, early_quadratic, quadratic_bias, trim_censored
    from vzero.plugins.rates.noise import conversion_scale, screen
    from vzero.plugins.rates.spikes import find_spikes

    t = np.asarray(time, dtype=float)
    y = trim_censored(np.array(signal, dtype=float, ndmin=2), CENSORED_READS)
    sc = screen(y, min_points=min_points, time=t)
    spikes = find_spikes(t, y, sc.sigma)
    if spikes.any():
        y[spikes] = np.nan
        sc = screen(y, min_points=min_points, time=t)
    n_w = y.shape[0]
    s = np.broadcast_to(np.asarray(s0, dtype=float), (n_w,))
    q = early_quadratic(t, y, conversion_scale(s, signal_per_conc, n_w), frac=window_conversion,
                        min_points=min_points, sigma=sc.sigma)
    _, bias = quadratic_bias(q, np.abs(sc.change), s, float(signal_per_conc))
    return ModelFree(q.v0, q.se, np.nan_to_num(bias, nan=0.0), np.asarray(sc.usable, dtype=bool))


def model_free_gap(time: np.ndarray, signal: np.ndarray, v0: np.ndarray, stderr: np.ndarray, *,
                   s0: np.ndarray, signal_per_conc: float, min_points: int = 8,
                   window_conversion: float = MODEL_FREE_CONVERSION, ref: ModelFree | None = None) -> np.ndarray:
    """Per well, how far ``v0`` (signal/s, SE ``stderr``) lies from the model-free estimate ``v_q``
    (:func:`model_free`; ``ref`` when already computed on the same wells), in standard errors of the
    difference after the quadratic's own bias is allowed for: ``(|v0 - v_q| - b |v_q|) / SE_d`` (NaN where
    either is missing). Dimensionless.

    The two estimates use overlapping reads, so they are correlated and the variance of their difference is
    not the sum of the variances. Where one estimate is efficient (the smallest variance of the unbiased
    estimates from those reads) its covariance with any other unbiased one equals its own variance, so
    ``Var(d) = |SE_q² - SE²|`` (Hausman 1978, Econometrica 46:1251; the form ``model-choice`` uses). The
    more precise of the two is taken to be efficient; where the two are about equally precise they still
    differ through their different weights, so ``SE_d`` is at least
    :data:`vzero.plugins.rates.choice.DIFF_FLOOR` of the larger SE.
    """
    q = ref if ref is not None else model_free(time, signal, s0=s0, signal_per_conc=signal_per_conc,
                                               min_points=min_points, window_conversion=window_conversion)
    v = np.asarray(v0, dtype=float)
    se = np.asarray(stderr, dtype=float)
    with np.errstate(invalid="ignore"):
        gap = (np.abs(v - q.v0) - q.bias * np.abs(q.v0)) / difference_se(q.se, se)
    return np.where(q.usable, gap, np.nan)


def difference_se(se_a: np.ndarray, se_b: np.ndarray) -> np.ndarray:
    """Standard error of the difference of two estimates of one quantity from overlapping reads, the more
    precise of them efficient: ``sqrt(|SE_a² - SE_b²|)`` (Hausman 1978), at least
    :data:`vzero.plugins.rates.choice.DIFF_FLOOR` of the larger SE (see :func:`model_free_gap`). Same unit
    as the SEs."""
    from vzero.plugins.rates.choice import DIFF_FLOOR

    a, b = np.asarray(se_a, dtype=float), np.asarray(se_b, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.sqrt(np.fmax(np.abs(a**2 - b**2), (DIFF_FLOOR * np.fmax(a, b)) ** 2))


def compared_rows(result: RateResult) -> np.ndarray:
    """Indices of the wells compared with the model-free estimate: those with a rate and without a LAG flag
    (a lag puts the quadratic from t = 0 off, and LAG already says so)."""
    flags = np.asarray(result.flags, dtype=np.int64)
    return np.flatnonzero(np.isfinite(np.asarray(result.v0, dtype=float)) & ((flags & int(Flag.LAG)) == 0))


def mark_disagreement(time: np.ndarray, signal: np.ndarray, result: RateResult, *, s0: np.ndarray | None,
                      signal_per_conc: float | None, min_points: int = 8, z: float = DISAGREE_Z,
                      ref: ModelFree | None = None) -> RateResult:
    """DISAGREES where :func:`model_free_gap` exceeds ``z`` on the wells of :func:`compared_rows` (``ref``: the
    model-free estimate of those rows when already computed). Returns a new result (the same one when nothing
    is found or s0/signal_per_conc are unknown)."""
    if s0 is None or signal_per_conc is None:
        return result
    rows = compared_rows(result)
    if rows.size == 0:
        return result
    y = np.array(signal, dtype=float, ndmin=2)[rows]
    flags = np.asarray(result.flags, dtype=np.int64)
    s = np.broadcast_to(np.asarray(s0, dtype=float), flags.shape)[rows]
    gap = model_free_gap(time, y, np.asarray(result.v0, float)[rows], np.asarray(result.stderr, float)[rows],
                         s0=s, signal_per_conc=signal_per_conc, min_points=min_points, ref=ref)
    with np.errstate(invalid="ignore"):
        hit = gap > z
    if not hit.any():
        return result
    flags = flags.copy()
    flags[rows[hit]] |= int(Flag.DISAGREES)
    return dataclasses.replace(result, flags=flags)


#: Relative floor of the model-free tolerance (:func:`model_free_tolerance`): the issue's 5 % of v0.
TOLERANCE_FLOOR = 0.05

#: Share of the model-free tolerance above which a method's SE counts as less precise than the careful
#: analysis (IMPRECISE). 0.5 puts the line at the larger of SE_q and 2.5 % of v0: a rate less precise than the
#: quadratic through the same reads, by enough to matter (docs/rates.md, "Flags: measured").
IMPRECISE_SE_SHARE = 0.5

#: Model-free tolerances beyond which an imprecise rate lies too far from the model-free estimate (IMPRECISE).
#: Chosen by a sweep on the benchmark (docs/rates.md, "Flags: measured"): the flag should fire on fewer than
#: 10 % of rates within tolerance and more than 80 % of bad ones.
IMPRECISE_K = 1.25


def model_free_tolerance(ref: ModelFree) -> np.ndarray:
    """Per well, what a careful analysis of the reads gets within (signal/s): the larger of
    :data:`TOLERANCE_FLOOR` of ``|v_q|`` and twice ``SE_q`` (the issue's tolerance, from the well's own reads
    rather than from repeated plates)."""
    return np.fmax(TOLERANCE_FLOOR * np.abs(ref.v0), 2.0 * ref.se)


def imprecision(v0: np.ndarray, stderr: np.ndarray, ref: ModelFree) -> tuple[np.ndarray, np.ndarray]:
    """Per well, the rate's SE and its distance from the model-free estimate ``|v0 - v_q|``, both over
    :func:`model_free_tolerance` (dimensionless; NaN where the reads are not usable or either estimate is
    missing).

    Unlike :func:`model_free_gap` the distance allows nothing for the quadratic's third-order bias: that
    allowance is read from the quadratic's curvature, which is mostly noise on the low-signal wells this
    measure is for, and there it swallowed the distance (bad rates of ``auto`` marked: 79 % with it, 93 %
    without, 40 draws; docs/rates.md). A precise but biased rate is DISAGREES's business; the SE share keeps
    IMPRECISE off it."""
    tol = model_free_tolerance(ref)
    v = np.asarray(v0, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.asarray(stderr, dtype=float) / tol
        far = np.abs(v - ref.v0) / tol
    return np.where(ref.usable, share, np.nan), np.where(ref.usable, far, np.nan)


def mark_imprecision(time: np.ndarray, signal: np.ndarray, result: RateResult, *, s0: np.ndarray | None,
                     signal_per_conc: float | None, min_points: int = 8, samples: np.ndarray | None = None,
                     se_share: float = IMPRECISE_SE_SHARE, k: float = IMPRECISE_K,
                     ref: ModelFree | None = None) -> RateResult:
    """IMPRECISE on the sample wells (``samples``, bool per well; None: all) of :func:`compared_rows` whose SE
    exceeds ``se_share`` and whose distance from the model-free estimate exceeds ``k`` model-free tolerances
    (:func:`imprecision`; ``ref``: the model-free estimate of those rows when already computed). Returns a
    new result (the same one when nothing is found or s0/signal_per_conc are unknown)."""
    if s0 is None or signal_per_conc is None:
        return result
    rows = compared_rows(result)
    if rows.size == 0:
        return result
    if ref is None:
        s = np.broadcast_to(np.asarray(s0, dtype=float), np.shape(result.v0))[rows]
        ref = model_free(time, np.array(signal, dtype=float, ndmin=2)[rows], s0=s,
                         signal_per_conc=signal_per_conc, min_points=min_points)
    share, far = imprecision(np.asarray(result.v0, float)[rows], np.asarray(result.stderr, float)[rows], ref)
    with np.errstate(invalid="ignore"):
        hit = (share > se_share) & (far > k)
    if samples is not None:
        hit &= np.asarray(samples, dtype=bool)[rows]
    if not hit.any():
        return result
    flags = np.asarray(result.flags, dtype=np.int64).copy()
    flags[rows[hit]] |= int(Flag.IMPRECISE)
    return dataclasses.replace(result, flags=flags)
