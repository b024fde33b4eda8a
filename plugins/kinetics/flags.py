"""Per-well quality flags: one vocabulary shared by every stage.

A flag marks something a scientist should know about a well before trusting its rate. Flags never stop a
run; the recipe decides which flags exclude a well from fitting (``fit.exclude_flags``). Internally flags are
a bit mask (:class:`Flag`, an :class:`enum.IntFlag`) so that a whole plate is one integer array; in tables
and the audit file they are written as names joined by ``;`` (see :func:`to_names`).
"""

from __future__ import annotations

import enum
from typing import Any


class Flag(enum.IntFlag):
    """Quality flags for a well. Definitions are in docs/rates.md (section "Flags") and docs/inputs.md."""

    NONE = 0
    SATURATED = 1 << 0  # a read at the detector ceiling or an overflow token; those reads are masked
    HIGH_CONVERSION = 1 << 1  # the rate window runs past ~10 % substrate conversion (common practice)
    CURVATURE = 1 << 2  # the progress curve bends significantly inside the window used
    LAG = 1 << 3  # the curve starts slow and accelerates (hysteresis, temperature equilibration)
    DECAY = 1 << 4  # the rate falls faster than substrate depletion explains (inactivation)
    NOISY = 1 << 5  # signal-to-noise below the method's threshold
    TOO_FEW_POINTS = 1 << 6  # fewer usable reads than the method needs
    ALL_MISSING = 1 << 7  # no usable read at all
    NO_SIGNAL = 1 << 8  # total change within a few multiples of the read noise: no determinable rate
    FIT_FAILED = 1 << 9  # a nonlinear per-well fit did not converge or the model does not describe the curve
    EXCLUDED = 1 << 10  # excluded by the recipe (with a reason recorded)
    OVERRIDDEN = 1 << 11  # window fixed by the recipe (with a reason recorded)
    SPIKE = 1 << 12  # a single-read outlier found by a robust test; that read is masked, the rest is used
    UNMODELLED = 1 << 13  # a lag (or decay) the rate method does not model: left out of fits by default
    DISAGREES = 1 << 14  # v0 differs from the model-free early quadratic's beyond its standard errors
    IMPRECISE = 1 << 15  # less precise than the model-free early quadratic and off it by more than its tolerance


FLAG_NAMES: dict[str, Flag] = {f.name.lower(): f for f in Flag if f.name and f is not Flag.NONE}
"""Every flag by its name in tables (lower case), in definition order: the one list of flag names."""

NAMES: tuple[str, ...] = tuple(FLAG_NAMES)

#: Flags meaning the method could not compute a rate for a well that should have one (the run then finishes
#: with exit code 1). NO_SIGNAL is not among them: a well without change is a measurement, not a failure.
FAILURE = Flag.FIT_FAILED | Flag.ALL_MISSING | Flag.TOO_FEW_POINTS

#: Flags that keep a well out of the fit unless the recipe's ``fit.exclude_flags`` says otherwise: the wells
#: without a rate, and the flags whose rates are off by more than 5 % nearly always on the benchmark
#: (UNMODELLED, IMPRECISE; docs/rates.md, "Flags: measured").
NOT_FITTED = (Flag.ALL_MISSING | Flag.NO_SIGNAL | Flag.TOO_FEW_POINTS | Flag.FIT_FAILED | Flag.EXCLUDED
              | Flag.UNMODELLED | Flag.IMPRECISE)

#: Each flag in words (as the report prints it) and as a short label (beside a well in a figure).
DESCRIPTIONS: dict[Flag, tuple[str, str]] = {
    Flag.SATURATED: ("a read hit the detector ceiling; those reads were not used", "sat"),
    Flag.HIGH_CONVERSION: ("the rate window runs past about 10 % substrate conversion (common practice limit)",
                           "conv"),
    Flag.CURVATURE: ("the progress curve bends inside the window used", "curv"),
    Flag.LAG: ("the curve starts slowly and speeds up (lag phase)", "lag"),
    Flag.DECAY: ("the rate falls faster than substrate depletion explains (loss of activity?)", "decay"),
    Flag.NOISY: ("signal-to-noise below the method's threshold", "noisy"),
    Flag.TOO_FEW_POINTS: ("too few usable reads for the method", "few"),
    Flag.ALL_MISSING: ("no usable read at all", "empty"),
    Flag.NO_SIGNAL: ("total change within the read noise: no determinable rate", "no sig"),
    Flag.FIT_FAILED: ("the per-well curve fit did not converge or does not describe the curve", "fit"),
    Flag.EXCLUDED: ("excluded in the recipe", "excl"),
    Flag.OVERRIDDEN: ("window fixed by hand in the recipe", "fixed"),
    Flag.SPIKE: ("a single-read outlier, masked; the rate uses the other reads", "spike"),
    Flag.UNMODELLED: ("a lag or decay that the rate method does not model: its rate is not the initial rate, "
                      "so the well is left out of fits by default", "unmod"),
    Flag.DISAGREES: ("the rate differs from the model-free estimate (a quadratic over the early reads) by more "
                     "than the noise allows: the method's model may not fit this curve", "disagr"),
    Flag.IMPRECISE: ("the rate is less precise than the model-free estimate from the same reads and lies "
                     "further from it than that estimate's tolerance: a doubtful rate, left out of fits by default",
                     "impr"),
}


def names_of(mask: int) -> tuple[str, ...]:
    """The names of the flags set in ``mask``, in definition order."""
    return tuple(name for name, f in FLAG_NAMES.items() if int(mask) & int(f))


def text_by_name() -> dict[str, str]:
    """Flag name -> description in words."""
    return {f.name.lower(): text for f, (text, _) in DESCRIPTIONS.items() if f.name}


def short_by_name() -> dict[str, str]:
    """Flag name -> short label."""
    return {f.name.lower(): short for f, (_, short) in DESCRIPTIONS.items() if f.name}


def to_names(mask: int) -> str:
    """Return the flag names set in ``mask`` joined by ``;`` ('' when none), in definition order."""
    return ";".join(names_of(mask))


def names_array(masks: Any) -> Any:
    """Vector form of :func:`to_names` for an integer array of masks; returns an object array of str.
    (numpy is imported here so that registering the stages, which reads the flag names, stays light.)"""
    import numpy as np

    masks = np.asarray(masks, dtype=np.int64)
    uniq, inv = np.unique(masks, return_inverse=True)
    names = np.array([to_names(int(u)) for u in uniq], dtype=object)
    return names[inv].reshape(masks.shape)


def from_names(text: str) -> int:
    """Parse ``'lag;noisy'`` back to a mask. Unknown names raise ``KeyError`` naming the flag."""
    mask = 0
    for part in filter(None, (p.strip() for p in str(text).split(";"))):
        mask |= int(FLAG_NAMES[part])
    return mask
