"""Quantities with units, parsed with pint from recipe text such as ``"6220 M^-1 cm^-1"`` or ``"30 s"``.

One unit registry for the whole process (pint is imported on first use, to keep the command line quick),
with vzero's own unit list (``pipeline/units.txt``). Plate-reader signal units are among them: ``AU``
(absorbance units; ``mAU`` by prefix), ``RFU`` (relative fluorescence units), ``RLU`` (relative
luminescence units) and ``count``, all dimensionless.
"""

from __future__ import annotations

import functools
from typing import Any

from vzero.errors import UnitError


@functools.cache
def registry() -> Any:
    """Return the process-wide :class:`pint.UnitRegistry` (created once, set as pint's application registry).

    Its units are vzero's own short list (``pipeline/units.txt``: SI prefixes, time, length, volume, molar,
    mass, temperature, enzyme activity, ratios and the plate-reader signals), read much faster than pint's
    full list, which would dominate the start of every command. pint can also cache parsed definitions as
    pickle files in the user's cache folder; vzero does not, so that nothing it does ever unpickles a file
    another program could write."""
    from importlib import resources

    pint = _import_pint()
    definitions = resources.files("vzero").joinpath("units.txt")
    with resources.as_file(definitions) as path:
        ureg = pint.UnitRegistry(str(path), autoconvert_offset_to_baseunit=True, cache_folder=None)
    pint.set_application_registry(ureg)
    return ureg


def _import_pint() -> Any:
    """Import pint without its optional dask support.

    When dask is installed (vzero's ``dask`` extra), importing pint imports dask too, to recognise dask
    arrays of quantities: a noticeable part of every start, for a feature vzero never uses. While pint is
    imported, ``dask`` is marked as not importable (a ``None`` entry in ``sys.modules``, Python's own way of
    saying so); the mark is taken away at once, so dask imports normally afterwards (``--scheduler``)."""
    import sys

    blocked = "dask" not in sys.modules
    if blocked:
        sys.modules["dask"] = None  # type: ignore[assignment]
    try:
        import pint
    finally:
        if blocked and sys.modules.get("dask", 0) is None:
            del sys.modules["dask"]
    return pint


def quantity(text: Any, *, like: str | None = None, what: str = "value") -> Any:
    """Parse ``text`` (for example ``"0.55 cm"``) into a pint Quantity.

    ``like`` is a unit whose dimension the quantity must share (``"s"`` for a time, ``"M"`` for a
    concentration). A bare number is refused when ``like`` has a dimension, because a silent unit assumption
    is how a thousand-fold error gets into a paper. Raises :class:`UnitError` saying what was expected.
    """
    ureg = registry()
    if isinstance(text, bool) or text is None:
        raise UnitError(f"{what}: expected a quantity like {_example(like)}, got {text!r}")
    try:
        q = ureg.Quantity(text) if isinstance(text, str) else ureg.Quantity(float(text), "")
    except Exception as exc:  # pint raises several unrelated types for bad text
        raise UnitError(
            f"{what}: cannot read {text!r} as a quantity ({exc}); write a number and a unit, "
            f"for example {_example(like)}. {KNOWN}"
        ) from None
    if like is not None:
        target = ureg.Quantity(1, like)
        if q.dimensionality != target.dimensionality:
            lacking = missing_dimension(target.dimensionality, q.dimensionality)
            got = "no unit" if q.dimensionless else f"unit {q.units:~P} ({q.dimensionality})"
            if lacking:
                number = str(text).strip().split(" ", 1)[0] if isinstance(text, str) else str(text)
                raise UnitError(f"{what}: expected a quantity with a unit like {like!r}, but {text!r} {lacking}, "
                                f"e.g. \"{number} {like}\"")
            raise UnitError(
                f"{what}: expected a quantity with a unit like {like!r} ({target.dimensionality}), got {got} "
                f"in {text!r}; write it like {_example(like)}"
            )
    return q


#: The magnitudes, in SI base units, that a physical setting of an assay can have (concentrations, extinction
#: coefficients, pathlengths, volumes, times). Far wider than any real assay; outside it a value is a typo or
#: a probe, and the arithmetic downstream would overflow to inf or underflow to 0.
PLAUSIBLE_SI = (1e-30, 1e30)
#: Dimensions of settings that may be zero (a window that starts at 0 s, a substrate-free control).
ZERO_ALLOWED = ("[time]", "[substance] / [length] ** 3")


