"""The fast twin of :func:`vzero.run.outputs.plain_csv_text`: pandas' CSV text, character for character,
several times faster, for tables of float64, integer, bool and text columns.

Kept apart from the plain path on purpose: tests/pipeline/test_csv_text.py compares its text with pandas'
on every column kind, missing values, quoting, formula-like cells and split files. Change both together.
"""

from __future__ import annotations

import os
import re
from typing import Any

import numpy as np
import pandas as pd
from vzero.spreadsheet import inert


def csv_text(frame: pd.DataFrame, header: bool = True) -> str | None:
    """``frame.to_csv(index=False, header=header)``'s text, character for character, about four times faster;
    ``None`` when a column has a type this does not handle (the caller then uses pandas).

    pandas formats float64 through numpy's shortest round-trip text, which is Python's ``repr`` of the same
    float (checked over millions of bit patterns); ``repr`` on a list is much faster than numpy's
    ``astype(str)``. Missing values are empty fields; quoting is the csv module's minimal quoting, as pandas.
    Text cells a spreadsheet would evaluate get a leading ``'`` (:mod:`vzero.spreadsheet`), so the text is
    pandas' text of ``inert_frame(frame)``.
    Every row's text depends on that row alone, so a file split by rows joins into the same text.
    """
    import csv
    import io

    from vzero.audit.codec import text_codes
    from vzero.data import columns as data_columns
    from vzero.data import values_as

    if not handled(frame):
        return None
    columns: list[list[str]] = []
    texts: list[list[str]] = []  # the distinct values of the columns that may need quoting
    for dtype, values in data_columns(frame):
        kind = _kind(dtype)
        if kind == "float":
            text = _float_texts(values_as(values, np.float64))
        elif kind == "int":
            text = list(map(str, values.tolist()))
        else:
            distinct, codes = text_codes(values_as(values, object))
            distinct = [inert(t) for t in distinct]  # no cell a spreadsheet would run as a formula
            text = np.array(distinct, dtype=object)[codes].tolist()
            texts.append(distinct)
        columns.append(text)
    names = [inert(str(c)) for c in frame.columns]
    head = [names] if header else []
    if len(columns) > 1 and not any(_NEEDS_QUOTES.search("".join(col)) for col in [names, *texts]):
        # nothing to quote: plain joins (twice as fast as the csv module)
        lines = [*head, *zip(*columns, strict=True)]
        return os.linesep.join(map(",".join, lines)) + os.linesep if lines else ""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator=os.linesep)
    writer.writerows(head)
    writer.writerows(zip(*columns, strict=True))
    return out.getvalue()


def handled(frame: pd.DataFrame) -> bool:
    """Whether :func:`csv_text` writes ``frame`` (float64, numpy integer and bool, and text columns, one level
    of column names, at least one column); other tables are left to pandas."""
    return frame.columns.nlevels == 1 and frame.shape[1] > 0 and all(_kind(d) is not None for d in frame.dtypes)


def _kind(dtype: Any) -> str | None:
    if dtype == "float64":
        return "float"
    if isinstance(dtype, np.dtype) and dtype.kind in "biu":
        return "int"
    if (isinstance(dtype, np.dtype) and dtype.kind == "O") or isinstance(dtype, pd.StringDtype):
        return "text"
    return None


def _float_texts(values: np.ndarray) -> list[str]:
    """Each float's shortest round-trip text (``repr``), NaN as an empty field. A column with many repeats
    (concentrations, levels, a constant) formats each distinct bit pattern once (so -0.0 stays "-0.0")."""
    bits, codes = np.unique(values.view(np.int64), return_inverse=True)
    if 2 * bits.size <= values.size:
        distinct = ["" if t == "nan" else t for t in map(repr, bits.view(np.float64).tolist())]
        return np.array(distinct, dtype=object)[codes].tolist()  # type: ignore[no-any-return]
    text = list(map(repr, values.tolist()))
    for i in np.flatnonzero(np.isnan(values)).tolist():
        text[i] = ""
    return text


_NEEDS_QUOTES = re.compile('[,"\r\n]')
"""Characters that make the csv module quote a field (delimiter, quote character, line breaks)."""
