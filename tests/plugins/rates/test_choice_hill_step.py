"""model-choice step 6b (:func:`vzero.plugins.rates.choice._hill_step`) clause by clause, both sides of each
threshold (invented wells).

The Hill fits are replaced by fixed figures (their own computation is checked against Radau integration in
test_hillcurve.py), so that each well sits just inside or just outside one clause while passing the others.
The extra-sum-of-squares F-test's critical values are computed here as the square of Student's t (F(1, k) =
t_k², scipy.stats.t; the product uses scipy.stats.f), the statistic by its textbook definition
(Motulsky & Christopoulos, "Fitting models to biological data using linear and nonlinear regression", 2004:
F = ((SS_simple - SS_complex) / (df_simple - df_complex)) / (SS_complex / df_complex)). The thresholds are
those docs/rates.md (model-choice step 6b) states: 1 % where Michaelis–Menten was kept, 5 % otherwise, the
Hill curve within 1.4 read noises and within 2 of the quadratic's standard errors.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
from scipy.stats import t as t_dist
from vzero.plugins.rates import hillcurve
from vzero.plugins.rates.choice import EarlyQuadratic, _hill_step
from vzero.plugins.rates.noise import Screen

T = np.arange(40) * 10.0  # s
S0, SPC = 0.5, 2.5  # mM, AU/mM (invented)
SIGMA, R_BEST, N_READS = 1e-3, 1.2, 40  # read noise (AU), the better three-parameter curve's RMS / noise, reads
V_PW, V_HILL, SE_Q = 1e-3, 1.02e-3, 1e-5  # AU/s
LOF, AGREE = 1.4, 2.0


def f_critical(alpha: float, k: int) -> float:
    """Upper-alpha point of F(1, k), as Student's t squared (scipy.stats.t)."""
    return float(t_dist.ppf(1.0 - alpha / 2.0, k)) ** 2


#: per well (F within 0.1 % of its critical value: a degree of freedom more or less moves either by more):
#: (name, Michaelis-Menten kept, F over its critical value at the well's level, Hill ratio, distance
#: from the quadratic in agree_z SEs, converged, kept?)
CASES: list[tuple[str, bool, float, float, float, bool, bool]] = [
    ("curve kept, F just beyond 1 %", True, 1.001, 1.0, 0.0, True, True),
    ("curve kept, F just within 1 % (beyond 5 %)", True, 0.999, 1.0, 0.0, True, False),
    ("no curve kept, F just beyond 5 %", False, 1.001, 1.0, 0.0, True, True),
    ("no curve kept, F just within 5 %", False, 0.999, 1.0, 0.0, True, False),
    ("at the noise limit", False, 2.0, LOF, 0.0, True, True),
    ("beyond the noise limit", False, 2.0, LOF * 1.01, 0.0, True, False),
    ("near the quadratic", False, 2.0, 1.0, 0.99, True, True),
    ("off the quadratic", False, 2.0, 1.0, 1.01, True, False),
    ("off the quadratic, below it", False, 2.0, 1.0, -1.01, True, False),
    ("not converged", False, 2.0, 1.0, 0.0, False, False),
]
N = len(CASES)


def _hill_rss(i: int, n: int) -> float:
    """The Hill fit's residual sum of squares that gives well ``i`` (``n`` reads) its F statistic: the
    definition solved for SS_complex, with SS_simple = (R_BEST sigma)² (n - 3), df 1 and n - 4."""
    mm_kept, factor = CASES[i][1], CASES[i][2]
    f = factor * f_critical(0.01 if mm_kept else 0.05, n - 4)
    rss3 = (R_BEST * SIGMA) ** 2 * (n - 3)
    return rss3 * (n - 4) / (f + n - 4)


