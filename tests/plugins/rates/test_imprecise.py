"""IMPRECISE: the shared check marking rates less precise than the model-free estimate of the same reads and
further from it than that estimate's tolerance (:mod:`vzero.plugins.rates.checks`), on designed curves with a
known answer (invented data).

Outside references: numpy.polyfit for the model-free estimate's standard error (its slope at t = 0 over
repeated noise draws) and for the reference analysis whose tolerance defines a good and a bad rate; the true
initial rates of curves integrated by scipy's solve_ivp (:func:`vzero.plugins.kinetics.simulate.simulate_plate`).
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
from vzero.plugins.rates.checks import (
    IMPRECISE_K,
    IMPRECISE_SE_SHARE,
    mark_imprecision,
    model_free,
    model_free_tolerance,
)
from vzero.stage import StageInput

T = np.arange(120) * 5.0  # s
SPC = 5.0  # AU/mM (invented)
KM = 1.0  # mM


def _stage(method: type, signal: np.ndarray, s0: np.ndarray, roles: list[str] | None = None) -> pd.DataFrame:
    """The stage's own run on one invented plate (signal per concentration given); the rates table."""
    n = signal.shape[0]
    wells = pd.DataFrame({"well": [f"W{i}" for i in range(n)], "role": roles or ["sample"] * n, "substrate": s0})
    traces = Traces("p", T, signal, np.isfinite(signal), np.zeros_like(signal, bool), wells, "AU", {"substrate": "mM"})
    settings, problems = validate(method.params, {"signal_per_conc": f"{SPC} 1/mM"})
    assert not problems
    out = method(**settings).run(StageInput({"traces": traces}, {"name": "p"}, {}, {}, None, lambda _m: None))
    return out.artifacts["rates"].frame


def _has(frame: pd.DataFrame, column: str, name: str) -> np.ndarray:
    return frame[column].fillna("").str.split(";").apply(lambda f: name in [p.strip() for p in f]).to_numpy()


