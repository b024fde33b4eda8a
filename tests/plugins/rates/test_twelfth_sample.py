"""Tests for the two open survivors of the twelfth untouched mutation sample (docs/testing.md): the lack-of-fit
ratio that `auto` reports, and the shape profile's start on a falling curve far from zero. Each checks
documented behaviour against an independent calculation (numpy's polyfit, scipy's least_squares). Invented
data, integrated by scipy.integrate.solve_ivp where it is a progress curve."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import least_squares
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates.auto import auto
from vzero.plugins.rates.progress import shape_profile
from vzero.plugins.rates.shapegrid import SHAPE_GRID, fixed_shape_model

T = np.arange(60) * 10.0  # s


@pytest.mark.parametrize(("estimate", "degree"), [("quadratic", 2), ("select", 1)])
def test_auto_lack_of_fit_ratio_is_the_window_rms_over_the_read_noise(estimate: str, degree: int) -> None:
    # documented (auto's extra): rmse_over_noise is the residual RMS of the reported line or quadratic over the
    # chosen window, sqrt(RSS/(n - p)) with p = 3 for a quadratic and 2 for a line, over the read noise;
    # reference: numpy.polyfit over the same reads (the window auto reports). "select" reports a line on these
    # nearly straight wells (S0 = 20 Km, 2 % converted), "quadratic" always the quadratic.
    s0 = np.full(6, 10.0)
    y = simulate_plate(T, s0, 0.5, 3e-4, signal_per_conc=1.0, baseline=0.1, noise=0.002, seed=21).signal
    r = auto(T, y, estimate=estimate, find_lag=False)
    for i in range(y.shape[0]):
        inside = (T >= r.window_start_s[i]) & (T <= r.window_end_s[i])
        tt, yy = T[inside], y[i, inside]
        assert tt.size == r.n_points[i]
        coef = np.polyfit(tt - tt[0], yy, degree)
        rss = float(np.sum((np.polyval(coef, tt - tt[0]) - yy) ** 2))
        want = np.sqrt(rss / (tt.size - degree - 1)) / r.extra["read_noise"][i]
        assert r.extra["rmse_over_noise"][i] == pytest.approx(want, rel=1e-6), i


def test_shape_profile_fits_a_faint_falling_curve() -> None:
    # the profile's fits start from the four-parameter fit's baseline: on a faint falling curve (blank-
    # corrected, near 0 AU, losing 0.04 AU over the run at read noise 0.002) every shape's fit converges to the
    # optimum of scipy's least_squares on the same block means (as test_shapegrid does for a rising curve)
    v0, c1 = 6e-5, 10.0  # AU/s, 1/AU
    model_true = fixed_shape_model(T, -np.ones(1), np.array([0.5]))
    f, _ = model_true(np.array([[0.0, np.log(v0), c1]]), np.array([0]))
    y = f[0] + 0.002 * np.random.default_rng(22).standard_normal((4, T.size))
    start = np.column_stack([np.full(4, 0.001), np.full(4, np.log(0.9 * v0)), np.full(4, np.log(0.8 * c1)),
                             np.zeros(4)])
    prof = shape_profile(T, y, np.ones_like(y), -np.ones(4), start, np.full(4, 0.002**2))
    tb, yb = T.reshape(20, 3).mean(axis=1), y.reshape(4, 20, 3).mean(axis=2)
    for g, r in enumerate(SHAPE_GRID):
        model = fixed_shape_model(tb, -np.ones(1), np.array([r]))
        for i in range(4):
            def resid(p: np.ndarray, i: int = i, model=model) -> np.ndarray:
                return np.sqrt(3.0) * (model(p[None, :], np.array([0]))[0][0] - yb[i])
            ref = least_squares(resid, [0.001, np.log(0.9 * v0), 0.8 * c1],
                                bounds=([-np.inf, -30, 0], [np.inf, 0, np.inf]), xtol=1e-14, ftol=1e-14, gtol=1e-14)
            assert prof["converged"][i, g], (i, r)
            # ln v0 to a fifth of its standard error at that shape
            assert prof["ln_v0"][i, g] == pytest.approx(ref.x[1], abs=0.2 * np.sqrt(prof["var"][i, g])), (i, r)
