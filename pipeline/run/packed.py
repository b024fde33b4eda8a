"""A plate's tables on their way from a worker to the driver: plain column arrays, stacked once.

A worker returns each plate's tables (the rates the pooled steps stack) to the process that writes the audit
file. Sent as DataFrames, every plate costs that process a DataFrame rebuilt from its pickle (most of the
cost of receiving a plate, bench/COSTS.md), and the stacking at the end builds them all once more.
:class:`PackedTable` carries the columns as plain numpy arrays instead (text as object arrays), and
:func:`stack` concatenates the arrays of every plate and builds one DataFrame for the batch. The stacked
table equals what :meth:`vzero.data.Table.concat` gives on the unpacked tables (tests/pipeline/test_packed.py);
tables that do not fit the simple case (an index other than 0..n-1, repeated or non-text column names, other
dtypes, differing columns or units between plates) travel and stack as before.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from vzero.data import Table


@dataclass(frozen=True)
class PackedTable:
    """A :class:`Table` as column names, dtypes and numpy arrays (one per column, ``len`` rows each)."""

    names: tuple[str, ...]
    dtypes: tuple[Any, ...]
    values: tuple[np.ndarray, ...]
    units: Mapping[str, str]
    meta: Mapping[str, Any]

    def __len__(self) -> int:
        return len(self.values[0]) if self.values else 0

    def unpack(self) -> Table:
        """The table as it was before :func:`pack`."""
        return _build(self.names, self.dtypes, list(self.values), self.units, self.meta)

    def column(self, name: str) -> np.ndarray:
        return self.values[self.names.index(name)]


def pack(table: Table) -> Table | PackedTable:
    """``table`` as a :class:`PackedTable`, or unchanged when it is not the simple case."""
    frame = table.frame
    index = frame.index
    if not (isinstance(index, pd.RangeIndex) and index.start == 0 and index.step == 1) or frame.shape[1] == 0:
        return table
    names = tuple(frame.columns)
    if not frame.columns.is_unique or not all(isinstance(n, str) for n in names):
        return table
    dtypes, values = [], []
    for name, dtype in frame.dtypes.items():
        if isinstance(dtype, np.dtype) and dtype.kind in "biuf":
            values.append(frame[name].to_numpy())
        elif isinstance(dtype, pd.StringDtype) and dtype.na_value is np.nan:
            values.append(frame[name].array.to_numpy(dtype=object))
        else:
            return table
        dtypes.append(dtype)
    return PackedTable(names, tuple(dtypes), tuple(values), dict(table.units), dict(table.meta))


def _build(names: Sequence[str], dtypes: Sequence[Any], values: list[np.ndarray], units: Mapping[str, str],
           meta: Mapping[str, Any]) -> Table:
    data = {name: (v if isinstance(d, np.dtype) else pd.array(v, dtype=d))
            for name, d, v in zip(names, dtypes, values, strict=True)}
    return Table(pd.DataFrame(data), dict(units), dict(meta))


def stack(tables: Sequence[PackedTable]) -> Table | None:
    """The tables stacked in order as one :class:`Table`, as :meth:`Table.concat` would give it, or ``None``
    when they differ in columns, dtypes or units (the caller then unpacks and concatenates them)."""
    if not tables:
        return None
    first = tables[0]
    if any(t.names != first.names or t.dtypes != first.dtypes or t.units != first.units for t in tables[1:]):
        return None
    columns = [np.concatenate([t.values[i] for t in tables]) for i in range(len(first.names))]
    return _build(first.names, first.dtypes, columns, first.units, first.meta)
