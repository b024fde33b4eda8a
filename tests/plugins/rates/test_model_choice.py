"""The default rate method (model-choice), the statistical signal decision and the spike test.

Plates are simulated by ODE integration (``scipy.integrate.solve_ivp``, an independent computation of the rate
law; :func:`vzero.plugins.kinetics.simulate.simulate_plate`), invented data.
"""

from __future__ import annotations

import numpy as np
import pytest
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates.choice import model_choice
from vzero.plugins.rates.noise import screen
from vzero.plugins.rates.spikes import find_spikes

T = np.arange(90) * 10.0
SPC = 3.4  # AU/mM, invented


def test_small_real_slope_gets_a_rate_and_pure_noise_does_not():
    rng = np.random.default_rng(5)
    sigma = 0.002
    # slope chosen so that the line through all reads is about 11 standard errors from zero
    sxx = ((T - T.mean()) ** 2).sum()
    slope = 11 * sigma / np.sqrt(sxx)
    y = np.vstack([slope * T, np.zeros_like(T)]) + sigma * rng.standard_normal((2, T.size))
    sc = screen(y, min_points=6, time=T)
    assert not sc.flags[0] & Flag.NO_SIGNAL and sc.flags[1] & Flag.NO_SIGNAL
    assert sc.slope_t[0] == pytest.approx(11, abs=2.5)  # its SE is one unit of t by construction
    r = model_choice(T, y)
    assert np.isfinite(r.v0[0]) and np.isfinite(r.stderr[0]) and np.isnan(r.v0[1])


def test_spike_is_masked_and_the_rate_stays_within_noise():
    s0 = np.array([0.2, 0.5, 1.0, 2.0])
    p = simulate_plate(T, s0, 0.5, 6e-4, signal_per_conc=SPC, noise=0.002, seed=2)
    spiked = p.signal.copy()
    spiked[:, 30] += 0.08  # 40 read noises, one read per well
    clean = model_choice(T, p.signal, s0=s0, signal_per_conc=SPC)
    dirty = model_choice(T, spiked, s0=s0, signal_per_conc=SPC)
    assert np.all(dirty.flags & Flag.SPIKE) and not np.any(clean.flags & Flag.SPIKE)
    assert np.all(np.abs(dirty.v0 - clean.v0) <= 2 * clean.stderr)
    found = find_spikes(T, spiked, screen(spiked, min_points=6, time=T).sigma)
    assert found[:, 30].all() and found.sum() == s0.size


def test_michaelis_menten_wells_get_the_curve_and_v0_within_one_percent():
    s0 = np.array([0.05, 0.2, 0.5, 1.0, 5.0])
    p = simulate_plate(T, s0, 0.5, 6e-4, signal_per_conc=SPC, noise=0.002, seed=3)
    r = model_choice(T, p.signal, s0=s0, signal_per_conc=SPC)
    np.testing.assert_allclose(r.v0, p.v0_true, rtol=0.03)
    # a whole-curve model described every well that runs past the quadratic's 20 % window; the well at
    # S0 = 10 Km stays within it (about 5 % conversion), so a curve would use the same reads and is not fitted
    assert np.all(r.extra["model"][:4] <= 1) and r.extra["model"][4] == 2


def test_whole_curve_fit_is_skipped_only_where_the_quadratic_bias_is_negligible():
    # S0 = Km, about 19 % conversion over the run: the quadratic's window holds every read. Its third-order
    # bias (-n (3n - 2) x²/10 of v0 with n = 1/2, x = 0.19: about +0.09 %; the least-squares quadratic of a
    # cubic, shifted Legendre remainder) is far above 0.3 of its SE at read noise 1e-5 AU, so the curve
    # is fitted and beats the quadratic through every read (numpy.polyfit, independent); at read noise 0.01 AU
    # the bias is lost in the noise and no curve is fitted.
    s0 = np.array([0.5])
    fine = simulate_plate(T, s0, 0.5, 2.2e-4, signal_per_conc=SPC, noise=1e-5, seed=8)
    r = model_choice(T, fine.signal, s0=s0, signal_per_conc=SPC)
    assert r.extra["model"][0] == 0
    quad = np.polyfit(T, fine.signal[0], 2)[1]
    assert abs(r.v0[0] / fine.v0_true[0] - 1) < 0.5 * abs(quad / fine.v0_true[0] - 1)
    coarse = simulate_plate(T, s0, 0.5, 2.2e-4, signal_per_conc=SPC, noise=0.01, seed=8)
    assert model_choice(T, coarse.signal, s0=s0, signal_per_conc=SPC).extra["model"][0] == 2


