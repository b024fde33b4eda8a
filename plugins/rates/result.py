"""The one result shape every rate-extraction kernel returns."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class RateResult:
    """Per-well initial rates from one method, every array of shape ``[n_wells]``.

    Attributes
    ----------
    v0 : initial rate in signal units per second (NaN where the well has no determinable rate).
    stderr : standard error of ``v0``, same unit (NaN where unknown).
    window_start_s, window_end_s : the reads (seconds) the rate was taken from; for whole-curve fits the
        span of the fitted curve.
    goodness : a per-well goodness measure named by ``goodness_name`` (for example R² of the window fit).
    flags : ``int64`` bit masks of :class:`vzero.plugins.flags.Flag`.
    lag_s : lag time in seconds (0 where no lag was detected, NaN where not assessed).
    n_points : reads used per well.
    extra : further per-well arrays a method wants to report (name -> ``[n_wells]`` float array), for
        example fitted Km or the quadratic coefficient; they appear as extra columns in the rates table.
    """

    v0: np.ndarray
    stderr: np.ndarray
    window_start_s: np.ndarray
    window_end_s: np.ndarray
    goodness: np.ndarray
    flags: np.ndarray
    n_points: np.ndarray
    lag_s: np.ndarray
    goodness_name: str = "r_squared"
    extra: dict[str, np.ndarray] = field(default_factory=dict)
