"""Data containers that carry their own labels and units.

* :class:`Traces`: one plate's time courses: ``time`` [n_time] in seconds, ``signal`` [n_wells, n_time],
  a boolean ``mask`` of usable reads, and the well table (one row per signal row, in the same order).
* :class:`Table`: a pandas DataFrame with a unit per column (``units``), the shape of every per-well and
  per-parameter result.

Both are immutable by convention: a stage returns new objects and never changes the ones it was given.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd


@dataclass(frozen=True)
class Table:
    """A DataFrame plus the unit of each numeric column (missing key: no unit / dimensionless)."""

    frame: pd.DataFrame
    units: Mapping[str, str] = field(default_factory=dict)
    meta: Mapping[str, Any] = field(default_factory=dict)

    def with_frame(self, frame: pd.DataFrame, **units: str) -> Table:
        """A new table with ``frame`` and the units updated by ``units``."""
        merged = {k: v for k, v in {**self.units, **units}.items() if k in frame.columns}
        return Table(frame, merged, dict(self.meta))

    def __len__(self) -> int:
        return len(self.frame)

    @staticmethod
    def concat(tables: list[Table]) -> Table:
        """Stack tables with the same columns; units are taken from the first table.

        A column given in another but equivalent spelling (``µM`` and ``uM``) is taken as it is; one given in
        another unit of the same dimension (``mM`` against ``uM``) is converted to the first table's unit,
        together with its ``<column>_unit`` text column if there is one. Units that cannot be converted raise
        :class:`vzero.errors.UnitError` naming the column and both units.
        """
        if not tables:
            return Table(pd.DataFrame())
        if len(tables) == 1 and isinstance(tables[0].frame.index, pd.RangeIndex) and tables[0].frame.index.start == 0 \
                and tables[0].frame.index.step == 1:
            return tables[0]  # already what stacking one table gives (the audit file then stores it once)
        units: dict[str, str] = {}
        frames = []
        for t in tables:
            frame = t.frame
            for k, v in t.units.items():
                first = units.setdefault(k, v)
                if first == v:
                    continue
                factor = _conversion(first, v, k)
                if factor != 1.0 or f"{k}_unit" in frame.columns:
                    frame = frame.copy() if frame is t.frame else frame
                    frame[k] = frame[k] * factor
                    if f"{k}_unit" in frame.columns:
                        frame[f"{k}_unit"] = first
            frames.append(frame)
        frame = pd.concat(frames, ignore_index=True)
        return Table(frame, units, dict(tables[0].meta))


def plain_columns(frame: pd.DataFrame) -> list[tuple[Any, Any]]:
    """Each column of ``frame`` as (dtype, values as stored: a numpy array for a numpy dtype, else the pandas
    extension array): the readable path of :func:`columns`."""
    return [(series.dtype, series.array if not isinstance(series.dtype, np.dtype) else series.to_numpy())
            for _, series in frame.items()]


def columns(frame: pd.DataFrame) -> list[tuple[Any, Any]]:
    """:func:`plain_columns`, through the fast path of :mod:`vzero._frame_columns` where pandas offers it
    (the same values; a test pins that)."""
    from vzero import _frame_columns

    fast = _frame_columns.columns(frame)
    return plain_columns(frame) if fast is None else fast


def values_as(values: Any, dtype: Any) -> np.ndarray:
    """``values`` (from :func:`columns`) as a numpy array of ``dtype``, as ``Series.to_numpy(dtype=...)``
    gives it (missing values of a text column as NaN; a missing value refused by an integer dtype raises)."""
    if isinstance(values, np.ndarray):
        return np.asarray(values, dtype=dtype)
    return np.asarray(values.to_numpy(dtype=dtype))


def _conversion(to_unit: str, from_unit: str, column: str) -> float:
    """Factor from ``from_unit`` to ``to_unit`` (1.0 for two spellings of one unit); UnitError otherwise."""
    from vzero import units
    from vzero.errors import UnitError

    try:
        return units.factor(from_unit, to_unit)
    except UnitError:
        raise UnitError(
            f"column {column!r} is in {to_unit!r} on one plate and in {from_unit!r} on another, which do not "
            "convert into each other",
            hint="Give that quantity in one kind of unit on every plate.",
        ) from None


@dataclass(frozen=True)
class Traces:
    """Time courses of one plate.

    Attributes
    ----------
    plate : plate name (from the recipe).
    time : read times in seconds, strictly increasing, shape [n_time].
    signal : reads, shape [n_wells, n_time], NaN where missing.
    mask : True where a read is usable, shape [n_wells, n_time].
    saturated : True where a read hit the detector ceiling or was an overflow token.
    wells : well table, one row per signal row (column ``well`` at least), units in ``well_units``.
    signal_unit : unit of ``signal`` (``AU``, ``RFU``, ...).
    temperature : optional temperature per read, °C.
    """

    plate: str
    time: np.ndarray
    signal: np.ndarray
    mask: np.ndarray
    saturated: np.ndarray
    wells: pd.DataFrame
    signal_unit: str
    well_units: Mapping[str, str] = field(default_factory=dict)
    temperature: np.ndarray | None = None

    def __post_init__(self) -> None:
        n_wells, n_time = self.signal.shape
        if self.time.shape != (n_time,):
            raise ValueError(f"time has shape {self.time.shape}, signal has {n_time} reads")
        if self.mask.shape != self.signal.shape or self.saturated.shape != self.signal.shape:
            raise ValueError("mask and saturated must have the shape of signal")
        if len(self.wells) != n_wells:
            raise ValueError(f"well table has {len(self.wells)} rows for {n_wells} signal rows")

    @property
    def well_names(self) -> list[str]:
        return [str(w) for w in self.wells["well"]]

    def masked_signal(self) -> np.ndarray:
        """Signal with unusable reads set to NaN (a new array)."""
        return np.where(self.mask, self.signal, np.nan)

    def evolve(self, **changes: Any) -> Traces:
        """A copy with some fields replaced (the validation in ``__post_init__`` runs again)."""
        return replace(self, **changes)


def steps_apart(frame: pd.DataFrame, column: str = "model") -> pd.DataFrame:
    """``frame`` with its ``column`` values followed by the step label in brackets (``hill (06-fit-nls)``) on
    the rows of groups that several steps of a stacking kind produced (tables with a ``step`` column, such as
    the fit tables when a recipe has several fit steps); unchanged otherwise. For readers that key on group
    and model (report, diff, exports), so that two steps' fits of one group never merge."""
    if "step" not in frame.columns or column not in frame.columns or "group" not in frame.columns:
        return frame
    steps = frame["step"].astype(str)
    several = steps.groupby(frame["group"].astype(str)).transform("nunique") > 1
    if not several.any():
        return frame
    out = frame.copy()
    out[column] = out[column].astype(str).where(~several, out[column].astype(str) + " (" + steps + ")")
    return out