def implausible(q: Any, like: str | None) -> str | None:
    """Why the quantity ``q`` cannot be a physical setting, or None: not a finite number, negative (only a
    temperature may be below zero on its own scale, and not below absolute zero), zero where that makes no
    sense (an extinction coefficient, a pathlength, a volume), or outside ``PLAUSIBLE_SI`` once in SI base
    units. The message gives the allowed range."""
    import math

    magnitude = float(q.magnitude)
    if not math.isfinite(magnitude):
        return "not a finite number; give a value like " + _example(like)
    try:
        base = q.to_base_units()
    except Exception:  # pragma: no cover - pint cannot convert an odd offset unit: leave the value be
        return None
    si = float(base.magnitude)
    low, high = PLAUSIBLE_SI
    span = f"between {low:g} and {high:g} {base.units:~P} in SI base units"
    if q.dimensionality == registry().Quantity(1, "K").dimensionality:
        return None if 0 <= si <= 1e4 else "not a temperature an assay can have (allowed: 0 to 10000 K)"
    if magnitude < 0:
        return f"must not be negative (allowed: 0 or {span})"
    if magnitude == 0:
        zero_ok = str(q.dimensionality) in ZERO_ALLOWED
        return None if zero_ok else f"must be greater than zero (allowed: {span})"
    if not math.isfinite(si) or not low <= si <= high:
        return f"outside the range an assay can have (allowed: {span}; this is {si:g})"
    return None

_DIMENSION_NAMES = (
    ({"[substance]": 1, "[length]": -3}, "concentration"),
    ({"[length]": 1}, "length"),
    ({"[time]": 1}, "time"),
    ({"[length]": 3}, "volume"),
    ({"[substance]": 1}, "amount"),
)


def missing_dimension(wanted: Any, got: Any) -> str:
    """What ``got`` lacks to have the dimension ``wanted``, in words ("has no concentration unit; a value per
    concentration needs one"), or '' when the difference is not one named dimension."""
    ratio = {k: v for k, v in dict(wanted / got).items() if v}
    for dims, name in _DIMENSION_NAMES:
        a = "an" if name[0] in "aeiou" else "a"
        if ratio == dims:
            return f"has no {name} unit; it needs {a} {name} unit"
        if ratio == {k: -v for k, v in dims.items()}:
            return f"has no {name} unit; a value per {name} needs {a} {name} unit below the line"
    return ""


def unit(text: str, *, like: str | None = None, what: str = "unit") -> Any:
    """Parse a unit alone (``"uM/min"``), optionally checking its dimension against ``like``."""
    ureg = registry()
    try:
        u = ureg.Unit(text)
    except Exception as exc:
        raise UnitError(f"{what}: unknown unit {text!r} ({exc}). {KNOWN}") from None
    if like is not None and ureg.Quantity(1, u).dimensionality != ureg.Quantity(1, like).dimensionality:
        raise UnitError(f"{what}: {text!r} is not a unit like {like!r}")
    return u


@functools.lru_cache(maxsize=256)
def factor(from_unit: str, to_unit: str) -> float:
    """Multiplicative factor converting a value in ``from_unit`` to ``to_unit``; UnitError if incompatible.
    (Kept per pair of units: a batch asks the same few questions for every plate.)"""
    ureg = registry()
    try:
        return float(ureg.Quantity(1.0, from_unit).m_as(to_unit))
    except Exception as exc:
        raise UnitError(f"cannot convert {from_unit!r} to {to_unit!r}: {exc}") from None


def pretty(u: Any) -> str:
    """Short, plain-text form of a unit for tables and plots (``µM/min``, ``1/s``)."""
    text = f"{registry().Unit(u) if isinstance(u, str) else u:~P}"
    return text.replace("µ", "µ") or "1"


KNOWN = ("vzero knows m, s, min, h, d, week, L, M (molar), mol, g, Da, K, degC, degF, U (IU), kat, Hz, rpm, Bq, "
         "Ci, %, ‰, ppm, AU, RFU, RLU, count, cps, cpm and dpm, with SI prefixes (u or µ for micro), combined "
         "with *, / and ^ (see pipeline/units.txt).")
"""The units of pipeline/units.txt in one sentence, for error messages."""

_EXAMPLES = {"s": '"30 s"', "cm": '"0.55 cm"', "M": '"10 uM"', "M^-1 cm^-1": '"6220 M^-1 cm^-1"'}


def _example(like: str | None) -> str:
    return _EXAMPLES.get(like or "", f'"1 {like}"' if like else '"1.5 uM"')
