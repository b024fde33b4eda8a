"""Shared screening for every rate kernel: input checks, read noise, bad-well flags, conversion.

The read-noise estimator itself (:func:`read_noise`, :func:`row_median`, :data:`MAD_TO_SD`) lives in
:mod:`vzero.plugins.kinetics.readnoise`, shared with the blank stage, and is imported here under its names.

Every kernel first calls :func:`screen`, which finds the wells that cannot give a rate (all reads missing,
too few reads, total change within a few multiples of the read noise) *before* any fit is attempted, so that
nonlinear fits never run on them. All functions work on whole plates: ``signal`` is ``[n_wells, n_time]``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from vzero.errors import StageError
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.kinetics.readnoise import MAD_TO_SD, read_noise, row_median  # noqa: F401 (re-exported)

#: |t| of the straight line through all of a well's reads (slope over its standard error from the read
#: noise) at or below which the well has no signal: with white noise the chance that a well without change
#: passes it is about 6e-5. A line 11 standard errors from zero (a small but real slope) always gets a rate.
NO_SIGNAL_T = 4.0
#: Default minimum |v0| / stderr(v0); below it a rate is flagged NOISY (a relative error above 10 %).
NOISY_MIN_T = 10.0


def check_inputs(time: np.ndarray, signal: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(time, signal)`` as float arrays ``[n_time]`` and ``[n_wells, n_time]``.

    Raises :class:`~vzero.errors.StageError` when the shapes disagree or time is not strictly increasing
    (a plate-level problem: the importer should have caught it).
    """
    t = np.asarray(time, dtype=float)
    y = np.asarray(signal, dtype=float)
    if y.ndim == 1:
        y = y[None, :]
    if t.ndim != 1 or y.ndim != 2 or y.shape[1] != t.size:
        raise StageError(
            f"rate kernel: time has shape {t.shape} and signal {y.shape}; expected time [n_time] and "
            "signal [n_wells, n_time] with the same n_time.",
            hint="Pass one shared time axis and one row of reads per well.",
        )
    if t.size and (not np.all(np.isfinite(t)) or np.any(np.diff(t) <= 0)):
        raise StageError(
            "rate kernel: the time axis must be finite and strictly increasing.",
            hint="Check the import stage's time column (repeated or backwards times).",
        )
    return t, y


@dataclass(frozen=True)
class Screen:
    """What :func:`screen` found, per well (arrays ``[n_wells]`` unless noted).

    ``valid`` is ``[n_wells, n_time]`` (finite reads); ``sigma`` the read noise, at least 1e-7 times the
    largest |read| (below any real reader's resolution) so that noise-free simulations do not divide by
    zero; ``change`` the signed total change (mean of the last few reads minus mean of the first few);
    ``usable`` the wells a kernel should work on; ``slope_t`` the t statistic of the straight line through
    all finite reads (slope over its standard error from ``sigma``).
    """

    valid: np.ndarray
    n_valid: np.ndarray
    sigma: np.ndarray
    change: np.ndarray
    flags: np.ndarray
    usable: np.ndarray
    slope_t: np.ndarray


