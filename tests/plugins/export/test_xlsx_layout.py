"""The xlsx export is a workbook a scientist opens: frozen headers, widths, number formats, units in the
header row, and the time courses in wide form (time down, wells across) beside the long form."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from numpy.testing import assert_allclose
from vzero.plugins.export import export
from vzero.run.runner import run

from tests.conftest import linear_plate


def test_xlsx_is_dressed_for_reading(tmp_path: Path):
    from openpyxl import load_workbook

    recipe = linear_plate(tmp_path / "in")
    result = run(recipe, tmp_path / "out")
    out = export(result.audit_path, "xlsx", tmp_path / "run.xlsx")
    book = load_workbook(out)
    assert "wide p1" in book.sheetnames and "time courses" in book.sheetnames
    for name in ("about", "rates", "time courses"):
        assert book[name].freeze_panes == "A2"
    assert book["wide p1"].freeze_panes == "B2"
    rates = book["rates"]
    header = [c.value for c in rates[1]]
    assert "rate (AU/s)" in header and "window_start_s (s)" in header
    col = header.index("rate (AU/s)") + 1
    assert rates.cell(row=2, column=col).number_format == "0.0000E+00"  # rates near 1e-4 AU/s
    from openpyxl.utils import get_column_letter

    assert rates.column_dimensions[get_column_letter(col)].width >= len("rate (AU/s)")
    # the wide sheet holds exactly the reads of the long one, time down and wells across
    wide = pd.read_excel(out, sheet_name="wide p1")
    long = pd.read_excel(out, sheet_name="time courses")
    assert list(wide.columns[:3]) == ["time (s)", "A1 (AU)", "A2 (AU)"] and len(wide) == 21
    a2 = long[long["well"] == "A2"].sort_values("time (s)")
    assert_allclose(wide["A2 (AU)"].to_numpy(), a2["signal"].to_numpy())
    assert_allclose(wide["time (s)"].to_numpy(), np.arange(0.0, 301.0, 15.0))
