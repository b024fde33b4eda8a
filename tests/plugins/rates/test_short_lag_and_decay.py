"""Short lags and loss of activity are flagged by every built-in rates method (docs/rates.md, "Flags").

Designed curves (invented): a lag of 3, 4 or 5 read intervals at 70 % or 50 % of the steady rate, then the
steady rate, at three noise levels (the per-read change 8, 15 and 30 times the read noise); clean straight
curves beside them. The lag time of such a curve follows from the standard definition (the time at which the
steady-state line meets the starting level; e.g. Frieden, J. Biol. Chem. 245 (1970) 5788, hysteretic
enzymes): the steady line runs ``(1 - r) v t_k`` above the slow segment at the knee ``t_k``, so it meets the
start ``(1 - r) t_k`` after it.

Decay: curves integrated with scipy.integrate.solve_ivp (``simulate_plate``) with irreversible first-order
inactivation (half-life 5.8 min) at substrate far above Km, so that depletion explains almost none of the fall.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from vzero.data import Traces
from vzero.params import validate
from vzero.plugins import rates
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates.earlylag import EARLY_LAG_Z, early_lag
from vzero.plugins.rates.noise import screen
from vzero.stage import StageInput

T = np.arange(120) * 5.0
STEP = 0.01  # signal change per read at the steady rate (AU)
V = STEP / 5.0  # AU/s
SPC = 5.0  # AU/mM
S0 = 20.0  # mM: at most 1.2 % conversion, the curves stay straight
METHODS = [rates.WindowRates, rates.AutoRates, rates.ModelChoiceRates, rates.PolynomialRates,
           rates.ProgressRates, rates.LagDecayRates]
NOT_MODELLING_DECAY = {"window", "auto", "polynomial", "progress"}
DESIGNS = [(r, k) for r in (0.7, 0.5) for k in (3, 4, 5)]
NOISE = (STEP / 8, STEP / 15, STEP / 30)


def designed(ratio: float, knee: int) -> np.ndarray:
    """A curve at ``ratio`` of the steady rate for the first ``knee`` read intervals, then the steady rate."""
    tk = T[knee]
    return 0.05 + np.where(T < tk, ratio * V * T, ratio * V * tk + V * (T - tk))


def _plate(seed: int = 11) -> tuple[np.ndarray, list[tuple[float, int] | None]]:
    rng = np.random.default_rng(seed)
    rows, what = [], []
    for sigma in NOISE:
        for design in [*DESIGNS, None, None, None]:
            for _ in range(3):
                y = designed(*design) if design else designed(1.0, 0)
                rows.append(y + sigma * rng.standard_normal(T.size))
                what.append(design)
    return np.array(rows), what


def run_stage(method: type, signal: np.ndarray, s0: np.ndarray) -> pd.DataFrame:
    """The stage's own run on one invented plate; the rates table."""
    n = signal.shape[0]
    wells = pd.DataFrame({"well": [f"W{i}" for i in range(n)], "role": ["sample"] * n, "substrate": s0})
    traces = Traces("p", T, signal, np.isfinite(signal), np.zeros_like(signal, bool), wells, "AU", {"substrate": "mM"})
    settings, problems = validate(method.params, {"signal_per_conc": f"{SPC} 1/mM"})
    assert not problems
    out = method(**settings).run(StageInput({"traces": traces}, {"name": "p"}, {}, {}, None, lambda _m: None))
    return out.artifacts["rates"].frame


def _has(frame: pd.DataFrame, name: str) -> np.ndarray:
    return frame["flags"].fillna("").str.split(";").apply(lambda f: name in f).to_numpy()


@pytest.mark.parametrize("method", METHODS, ids=lambda m: m.method)
def test_short_lags_are_flagged_by_every_method_and_clean_curves_are_not(method: type) -> None:
    signal, what = _plate()
    frame = run_stage(method, signal, np.full(len(what), S0))
    lag = _has(frame, "lag")
    is_lag = np.array([w is not None for w in what])
    assert lag[is_lag].all(), [w for w, f in zip(what, lag, strict=True) if w and not f]
    assert not lag[~is_lag].any()