def screen(
    signal: np.ndarray,
    *,
    min_points: int,
    no_signal_t: float = NO_SIGNAL_T,
    time: np.ndarray | None = None,
) -> Screen:
    """Flag wells with no determinable rate before any fitting.

    ALL_MISSING: no finite read. TOO_FEW_POINTS: fewer than ``min_points`` finite reads. NO_SIGNAL: a
    statistical decision, the slope of the straight line through every finite read is not distinguishable
    from zero, ``|slope| / SE(slope) <= no_signal_t`` with ``SE = sigma / sqrt(sum (t - mean t)²)`` from the
    read noise (this includes constant wells). A curve that rises and levels off, or starts after a lag,
    still has a line slope many standard errors from zero. ``change`` (mean of the last m reads minus the
    first m, m = 3 or fewer) gives the direction of the signal.
    """
    valid = np.isfinite(signal)
    n_valid = valid.sum(axis=1)
    flags = np.zeros(signal.shape[0], dtype=np.int64)
    flags[n_valid == 0] |= int(Flag.ALL_MISSING)
    flags[(n_valid > 0) & (n_valid < min_points)] |= int(Flag.TOO_FEW_POINTS)
    n_t = signal.shape[1]
    if n_t and n_valid.size and n_valid.min() == n_t:  # every read finite (the common case): plain slices
        m1 = min(max(n_t // 3, 1), 3)
        change = signal[:, -m1:].mean(axis=1) - signal[:, :m1].mean(axis=1)
        scale = np.abs(signal).max(axis=1)
    else:
        m = np.clip(n_valid // 3, 1, 3)[:, None]
        rank = np.cumsum(valid, axis=1)
        first = valid & (rank <= m)
        last = valid & (rank > n_valid[:, None] - m)
        y0 = np.where(valid, signal, 0.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            change = (y0 * last).sum(axis=1) / last.sum(axis=1) - (y0 * first).sum(axis=1) / first.sum(axis=1)
            scale = np.nanmax(np.abs(np.where(valid, signal, np.nan)), axis=1, initial=0.0)
    sigma = read_noise(signal, time)
    sigma = np.fmax(np.nan_to_num(sigma, nan=0.0), 1e-7 * np.fmax(scale, 1e-300))
    slope_t = line_t(signal, valid, time, sigma)
    small = n_valid >= min_points
    no_sig = small & ~(np.abs(slope_t) > no_signal_t)
    flags[no_sig] |= int(Flag.NO_SIGNAL)
    return Screen(valid, n_valid, sigma, change, flags, flags == 0, slope_t)


def line_t(signal: np.ndarray, valid: np.ndarray, time: np.ndarray | None, sigma: np.ndarray) -> np.ndarray:
    """t statistic of the least-squares slope through each well's finite reads, ``slope * sqrt(Sxx) / sigma``
    (NaN for wells with fewer than two reads)."""
    n_t = signal.shape[1]
    t = np.arange(n_t, dtype=float) if time is None else np.asarray(time, dtype=float)
    w = valid.astype(float)
    yz = np.where(valid, signal, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        n = w.sum(axis=1)
        tbar = (w @ t) / n
        dt = (t[None, :] - tbar[:, None]) * w
        sxx = (dt * dt).sum(axis=1)
        slope = (dt * yz).sum(axis=1) / sxx
        return slope * np.sqrt(sxx) / sigma


def conversion_scale(
    s0: np.ndarray | None, signal_per_conc: float | None, n_wells: int
) -> np.ndarray | None:
    """Signal change at full conversion per well, ``|signal_per_conc| * s0`` (None when either is unknown).

    Percent conversion of a signal change ``d`` is then ``|d| / conversion_scale``.
    """
    if s0 is None or signal_per_conc is None:
        return None
    s = np.broadcast_to(np.asarray(s0, dtype=float), (n_wells,)).copy()
    if signal_per_conc == 0 or not np.isfinite(signal_per_conc):
        raise StageError(
            f"rate kernel: signal_per_conc must be finite and non-zero, got {signal_per_conc!r}.",
            hint="Give the signal change per unit product concentration (e.g. epsilon x pathlength).",
        )
    s[~(s > 0)] = np.nan
    return np.abs(float(signal_per_conc)) * s


def blank_result(n_wells: int, flags: np.ndarray, goodness_name: str = "r_squared") -> dict:
    """Keyword arguments for a :class:`RateResult` with every value NaN (filled in by the kernel)."""
    nan = np.full(n_wells, np.nan)
    return {
        "v0": nan.copy(),
        "stderr": nan.copy(),
        "window_start_s": nan.copy(),
        "window_end_s": nan.copy(),
        "goodness": nan.copy(),
        "flags": np.asarray(flags, dtype=np.int64).copy(),
        "n_points": np.zeros(n_wells, dtype=np.int64),
        "lag_s": nan.copy(),
        "goodness_name": goodness_name,
    }


#: Flags that leave a well without a rate (:func:`finish` sets its v0 to NaN).
NO_RATE = int(Flag.ALL_MISSING | Flag.TOO_FEW_POINTS | Flag.NO_SIGNAL | Flag.FIT_FAILED)


def flag_noisy(v0: np.ndarray, stderr: np.ndarray, flags: np.ndarray, min_t: float = NOISY_MIN_T) -> None:
    """Set NOISY in place where the rate's signal-to-noise ``|v0| / stderr`` is below ``min_t`` (not on wells
    that get no rate at all: a well without signal is not also noisy)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        snr = np.abs(v0) / stderr
    flags[np.isfinite(v0) & ~(snr >= min_t) & ((flags & NO_RATE) == 0)] |= int(Flag.NOISY)


def finish(fields: dict, extra: dict[str, np.ndarray] | None = None) -> RateResult:
    """Build the :class:`RateResult`, forcing NaN v0/stderr on wells flagged as having no rate."""
    bad = (fields["flags"] & NO_RATE) != 0
    fields["v0"][bad] = np.nan
    fields["stderr"][bad] = np.nan
    return RateResult(**fields, extra=extra or {})
