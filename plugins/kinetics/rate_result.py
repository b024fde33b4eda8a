"""The one result shape every rate-extraction kernel returns."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class RateResult:
    """Per-well initial rates from one method, every array of shape ``[n_wells]``.

    Only ``v0`` is required; a field left out is filled with NaN (numbers), 0 (``n_points``) or no flag.

    Attributes
    ----------
    v0 : initial rate in signal units per second (NaN where the well has no determinable rate).
    stderr : standard error of ``v0``, same unit (NaN where unknown).
    window_start_s, window_end_s : the reads (seconds) the rate was taken from; for whole-curve fits the
        span of the fitted curve.
    goodness : a per-well goodness measure named by ``goodness_name`` (for example R² of the window fit).
    flags : ``int64`` bit masks of :class:`vzero.plugins.kinetics.flags.Flag`.
    lag_s : lag time in seconds (0 where no lag was detected, NaN where not assessed).
    n_points : reads used per well.
    extra : further per-well arrays a method wants to report (name -> ``[n_wells]`` float array), for
        example fitted Km or the quadratic coefficient; they appear as extra columns in the rates table.
    """

    v0: np.ndarray
    stderr: np.ndarray = None  # type: ignore[assignment]
    window_start_s: np.ndarray = None  # type: ignore[assignment]
    window_end_s: np.ndarray = None  # type: ignore[assignment]
    goodness: np.ndarray = None  # type: ignore[assignment]
    flags: np.ndarray = None  # type: ignore[assignment]
    n_points: np.ndarray = None  # type: ignore[assignment]
    lag_s: np.ndarray = None  # type: ignore[assignment]
    goodness_name: str = "r_squared"
    extra: dict[str, np.ndarray] = field(default_factory=dict)

    def __post_init__(self) -> None:
        """Fill what a kernel did not give: NaN (not assessed) for the numbers, no flag, 0 reads counted."""
        n = np.shape(self.v0)[0] if np.ndim(self.v0) else 0
        for name in ("stderr", "window_start_s", "window_end_s", "goodness", "lag_s"):
            if getattr(self, name) is None:
                object.__setattr__(self, name, np.full(n, np.nan))
        if self.flags is None:
            object.__setattr__(self, "flags", np.zeros(n, dtype=np.int64))
        if self.n_points is None:
            object.__setattr__(self, "n_points", np.zeros(n, dtype=np.int64))

    def problems(self, n_wells: int) -> list[str]:
        """Why this result does not fit a plate of ``n_wells`` wells (empty when it does)."""
        out = []
        arrays = {"v0": self.v0, "stderr": self.stderr, "window_start_s": self.window_start_s,
                  "window_end_s": self.window_end_s, "goodness": self.goodness, "flags": self.flags,
                  "n_points": self.n_points, "lag_s": self.lag_s, **{f"extra[{k!r}]": v for k, v in self.extra.items()}}
        for name, value in arrays.items():
            shape = np.shape(value)
            if shape != (n_wells,):
                out.append(f"{name} has shape {shape}, expected ({n_wells},): one value per well")
        for name in ("flags", "n_points"):
            kind = np.asarray(getattr(self, name)).dtype.kind
            if kind not in "iu":
                out.append(f"{name} holds {np.asarray(getattr(self, name)).dtype} values, expected integers")
        if not isinstance(self.goodness_name, str) or not self.goodness_name.isidentifier():
            out.append(f"goodness_name {self.goodness_name!r} is not a column name")
        return out
