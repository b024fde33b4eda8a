"""model-choice's late steps on both sides of each threshold (invented wells): step 7's decay model
(:func:`vzero.plugins.rates.choice._decay_model`) and the order range of step 6d
(:func:`vzero.plugins.rates.choice._same_reads_step`).

The decay fit is replaced by fixed figures (its own computation is checked in the lag-decay tests), so that each
well sits just inside or just outside one clause of the rule the step's docstring and docs/rates.md (model-choice
step 7) state: wells left with the quadratic whose power-law order is at least 6 and which lag_decay flags DECAY
take the decay model where it describes the reads within lof_ratio read noises, or better than the
whole-curve model did. Step 6d's candidates: a kept power law of order above 1.1 and below 6 whose quadratic
window holds every read (docs/rates.md, step 6d); its error rule itself is checked in test_same_reads.py.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.rates import choice
from vzero.plugins.rates.choice import EarlyQuadratic, _decay_model, _Estimates, _same_reads_step
from vzero.plugins.rates.noise import Screen

T = np.arange(30) * 10.0  # s
LOF = 1.4

#: per well: (name, model code before, power-law order, DECAY from lag_decay, decay fit RMS / noise, the whole-curve
#: RMS / noise, takes the decay model?)
CASES: list[tuple[str, float, float, bool, float, float, bool]] = [
    ("every clause holds", 2.0, 7.0, True, 1.0, 2.0, True),
    ("order at the threshold", 2.0, 6.0, True, 1.0, 2.0, True),
    ("order just below", 2.0, 6.0 * 0.99, True, 1.0, 2.0, False),
    ("order not fitted", 2.0, np.nan, True, 1.0, 2.0, False),
    ("a whole-curve model was kept", 0.0, 7.0, True, 1.0, 2.0, False),
    ("lag_decay sees no decay", 2.0, 7.0, False, 1.0, 2.0, False),
    ("decay fit at the noise limit, the curve closer", 2.0, 7.0, True, LOF, 1.0, True),
    ("beyond the noise, closer than the curve", 2.0, 7.0, True, 1.6, 1.7, True),
    ("beyond the noise, no closer than the curve", 2.0, 7.0, True, 1.6, 1.6, False),
]
N = len(CASES)


def test_decay_model_clause_by_clause(monkeypatch: pytest.MonkeyPatch) -> None:
    rng = np.random.default_rng(2)
    y = 0.1 + 1e-3 * T[None, :] + 1e-3 * rng.standard_normal((N, T.size))
    seen: dict[str, Any] = {}

    def fake_lag_decay(_t: np.ndarray, yy: np.ndarray, **k: Any) -> RateResult:
        w = np.array([int(np.flatnonzero((y == row).all(axis=1))[0]) for row in yy])
        seen["wells"], seen["kwargs"] = w, k
        flags = np.array([int(Flag.DECAY) if CASES[i][3] else 0 for i in w], np.int64)
        return RateResult(v0=2e-3 + 1e-5 * w, stderr=1e-5 + 1e-7 * w, window_start_s=np.full(w.size, 20.0),
                          flags=flags, extra={"k_decay": 1e-3 * (1 + w),
                                              "rmse_over_noise": np.array([CASES[i][4] for i in w])})

    monkeypatch.setattr(choice, "lag_decay", fake_lag_decay)
    code = np.array([c[1] for c in CASES])
    order = np.array([c[2] for c in CASES])
    v0, se, flags, w_start = np.full(N, 1e-3), np.full(N, 1e-6), np.zeros(N, np.int64), np.zeros(N)
    extra = {"rmse_over_noise": np.array([c[5] for c in CASES]), "k_decay": np.full(N, np.nan)}
    s0 = np.full(N, 0.5)
    _decay_model(T, y, s0, 2.5, code, v0, se, flags, extra, w_start, order, lof_ratio=LOF, min_points=8)
    tried = [i for i, c in enumerate(CASES) if c[1] == 2.0 and c[2] >= 6.0]
    assert seen["wells"].tolist() == tried
    np.testing.assert_array_equal(seen["kwargs"]["s0"], s0[tried])
    assert seen["kwargs"]["signal_per_conc"] == 2.5 and seen["kwargs"]["min_points"] == 8
    for i, case in enumerate(CASES):
        if case[6]:
            assert (code[i], v0[i], se[i]) == (3.0, 2e-3 + 1e-5 * i, 1e-5 + 1e-7 * i), case[0]
            assert flags[i] & Flag.DECAY and extra["k_decay"][i] == 1e-3 * (1 + i) and w_start[i] == 20.0
            assert extra["rmse_over_noise"][i] == case[4]
        else:
            assert (code[i], v0[i], se[i], flags[i], w_start[i]) == (case[1], 1e-3, 1e-6, 0, 0.0), case[0]
            assert np.isnan(extra["k_decay"][i]) and extra["rmse_over_noise"][i] == case[5]


@pytest.mark.parametrize(("order", "candidate"), [(1.05, False), (1.15, True), (5.9, True), (6.0, False)])
def test_same_reads_candidates_by_order(order: float, candidate: bool) -> None:
    # a kept power law (code 1) less precise than the quadratic, every read in the quadratic's window: a
    # candidate goes back to the quadratic (code 2); outside the order range it keeps the power law
    v0 = 1e-3
    q = EarlyQuadratic(np.array([v0]), np.array([4e-5]), np.array([-2.0 * v0**2 / (0.1 * 3.4)]),
                       np.array([T[-1]]), np.array([T.size]), np.array([1.0]), np.array([0.99]))
    sc = Screen(np.ones((1, T.size), bool), np.array([T.size]), np.array([0.002]), np.array([0.2 * 3.4 * 0.1]),
                np.zeros(1, np.int64), np.ones(1, bool), np.array([50.0]))
    est = _Estimates(np.array([1.1e-3]), np.array([9e-5]), np.array([1.0]), np.array([1.0]), np.array([0.99]),
                     np.array([0.0]), np.array([T[-1]]), np.array([T.size]))
    _same_reads_step(T, q, sc, np.array([0.1]), 3.4, np.array([order]), est, np.zeros(1, np.int64))
    assert est.code[0] == (2.0 if candidate else 1.0)
    assert est.v0[0] == (v0 if candidate else 1.1e-3)


def test_inhibition_hook_passes_the_power_law_and_takes_the_kept_fits(monkeypatch: pytest.MonkeyPatch) -> None:
    # step 6e's hook: wells already on the Hill curve (code 4) are not offered to the substrate-inhibition
    # step; the others are offered with the power law's v0 and order, the Michaelis-Menten RMS, the quadratic's
    # v0 and SE and a start baseline (first three counted reads less v0 times their mean time, by hand); the
    # wells the step keeps report its fit (code 5, no R², the window of every counted read)
    from vzero.plugins.rates import sicurve

    n = 5
    rng = np.random.default_rng(8)
    y = 0.1 + 1e-3 * T[None, :] + 1e-3 * rng.standard_normal((n, T.size))
    valid = np.ones_like(y, bool)
    valid[3, -4:] = False
    sc = Screen(valid, valid.sum(axis=1), np.full(n, 1e-3), np.full(n, 0.3), np.zeros(n, np.int64),
                np.ones(n, bool), np.full(n, 50.0))
    q = EarlyQuadratic(np.full(n, 1.05e-3), np.full(n, 2e-5), np.full(n, -1e-7), np.full(n, T[-1]),
                       np.full(n, T.size), np.ones(n), np.ones(n))
    pw = RateResult(v0=1e-3 * (1 + 0.01 * np.arange(n)), extra={"order": np.linspace(-0.2, 0.2, n)})
    r_mm = np.array([1.1, 1.2, 1.3, 1.4, 1.5])
    out = _Estimates(np.full(n, 9e-4), np.full(n, 1e-5), np.array([1.0, 4.0, 1.0, 1.0, 2.0]), np.full(n, 0.9),
                     np.full(n, 0.99), np.zeros(n), np.full(n, T[-1]), np.full(n, float(T.size)))
    seen: dict[str, Any] = {}

    def fake_step(_t: np.ndarray, yy: np.ndarray, *args: Any, **kw: Any) -> tuple[np.ndarray, dict]:
        seen["n"], seen["args"], seen["kw"] = yy.shape[0], args, kw
        m = yy.shape[0]
        fit = {"v0": np.full(m, 1.2e-3), "se": np.full(m, 3e-5), "ratio": np.full(m, 1.05)}
        return np.array([True, False, True, True][:m]), fit

    monkeypatch.setattr(sicurve, "inhibition_step", fake_step)
    choice._inhibition_hook(T, y, sc, q, np.arange(n), pw, r_mm, np.full(n, 0.5), 2.5, out, np.zeros(n, np.int64),
                            lof_ratio=LOF, agree_z=2.0)
    offered = np.array([0, 2, 3, 4])  # not the Hill well
    assert seen["n"] == 4 and seen["kw"] == {"lof_ratio": LOF, "agree_z": 2.0}
    valid_o, s0_o, spc, sigma_o, base0, pw_v0, order, rmm, qv0, qse = seen["args"]
    np.testing.assert_array_equal(valid_o, valid[offered])
    np.testing.assert_array_equal(s0_o, 0.5)
    np.testing.assert_array_equal(sigma_o, sc.sigma[offered])
    assert spc == 2.5
    np.testing.assert_array_equal(pw_v0, pw.v0[offered])
    np.testing.assert_array_equal(order, pw.extra["order"][offered])
    np.testing.assert_array_equal(rmm, r_mm[offered])
    np.testing.assert_array_equal(qv0, q.v0[offered])
    np.testing.assert_array_equal(qse, q.se[offered])
    want_base = y[offered, :3].mean(axis=1) - pw.v0[offered] * (T[:3].mean() - T[0])
    np.testing.assert_allclose(base0, want_base, rtol=1e-12)
    kept = offered[[0, 2, 3]]
    assert out.code.tolist() == [5.0, 4.0, 1.0, 5.0, 5.0]
    np.testing.assert_array_equal(out.v0[kept], 1.2e-3)
    np.testing.assert_array_equal(out.se[kept], 3e-5)
    np.testing.assert_array_equal(out.ratio[kept], 1.05)
    assert np.isnan(out.goodness[kept]).all() and out.goodness[1] == out.goodness[2] == 0.99
    assert out.w_end[3] == T[-5] and out.n_pts[3] == T.size - 4 and out.w_end[0] == T[-1]
    assert out.v0[2] == 9e-4 and out.ratio[2] == 0.9
