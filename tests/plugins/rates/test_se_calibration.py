"""Do the rate methods' standard errors mean what they say? Calibration on simulated replicate wells.

For each condition one progress curve is integrated numerically with scipy.integrate.solve_ivp
(``simulate_plate``: the rate law as an ODE, never the closed forms the methods use) and 2000 replicate wells
get independent Gaussian read noise. For each method:

* ``se_ratio`` = 1 / SD(z), z = (v0 − v0_true)/SE per well: the reported SE over the actual error (1 when
  calibrated; the SE varies from well to well for methods that choose a window, so the ratio is taken on z);
* ``rms_ratio`` = RMS(SE) / SD(v0), the plain ratio (the same as ``se_ratio`` where the SE is the same for
  every well);
* ``coverage`` = fraction of wells whose 95 % interval v0 ± q·SE holds the true v0 (q = t(0.975, n − 2) for
  the window's residual-based SE, 1.96 for the read-noise-based SEs of the other methods).

Acceptance (the project's standard): se_ratio within 0.8-1.25 and coverage within 0.93-0.97, for each method
in the conditions it is meant for. A method that misses it in a condition is marked ``xfail(strict=True)``
with the figure, so that the figure in docs/rates.md and this file change together. Invented data.

Run ``pytest -m slow -s tests/plugins/rates/test_se_calibration.py`` to print the table of docs/rates.md.
"""

from __future__ import annotations

import functools

import numpy as np
import pytest
from scipy import stats
from scipy.optimize import brentq
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates.auto import auto
from vzero.plugins.rates.choice import model_choice
from vzero.plugins.rates.lagdecay import lag_decay
from vzero.plugins.rates.polynomial import polynomial
from vzero.plugins.rates.progress import integrated_mm, progress_curve
from vzero.plugins.rates.window import window_slopes

pytestmark = pytest.mark.slow

T = np.arange(60) * 10.0  # 60 reads every 10 s
N_WELLS = 2000
NOISE = 0.002  # absorbance units (common plate-reader read noise)
SPC = 1.0  # signal per unit product concentration

# condition -> (S0, Km, fraction converted by the last read, first-order inactivation k (1/s))
CONDITIONS = {
    "near-linear": (10.0, 1.0, 0.05, 0.0),  # S0 = 10 Km, 5 % converted in 10 min
    "curving": (1.0, 1.0, 0.30, 0.0),  # S0 = Km, 30 % converted
    "inactivating": (10.0, 1.0, 0.05, 2e-3),  # enzyme lost with a 6-min half-life
}
# conditions for the whole-curve methods (`progress`, `model-choice`) alone, where the curvature
# u = Km/(Km + S0) is poorly determined and its bounds (0, 1) matter: the curve is far from completion
PROGRESS_CONDITIONS = {
    "barely-curving": (1.0, 1.0, 0.05, 0.0),  # S0 = Km, 5 % converted: u's SE exceeds its range
    "early-curving": (1.0, 1.0, 0.12, 0.0),  # S0 = Km, 12 % converted
    "mid-substrate": (3.0, 1.0, 0.10, 0.0),  # S0 = 3 Km, 10 % converted
    "saturating-2pct": (10.0, 1.0, 0.02, 0.0),  # S0 = 10 Km, 2 % converted
}
ALL_CONDITIONS = {**CONDITIONS, **PROGRESS_CONDITIONS}


def _seed(condition: str) -> int:
    """The first conditions keep the seeds they had before the `progress`-only ones joined."""
    if condition in CONDITIONS:
        return sorted(CONDITIONS).index(condition)
    return 10 + sorted(PROGRESS_CONDITIONS).index(condition)


@functools.cache
def _wells(condition: str) -> tuple[np.ndarray, float]:
    s0, km, fraction, k_inact = ALL_CONDITIONS[condition]
    # Vmax that converts `fraction` by the last read without inactivation (closed form only to choose Vmax)
    vmax = brentq(lambda v: 1 - integrated_mm(T[-1], s0, km, v) / s0 - fraction, 1e-9, 10.0)
    sim = simulate_plate(T, np.array([s0]), km, vmax, k_inact=k_inact, signal_per_conc=SPC, baseline=0.1)
    rng = np.random.default_rng(_seed(condition))
    signal = sim.signal + NOISE * rng.standard_normal((N_WELLS, T.size))
    return signal, float(sim.v0_true[0])


METHODS = {
    "window": lambda y, s0: window_slopes(T, y, 0.0, 120.0),
    "auto": lambda y, s0: auto(T, y),
    "polynomial": lambda y, s0: polynomial(T, y),
    "progress": lambda y, s0: progress_curve(T, y, s0=np.full(len(y), s0), signal_per_conc=SPC),
    "progress-signal": lambda y, s0: progress_curve(T, y),  # no S0: fitted in signal units
    "lag-decay": lambda y, s0: lag_decay(T, y),
    "model-choice": lambda y, s0: model_choice(T, y, s0=np.full(len(y), s0), signal_per_conc=SPC),
    "model-choice-signal": lambda y, s0: model_choice(T, y),  # no S0: its curves in signal units
}