def test_lag_wells_get_the_lag_model_with_an_unbiased_lag_time():
    s0 = np.array([0.5, 1.0, 2.0, 5.0])
    p = simulate_plate(T, s0, 0.5, 6e-4, lag_tau=60.0, signal_per_conc=SPC, noise=0.001, seed=4)
    r = model_choice(T, p.signal, s0=s0, signal_per_conc=SPC)
    assert np.all(r.flags & Flag.LAG) and np.all(r.extra["model"] == 3)
    np.testing.assert_allclose(r.lag_s, 60.0, rtol=0.10)  # the lag time of the simulated hysteresis
    np.testing.assert_allclose(r.v0, p.v0_true, rtol=0.03)


def test_late_saturated_reads_are_masked_and_the_rate_kept():
    s0 = np.array([2.0, 5.0])
    p = simulate_plate(T, s0, 0.5, 1.2e-3, signal_per_conc=SPC, noise=0.002, ceiling=2.0, seed=6)
    assert p.saturated[:, -1].all()
    r = model_choice(T, p.signal, s0=s0, signal_per_conc=SPC)
    np.testing.assert_allclose(r.v0, p.v0_true, rtol=0.02)


def test_rates_use_the_plates_own_standard_curve():
    import pandas as pd
    from vzero.data import Traces
    from vzero.params import validate
    from vzero.plugins.rates import ModelChoiceRates
    from vzero.stage import StageInput

    # invented fluorescence plate: 120 RFU per µM of product; standards of product at 0-10 µM, four samples
    s0 = np.array([20.0, 50.0, 100.0, 200.0])  # µM substrate
    p = simulate_plate(T, s0, 50.0, 0.05, signal_per_conc=120.0, baseline=40.0, noise=2.0, seed=8)
    std = np.array([0.0, 1.0, 2.0, 5.0, 10.0])
    rng = np.random.default_rng(9)
    standards = 40.0 + 120.0 * std[:, None] + 2.0 * rng.standard_normal((std.size, T.size))
    signal = np.vstack([p.signal, standards])
    wells = pd.DataFrame({"well": [f"A{i + 1}" for i in range(9)], "role": ["sample"] * 4 + ["standard"] * 5,
                          "substrate": np.concatenate([s0, np.full(5, np.nan)]),
                          "product": np.concatenate([np.full(4, np.nan), std])})
    traces = Traces("p", T, signal, np.isfinite(signal), np.zeros_like(signal, bool), wells, "RFU",
                    {"substrate": "uM", "product": "uM"})
    settings, problems = validate(ModelChoiceRates.params, {"standards": "product"})
    assert not problems
    warnings: list[str] = []
    out = ModelChoiceRates(**settings).run(StageInput({"traces": traces}, {"name": "p"}, {}, {}, None,
                                                      warnings.append))
    summary = out.record["standard_curve"].frame.set_index("quantity")
    assert summary.loc["slope", "value"] == pytest.approx(120.0, rel=0.01)
    assert any("standard curve (before the rates)" in w for w in warnings)
    rates = out.artifacts["rates"].frame["rate"].to_numpy()[:4]
    np.testing.assert_allclose(rates, p.v0_true, rtol=0.03)  # conversion-aware rates in RFU/s
