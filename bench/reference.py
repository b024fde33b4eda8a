"""The reference analysis of the accuracy benchmark: what a careful analyst does by hand, well by well.

Written independently of the rate methods (numpy.polyfit only, no project code). Per sample well:

1. the reads from the start up to about 20 % substrate conversion: the reads before the first whose change
   from the first reads (mean of the first three) passes 20 % of ``|signal_per_conc| * S0``, at least
   ``min_reads`` of them; saturated (missing) reads are skipped;
2. a quadratic through those reads; v0 is its slope at t = 0 (model-free, no rate law assumed);
3. the same quadratic through the matched blank's reads (mean of the enzyme-free blanks of the same
   condition) over the same reads, whose slope at t = 0 is the background rate subtracted; where the
   matched blank has fewer than three usable reads, the blank of the nearest substrate level (same
   inhibitor) is used, as an analyst would.
"""

from __future__ import annotations

import numpy as np


def _slope0(t: np.ndarray, y: np.ndarray) -> float:
    ok = np.isfinite(y)
    if ok.sum() < 4:
        return np.nan
    return float(np.polyfit(t[ok], y[ok], 2)[1])


def _window(y: np.ndarray, full: float, frac: float, min_reads: int) -> np.ndarray:
    """Indices of the reads used for one well."""
    idx = np.flatnonzero(np.isfinite(y))
    if idx.size < 4:
        return idx
    y0 = y[idx[:3]].mean()
    beyond = np.abs(y[idx] - y0) > frac * full
    stop = int(np.argmax(beyond)) if beyond.any() else idx.size
    return idx[: max(stop, min(min_reads, idx.size))]


def reference_rates(
    time: np.ndarray,
    sample: np.ndarray,
    blank: np.ndarray,
    s0: np.ndarray,
    inhibitor: np.ndarray,
    signal_per_conc: float,
    *,
    frac: float = 0.20,
    min_reads: int = 8,
) -> np.ndarray:
    """v0 (signal/s) per sample well. ``sample`` ``[n_cond, n_time]`` is one plate's sample wells, ``blank``
    ``[n_cond, n_blanks, n_time]`` the enzyme-free blanks of each condition (raw reads, NaN = saturated)."""
    n_c = sample.shape[0]
    with np.errstate(invalid="ignore"), np.testing.suppress_warnings() as sup:
        sup.filter(RuntimeWarning)
        blank_mean = np.nanmean(blank, axis=1)
    usable = np.isfinite(blank_mean).sum(axis=1) >= 3
    out = np.full(n_c, np.nan)
    for i in range(n_c):
        idx = _window(sample[i], abs(signal_per_conc) * s0[i], frac, min_reads)
        if idx.size < 4:
            continue
        j = i
        if not usable[i]:
            cand = np.flatnonzero(usable & (inhibitor == inhibitor[i]))
            if cand.size == 0:
                continue
            j = int(cand[np.argmin(np.abs(np.log(s0[cand] / s0[i])))])
        b = blank_mean[j, idx]
        out[i] = _slope0(time[idx], sample[i, idx]) - (_slope0(time[idx], b) if np.isfinite(b).sum() >= 4 else 0.0)
    return out
