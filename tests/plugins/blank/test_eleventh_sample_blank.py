"""The blank stage's documented default ``min_reads`` of 1 (a blank is skipped only when it has no usable
read at all), also when the stage is built from the Python API without that setting."""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.testing import assert_allclose
from vzero.data import Traces
from vzero.plugins.blank import MeanBlank
from vzero.stage import StageInput


def test_a_blank_with_one_usable_read_is_used_by_default() -> None:
    # invented plate: a sample rising 0.01 AU per read over a 0.5 AU background; blank H1 reads 0.2 AU
    # throughout, blank H2 0.4 AU at its first read and nothing after (saturated)
    t = np.arange(5) * 30.0
    sample = 0.5 + 0.01 * np.arange(5)
    h2 = np.array([0.4, np.nan, np.nan, np.nan, np.nan])
    signal = np.vstack([sample, np.full(5, 0.2), h2])
    wells = pd.DataFrame({"well": ["A1", "H1", "H2"], "role": ["sample", "blank", "blank"]})
    traces = Traces("p", t, signal, np.isfinite(signal), np.zeros_like(signal, bool), wells, "AU")
    warnings: list[str] = []
    out = MeanBlank(match="none", role="blank").run(
        StageInput({"traces": traces}, {"name": "p"}, {}, {}, None, warnings.append)).artifacts["traces"]
    # hand calculation: the per-read blank mean is (0.2 + 0.4)/2 = 0.3 at the first read, 0.2 after it
    blank = np.array([0.3, 0.2, 0.2, 0.2, 0.2])
    assert_allclose(out.signal[0], sample - blank, rtol=0, atol=1e-12)
    assert not any("skipped" in w for w in warnings), warnings
