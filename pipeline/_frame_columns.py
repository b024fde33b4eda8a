"""Fast path of :func:`vzero.data.columns`: a DataFrame's columns without a Series per column.

pandas builds a Series for each column that ``DataFrame.items()`` yields; a run hands a few hundred columns
to its audit file and CSV exports, so that shows in the time of a small run (bench/COSTS.md). pandas'
``DataFrame._get_column_array(i)`` returns the stored array of column ``i`` directly. It is private pandas
API: used only when it exists and the column names are unique, and
tests/pipeline/test_frame_columns.py pins that it gives exactly what the plain path
(:func:`vzero.data.plain_columns`) gives, for every column dtype the project stores; if a pandas release
changes or drops it, that test fails or the plain path takes over.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd


def columns(frame: pd.DataFrame) -> list[tuple[Any, Any]] | None:
    """(dtype, stored values) per column through pandas' private accessor, or None where it is unavailable
    (the caller then takes the plain path)."""
    get = getattr(frame, "_get_column_array", None)
    if get is None or not frame.columns.is_unique:
        return None
    out = []
    for i in range(frame.shape[1]):
        values = get(i)
        dtype = values.dtype  # the column's dtype (frame.dtypes would build a Series first)
        if isinstance(dtype, np.dtype) and not isinstance(values, np.ndarray):  # datetimes come back wrapped
            values = values.to_numpy()
        out.append((dtype, values))
    return out
