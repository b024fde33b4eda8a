"""Fast checks that each rate method's standard error follows the scatter it claims to measure (the full
calibration, 2000 wells per condition, is test_se_calibration.py, marked slow).

One curve integrated with scipy.integrate.solve_ivp (``simulate_plate``), 400 replicate wells with
independent read noise (seeded): SD of z = (v0 − true)/SE must be near 1 (0.8-1.25). And where a whole-curve
fit misses the data (residual RMS above the read noise), its SE must grow with the misfit, as documented in
docs/rates.md (the SE uses the larger of residual RMS and read noise). Invented data.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates.auto import auto
from vzero.plugins.rates.choice import model_choice
from vzero.plugins.rates.lagdecay import lag_decay
from vzero.plugins.rates.polynomial import polynomial
from vzero.plugins.rates.progress import integrated_mm, progress_curve
from vzero.plugins.rates.window import window_slopes

T = np.arange(60) * 10.0


def _curve(s0: float, fraction: float) -> tuple[np.ndarray, float]:
    vmax = brentq(lambda v: 1 - integrated_mm(T[-1], s0, 1.0, v) / s0 - fraction, 1e-9, 10.0)
    sim = simulate_plate(T, np.array([s0]), 1.0, vmax, baseline=0.1)
    return sim.signal[0], float(sim.v0_true[0])


@pytest.mark.parametrize("method", ["window", "auto", "polynomial", "progress", "lag-decay", "model-choice"])
def test_standard_error_matches_the_scatter(method: str) -> None:
    whole = method in ("progress", "model-choice")  # methods meant for whole curves get a curving one
    s0 = 1.0 if whole else 10.0
    clean, truth = _curve(s0, 0.30 if whole else 0.05)
    y = clean[None, :] + 0.002 * np.random.default_rng(8).standard_normal((400, T.size))
    r = {"window": lambda: window_slopes(T, y, 0.0, 120.0), "auto": lambda: auto(T, y),
         "polynomial": lambda: polynomial(T, y), "lag-decay": lambda: lag_decay(T, y),
         "progress": lambda: progress_curve(T, y, s0=np.full(400, s0), signal_per_conc=1.0),
         "model-choice": lambda: model_choice(T, y, s0=np.full(400, s0), signal_per_conc=1.0)}[method]()
    assert np.all(np.isfinite(r.v0)) and np.all(r.stderr > 0)
    z = (r.v0 - truth) / r.stderr
    assert 0.8 <= np.std(z, ddof=1) <= 1.25, np.std(z, ddof=1)
    assert abs(np.mean(z)) < 0.3  # no bias beyond a third of a standard error


def _progress_known(t: np.ndarray, y: np.ndarray):
    return progress_curve(t, y, s0=np.full(len(y), 1.0), signal_per_conc=1.0)


@pytest.mark.parametrize("kernel", [_progress_known, lag_decay])
def test_whole_curve_se_grows_with_lack_of_fit(kernel) -> None:
    clean, _ = _curve(1.0, 0.30)
    noise = 0.002 * np.random.default_rng(9).standard_normal((50, T.size))
    misfit = 0.005 * np.sin(2 * np.pi * T / 150)  # about 2 x the read noise in RMS: not refused
    plain = kernel(T, clean[None, :] + noise)
    bent = kernel(T, clean[None, :] + noise + misfit[None, :])
    ratio = bent.extra["rmse_over_noise"]
    kept = ratio < 3.0  # not refused (FIT_FAILED above 3)
    assert kept.sum() >= 40 and np.median(ratio) > 1.5
    grow = np.median(bent.stderr[kept] / plain.stderr[kept])
    expected = np.median(ratio[kept] / plain.extra["rmse_over_noise"][kept].clip(min=1.0))
    assert grow == pytest.approx(expected, rel=0.25)
