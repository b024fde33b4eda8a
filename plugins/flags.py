"""Per-well quality flags: one vocabulary shared by every stage.

A flag marks something a scientist should know about a well before trusting its rate. Flags never stop a
run; the recipe decides which flags exclude a well from fitting (``fit.exclude_flags``). Internally flags are
a bit mask (:class:`Flag`, an :class:`enum.IntFlag`) so that a whole plate is one integer array; in tables
and the audit file they are written as names joined by ``;`` (see :func:`to_names`).
"""

from __future__ import annotations

import enum

import numpy as np


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


FLAG_NAMES: dict[str, Flag] = {f.name.lower(): f for f in Flag if f.name and f is not Flag.NONE}


def to_names(mask: int) -> str:
    """Return the flag names set in ``mask`` joined by ``;`` ('' when none), in definition order."""
    return ";".join(name for name, f in FLAG_NAMES.items() if int(mask) & int(f))


def names_array(masks: np.ndarray) -> np.ndarray:
    """Vector form of :func:`to_names` for an integer array of masks; returns an object array of str."""
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