def test_short_lag_time_follows_the_standard_definition() -> None:
    # noise-free designed curves: lag = (1 - r) t_k exactly (module text)
    y = np.array([designed(r, k) for r, k in DESIGNS]) + 1e-6 * np.sin(np.arange(T.size))[None, :]
    sc = screen(y, min_points=8, time=T)
    res = early_lag(T, y, sc.sigma, sc.change, sc.usable)
    assert res.has.all()
    np.testing.assert_allclose(res.lag_s, [(1 - r) * T[k] for r, k in DESIGNS], rtol=0.02)
    np.testing.assert_allclose(res.ratio, [r for r, _ in DESIGNS], rtol=0.02)


def test_false_alarm_rate_on_clean_curves() -> None:
    # straight and depleting (concave) curves with white noise: the one-sided threshold keeps false alarms
    # rare. With 4000 wells and a true rate of 0.3 % (measured), more than 1 % is a 1e-14 binomial tail.
    rng = np.random.default_rng(5)
    straight = 0.05 + V * T + 0.002 * rng.standard_normal((2000, T.size))
    p = simulate_plate(T, np.full(2000, 0.5), 0.5, 2e-3, signal_per_conc=SPC, baseline=0.05, noise=0.002, seed=6)
    y = np.vstack([straight, p.signal])
    sc = screen(y, min_points=8, time=T)
    res = early_lag(T, y, sc.sigma, sc.change, sc.usable)
    assert res.has.mean() < 0.01, res.has.mean()
    assert EARLY_LAG_Z >= 3.0  # common practice: a one-sided test this strict among ~10 correlated knees


def _decay_plate() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    s0 = np.full(12, S0)
    k = np.repeat([2e-3, 0.0], 6)  # 1/s; 2e-3: half-life 5.8 min
    p = simulate_plate(T, s0, 0.5, V / SPC, k_inact=k, signal_per_conc=SPC, baseline=0.05, noise=0.001, seed=8)
    return p.signal, s0, k > 0


@pytest.mark.parametrize("method", METHODS, ids=lambda m: m.method)
def test_decay_is_flagged_by_every_method(method: type) -> None:
    signal, s0, decaying = _decay_plate()
    frame = run_stage(method, signal, s0)
    decay, unmodelled = _has(frame, "decay"), _has(frame, "unmodelled")
    assert decay[decaying].all(), frame["flags"].tolist()
    assert not decay[~decaying].any(), frame["flags"].tolist()
    assert (unmodelled == decaying).all() if method.method in NOT_MODELLING_DECAY else not unmodelled.any()


def test_depletion_alone_is_not_decay() -> None:
    # Michaelis-Menten curves converting 30-90 % of the substrate, no inactivation: the rate falls by
    # depletion alone, never beyond (1 - x); no method may call it decay
    s0 = np.array([0.2, 0.5, 1.0, 2.0])
    p = simulate_plate(T, s0, 0.5, 2e-3, signal_per_conc=SPC, baseline=0.05, noise=0.001, seed=9)
    for method in (rates.WindowRates, rates.AutoRates, rates.PolynomialRates, rates.ProgressRates):
        assert not _has(run_stage(method, p.signal, s0), "decay").any(), method.method


def test_the_decay_prescreen_changes_no_flag(monkeypatch: pytest.MonkeyPatch) -> None:
    # the quick pre-screen only spares wells the decay fit would not flag: the same flags without it, on
    # decaying, clean and strongly depleting wells (k from 0 to 3e-3 /s, S0 from 0.2 to 20 mM)
    from vzero.plugins.kinetics.rate_result import RateResult
    from vzero.plugins.rates import checks

    s0 = np.tile([0.2, 0.5, 2.0, 20.0], 5)
    k = np.repeat([0.0, 5e-4, 1e-3, 2e-3, 3e-3], 4)
    p = simulate_plate(T, s0, 0.5, 4e-4, k_inact=k, signal_per_conc=SPC, baseline=0.05, noise=0.001, seed=12)
    bare = RateResult(v0=np.ones(s0.size))
    with_screen = checks.mark_decay(T, p.signal, bare, s0=s0, signal_per_conc=SPC, modelled=False)
    monkeypatch.setattr(checks, "_falling", lambda t, y, *a: np.ones(y.shape[0], dtype=bool))
    without = checks.mark_decay(T, p.signal, bare, s0=s0, signal_per_conc=SPC, modelled=False)
    np.testing.assert_array_equal(with_screen.flags, without.flags)
    assert (np.asarray(without.flags)[k >= 2e-3] != 0).any()  # the comparison is not empty
