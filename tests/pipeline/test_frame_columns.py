"""The fast path of vzero.data.columns (pandas' private column accessor, vzero._frame_columns) gives exactly
what the plain path gives, for every kind of column the project stores."""

from __future__ import annotations

import numpy as np
import pandas as pd
from vzero import _frame_columns
from vzero.data import columns, plain_columns


def _frame() -> pd.DataFrame:
    return pd.DataFrame({
        "well": pd.array(["A1", "B2", None], dtype="string"), "text": ["x", None, "zé"],
        "rate": [1.5, np.nan, -2e-300], "n": np.array([1, 2, 3], np.int64), "ok": [True, False, True],
        "flag": pd.array([1, None, 3], dtype="Int64"), "when": pd.to_datetime(["2026-01-01", None, "2026-01-03"]),
        "kind": pd.Categorical(["a", "b", "a"]),
        "zoned": pd.to_datetime(["2026-01-01", None, "2026-01-03"]).tz_localize("UTC"),
        "span": pd.to_timedelta([1.0, None, 3.0], unit="s"), "small": np.array([1, 2, 3], np.int8),
    })


def _same(a: list[tuple[object, object]], b: list[tuple[object, object]]) -> None:
    assert len(a) == len(b)
    for (da, va), (db, vb) in zip(a, b, strict=True):
        assert da == db and type(va) is type(vb)
        assert pd.Series(va).equals(pd.Series(vb))


def test_fast_path_gives_the_plain_paths_values() -> None:
    frame = _frame()
    fast = _frame_columns.columns(frame)
    assert fast is not None, "pandas no longer offers the accessor: the plain path is taken (drop the fast one)"
    _same(fast, plain_columns(frame))
    _same(columns(frame), plain_columns(frame))


def test_duplicate_names_take_the_plain_path() -> None:
    frame = pd.DataFrame([[1, 2.0]], columns=["a", "a"])
    assert _frame_columns.columns(frame) is None
    _same(columns(frame), plain_columns(frame))
