"""Undetermined parameters are exported as "not determined" with the reason; intervals of positive
quantities stay above zero (log-scale interval, by hand below)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from numpy.testing import assert_allclose
from vzero.cli.inspect import _value
from vzero.plugins.fit.catalog import BY_NAME
from vzero.plugins.fit.determined import settle


def _fits(**cols: list) -> pd.DataFrame:
    n = len(cols["parameter"])
    base = {"group": ["g"] * n, "model": ["substrate-inhibition"] * n, "unit": ["uM"] * n, "fixed": [False] * n,
            "dof": [10] * n, "note": [""] * n, "ci_method": ["wald-t"] * n}
    base.update(cols)
    return pd.DataFrame(base)


def test_a_runaway_constant_without_error_is_not_determined():
    frame = _fits(parameter=["Km", "Ksi"], estimate=[40.0, 2.5863e107], stderr=[3.0, np.nan],
                  ci_low=[34.0, np.nan], ci_high=[46.0, np.nan])
    out = settle(frame, BY_NAME)
    ksi = out.set_index("parameter").loc["Ksi"]
    assert np.isnan(ksi["estimate"]) and ksi["note"].startswith("not determined: no standard error")
    assert out.set_index("parameter").loc["Km", "estimate"] == 40.0  # a determined one is left alone
    text = _value(ksi)
    assert text.startswith("not determined (no standard error") and "nan" not in text and "e+107" not in text


def test_positive_interval_below_zero_becomes_log_scale():
    # Wald: 2 ± 2.0 * 1.5 = [-1, 5]. Log scale (delta method on log(estimate), common practice):
    # 2 * exp(±2.0 * 1.5 / 2) = [2 / e^1.5, 2 e^1.5] = [0.44626, 8.96338].
    frame = _fits(parameter=["kcat/Km"], estimate=[2.0], stderr=[1.5], ci_low=[-1.0], ci_high=[5.0],
                  model=["michaelis-menten"])
    out = settle(frame, BY_NAME).iloc[0]
    assert_allclose([out["ci_low"], out["ci_high"]], [2 / math.exp(1.5), 2 * math.exp(1.5)], rtol=1e-12)
    assert out["ci_low"] > 0 and out["ci_method"] == "wald-t (log scale)"
    # an interval that stays above zero keeps its Wald form
    kept = settle(_fits(parameter=["Km"], estimate=[40.0], stderr=[3.0], ci_low=[34.0], ci_high=[46.0]), BY_NAME)
    assert kept["ci_low"].iloc[0] == 34.0 and kept["ci_method"].iloc[0] == "wald-t"
