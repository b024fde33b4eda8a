"""Two-letter codes for the quality flags, printed in a flagged well's cell of the progress-curve figure.

A word such as "noisy" does not fit a 384-well cell; two capitals do, and stay legible in greyscale (ink on
the tinted, heavy-framed cell of a flagged well). The codes are our own; each figure that prints them carries
a legend of the codes it uses, and the report's flagged-wells table repeats them beside the flag names.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence

FLAG_CODES: dict[str, str] = {
    "saturated": "SA",
    "high_conversion": "HC",
    "curvature": "CV",
    "lag": "LG",
    "decay": "DC",
    "noisy": "NZ",
    "too_few_points": "FP",
    "all_missing": "MI",
    "no_signal": "NS",
    "fit_failed": "FF",
    "excluded": "EX",
    "overridden": "OV",
    "spike": "SP",
    "unmodelled": "UM",
    "disagrees": "DS",
    "imprecise": "IP",
}
"""Flag name (as in the rates table) -> its code. A flag without an entry gets its first two letters."""

MOST_SHOWN = 2
"""Codes printed in one cell; a well with more flags shows the first ones and a '+'."""


def code(flag: str) -> str:
    """The code of one flag name."""
    return FLAG_CODES.get(flag, flag.replace("_", "")[:2].upper() or "?")


def cell_label(flags: Sequence[str]) -> str:
    """What a flagged well's cell shows: its flags' codes, at most :data:`MOST_SHOWN`, then '+'."""
    shown = [code(f) for f in flags[:MOST_SHOWN]]
    return " ".join(shown) + ("+" if len(flags) > MOST_SHOWN else "")


def legend(flags: Iterable[str], words: dict[str, str] | None = None) -> str:
    """The codes in use, in code order, as ``NZ noisy · LG lag`` (flag names in words unless ``words``
    maps them otherwise); '' when no flag is in use."""
    names = sorted(set(flags), key=code)
    return " · ".join(f"{code(f)} {(words or {}).get(f, f.replace('_', ' '))}" for f in names)
