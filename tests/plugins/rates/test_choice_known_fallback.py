"""``model-choice`` with S0: a well that goes back to the early quadratic because neither whole-curve model
(Michaelis–Menten, power law) describes its reads within ``lof_ratio`` read noises gets the quadratic's SE
scaled to the better curve's residual RMS over the read noise, as without S0
(tests/plugins/rates/test_choice_signal_fallback.py; docs/rates.md, "Do the standard errors mean what they
say?": on such wells of the curving condition the SE was 0.71x the scatter and its intervals held the truth
80 % of the time).

The quadratic's figures come from the real early quadratic (spied); each curve's residual RMS is set by hand
on chosen wells, so the rule is checked on both sides of each clause. Invented data, integrated by
scipy.integrate.solve_ivp (:func:`vzero.plugins.kinetics.simulate.simulate_plate`).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pytest
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates import choice

from tests.plugins.rates.choice_spy import spy_quadratic

T = np.arange(60) * 10.0  # s


def _model_choice(monkeypatch: pytest.MonkeyPatch, n: int, seed: int,
                  edit: Callable[[Any, bool], None]) -> tuple[Any, Any]:
    """``model_choice`` with S0 = Km on ``n`` wells with about 40 % converted by the last read (every well
    fitted, none skipped), after ``edit(result, is_power_law)`` changed each whole-curve fit's result; returns
    it and the early quadratic it saw."""
    s0 = np.full(n, 1.0)
    y = simulate_plate(T, s0, 1.0, 1.6e-3, signal_per_conc=1.0, baseline=0.1, noise=0.002, seed=seed).signal
    seen: dict[str, Any] = {}
    monkeypatch.setattr(choice, "early_quadratic", spy_quadratic(seen))
    real = choice.progress_curve

    def curve(*a: Any, **k: Any) -> Any:
        r = real(*a, **k)
        edit(r, k.get("model") == "power")
        if k.get("model") == "power":
            r.extra["order"][:] = 1.0  # no Hill step
        return r

    monkeypatch.setattr(choice, "progress_curve", curve)
    out = choice.model_choice(T, y, s0=s0, signal_per_conc=1.0, find_lag=False, pool_shape=False)
    return out, seen["q"]


def test_known_s0_fallback_quadratic_se_takes_the_better_curve_residual_rms(monkeypatch: pytest.MonkeyPatch) -> None:
    # per well: the residual RMS over the read noise of the Michaelis–Menten curve and of the power law
    r_mm = np.array([2.0, 1.6, np.nan, 1.5, 1.2])
    r_pw = np.array([1.8, 2.5, 1.7, np.nan, 1.3])

    def edit(r: Any, power: bool) -> None:
        r.extra["rmse_over_noise"][:] = (r_pw if power else r_mm)[: r.v0.size]

    out, q = _model_choice(monkeypatch, 5, 9, edit)
    code = out.extra["model"]
    # well 4: the Michaelis–Menten curve describes the reads (1.2 <= lof_ratio 1.4) and is kept
    assert code[4] == 0.0
    assert out.stderr[4] != q.se[4]
    # wells 0-3: no curve within lof_ratio, so the quadratic's v0, and its SE times the better curve's ratio
    # (0: power 1.8 below 2.0; 1: 1.6; 2: Michaelis–Menten unknown, power 1.7; 3: power unknown, 1.5)
    for w, factor in ((0, 1.8), (1, 1.6), (2, 1.7), (3, 1.5)):
        assert code[w] == 2.0
        assert out.v0[w] == q.v0[w]
        assert out.stderr[w] == pytest.approx(factor * q.se[w], rel=1e-12)


def test_known_s0_quadratic_kept_for_disagreement_keeps_its_se(monkeypatch: pytest.MonkeyPatch) -> None:
    # a power law that describes the reads (ratio 1.0) but whose v0 disagrees with the quadratic: back to the
    # quadratic for the disagreement, not for a misfit, so the quadratic's SE is unchanged
    def edit(r: Any, power: bool) -> None:
        r.extra["rmse_over_noise"][:] = 1.0 if power else 3.0
        if power:
            r.v0[:] = r.v0 * 2.0  # far outside agree_z of the quadratic's SE

    out, q = _model_choice(monkeypatch, 2, 10, edit)
    for w in range(2):
        assert out.extra["model"][w] == 2.0
        assert out.stderr[w] == q.se[w]
