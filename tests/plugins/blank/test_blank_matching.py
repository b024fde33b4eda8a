"""Blank subtraction when some wells have no blank of their own: the overall blank mean is used and the
warning names exactly those wells (hand-computed expectations)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.testing import assert_allclose
from vzero.data import Traces
from vzero.params import validate
from vzero.plugins.blank import MeanBlank
from vzero.stage import StageInput


def test_wells_without_a_matching_blank_are_named_and_get_the_overall_mean() -> None:
    t = np.arange(4.0)
    signal = np.vstack([0.5 + 0.1 * t, 0.9 + 0.1 * t, 0.3 + 0 * t, 0.5 + 0 * t])
    wells = pd.DataFrame({"well": ["A1", "A2", "A3", "A4"], "role": ["sample", "sample", "blank", "blank"],
                          "substrate": [5.0, 7.0, 5.0, 5.0]})
    traces = Traces("p", t, signal, np.ones_like(signal, bool), np.zeros_like(signal, bool), wells, "AU",
                    {"substrate": "uM"})
    settings, problems = validate(MeanBlank.params, {"match": "substrate"})
    assert not problems
    warnings: list[str] = []
    data = StageInput({"traces": traces}, {"name": "p"}, {}, {}, None, warnings.append)
    out = MeanBlank(**settings).run(data).artifacts["traces"]
    assert_allclose(out.signal[0], 0.1 + 0.1 * t, atol=1e-12)  # its own blanks: mean 0.4
    assert_allclose(out.signal[1], 0.5 + 0.1 * t, atol=1e-12)  # no blank at 7 uM: overall mean 0.4
    assert len(warnings) == 1 and "for 1 well(s) (A2)" in warnings[0]


def test_preflight_warns_only_when_the_layout_has_no_blank_wells() -> None:
    settings, problems = validate(MeanBlank.params, {})
    assert not problems
    for roles, warned in ((["sample", "blank"], False), (["sample", "sample"], True)):
        warnings: list[str] = []
        layout = pd.DataFrame({"well": ["A1", "A2"], "role": roles})
        MeanBlank(**settings).preflight(StageInput({"layout": layout}, {"name": "p"}, {}, {}, None, warnings.append))
        assert bool(warnings) == warned and all("no wells with role 'blank'" in w for w in warnings)
