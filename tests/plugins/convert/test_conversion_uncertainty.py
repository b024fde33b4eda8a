"""Beer-Lambert conversion: the standard errors follow the rates through the conversion and the turnover,
and the sign warning fires only when most sample rates are negative. Hand calculations beside each check
(ε of NADH at 340 nm, 6220 M⁻¹ cm⁻¹: Horecker & Kornberg 1948)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from vzero.data import Table
from vzero.params import validate
from vzero.plugins.convert import BeerLambert
from vzero.plugins.convert.standard_curve import _curvature_p, _ols, fit_standard_curve
from vzero.stage import StageInput


def _convert(rates: list[float], stderr: list[float], enzyme: list[float], roles: list[str] | None = None):
    n = len(rates)
    frame = pd.DataFrame({"well": [f"A{i + 1}" for i in range(n)], "role": roles or ["sample"] * n,
                          "rate": rates, "rate_stderr": stderr, "enzyme": enzyme})
    table = Table(frame, {"rate": "AU/s", "enzyme": "nM"}, {"signal_unit": "AU"})
    settings, problems = validate(BeerLambert.params, {"epsilon": "6220 M^-1 cm^-1", "pathlength": "0.5 cm",
                                                       "output_unit": "uM/min"})
    assert not problems
    warnings: list[str] = []
    data = StageInput({"rates": table}, {"name": "p"}, {}, {}, None, warnings.append)
    return BeerLambert(**settings).run(data).artifacts["rates"].frame, warnings


def test_rate_and_turnover_standard_errors_by_hand() -> None:
    out, _ = _convert([1e-3, 2e-3], [1e-5, 4e-5], [10.0, 40.0])
    # (AU/s)/(ε l) = M/s; ε l = 6220 × 0.5 = 3110 per M; ×1e6 µM/M × 60 s/min
    per = 1e6 * 60 / 3110
    np.testing.assert_allclose(out["rate"], np.array([1e-3, 2e-3]) * per, rtol=1e-12)
    np.testing.assert_allclose(out["rate_stderr"], np.array([1e-5, 4e-5]) * per, rtol=1e-12)
    # turnover = rate / [E]: (µM/min)/(nM) = 1000/min = 1000/60 per s; its SE divides by [E] the same way
    to_per_s = 1000 / 60
    np.testing.assert_allclose(out["turnover"], np.array([1e-3, 2e-3]) * per / [10.0, 40.0] * to_per_s, rtol=1e-12)
    np.testing.assert_allclose(out["turnover_stderr"], np.array([1e-5, 4e-5]) * per / [10.0, 40.0] * to_per_s,
                               rtol=1e-12)


@pytest.mark.parametrize(("negative", "warned"), [(2, False), (3, True)])
def test_sign_warning_only_when_most_sample_rates_are_negative(negative: int, warned: bool) -> None:
    rates = [-1e-3] * negative + [1e-3] * (4 - negative) + [-1e-3]  # the last is a blank: not counted
    _, warnings = _convert(rates, [1e-5] * 5, [np.nan] * 5, ["sample"] * 4 + ["blank"])
    assert any("negative after conversion" in w for w in warnings) == warned


@pytest.mark.parametrize(("bend", "dropped"), [(0.0025, ()), (0.003, (5.0,))])
def test_standard_curve_drops_the_top_level_only_below_p_of_five_percent(bend: float, dropped: tuple) -> None:
    # invented standards 0-5 in duplicate with a slight downward bend: the quadratic term's F-test gives
    # p = 0.076 (kept, straight enough at alpha 0.05) and p = 0.046 (top level dropped)
    x = np.repeat(np.arange(6.0), 2)
    y = x + np.array([0.01, -0.01, -0.02, 0.015, 0.01, -0.005, 0.0, 0.02, -0.015, 0.0, 0.01, -0.01])
    y -= bend * (x - 2.5) ** 2
    _, _, rss = _ols(x, y, 1)
    assert (_curvature_p(x, y, rss) < 0.05) == bool(dropped)
    assert fit_standard_curve(x, y).dropped_levels == dropped
