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
    mass, temperature, enzyme activity, ratios and the plate-reader signals), read in a few milliseconds
    where pint's full list takes about 0.15 s. pint can also cache parsed definitions as pickle files in the
    user's cache folder; vzero does not, so that nothing it does ever unpickles a file another program could
    write."""
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
    arrays of quantities: about 0.07 s of every start, for a feature vzero never uses. While pint is
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
            got = "no unit" if q.dimensionless else f"unit {q.units:~P} ({q.dimensionality})"
            raise UnitError(
                f"{what}: expected a quantity with a unit like {like!r} ({target.dimensionality}), got {got} "
                f"in {text!r}; write it like {_example(like)}"
            )
    return q


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