def _run(monkeypatch: pytest.MonkeyPatch, pw_v0: np.ndarray, r_best: np.ndarray) -> tuple[list[np.ndarray], dict]:
    rng = np.random.default_rng(4)
    y = 0.1 + V_PW * T[None, :] + SIGMA * rng.standard_normal((N, T.size))
    valid = np.ones_like(y, bool)
    valid[1, -2:] = False  # fewer reads in one well: its own degrees of freedom
    sc = Screen(valid, valid.sum(axis=1), np.full(N, SIGMA), np.full(N, 0.3), np.zeros(N, np.int64),
                np.ones(N, bool), np.full(N, 50.0))
    q_v0 = V_HILL - np.array([c[4] for c in CASES]) * AGREE * SE_Q
    q = EarlyQuadratic(q_v0, np.full(N, SE_Q), np.full(N, -1e-7), np.full(N, T[-1]), np.full(N, T.size),
                       np.ones(N), np.ones(N))
    seen: dict[str, Any] = {"y": y, "sc": sc}

    def fake_hill(_t: np.ndarray, yy: np.ndarray, _valid: np.ndarray, _s0: np.ndarray, _spc: float,
                  _sigma: np.ndarray, start: np.ndarray, *, max_iter: int) -> dict[str, np.ndarray]:
        w = np.array([int(np.flatnonzero((y == row).all(axis=1))[0]) for row in yy])
        seen["wells"], seen["start"] = w, start.copy()
        rss = np.array([_hill_rss(i, int(sc.n_valid[i])) for i in w])
        return {"v0": np.full(w.size, V_HILL), "se": np.full(w.size, 2e-5), "rss": rss,
                "ratio": np.array([CASES[i][3] for i in w]), "h": np.full(w.size, 2.0),
                "converged": np.array([CASES[i][5] for i in w])}

    monkeypatch.setattr(hillcurve, "fit_hill_curve", fake_hill)
    arrays = [np.full(N, V_PW), np.full(N, 5e-6), np.full(N, 1.0), np.full(N, 0.8), np.full(N, 0.99),
              np.zeros(N), np.full(N, T[-1]), np.full(N, float(T.size))]
    mm_kept = np.array([c[1] for c in CASES])
    _hill_step(T, y, sc, q, np.arange(N), pw_v0, np.full(N, 2.0), r_best, mm_kept, np.full(N, S0), SPC, *arrays,
               np.zeros(N, np.int64), lof_ratio=LOF, agree_z=AGREE)
    return arrays, seen


def test_each_clause_of_the_hill_step_on_both_sides(monkeypatch: pytest.MonkeyPatch) -> None:
    # the second well counts two reads fewer: its F statistic is set for its own 38 reads
    (v0, se, code, ratio, goodness, w_start, w_end, n_pts), seen = _run(monkeypatch, np.full(N, V_PW),
                                                                        np.full(N, R_BEST))
    sc = seen["sc"]
    for i, case in enumerate(CASES):
        assert bool(code[i] == 4.0) is case[6], case[0]
        if case[6]:
            assert v0[i] == V_HILL and se[i] == 2e-5 and ratio[i] == case[3] and np.isnan(goodness[i])
            last = np.flatnonzero(sc.valid[i])[-1]
            assert w_start[i] == T[0] and w_end[i] == T[last] and n_pts[i] == sc.n_valid[i]
        else:
            assert (v0[i], se[i], code[i], ratio[i], goodness[i]) == (V_PW, 5e-6, 1.0, 0.8, 0.99), case[0]


def test_the_hill_fit_starts_from_the_power_law(monkeypatch: pytest.MonkeyPatch) -> None:
    # the step's text: baseline from the first three counted reads less v0 times their mean time, ln(v0/spc),
    # the power law's order, and u = 0.95 (K0.5 well above S0) as its logit; by hand
    _, seen = _run(monkeypatch, np.full(N, V_PW), np.full(N, R_BEST))
    y = seen["y"]
    for k, w in enumerate(seen["wells"]):
        base = y[w, :3].mean() - V_PW * (T[:3].mean() - T[0])
        want = [base, math.log(V_PW / SPC), 2.0, math.log(0.95 / 0.05)]
        np.testing.assert_allclose(seen["start"][k], want, rtol=1e-12)


def test_only_wells_with_a_rising_power_law_and_a_three_parameter_fit_are_tried(
        monkeypatch: pytest.MonkeyPatch) -> None:
    # a power law whose v0 runs against the signal's direction, is zero or is missing, or no three-parameter curve's
    # residual RMS to test against: no Hill fit, the well keeps what it had
    pw_v0 = np.full(N, V_PW)
    pw_v0[0], pw_v0[2], pw_v0[6] = -V_PW, np.nan, 0.0
    r_best = np.full(N, R_BEST)
    r_best[4] = np.nan
    (_, _, code, *_), seen = _run(monkeypatch, pw_v0, r_best)
    assert seen["wells"].tolist() == [i for i in range(N) if i not in (0, 2, 4, 6)]
    assert code[0] == code[2] == code[4] == code[6] == 1.0
