"""``model-choice`` without S0: a well that falls back to the early quadratic because the curve's residual RMS
passed ``lof_ratio`` read noises gets the quadratic's SE scaled to the larger of the read noise and that
residual RMS (docs/rates.md, "Do the standard errors mean what they say?").

The quadratic's own figures come from the real early quadratic (spied); the curve's residual RMS is set by
hand on chosen wells, so the rule is checked on both sides of each clause. Invented data, integrated by
scipy.integrate.solve_ivp (:func:`vzero.plugins.kinetics.simulate.simulate_plate`).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates import choice

from tests.plugins.rates.choice_spy import spy_quadratic

T = np.arange(60) * 10.0  # s


def test_fallback_quadratic_se_takes_the_curve_residual_rms(monkeypatch: pytest.MonkeyPatch) -> None:
    s0 = np.full(5, 2.0)
    y = simulate_plate(T, s0, 1.0, 4e-4, signal_per_conc=1.0, baseline=0.1, noise=0.002, seed=5).signal
    seen: dict[str, Any] = {}
    monkeypatch.setattr(choice, "early_quadratic", spy_quadratic(seen))
    real = choice.progress_curve
    # per well: the curve's residual RMS over the read noise, and whether its v0 is finite
    ratio = np.array([2.0, 1.2, 1.41, 0.9, np.nan])
    lose_v0 = np.array([False, False, False, True, False])

    def curve(*a: Any, **k: Any) -> Any:
        r = real(*a, **k)
        r.extra["rmse_over_noise"][:] = ratio
        r.v0[lose_v0] = np.nan
        return r

    monkeypatch.setattr(choice, "progress_curve", curve)
    out = choice.model_choice(T, y, find_lag=False)
    q = seen["q"]
    code = out.extra["model"]
    # kept (1.2 <= lof_ratio 1.4): the curve's figures, not the quadratic's
    assert code[1] == 0.0
    assert out.v0[1] != q.v0[1]
    # left with the quadratic: its v0 always; its SE times the curve's residual RMS over the noise where that
    # exceeds 1 (wells 0 and 2), unchanged where it does not (well 3: the curve failed for another reason)
    # or where it is unknown (well 4)
    for w, factor in ((0, 2.0), (2, 1.41), (3, 1.0), (4, 1.0)):
        assert code[w] == 2.0
        assert out.v0[w] == q.v0[w]
        assert out.stderr[w] == pytest.approx(factor * q.se[w], rel=1e-12)
