"""Times past one hour, in every time format the readers accept: text h:mm:ss, mm:ss / h:mm, numbers in
s / min / h, and spreadsheet time and duration cells. Each expected value is the file's own text
worked out by hand (1 h = 3600 s)."""

from __future__ import annotations

import datetime as dt
import io

import numpy as np
import pytest
from numpy.testing import assert_allclose
from vzero.plugins.importers.readers import ReadOptions, read_table


def _times(text: str, **kw: object) -> list[float]:
    block = read_table(text.encode(), source="t.csv", options=ReadOptions(**kw))[0]  # type: ignore[arg-type]
    return list(block.time_s)


def test_hms_text_past_one_hour() -> None:
    got = _times("Time,A1\n0:59:59,1\n1:00:00,2\n1:02:03.5,3\n25:00:01,4\n")
    assert_allclose(got, [3599.0, 3600.0, 3723.5, 90001.0])


def test_two_part_text_is_mm_ss_or_h_mm() -> None:
    assert_allclose(_times("Time,A1\n59:30,1\n61:15,2\n"), [3570.0, 3675.0])  # mm:ss by default
    assert_allclose(_times("Time,A1\n1:30,1\n2:05,2\n", time_unit="h"), [5400.0, 7500.0])  # h:mm


@pytest.mark.parametrize(("label", "unit", "values", "seconds"), [
    ("Time (h)", None, "1.5\n2.25", [5400.0, 8100.0]),
    ("Time [min]", None, "61\n90", [3660.0, 5400.0]),
    ("Time (s)", None, "3600\n7201", [3600.0, 7201.0]),
    ("Time", "h", "1\n3", [3600.0, 10800.0]),
    ("Time", "min", "75\n120", [4500.0, 7200.0]),
])
def test_numeric_times_in_each_unit(label: str, unit: str | None, values: str, seconds: list[float]) -> None:
    rows = "".join(f"{v},{k}\n" for k, v in enumerate(values.split("\n")))
    assert_allclose(_times(f"{label},A1\n{rows}", time_unit=unit), seconds)


def test_decimal_comma_hms() -> None:
    assert_allclose(_times("Time;A1\n1:00:00,5;1\n1:00:01,5;2\n", decimal=","), [3600.5, 3601.5])


def test_spreadsheet_time_and_duration_cells() -> None:
    import openpyxl

    wb = openpyxl.Workbook(write_only=True)
    ws = wb.create_sheet("Data")
    ws.append(["Time", "A1"])
    ws.append([dt.time(0, 30, 0), 1.0])
    ws.append([dt.time(1, 2, 3), 2.0])
    ws.append([dt.timedelta(hours=26, minutes=1), 3.0])
    buf = io.BytesIO()
    wb.save(buf)
    block = read_table(buf.getvalue(), source="t.xlsx", options=ReadOptions())[0]
    assert_allclose(block.time_s, [1800.0, 3723.0, 93660.0])


@pytest.mark.parametrize(("text", "message", "line"), [
    ("Time,A1\n0,1\n10,2\n20,3\n20,4\n", "time 20 s repeats the previous time (20 s)", 5),
    ("Time,A1\n0,1\n10,2\n20,3\n15,4\n", "time 15 s goes back in time (20 s)", 5),
])
def test_times_out_of_order_are_named_with_their_row(text: str, message: str, line: int) -> None:
    from vzero.errors import InputFileError

    with pytest.raises(InputFileError) as err:
        _times(text)
    assert str(err.value).startswith(f"t.csv, row {line}, column 'Time': {message}")


@pytest.mark.parametrize("text", ["Time,A1\n:30,1\n1:00,2\n", "Time,A1\n0:30,1\n:59,2\n"])
def test_a_time_with_nothing_before_its_colon_is_refused_as_a_time(text: str) -> None:
    from vzero.errors import InputFileError

    with pytest.raises(InputFileError, match=r"time ':\d\d' is not a number or h:mm:ss / mm:ss"):
        _times(text)


@pytest.mark.parametrize(("cells", "row"), [(["0", "", "10"], 3), (["0", "", "", "15"], 3)])
def test_a_blank_time_cell_is_named_by_its_row(cells: list[str], row: int) -> None:
    # a blank cell of the time column is an error naming the file, the first blank's row and the column
    from vzero.errors import InputFileError
    from vzero.plugins.importers import readers
    with pytest.raises(InputFileError) as err:
        readers._times(np.array(cells), "Time", ".", readers.ReadOptions(), "plate.csv", list(range(2, 2 + len(cells))))
    assert err.value.row == row and "plate.csv" in str(err.value) and "'Time'" in str(err.value)


def test_the_first_bad_time_in_file_order_is_named() -> None:
    # several bad h:mm:ss cells: the error names the first one in the file (row 3, '0:x5'), not the first in
    # sorted order ('0:a0', row 4), so the user fixes the file from the top
    from vzero.errors import InputFileError

    with pytest.raises(InputFileError) as err:
        _times("Time,A1\n0:10,1\n0:x5,2\n0:a0,3\n")
    assert err.value.row == 3 and "'0:x5'" in str(err.value)
