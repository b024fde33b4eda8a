"""DISAGREES: the shared check comparing a method's v0 with the model-free early quadratic
(:mod:`vzero.plugins.rates.checks`), on designed curves with a known answer (invented data).

Outside references: numpy.polyfit for the two estimates whose difference's spread the Hausman form must
predict (Hausman 1978, Econometrica 46:1251); the true initial rates of curves integrated by scipy's
solve_ivp (:func:`vzero.plugins.kinetics.simulate.simulate_plate`) for the rates the flag must and must not
mark.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from vzero.data import Traces
from vzero.params import validate
from vzero.plugins import rates
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates.checks import DISAGREE_Z, difference_se, mark_disagreement, model_free_gap
from vzero.stage import StageInput

T = np.arange(120) * 5.0  # s
SPC = 5.0  # AU/mM (invented)
KM = 1.0  # mM


def _stage(method: type, signal: np.ndarray, s0: np.ndarray, given: dict[str, str]) -> pd.DataFrame:
    """The stage's own run on one invented plate; the rates table."""
    n = signal.shape[0]
    wells = pd.DataFrame({"well": [f"W{i}" for i in range(n)], "role": ["sample"] * n, "substrate": s0})
    traces = Traces("p", T, signal, np.isfinite(signal), np.zeros_like(signal, bool), wells, "AU", {"substrate": "mM"})
    settings, problems = validate(method.params, given)
    assert not problems
    out = method(**settings).run(StageInput({"traces": traces}, {"name": "p"}, {}, {}, None, lambda _m: None))
    return out.artifacts["rates"].frame


def _has(frame: pd.DataFrame, name: str) -> np.ndarray:
    return frame["flags"].fillna("").str.split(";").apply(lambda f: name in f).to_numpy()


def test_the_difference_se_matches_the_spread_of_polyfit_differences() -> None:
    # Hausman (1978): under a straight line the least-squares line through every read (numpy.polyfit, degree
    # 1) is efficient (Gauss-Markov), so for any other unbiased estimate b from those reads
    # Var(b - line) = Var(b) - Var(line): checked for the quadratic's slope at t0 over every read and for the
    # line through the first 80 reads; the sum of the variances (independent estimates) would overstate the
    # latter's spread by a third
    rng = np.random.default_rng(5)
    sigma, n = 0.002, 4000
    y = 0.05 + 1e-3 * T[None, :] + sigma * rng.standard_normal((n, T.size))
    line = np.polyfit(T, y.T, 1)[0]
    quad = np.polyfit(T, y.T, 2)[1]  # slope at t = 0 (T[0] = 0)
    part = np.polyfit(T[:80], y[:, :80].T, 1)[0]
    x2, x3, x2p = np.vander(T, 2), np.vander(T, 3), np.vander(T[:80], 2)
    se_line = sigma * np.sqrt(np.linalg.inv(x2.T @ x2)[0, 0])
    se_quad = sigma * np.sqrt(np.linalg.inv(x3.T @ x3)[1, 1])
    se_part = sigma * np.sqrt(np.linalg.inv(x2p.T @ x2p)[0, 0])
    for se_b, b in ((se_quad, quad), (se_part, part)):
        observed = np.std(b - line, ddof=1)
        assert difference_se(se_b, se_line) == pytest.approx(observed, rel=0.05)  # an SD from 4000: 1.1 %
        assert difference_se(se_line, se_b) == difference_se(se_b, se_line)
    assert np.hypot(se_part, se_line) > 1.25 * np.std(part - line, ddof=1)  # the test tells the forms apart


def _curved_well(seed: int = 3) -> tuple[np.ndarray, float]:
    """One Michaelis–Menten well at S0 = 0.5 Km, about 35 % conversion over the run; reads and true v0."""
    p = simulate_plate(T, np.array([0.5]), KM, 4e-4, signal_per_conc=SPC, baseline=0.05, noise=0.002, seed=seed)
    return p.signal, float(p.v0_true[0])


