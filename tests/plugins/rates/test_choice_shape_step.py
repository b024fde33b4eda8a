"""model-choice step 6c (:func:`vzero.plugins.rates.choice._shape_step`) clause by clause, both sides of each
threshold (invented wells).

The step's inputs are set by hand: the smooth-misfit statistic of each well (its own computation is checked
against a polynomial fit in test_hillcurve.py and test_choice_time_origin.py) and the Hill fits (their own
computation is checked against Radau integration in test_hillcurve.py) are replaced by fixed figures, so that
each well sits just inside or just outside one threshold of the step while passing every other. The expected
verdicts follow the step's rule as its docstring states it, with the standard error of the difference in
Hausman's form, sqrt(SE_hill² - SE_kept²) but at least DIFF_FLOOR of SE_hill (Hausman 1978, Econometrica
46:1251), evaluated here by hand.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
from scipy.stats import chi2
from vzero.plugins.rates import choice, hillcurve
from vzero.plugins.rates.choice import EarlyQuadratic, _Estimates, _shape_step
from vzero.plugins.rates.noise import Screen

# the step's thresholds as docs/rates.md (model-choice step 6c) states them, written out here so that a changed
# constant in the product is caught: the misfit trigger is chi² with one degree of freedom at 5 % (scipy.stats,
# independent; the product rounds it to 3.84), one SE of the screen's step, h at most 4 (Hill coefficients
# above 4 are rare: common practice), 2 SEs of the difference, the difference SE at least 0.3 of the larger
# SE, and the fit started at h = 2
MISFIT_TRY = float(chi2.ppf(0.95, 1))
SHAPE_SCREEN, SHAPE_H_MAX, SHAPE_Z, DIFF_FLOOR, SHAPE_H_START = 1.0, 4.0, 2.0, 0.3, 2.0

T = np.arange(40) * 10.0  # s
S0, SPC, KM = 0.5, 2.5, 0.4  # mM, AU/mM, mM (invented)
LOF, AGREE = 1.4, 2.0  # the lof_ratio and agree_z the step is called with
V_KEPT, SE_KEPT = 1e-3, 1e-5  # AU/s: the kept curve's v0 and SE
SE_HILL = 2e-5  # AU/s
ROOM = math.sqrt(SE_HILL**2 - SE_KEPT**2)  # above the floor (0.3 SE_HILL = 6e-6)

#: one well per row: (name, kept code, misfit, screen move in SE, Hill ratio, h, distance from the quadratic in
#: agree_z quadratic SEs, distance from the kept v0 in SHAPE_Z rooms, converged, replaced?)
CASES: list[tuple[str, float, float, float, float, float, float, float, bool, bool]] = [
    ("every clause holds", 0.0, 5.0, 2.0, 1.0, 2.0, 0.0, 1.5, True, True),
    ("misfit just below the trigger", 0.0, MISFIT_TRY * 0.99, 2.0, 1.0, 2.0, 0.0, 1.5, True, False),
    ("misfit just above the trigger", 0.0, MISFIT_TRY * 1.01, 2.0, 1.0, 2.0, 0.0, 1.5, True, True),
    ("one step moves v0 too little", 0.0, 5.0, SHAPE_SCREEN * 0.9, 1.0, 2.0, 0.0, 1.5, True, False),
    ("one step moves v0 enough", 0.0, 5.0, SHAPE_SCREEN * 1.1, 1.0, 2.0, 0.0, 1.5, True, True),
    ("Hill curve beyond the noise", 0.0, 5.0, 2.0, LOF * 1.01, 2.0, 0.0, 1.5, True, False),
    ("Hill curve at the noise limit", 0.0, 5.0, 2.0, LOF, 2.0, 0.0, 1.5, True, True),
    ("h at its limit", 0.0, 5.0, 2.0, 1.0, SHAPE_H_MAX, 0.0, 1.5, True, True),
    ("h beyond its limit", 0.0, 5.0, 2.0, 1.0, SHAPE_H_MAX * 1.01, 0.0, 1.5, True, False),
    ("off the quadratic", 0.0, 5.0, 2.0, 1.0, 2.0, 1.01, 1.5, True, False),
    ("near the quadratic", 0.0, 5.0, 2.0, 1.0, 2.0, 0.99, 1.5, True, True),
    ("just beyond SHAPE_Z", 0.0, 5.0, 2.0, 1.0, 2.0, 0.0, 1.05, True, True),
    ("just within SHAPE_Z", 0.0, 5.0, 2.0, 1.0, 2.0, 0.0, 0.95, True, False),
    ("below the kept v0, beyond SHAPE_Z", 0.0, 5.0, 2.0, 1.0, 2.0, 0.0, -1.05, True, True),
    ("not converged", 0.0, 5.0, 2.0, 1.0, 2.0, 0.0, 1.5, False, False),
    ("kept power law", 1.0, 5.0, 2.0, 1.0, 2.0, 0.0, 1.5, True, True),
    ("left with the quadratic", 2.0, 5.0, 2.0, 1.0, 2.0, 0.0, 1.5, True, False),
]
N = len(CASES)


def _inputs(se_hill: np.ndarray) -> tuple[np.ndarray, Screen, EarlyQuadratic, dict[str, np.ndarray], _Estimates]:
    rng = np.random.default_rng(6)
    y = 0.1 + V_KEPT * T[None, :] + 1e-3 * rng.standard_normal((N, T.size))  # distinct rows, to tell wells apart
    valid = np.ones_like(y, bool)
    valid[0, -3:] = False  # the first well's last three reads are not counted: its window ends earlier
    sc = Screen(valid, valid.sum(axis=1), np.full(N, 1e-3), np.full(N, 0.3), np.zeros(N, np.int64),
                np.ones(N, bool), np.full(N, 50.0))
    hill_v0 = np.array([V_KEPT + c[7] * SHAPE_Z * _room(se_hill[i]) for i, c in enumerate(CASES)])
    q_v0 = hill_v0 - np.array([c[6] for c in CASES]) * AGREE * SE_KEPT
    q = EarlyQuadratic(q_v0, np.full(N, SE_KEPT), np.full(N, -1e-7), np.full(N, T[-1]), np.full(N, T.size),
                       np.ones(N), np.ones(N))
    mm = {"v0": np.full(N, V_KEPT), "km": np.full(N, KM), "vmax": np.full(N, 1e-3)}
    code = np.array([c[1] for c in CASES])
    out = _Estimates(np.full(N, V_KEPT), np.full(N, SE_KEPT), code, np.full(N, 0.9), np.full(N, 0.999),
                     np.zeros(N), np.full(N, T[-1]), np.full(N, T.size))
    return y, sc, q, mm, out


def _room(se_hill: float) -> float:
    """Standard error of the difference between the Hill and the kept v0 (Hausman's form with its floor)."""
    return math.sqrt(max(se_hill**2 - SE_KEPT**2, (DIFF_FLOOR * se_hill) ** 2))


def _run(monkeypatch: pytest.MonkeyPatch, se_hill: np.ndarray) -> tuple[_Estimates, np.ndarray, dict[str, Any]]:
    y, sc, q, mm, out = _inputs(se_hill)
    seen: dict[str, Any] = {"calls": []}

    def wells(yy: np.ndarray) -> np.ndarray:
        return np.array([int(np.flatnonzero((y == row).all(axis=1))[0]) for row in yy])

    def misfit(_t: np.ndarray, yy: np.ndarray, *_a: Any) -> np.ndarray:
        return np.array([CASES[w][2] for w in wells(yy)])

    def fake_hill(_t: np.ndarray, yy: np.ndarray, _valid: np.ndarray, _s0: np.ndarray, _spc: float,
                  _sigma: np.ndarray, start: np.ndarray, *, max_iter: int, restart: bool) -> dict[str, np.ndarray]:
        w = wells(yy)
        seen["calls"].append((w, start.copy(), max_iter, restart))
        if max_iter == 1:  # the screen's single step
            return {"v0": V_KEPT + np.array([CASES[i][3] for i in w]) * 1e-5, "se": np.full(w.size, 1e-5)}
        v0 = np.array([V_KEPT + CASES[i][7] * SHAPE_Z * _room(se_hill[i]) for i in w])
        return {"v0": v0, "se": se_hill[w], "ratio": np.array([CASES[i][4] for i in w]),
                "h": np.array([CASES[i][5] for i in w]), "converged": np.array([CASES[i][8] for i in w])}

    monkeypatch.setattr(choice, "smooth_misfit", misfit)
    monkeypatch.setattr(hillcurve, "fit_hill_curve", fake_hill)
    stat = _shape_step(T, y, sc, q, np.full(N, S0), SPC, mm, np.full(N, V_KEPT), np.where(out.code == 1.0, 1.5, np.nan),
                       out, np.zeros(N, np.int64), lof_ratio=LOF, agree_z=AGREE)
    seen["y"], seen["sc"] = y, sc
    return out, stat, seen


def test_each_clause_of_the_shape_step_on_both_sides(monkeypatch: pytest.MonkeyPatch) -> None:
    out, stat, seen = _run(monkeypatch, np.full(N, SE_HILL))
    for i, case in enumerate(CASES):
        assert bool(out.code[i] == 4.0) is case[9], case[0]
    # the statistic is returned for the wells it was computed on (codes 0 and 1), NaN elsewhere
    tested = np.array([c[1] in (0.0, 1.0) for c in CASES])
    np.testing.assert_array_equal(stat[tested], [c[2] for c, t in zip(CASES, tested, strict=True) if t])
    assert np.isnan(stat[~tested]).all()
    # the replaced wells carry the Hill fit's figures and the window of every counted read
    sc = seen["sc"]
    for i, case in enumerate(CASES):
        if case[9]:
            assert out.v0[i] == pytest.approx(V_KEPT + case[7] * SHAPE_Z * _room(SE_HILL), rel=1e-12)
            assert out.se[i] == SE_HILL and out.ratio[i] == case[4] and np.isnan(out.goodness[i])
            last = np.flatnonzero(sc.valid[i])[-1]
            assert out.w_start[i] == T[0] and out.w_end[i] == T[last] and out.n_pts[i] == sc.valid[i].sum()
        else:
            assert out.v0[i] == V_KEPT and out.se[i] == SE_KEPT and out.ratio[i] == 0.9 and out.goodness[i] == 0.999
    assert out.w_end[0] == T[-4] and out.n_pts[0] == T.size - 3


def test_the_difference_se_takes_its_floor_where_the_two_ses_are_close(monkeypatch: pytest.MonkeyPatch) -> None:
    # SE_hill just above SE_kept: sqrt(SE_h² - SE²) = 1.4e-6 is below the floor 0.3 SE_h = 3.03e-6; the
    # cases "just beyond / just within SHAPE_Z" are judged against the floor (by hand above)
    se_hill = np.full(N, 1.01e-5)
    assert math.sqrt(se_hill[0] ** 2 - SE_KEPT**2) < DIFF_FLOOR * se_hill[0]
    out, _, _ = _run(monkeypatch, se_hill)
    for i, case in enumerate(CASES):
        assert bool(out.code[i] == 4.0) is case[9], case[0]


def test_the_hill_fits_start_from_the_michaelis_menten_fit(monkeypatch: pytest.MonkeyPatch) -> None:
    # the step's text: baseline from the first three counted reads less v0 times their mean time, ln(v0/spc),
    # the order at t = 0 of the Michaelis-Menten fit n0 = u = Km/(Km + S0), and the logit of u / SHAPE_H_START
    # (so that h = n0 / u_hill starts at SHAPE_H_START); by hand
    _, _, seen = _run(monkeypatch, np.full(N, SE_HILL))
    (w1, start1, it1, re1), (w2, start2, it2, re2) = seen["calls"]
    assert it1 == 1 and it2 > 1 and not re1 and not re2
    tried = [i for i, c in enumerate(CASES) if c[1] in (0.0, 1.0) and c[2] > MISFIT_TRY]
    assert w1.tolist() == tried
    assert w2.tolist() == [i for i in tried if CASES[i][3] > SHAPE_SCREEN]
    u = KM / (KM + S0)
    y = seen["y"]
    for k, w in enumerate(w1):
        base = y[w, :3].mean() - V_KEPT * (T[:3].mean() - T[0])
        want = [base, math.log(V_KEPT / SPC), u, math.log(u / (SHAPE_H_START - u))]
        np.testing.assert_allclose(start1[k], want, rtol=1e-12)
    np.testing.assert_array_equal(start2, start1[np.isin(w1, w2)])


def _misfit_by_polyfit(t: np.ndarray, resid: np.ndarray, sigma: float) -> float:
    """The smooth misfit's definition, independently: on means of equal blocks of QUICK_BLOCKS = 20 (reads
    per block t.size // 20), the squared norm of the weighted least-squares cubic (numpy Polynomial.fit)
    beyond the constant, weighted by the reads per block, in read variances."""
    k = max(t.size // 20, 1)
    tb, eb = t.reshape(-1, k).mean(axis=1), resid.reshape(-1, k).mean(axis=1)
    fit = np.polynomial.Polynomial.fit(tb, eb, 3)
    return float(k * ((fit(tb) - eb.mean()) ** 2).sum() / sigma**2)


def test_the_misfit_is_taken_from_each_kept_curves_own_shape(monkeypatch: pytest.MonkeyPatch) -> None:
    # step 6c's statistic for a kept Michaelis-Menten curve (code 0) and a kept power law (code 1), each from its
    # own fitted curve: the Michaelis-Menten substrate by scipy.special.lambertw (S = Km W((S0/Km) e^((S0 - Vmax
    # t)/Km))), the power law's conversion by its closed form x = 1 - (1 + m k t)^(-1/m), m = n - 1, k = v0/S0
    # (standard chemical kinetics); the same invented reads for both wells
    from scipy.special import lambertw

    t = np.arange(40) * 10.0
    km, vmax, v_pw, order, sigma = 0.4, 5e-4, 1.1e-3, 0.6, 2e-3
    rng = np.random.default_rng(12)
    reads = 0.05 + 1.0e-3 * t - 6e-7 * t**2 + 2e-10 * t**3 + sigma * rng.standard_normal(t.size)
    y = np.vstack([reads, reads])
    sc = Screen(np.ones_like(y, bool), np.full(2, t.size), np.full(2, sigma), np.full(2, 0.3), np.zeros(2, np.int64),
                np.ones(2, bool), np.full(2, 50.0))
    q = EarlyQuadratic(np.full(2, 1e-3), np.full(2, 1e-5), np.full(2, -1e-7), np.full(2, t[-1]), np.full(2, t.size),
                       np.ones(2), np.ones(2))
    mm = {"v0": np.full(2, SPC * vmax * S0 / (km + S0)), "km": np.array([km, np.nan]), "vmax": np.array([vmax, np.nan])}
    out = _Estimates(np.full(2, 1e-3), np.full(2, 1e-5), np.array([0.0, 1.0]), np.ones(2), np.ones(2), np.zeros(2),
                     np.full(2, t[-1]), np.full(2, t.size))

    def still(_t: Any, yy: np.ndarray, *_a: Any, **_k: Any) -> dict[str, np.ndarray]:  # a step that moves nothing
        n = yy.shape[0]
        return {"v0": mm["v0"][:n], "se": np.ones(n)}

    monkeypatch.setattr(hillcurve, "fit_hill_curve", still)
    stat = _shape_step(t, y, sc, q, np.full(2, S0), SPC, mm, np.array([np.nan, v_pw]), np.array([np.nan, order]),
                       out, np.zeros(2, np.int64), lof_ratio=LOF, agree_z=AGREE)
    substrate = km * lambertw((S0 / km) * np.exp((S0 - vmax * t) / km)).real
    m, k = order - 1.0, v_pw / SPC / S0
    conversion = 1.0 - (1.0 + m * k * t) ** (-1.0 / m)
    # to about five digits: the kernel's small ridge on its normal equations works on the residuals' level
    assert stat[0] == pytest.approx(_misfit_by_polyfit(t, reads - SPC * (S0 - substrate), sigma), rel=1e-4)
    assert stat[1] == pytest.approx(_misfit_by_polyfit(t, reads - SPC * S0 * conversion, sigma), rel=1e-4)
    assert stat[0] > MISFIT_TRY and stat[1] > MISFIT_TRY  # both wells were tried (and kept their curves)
    assert out.code.tolist() == [0.0, 1.0]
