"""model-choice step 5's verdict on the power-law curve, clause by clause on both sides, and what the method
reports (invented data).

Plate: Michaelis–Menten wells simulated by ODE integration (:func:`vzero.plugins.kinetics.simulate.simulate_plate`,
scipy.integrate.solve_ivp). The two curve fits are real; their residual RMS and v0 are then set per well
so that each well sits just inside or just outside one clause of the rule docs/rates.md (model-choice step 5)
states: the power law is the better description where its residual RMS is smaller by more than ``tie`` (0.01
read noises); it is kept where it is within ``lof_ratio`` (1.4) and its v0 within ``agree_z`` (2) of the
quadratic's standard errors; a better power law that is not kept, or a worse one where Michaelis–Menten does
not describe the well either, sends the well back to the quadratic.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np
import pytest
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates import choice

from tests.plugins.rates.choice_spy import rows_of, spy_quadratic

T = np.arange(60) * 10.0  # s
SPC, KM = 2.5, 0.5  # AU/mM, mM (invented)

#: per well: (name, Michaelis-Menten RMS / noise, power law RMS / noise, power v0 off the quadratic in agree_z
#: quadratic SEs, model expected)
CASES: list[tuple[str, float, float, float, int]] = [
    ("better by more than the tie, agrees", 1.2, 1.2 - 0.0101, 0.0, 1),
    ("better by less than the tie", 1.2, 1.2 - 0.0099, 0.0, 0),
    ("Michaelis-Menten beyond the noise, power law within", 1.5, 1.3, 0.0, 1),
    ("power law at the noise limit", 1.5, 1.4, 0.0, 1),
    ("better but beyond the noise", 1.5, 1.45, 0.0, 2),
    ("worse, and Michaelis-Menten beyond the noise", 1.5, 1.6, 0.0, 2),
    ("better, near the quadratic", 1.2, 1.0, 0.99, 1),
    ("better, off the quadratic", 1.2, 1.0, 1.01, 2),
    ("better, off the quadratic below it", 1.2, 1.0, -1.01, 2),
    ("Michaelis-Menten at the noise limit, power law worse", 1.4, 1.5, 0.0, 0),
]
N = len(CASES)


def test_power_law_verdict_clause_by_clause(monkeypatch: pytest.MonkeyPatch) -> None:
    s0 = np.full(N, KM)
    y = simulate_plate(T, s0, KM, 4e-4, signal_per_conc=SPC, noise=0.0005, seed=5).signal
    real_fit = choice.progress_curve
    seen: dict[str, Any] = {}
    quadratic = spy_quadratic(seen)

    def index(rows: np.ndarray) -> np.ndarray:
        return rows_of(y, rows)

    def fit(t: np.ndarray, yy: np.ndarray, **k: Any) -> Any:
        res = real_fit(t, yy, **k)
        rows, q = index(yy), seen["q"]
        if k.get("model") == "power":
            assert "power" not in seen
            seen["power"] = rows
            v0 = q.v0[rows] + np.array([CASES[w][3] for w in rows]) * 2.0 * q.se[rows]  # agree_z 2 (docs)
            seen["pw_v0"] = v0
            ratio = np.array([CASES[w][2] for w in rows])
            seen["pw_res"] = dataclasses.replace(res, v0=v0, extra=dict(res.extra, rmse_over_noise=ratio))
            return seen["pw_res"]
        assert "mm" not in seen
        seen["mm"] = rows
        # the curve's v0 ten quadratic SEs away: the disagreement trigger sends every well on to the power law
        v0 = q.v0[rows] + 10.0 * q.se[rows]
        seen["mm_v0"] = v0
        ratio = np.array([CASES[w][1] for w in rows])
        seen["mm_res"] = dataclasses.replace(res, v0=v0, extra=dict(res.extra, rmse_over_noise=ratio))
        return seen["mm_res"]

    monkeypatch.setattr(choice, "early_quadratic", quadratic)
    monkeypatch.setattr(choice, "progress_curve", fit)
    r = choice.model_choice(T, y, s0=s0, signal_per_conc=SPC, find_lag=False)
    assert seen["mm"].tolist() == list(range(N)) and seen["power"].tolist() == list(range(N))
    q = seen["q"]
    for w, case in enumerate(CASES):
        assert r.extra["model"][w] == case[4], case[0]
        want_v0, want_ratio = {0: (seen["mm_v0"][w], case[1]), 1: (seen["pw_v0"][w], case[2]),
                               2: (q.v0[w], q.rmse_over_noise[w])}[case[4]]
        assert r.v0[w] == want_v0 and r.extra["rmse_over_noise"][w] == want_ratio, case[0]
        if case[4] == 2:
            # back to the quadratic: where neither curve is within lof_ratio 1.4 (a misfit, not a disagreement)
            # its SE is scaled to the better curve's residual RMS over the noise (docs/rates.md)
            best = min(case[1], case[2])
            assert r.stderr[w] == pytest.approx(q.se[w] * (best if best > 1.4 else 1.0), rel=1e-12), case[0]
            assert r.n_points[w] == q.n[w]
            assert r.window_end_s[w] == q.end_s[w]
            assert r.goodness[w] == q.goodness[w] and r.window_start_s[w] == T[0]
        else:  # the kept curve's own figures (rows are in well order: asserted above)
            res = seen["mm_res"] if case[4] == 0 else seen["pw_res"]
            for name in ("stderr", "goodness", "window_start_s", "window_end_s", "n_points"):
                assert getattr(r, name)[w] == getattr(res, name)[w], (case[0], name)


def test_hill_step_gets_the_wells_whose_power_law_order_exceeds_1_1(monkeypatch: pytest.MonkeyPatch) -> None:
    # docs/rates.md, step 6b: wells whose power law needed an order above 1.1 go to the Hill step, with the
    # residual RMS of the better three-parameter curve and whether Michaelis-Menten was kept (described the
    # well and still stands after the power law's verdict); the plate and verdicts of the test above, each
    # power-law fit given the order below
    orders = np.array([1.09, 1.11, 1.5, 2.0, 0.5, 3.0, 1.2, 1.2, 1.3, 1.1])  # the last exactly at 1 + 0.1
    s0 = np.full(N, KM)
    y = simulate_plate(T, s0, KM, 4e-4, signal_per_conc=SPC, noise=0.0005, seed=5).signal
    real_fit = choice.progress_curve
    q = choice.early_quadratic(T, y, np.full(N, SPC * KM), frac=0.2, min_points=8,
                               sigma=choice.screen(y, min_points=8, time=T).sigma)
    seen: dict[str, Any] = {}

    def fit(t: np.ndarray, yy: np.ndarray, **k: Any) -> Any:
        res = real_fit(t, yy, **k)
        power = k.get("model") == "power"
        ratio = np.array([c[2] if power else c[1] for c in CASES])
        v0 = q.v0 + (np.array([c[3] for c in CASES]) * 2.0 if power else 10.0) * q.se
        extra = dict(res.extra, rmse_over_noise=ratio, **({"order": orders} if power else {}))
        return dataclasses.replace(res, v0=v0, extra=extra)

    def record(_t: Any, _y: Any, _sc: Any, _q: Any, rows: np.ndarray, pw_v0: np.ndarray, pw_order: np.ndarray,
               r_best: np.ndarray, mm_kept: np.ndarray, *_a: Any, **_k: Any) -> None:
        seen.update(rows=rows, pw_order=pw_order, r_best=r_best, mm_kept=mm_kept, pw_v0=pw_v0)

    monkeypatch.setattr(choice, "progress_curve", fit)
    def record_si(_t: Any, _y: Any, _sc: Any, _q: Any, rows: np.ndarray, pw: Any, r_mm: np.ndarray, *_a: Any,
                  **_k: Any) -> None:
        seen.update(si_rows=rows, si_order=pw.extra["order"], si_r_mm=r_mm)

    monkeypatch.setattr(choice, "_hill_step", record)
    monkeypatch.setattr(choice, "_inhibition_hook", record_si)
    choice.model_choice(T, y, s0=s0, signal_per_conc=SPC, find_lag=False)
    # step 6e's hook is offered every well the power law was fitted to, with Michaelis-Menten's residual RMS
    assert seen["si_rows"].tolist() == list(range(N))
    np.testing.assert_array_equal(seen["si_order"], orders)
    np.testing.assert_array_equal(seen["si_r_mm"], [c[1] for c in CASES])
    rising = np.flatnonzero(orders > 1.1)
    assert seen["rows"].tolist() == rising.tolist() == [1, 2, 3, 5, 6, 7, 8]
    np.testing.assert_array_equal(seen["pw_order"], orders[rising])
    best = np.array([min(CASES[w][1], CASES[w][2]) for w in rising])
    np.testing.assert_array_equal(seen["r_best"], best)
    # Michaelis-Menten kept (within 1.4 and not replaced by the power law): only the well whose power law is
    # better by less than the tie
    assert seen["mm_kept"].tolist() == [w == 1 for w in rising]
    np.testing.assert_allclose(seen["pw_v0"], (q.v0 + np.array([c[3] for c in CASES]) * 2.0 * q.se)[rising],
                               rtol=1e-12)
