"""Round trip: a random well table written in each supported shape and dialect reads back exactly.

Floats are written with ``repr`` (shortest text that parses back to the same double), so the comparison is
exact, not approximate; missing reads are written as empty cells and must come back as NaN.
"""

from __future__ import annotations

import io

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_array_equal
from vzero.plugins.importers.readers import ReadOptions, read_table
from vzero.plugins.kinetics.wells import all_wells

DIALECTS = [(",", ".", "utf-8"), ("\t", ".", "utf-8-sig"), (";", ",", "latin-1"), (";", ".", "utf-8")]
_value = st.one_of(st.none(), st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False))


@st.composite
def tables(draw: st.DrawFn) -> tuple[list[str], np.ndarray, np.ndarray, np.ndarray]:
    wells = draw(st.lists(st.sampled_from(all_wells(96)), min_size=1, max_size=5, unique=True))
    times = sorted(draw(st.lists(st.floats(0, 1e5, allow_nan=False), min_size=1, max_size=6, unique=True)))
    n_t = len(times)
    cells = draw(st.lists(st.lists(_value, min_size=n_t, max_size=n_t), min_size=len(wells), max_size=len(wells)))
    signal = np.array([[np.nan if v is None else v for v in row] for row in cells], dtype=float)
    temps = np.array(draw(st.lists(st.floats(4, 60, allow_nan=False), min_size=n_t, max_size=n_t)))
    return wells, np.array(times), signal, temps


def _num(x: float, decimal: str) -> str:
    return "" if np.isnan(x) else repr(float(x)).replace(".", decimal)


def _padded(well: str) -> str:
    return f"{well[0]}{int(well[1:]):02d}"  # A1 -> A01, so normalisation is exercised too


def _write(table: tuple, shape: str, delim: str, decimal: str, encoding: str, by_time: bool) -> bytes:
    wells, times, signal, temps = table
    if shape == "wide":
        lines = [delim.join(["Time (s)", "Temp (°C)", *map(_padded, wells)])]
        for t in range(times.size):
            row = [_num(times[t], decimal), _num(temps[t], decimal)]
            lines.append(delim.join(row + [_num(v, decimal) for v in signal[:, t]]))
    else:
        lines = [delim.join(["Well", "Time (s)", "Signal"])]
        pairs = [(w, t) for t in range(times.size) for w in range(len(wells))]
        if not by_time:
            pairs.sort()
        for w, t in pairs:
            lines.append(delim.join([wells[w], _num(times[t], decimal), _num(signal[w, t], decimal)]))
    return ("Invented demo export\n\n" + "\n".join(lines) + "\n").encode(encoding)


def _check(table: tuple, data: bytes, with_temp: bool) -> None:
    wells, times, signal, temps = table
    (block,) = read_table(data, source="prop", options=ReadOptions())
    assert block.wells == wells
    assert_array_equal(block.time_s, times)
    assert_array_equal(block.signal, signal)  # NaN == NaN for assert_array_equal
    assert not block.saturated.any()
    if with_temp:
        assert block.temperature is not None
        assert_array_equal(block.temperature, temps)


@settings(max_examples=40, deadline=None)
@given(table=tables(), dialect=st.sampled_from(DIALECTS), by_time=st.booleans())
def test_wide_text_round_trip(table: tuple, dialect: tuple[str, str, str], by_time: bool) -> None:
    _check(table, _write(table, "wide", *dialect, by_time), with_temp=True)


@settings(max_examples=40, deadline=None)
@given(table=tables(), dialect=st.sampled_from(DIALECTS), by_time=st.booleans())
def test_long_text_round_trip(table: tuple, dialect: tuple[str, str, str], by_time: bool) -> None:
    _check(table, _write(table, "long", *dialect, by_time), with_temp=False)


@settings(max_examples=15, deadline=None)
@given(table=tables())
def test_xlsx_round_trip(table: tuple) -> None:
    import openpyxl

    # A spreadsheet keeps 15 significant digits (and openpyxl may write the 17th digit off by one ulp), so the
    # workbook round trip is exact for numbers of up to 12 significant digits, which is what a reader exports.
    wells, times, signal, temps = (
        np.vectorize(lambda x: float(f"{x:.12g}"))(a) if i else a for i, a in enumerate(table)
    )
    if np.any(np.diff(times) <= 0):
        return  # rounding merged two times
    table = (wells, times, signal, temps)
    wb = openpyxl.Workbook(write_only=True)
    ws = wb.create_sheet("plate")
    ws.append(["Time (s)", "Temperature", *wells])
    for t in range(times.size):
        vals = [None if np.isnan(v) else float(v) for v in signal[:, t]]
        ws.append([float(times[t]), float(temps[t]), *vals])
    buf = io.BytesIO()
    wb.save(buf)
    _check(table, buf.getvalue(), with_temp=True)
