"""``model-choice`` field by field where the answer is known independently (invented data).

Where a well stays inside the quadratic's conversion window and its third-order bias is negligible, no
whole-curve model is fitted and every returned figure is the early quadratic's: checked against
numpy.polyfit (v0, curvature-free figures, R², window, reads used) and the read noise the method reports. A
masked spike or censored read must give exactly the result of the same plate with that read missing; a well
with nothing to fit gets no rate. Plates simulated by ODE integration (scipy.integrate.solve_ivp,
:func:`vzero.plugins.kinetics.simulate.simulate_plate`).
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any

import numpy as np
import pytest
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates.choice import model_choice

from tests.plugins.rates.choice_spy import rows_of, spy_quadratic

T = np.arange(60) * 10.0  # s
SPC = 2.5  # AU/mM, invented
KM = 0.5  # mM


def _plate(s0: np.ndarray, noise: float, seed: int) -> np.ndarray:
    return simulate_plate(T, s0, KM, 2e-5, signal_per_conc=SPC, noise=noise, seed=seed).signal


def test_wells_left_with_the_early_quadratic_get_its_figures_by_polyfit() -> None:
    # S0 = Km, about 17 % conversion over the run: most wells stay inside the quadratic's window with a
    # negligible third-order bias, so no whole-curve model is kept and every figure is the quadratic's
    s0 = np.full(6, KM)
    y = simulate_plate(T, s0, KM, 2e-4, signal_per_conc=SPC, noise=0.005, seed=11).signal
    r = model_choice(T, y, s0=s0, signal_per_conc=SPC)
    rows = np.flatnonzero(r.extra["model"] == 2)
    assert rows.size >= 4 and (r.flags[rows] == 0).all()
    for w in rows:
        # numpy.polyfit of a quadratic in (t - t0) over the reads used; SE from the reported read noise and
        # (X'X)^-1; R² and the residual RMS from their definitions
        n = int(r.n_points[w])
        tt, yy = T[:n] - T[0], y[w, :n]
        c2, c1, c0 = np.polyfit(tt, yy, 2)
        x = np.column_stack([np.ones_like(tt), tt, tt**2])
        resid = yy - x @ [c0, c1, c2]
        assert r.v0[w] == pytest.approx(c1, rel=1e-7)
        sigma = r.extra["read_noise"][w]
        assert r.stderr[w] == pytest.approx(sigma * math.sqrt(np.linalg.inv(x.T @ x)[1, 1]), rel=1e-7)
        assert r.goodness[w] == pytest.approx(1 - resid @ resid / ((yy - yy.mean()) ** 2).sum(), rel=1e-7)
        assert r.extra["rmse_over_noise"][w] == pytest.approx(math.sqrt(resid @ resid / (n - 3)) / sigma, rel=1e-6)
        assert r.extra["rate_t"][w] == pytest.approx(r.v0[w] / r.stderr[w])
        assert r.window_start_s[w] == 0.0 and r.window_end_s[w] == T[n - 1]
        assert n >= 40
    assert (r.lag_s == 0.0).all() and np.isnan(r.extra["k_decay"]).all()
    # the robust read-noise estimate scatters by about 18 % over 60 reads (docs/rates.md)
    assert (0.005 * 0.6 < r.extra["read_noise"]).all() and (r.extra["read_noise"] < 0.005 * 1.4).all()


def test_a_masked_spike_gives_the_result_of_the_plate_without_that_read() -> None:
    s0 = np.array([0.2, 0.5, 1.0, 3.0])
    y = _plate(s0, 0.002, 12)
    spiked, gap = y.copy(), y.copy()
    spiked[1, 25] += 0.1  # 50 read noises in one well
    gap[1, 25] = np.nan
    a = model_choice(T, spiked, s0=s0, signal_per_conc=SPC)
    b = model_choice(T, gap, s0=s0, signal_per_conc=SPC)
    assert not (b.flags & Flag.SPIKE).any()
    np.testing.assert_array_equal(a.flags, b.flags | np.array([0, int(Flag.SPIKE), 0, 0]))
    for name in ("v0", "stderr", "goodness", "window_start_s", "window_end_s", "lag_s"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name))
    np.testing.assert_array_equal(a.n_points, b.n_points)
    np.testing.assert_array_equal(a.extra["model"], b.extra["model"])


def test_the_read_beside_a_missing_block_is_left_out() -> None:
    s0 = np.array([0.5, 1.0])
    y = _plate(s0, 0.002, 13)
    head = y.copy()
    head[0, :3] = np.nan  # a leading block (reads above the detector's range)
    head[1, -4:] = np.nan  # a trailing one
    by_hand = head.copy()
    by_hand[0, 3] = by_hand[1, -5] = np.nan
    a = model_choice(T, head, s0=s0, signal_per_conc=SPC)
    b = model_choice(T, by_hand, s0=s0, signal_per_conc=SPC, censored_reads=0)
    np.testing.assert_array_equal(a.v0, b.v0)
    np.testing.assert_array_equal(a.stderr, b.stderr)
    np.testing.assert_array_equal(a.n_points, b.n_points)
    np.testing.assert_array_equal(a.window_start_s, b.window_start_s)
    assert a.window_start_s[0] == 40.0  # the first read used is the fifth


def test_wells_without_a_usable_signal_get_no_rate() -> None:
    s0 = np.array([1.0, 1.0, 1.0, 1.0])
    y = _plate(s0, 0.002, 14)
    y[0] = np.nan  # all missing
    y[1] = 0.3 + 0.002 * np.random.default_rng(1).standard_normal(60)  # no signal: noise about a constant
    y[2, 5:] = np.nan  # five reads: too few
    r = model_choice(T, y, s0=s0, signal_per_conc=SPC)
    assert r.flags[0] & Flag.ALL_MISSING and r.flags[1] & Flag.NO_SIGNAL and r.flags[2] & Flag.TOO_FEW_POINTS
    assert np.isnan(r.v0[:3]).all() and np.isnan(r.stderr[:3]).all() and np.isnan(r.extra["rate_t"][:3]).all()
    assert np.isfinite(r.v0[3]) and not r.flags[3] & (Flag.ALL_MISSING | Flag.NO_SIGNAL | Flag.FIT_FAILED)


def test_power_law_is_tried_where_the_curve_and_quadratic_disagree_beyond_room_and_bias(
        monkeypatch: pytest.MonkeyPatch) -> None:
    # model-choice's step after the Michaelis-Menten curve (module comment there): the power law is tried
    # where |v0_curve - v0_quadratic| > agree_z * room + bias, room = sqrt(max(SE_q^2 - SE^2, (DIFF_FLOOR
    # SE_q)^2)), bias = |u (3u - 2)| x^2 / 10 of v0 with u = Km/(Km + S0) and x = v0 (window end - t0) /
    # (spc S0). Eight wells at S0 = Km (u about 1/2); the curve's v0 is moved to 0.8 and 1.25 times that
    # threshold from the quadratic's (the formula evaluated here, by hand): only the second kind goes on to
    # the power law
    from vzero.plugins.rates import choice

    s0 = np.full(8, 0.5)
    y = simulate_plate(T, s0, KM, 4e-4, signal_per_conc=SPC, noise=0.0005, seed=3).signal
    real_fit = choice.progress_curve
    seen: dict[str, Any] = {"power": []}
    quadratic = spy_quadratic(seen)

    def fit(t: np.ndarray, yy: np.ndarray, **k: Any) -> Any:
        res = real_fit(t, yy, **k)
        if k.get("model") == "power":
            seen["power"] += rows_of(y, yy).tolist()
            return res
        if "moved" in seen:
            return res
        q, rows = seen["q"], np.array([int(np.flatnonzero((y == row).all(axis=1))[0]) for row in yy])
        u = res.extra["km"] / (res.extra["km"] + s0[rows])
        assert ((u > choice.U_EDGE) & (u < 1 - choice.U_EDGE)).all() and (res.extra["rmse_over_noise"] < 1.4).all()
        room = np.sqrt(np.fmax(q.se[rows] ** 2 - res.stderr**2, (choice.DIFF_FLOOR * q.se[rows]) ** 2))
        factor = np.where(rows % 2 == 1, 1.25, 0.8)
        v = res.v0.copy()
        for _ in range(50):  # the bias depends on the curve's own v0: a fixed point, reached in a few steps
            x = np.abs(v) * (q.end_s[rows] - t[0]) / (SPC * s0[rows])
            v = q.v0[rows] + factor * (choice.AGREE_Z * room + 0.1 * np.abs(u * (3 * u - 2)) * x**2 * np.abs(v))
        seen["moved"] = rows
        return dataclasses.replace(res, v0=v)

    monkeypatch.setattr(choice, "early_quadratic", quadratic)
    monkeypatch.setattr(choice, "progress_curve", fit)
    choice.model_choice(T, y, s0=s0, signal_per_conc=SPC)
    assert seen["moved"].tolist() == list(range(8))
    assert sorted(seen["power"]) == [1, 3, 5, 7]