def _low_signal(n: int, seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``n`` replicate Michaelis–Menten wells at S0 = 0.02 Km: about 80 % conversion over the run but a total
    change of only 0.08 AU against a read noise of 0.003 AU (the kind of well on which ``auto`` took its slope
    from few reads). Substrate, reads and true v0."""
    s0 = np.full(n, 0.02)
    p = simulate_plate(T, s0, KM, 3e-3, signal_per_conc=SPC, baseline=0.05, noise=0.003, seed=seed)
    return s0, p.signal, p.v0_true


def test_the_model_free_se_matches_the_spread_of_polyfit_slopes() -> None:
    # the tolerance is built from SE_q; numpy.polyfit's quadratic through the same reads (a straight well far
    # from 20 % conversion, so the window is every read) must scatter by SE_q over noise draws
    rng = np.random.default_rng(2)
    sigma, n = 0.002, 3000
    s0 = np.full(n, 1.0)
    y = 0.05 + 2e-4 * T[None, :] + sigma * rng.standard_normal((n, T.size))
    ref = model_free(T, y, s0=s0, signal_per_conc=SPC)
    slopes = np.polyfit(T, y.T, 2)[1]  # slope at t = 0 (T[0] = 0)
    assert np.median(ref.se) == pytest.approx(np.std(slopes, ddof=1), rel=0.06)  # an SD from 3000: 1.3 %
    tol = model_free_tolerance(ref)
    assert np.allclose(tol, np.fmax(0.05 * np.abs(ref.v0), 2.0 * ref.se))


def _edge_case() -> tuple[np.ndarray, float, float, np.ndarray]:
    """One low-signal well: its reads, the model-free estimate, its tolerance (signal/s) and a SE well above
    the precision line."""
    s0, y, _ = _low_signal(1, seed=5)
    ref = model_free(T, y, s0=s0, signal_per_conc=SPC)
    return y, float(ref.v0[0]), float(model_free_tolerance(ref)[0]), s0


def _flagged(y: np.ndarray, v0: float, se: float, s0: np.ndarray, **kw: object) -> bool:
    res = mark_imprecision(T, y, RateResult(v0=np.array([v0]), stderr=np.array([se])), s0=s0,
                           signal_per_conc=SPC, **kw)
    return bool(np.asarray(res.flags)[0] & int(Flag.IMPRECISE))


def test_flag_fires_just_outside_each_threshold_and_not_just_inside() -> None:
    y, vq, tol, s0 = _edge_case()
    assert tol > 0.0
    se = 2.0 * tol  # clearly less precise than the model-free estimate
    # the distance from the model-free estimate, in either direction
    for sign in (1.0, -1.0):
        assert not _flagged(y, vq + sign * (IMPRECISE_K - 0.01) * tol, se, s0)
        assert _flagged(y, vq + sign * (IMPRECISE_K + 0.01) * tol, se, s0)
    # the rate's own SE: far from the estimate, but as precise as it is not flagged
    far = vq + 3.0 * IMPRECISE_K * tol
    assert not _flagged(y, far, (IMPRECISE_SE_SHARE - 0.01) * tol, s0)
    assert _flagged(y, far, (IMPRECISE_SE_SHARE + 0.01) * tol, s0)
    # without the substrate or the signal per concentration the check is skipped quietly; a well that is not
    # a sample is never marked; a well flagged LAG is not compared
    res = mark_imprecision(T, y, RateResult(v0=np.array([far]), stderr=np.array([se])), s0=None,
                           signal_per_conc=SPC)
    assert int(np.asarray(res.flags)[0]) == 0
    assert not _flagged(y, far, se, s0, samples=np.array([False]))
    lagged = mark_imprecision(T, y, RateResult(v0=np.array([far]), stderr=np.array([se]),
                                               flags=np.array([int(Flag.LAG)])), s0=s0, signal_per_conc=SPC)
    assert int(np.asarray(lagged.flags)[0]) == int(Flag.LAG)


def test_bad_auto_rates_on_low_signal_wells_are_flagged_and_good_ones_are_not() -> None:
    # the rule on one designed condition: the tolerance is the larger of 5 % and twice the RMSE of a
    # careful reference analysis (numpy.polyfit's quadratic through the reads up to 20 % conversion, slope at
    # t = 0) over the replicates; a flag for doubtful rates fires on fewer than 10 % of the rates within it and
    # more than 80 % of those beyond twice it. NOISY fires on every one of these wells, good or bad.
    s0, y, v_true = _low_signal(300, seed=11)
    frame = _stage(rates.AutoRates, y, s0)
    err = frame["rate"].to_numpy() / v_true - 1.0
    ref = []
    for row in y:
        beyond = np.abs(row - row[:3].mean()) > 0.2 * SPC * s0[0]
        stop = max(int(np.argmax(beyond)) if beyond.any() else row.size, 8)
        ref.append(np.polyfit(T[:stop], row[:stop], 2)[1])
    tol = max(0.05, 2.0 * float(np.sqrt(np.mean((np.array(ref) / v_true - 1.0) ** 2))))
    good, bad = np.abs(err) <= tol, np.abs(err) > 2.0 * tol
    assert good.sum() >= 100 and bad.sum() >= 30
    flagged = _has(frame, "flags", "imprecise")
    assert flagged[bad].mean() > 0.8
    assert flagged[good].mean() < 0.1
    assert flagged[np.argmax(np.abs(err))]  # the worst rate of the plate
    assert _has(frame, "flags", "noisy")[good].mean() > 0.9  # why NOISY cannot be the doubtful-rate flag
    # not a bias: the flagged rates scatter on both sides of the truth
    assert (err[flagged] > 0).any() and (err[flagged] < 0).any()


def test_blanks_standards_and_empty_wells_never_carry_it() -> None:
    s0, y, _ = _low_signal(80, seed=11)
    roles = ["sample", "blank", "standard", "empty"] * 20
    frame = _stage(rates.AutoRates, y, s0, roles)
    sample = np.array(roles) == "sample"
    assert _has(frame, "flags", "imprecise")[sample].any()  # the same reads are marked on sample wells
    assert not _has(frame, "flags", "imprecise")[~sample].any()
    assert not frame.loc[~sample, "status"].str.contains("imprecise").any()


def test_the_fit_leaves_imprecise_rates_out_by_default_and_keeps_them_on_request() -> None:
    # invented Michaelis–Menten rates (Vmax 10, Km 5); two wells marked imprecise with rates far off
    from vzero.data import Table
    from vzero.manager import make_manager
    from vzero.plugins.fit.stage import FitStage

    s = np.repeat([1.0, 2.0, 5.0, 10.0, 20.0, 50.0], 2)
    rate = 10.0 * s / (5.0 + s)
    rate[[0, 5]] *= (0.3, 1.8)
    flags = [""] * s.size
    flags[0], flags[5] = "noisy;imprecise", "imprecise"
    frame = pd.DataFrame({"well": [f"A{i + 1}" for i in range(s.size)], "group": "g", "role": "sample",
                          "substrate": s, "rate": rate, "rate_stderr": 0.1, "flags": flags})

    def km_row(given: dict[str, object]) -> pd.Series:
        settings, problems = validate(FitStage.params, {"models": ["michaelis-menten"], **given})
        assert not problems
        data = StageInput({"rates": Table(frame, {"rate": "uM/min", "substrate": "uM"})}, None, {}, {},
                          make_manager(autoload=False).registry, lambda _: None)
        fits = FitStage(**settings).run(data).artifacts["fits"].frame
        return fits[fits["parameter"] == "Km"].iloc[0]

    row = km_row({})
    assert row["n_points"] == 10
    assert row["estimate"] == pytest.approx(5.0, rel=1e-6)  # the ten exact rates give Km back
    kept = km_row({"exclude_flags": ["all_missing", "no_signal", "too_few_points", "fit_failed", "excluded"]})
    assert kept["n_points"] == 12
    assert abs(kept["estimate"] / 5.0 - 1.0) > 0.05