def test_flag_fires_just_outside_the_threshold_and_not_just_inside() -> None:
    y, v_true = _curved_well()
    se = np.array([1e-7])
    s0 = np.array([0.5])
    # far above the model-free estimate the gap is linear in v0: its slope gives 1 / SE_d, then the v0 at
    # which the gap is exactly DISAGREE_Z
    v1, v2 = 3.0 * v_true, 4.0 * v_true
    g1, g2 = (model_free_gap(T, y, np.array([v]), se, s0=s0, signal_per_conc=SPC)[0] for v in (v1, v2))
    se_d = (v2 - v1) / (g2 - g1)
    edge = v1 + (DISAGREE_Z - g1) * se_d
    assert 0.0 < se_d < 0.1 * v_true and v_true < edge < 1.5 * v_true

    def flagged(v: float) -> bool:
        res = mark_disagreement(T, y, RateResult(v0=np.array([v]), stderr=se), s0=s0, signal_per_conc=SPC)
        return bool(np.asarray(res.flags)[0] & int(Flag.DISAGREES))

    assert not flagged(edge - 0.05 * se_d)
    assert flagged(edge + 0.05 * se_d)
    # without the substrate or the signal per concentration the check is skipped quietly
    res = mark_disagreement(T, y, RateResult(v0=np.array([3 * v_true]), stderr=se), s0=None, signal_per_conc=SPC)
    assert int(np.asarray(res.flags)[0]) == 0


def test_a_straight_line_through_a_curving_well_is_flagged_and_a_straight_well_is_not() -> None:
    # truth: solve_ivp's integration of Michaelis–Menten kinetics (simulate_plate); a line over all 600 s of a
    # well converting ~50 % of its substrate runs far below v0, over a well converting ~1 % it does not
    s0 = np.repeat([0.2, 20.0], [8, 60])
    p = simulate_plate(T, s0, KM, 1.2e-3, signal_per_conc=SPC, baseline=0.05, noise=0.002, seed=8)
    frame = _stage(rates.WindowRates, p.signal, s0, {"signal_per_conc": f"{SPC} 1/mM", "start": "0 s",
                                                      "end": "600 s"})
    err = frame["rate"].to_numpy() / p.v0_true - 1.0
    curved = s0 < 1.0
    assert (err[curved] < -0.15).all() and (np.abs(err[~curved]) < 0.02).all()
    assert _has(frame, "disagrees")[curved].all()
    # at the threshold of 3 a straight well's gap passes it by chance now and then (the benchmark: 3.3 % of
    # `window`'s rates within tolerance); point 8 of the flags' rule allows fewer than 10 %
    assert _has(frame, "disagrees")[~curved].mean() < 0.10
    # the same rates without signal_per_conc: not assessed, no flag
    frame = _stage(rates.WindowRates, p.signal, s0, {"start": "0 s", "end": "600 s"})
    assert not _has(frame, "disagrees").any()


def test_michaelis_menten_fits_to_cooperative_wells_are_flagged() -> None:
    # Hill kinetics (h = 2.5, K0.5 = 1 mM) integrated by solve_ivp: the integrated Michaelis–Menten curve
    # cannot follow a rate that falls faster than depletion allows, and its v0 runs low (docs/rates.md,
    # "Flags: measured": the progress method's bad rates on the Hill plate); the model-choice default makes
    # the same comparison itself and gets no DISAGREES from the shared check
    s0 = np.repeat([0.3, 0.5], 6)
    p = simulate_plate(T, s0, KM, 2e-3, hill=2.5, signal_per_conc=SPC, baseline=0.05, noise=0.002, seed=4)
    given = {"signal_per_conc": f"{SPC} 1/mM"}
    frame = _stage(rates.ProgressRates, p.signal, s0, given)
    err = frame["rate"].to_numpy() / p.v0_true - 1.0
    off = np.abs(err) > 0.05
    assert off.sum() >= 6
    assert _has(frame, "disagrees")[off].all()
    assert not _has(_stage(rates.ModelChoiceRates, p.signal, s0, given), "disagrees").any()