@functools.cache
def calibration(method: str, condition: str) -> dict[str, float]:
    """Bias, scatter, SE ratios and 95 % coverage of one method on one condition's replicate wells."""
    y, truth = _wells(condition)
    r = METHODS[method](y, ALL_CONDITIONS[condition][0])
    ok = np.isfinite(r.v0) & np.isfinite(r.stderr) & (r.stderr > 0)
    v, se = r.v0[ok], r.stderr[ok]
    if v.size < 3:
        nan = float("nan")
        return {"wells": int(ok.sum()), "bias": nan, "rel_sd": nan, "se_ratio": nan, "rms_ratio": nan, "coverage": nan}
    z = (v - truth) / se
    q = stats.t.ppf(0.975, r.n_points[ok] - 2) if method == "window" else stats.norm.ppf(0.975)
    return {"wells": int(ok.sum()), "bias": float(np.mean(v) / truth - 1), "rel_sd": float(np.std(v, ddof=1) / truth),
            "se_ratio": float(1 / np.std(z, ddof=1)), "rms_ratio": float(np.sqrt(np.mean(se**2)) / np.std(v, ddof=1)),
            "coverage": float(np.mean(np.abs(z) <= q))}


def _miss(reason: str):
    return pytest.mark.xfail(strict=True, reason=reason)


CASES = [
    ("window", "near-linear"),
    pytest.param("window", "curving", marks=_miss("a straight line over a curving window runs low (bias -1.7 %)")),
    ("auto", "near-linear"),
    ("auto", "curving"),
    ("auto", "inactivating"),
    ("polynomial", "near-linear"),
    ("polynomial", "curving"),
    ("progress", "near-linear"),
    ("progress", "curving"),
    ("progress", "barely-curving"),
    pytest.param("progress", "early-curving", marks=_miss("SE ratio 1.01 but coverage 0.986: v0's error is "
                                                          "light-tailed when the curvature is bounded on both "
                                                          "sides")),
    ("progress", "mid-substrate"),
    ("progress", "saturating-2pct"),
    pytest.param("progress-signal", "near-linear", marks=_miss("SE ratio 1.21 but coverage 0.978 (no upper bound "
                                                               "on the curvature without S0; docs/rates.md)")),
    ("progress-signal", "curving"),
    pytest.param("progress-signal", "barely-curving", marks=_miss("SE conservative: SE ratio 1.38, coverage 0.988")),
    ("progress-signal", "early-curving"),
    ("progress-signal", "mid-substrate"),
    pytest.param("progress-signal", "saturating-2pct", marks=_miss("SE conservative: SE ratio 1.44, coverage "
                                                                   "0.978")),
    ("lag-decay", "near-linear"),
    ("lag-decay", "curving"),
    ("lag-decay", "inactivating"),
    ("model-choice", "near-linear"),
    ("model-choice", "curving"),
    ("model-choice", "inactivating"),
    # with S0, far from completion: its quick Michaelis–Menten fits keep the unbounded SE (docs/rates.md: the
    # bounded one calibrates these conditions, 1.06 and 1.16, but cut the SE threefold on cooperative wells
    # whose Michaelis–Menten rate runs 18 % low, and moved the demo's h from 2.49 to 2.56)
    pytest.param("model-choice", "barely-curving", marks=_miss("SE conservative: SE ratio 1.55, coverage 0.970")),
    ("model-choice", "early-curving"),
    ("model-choice", "mid-substrate"),
    pytest.param("model-choice", "saturating-2pct", marks=_miss("SE conservative: SE ratio 1.50, coverage 0.962")),
    pytest.param("model-choice-signal", "near-linear", marks=_miss("SE ratio 1.17 but coverage 0.978")),
    ("model-choice-signal", "curving"),
    pytest.param("model-choice-signal", "barely-curving", marks=_miss("SE conservative: SE ratio 1.39, coverage "
                                                                      "0.988")),
    ("model-choice-signal", "early-curving"),
    ("model-choice-signal", "mid-substrate"),
    pytest.param("model-choice-signal", "saturating-2pct", marks=_miss("SE conservative: SE ratio 1.39, coverage "
                                                                       "0.975")),
]


@pytest.mark.parametrize(("method", "condition"), CASES)
def test_standard_error_is_calibrated(method: str, condition: str) -> None:
    c = calibration(method, condition)
    assert c["wells"] >= 0.95 * N_WELLS, c
    assert 0.8 <= c["se_ratio"] <= 1.25, c
    assert 0.93 <= c["coverage"] <= 0.97, c


def test_print_the_table() -> None:
    lines = ["| method | condition | wells | bias | SD/v0 | SE ratio (z) | RMS SE / SD | 95 % coverage |",
             "|---|---|---|---|---|---|---|---|"]
    for method in METHODS:
        for condition in CONDITIONS:
            c = calibration(method, condition)
            lines.append(f"| {method} | {condition} | {c['wells']} | {c['bias']:+.2%} | {c['rel_sd']:.2%} | "
                         f"{c['se_ratio']:.2f} | {c['rms_ratio']:.2f} | {c['coverage']:.3f} |")
    far = ("progress", "progress-signal", "model-choice", "model-choice-signal")
    for method, condition in ((m, c) for m in far for c in PROGRESS_CONDITIONS):
        c = calibration(method, condition)
        lines.append(f"| {method} | {condition} | {c['wells']} | {c['bias']:+.2%} | {c['rel_sd']:.2%} | "
                     f"{c['se_ratio']:.2f} | {c['rms_ratio']:.2f} | {c['coverage']:.3f} |")
    print("\n".join(lines))
    assert len(lines) == 2 + len(METHODS) * len(CONDITIONS) + len(far) * len(PROGRESS_CONDITIONS)
