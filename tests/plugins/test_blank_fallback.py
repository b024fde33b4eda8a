"""Blanks that fail are replaced, loudly: skipped with a warning naming them, their wells use the next match."""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.testing import assert_allclose
from vzero.data import Traces
from vzero.params import validate
from vzero.plugins.blank import MeanBlank
from vzero.stage import StageInput


def _run(signal, wells, **written):
    settings, problems = validate(MeanBlank.params, written)
    assert not problems
    t = np.arange(signal.shape[1], dtype=float) * 10.0
    traces = Traces("p", t, signal, np.isfinite(signal), np.zeros_like(signal, bool), wells, "AU",
                    {"substrate": "mM", "inhibitor": "mM"})
    warnings: list[str] = []
    out = MeanBlank(**settings).run(StageInput(artifacts={"traces": traces}, plate={"name": "p"}, inputs={},
                                               recipe={}, registry=None, warn=warnings.append))
    return out.artifacts["traces"], warnings


def _plate():
    # invented: samples at 1, 2 and 5 mM substrate; blanks per level carry the substrate's own absorbance
    # (0.1 AU/mM) and a background rate of 1e-5 AU/s per mM; the 5-mM blanks saturate at every read
    t = np.arange(6) * 10.0
    sub = np.array([1.0, 2.0, 5.0, 1.0, 2.0, 5.0, 5.0])
    role = ["sample"] * 3 + ["blank"] * 4
    base = 0.1 * sub[:, None] + 1e-5 * sub[:, None] * t
    signal = base + np.where(np.arange(7) < 3, 1e-3, 0.0)[:, None] * t
    signal[5:] = np.nan
    wells = pd.DataFrame({"well": ["A1", "A2", "A3", "H1", "H2", "H3", "H4"], "role": role, "substrate": sub,
                          "inhibitor": [0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0]})
    return t, signal, wells


def test_saturated_blanks_are_skipped_and_named():
    t, signal, wells = _plate()
    out, warnings = _run(signal, wells, match="substrate")
    assert any("H3, H4" in w and "skipped" in w for w in warnings)
    assert any("A3" in w and "nearest level" in w for w in warnings)
    # the 5-mM sample keeps every read; minus the 2-mM blank: the enzyme's 1e-3 AU/s plus the difference of
    # the background rates (5 - 2) x 1e-5 AU/s, and a constant offset of 0.3 AU
    assert np.isfinite(out.signal[2]).all()
    assert_allclose(np.diff(out.signal[2]) / 10.0, 1e-3 + 3e-5, rtol=1e-9)
    assert list(out.wells["blanks"][:3]) == ["H1", "H2", "H2"]
    assert list(out.wells["blank_match"][:3]) == ["matched", "matched", "nearest level"]
    assert_allclose(out.signal[0], 1e-3 * t, atol=1e-12)


def test_substrate_and_inhibitor_match_falls_back_to_same_substrate():
    _, signal, wells = _plate()
    wells = wells.assign(inhibitor=[0.0, 0.5, 0.0, 0.0, 0.0, 0.0, 0.0])
    out, warnings = _run(signal, wells, match="substrate+inhibitor")
    assert list(out.wells["blank_match"][:2]) == ["matched", "same substrate"]
    assert any("A2" in w and "same substrate" in w for w in warnings)
