"""Text cells that a spreadsheet would run as a formula, made inert in every CSV and xlsx vzero writes.

A spreadsheet program that opens a CSV file evaluates a cell starting with ``=``, ``+``, ``-`` or ``@`` (and
some read a leading tab or carriage return the same way) as a formula; a group, well, plate or recipe text
received from someone else could so start a formula on the reader's machine ("CSV injection"). The usual
rule, applied here: such a text cell gets a leading ``'``, which spreadsheets show as text and do not
evaluate. A cell that is a real number (``-0.5``, ``+3``, ``-1e-07``, ``-inf``) is left as it is, so
negative numbers stay numbers. Numeric columns are never touched. See docs/security.md.
"""

from __future__ import annotations

from typing import Any

import pandas as pd

#: First characters that make a spreadsheet treat a cell as a formula.
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def inert(text: str) -> str:
    """``text`` made safe to open in a spreadsheet: a ``'`` before a leading formula character, unless the
    whole text is a number."""
    if not text.startswith(FORMULA_STARTS):
        return text
    try:
        float(text)
    except ValueError:
        return "'" + text
    return text if text == text.strip() else "'" + text


def inert_value(value: Any) -> Any:
    """:func:`inert` for text; any other value unchanged."""
    return inert(value) if isinstance(value, str) else value


def inert_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """``frame`` with every text cell and column name passed through :func:`inert` (a copy where anything
    changed; numeric columns are left alone)."""
    names = [inert_value(c) for c in frame.columns]
    changed = names != list(frame.columns)
    out = frame
    for i, dtype in enumerate(frame.dtypes):
        if pd.api.types.is_object_dtype(dtype) or isinstance(dtype, pd.StringDtype):
            column = frame.iloc[:, i]
            fixed = column.map(inert_value, na_action="ignore")
            if not fixed.equals(column):
                if out is frame:
                    out = frame.copy()
                out.isetitem(i, fixed.astype(dtype))
    if changed:
        out = out.copy() if out is frame else out
        out.columns = names
    return out
