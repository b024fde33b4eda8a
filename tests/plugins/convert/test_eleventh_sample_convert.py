"""The plate standard curve's refusal names what is missing when either the standard wells or the
concentration column is absent (each alone is enough to refuse)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from vzero.data import Traces
from vzero.errors import StageError
from vzero.plugins.convert.standard_curve import plate_standard_curve


def _traces(roles: list[str], columns: dict[str, list[float]]) -> Traces:
    # invented plate: four wells, three reads each, product standards at 0-30 uM reading 0.01 AU/uM
    t = np.arange(3) * 60.0
    signal = np.repeat(np.array([[0.05], [0.15], [0.25], [0.35]]), 3, axis=1)
    wells = pd.DataFrame({"well": ["A1", "A2", "A3", "A4"], "role": roles, **columns})
    return Traces("p", t, signal, np.ones_like(signal, bool), np.zeros_like(signal, bool), wells, "AU",
                  {k: "uM" for k in columns})


@pytest.mark.parametrize(("roles", "columns"), [
    (["sample"] * 4, {"product": [0.0, 10.0, 20.0, 30.0]}),  # the column, but no standard wells
    (["standard"] * 4, {"other": [0.0, 10.0, 20.0, 30.0]}),  # standard wells, but no 'product' column
])
def test_missing_standards_or_column_is_refused_by_name(roles: list[str], columns: dict[str, list[float]]) -> None:
    with pytest.raises(StageError, match="needs wells with role 'standard' and a layout column 'product'"):
        plate_standard_curve(_traces(roles, columns), "product", "uM", check_linearity=False)


def test_standards_and_column_give_the_line() -> None:
    # the same plate with both present: slope 0.01 AU/uM and intercept 0.05 AU by hand (an exact line)
    cal = plate_standard_curve(_traces(["standard"] * 4, {"product": [0.0, 10.0, 20.0, 30.0]}), "product", None,
                               check_linearity=False)
    assert cal.curve.slope == pytest.approx(0.01, rel=1e-9)
    assert cal.curve.intercept == pytest.approx(0.05, rel=1e-9)
