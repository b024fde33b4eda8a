"""Step 9's second gate: the joint Hill fit is tried where the pool's own rates show cooperativity
(plugins/rates/poolshape.py ``rates_hill_z`` and ``RATES_HILL_Z``), even when no well kept the Hill curve.

References: scipy.optimize.curve_fit (MINPACK's leastsq, an independent solver path) for the Hill law
fitted to rates and its covariance; the plate's curves integrated by scipy.integrate.solve_ivp (Radau, in
``test_poolshape.plate``; Hill 1910 rate law, h 2.5, K0.5 0.3 mM). Invented wells.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import curve_fit
from vzero.plugins.rates.choice import model_choice, smooth_misfit
from vzero.plugins.rates.poolshape import pool_shape, rates_hill_z

from tests.plugins.rates.test_poolshape import HILL, S_HILL, SPC, T, hill_rate, plate

# the gate's constants as the module's docstrings state them (our choice, written out so a change is caught)
RATES_HILL_Z, RATES_MIN_LEVELS = 3.0, 4


def _reference_z(s: np.ndarray, v: np.ndarray, se: np.ndarray) -> float:
    """ln h over its SE by curve_fit: absolute sigma (each SE floored at 1e-3 of the largest rate, as the
    product documents), the covariance scaled by the reduced chi-square where it is above 1."""
    sig = np.fmax(se, 1e-3 * v.max())

    def law(x: np.ndarray, lv: float, lh: float, lk: float) -> np.ndarray:
        h = np.exp(lh)
        return np.exp(lv) * x**h / (np.exp(lk) ** h + x**h)

    p, cov = curve_fit(law, s, v, p0=np.log([v.max() * 1.5, 2.0, 0.3]), sigma=sig, absolute_sigma=True)
    chi2_red = float(np.sum(((law(s, *p) - v) / sig) ** 2) / (s.size - 3))
    return float(p[1] / np.sqrt(cov[1, 1] * max(chi2_red, 1.0)))


@pytest.mark.parametrize("rel", [0.05, 0.5])  # reduced chi-square above 1 (scaled) and below 1 (not scaled)
def test_rates_hill_z_against_curve_fit(rel: float) -> None:
    v = hill_rate(S_HILL) * (1.0 + 0.05 * np.random.default_rng(3).standard_normal(S_HILL.size))
    se = rel * hill_rate(S_HILL)
    assert rates_hill_z(S_HILL, v, se) == pytest.approx(_reference_z(S_HILL, v, se), rel=1e-4)


def test_rates_hill_z_needs_four_levels_and_is_zero_for_michaelis_menten_rates() -> None:
    v = hill_rate(S_HILL)
    s = np.repeat(S_HILL[:RATES_MIN_LEVELS], 2)
    assert rates_hill_z(s, hill_rate(s), 0.01 * hill_rate(s)) > RATES_HILL_Z
    s = np.repeat(S_HILL[: RATES_MIN_LEVELS - 1], 3)  # 9 wells, 3 levels: the law is not determined
    assert rates_hill_z(s, hill_rate(s), 0.01 * hill_rate(s)) == 0.0
    mm = 4e-4 * S_HILL / (0.3 + S_HILL)  # h = 1 exactly: ln h = 0
    assert abs(rates_hill_z(S_HILL, mm, 0.01 * mm)) < 1e-3
    assert rates_hill_z(S_HILL, v, 0.01 * v) > 50  # the same levels, cooperative


def _pool(rel_se: float) -> object:
    """pool_shape on the Hill plate where no well kept the Hill curve (every well on Michaelis–Menten,
    model 0): only the rates can open the gate."""
    y, v_true = plate(hill_rate, S_HILL, HILL["vmax"], 0.002, 41)
    n = S_HILL.size
    return pool_shape(T, y, np.ones(y.shape, bool), S_HILL, SPC, np.full(n, 0.002), np.zeros(n), v_true,
                      rel_se * v_true, np.full(n, 0.05), v_true, np.full(n, 1.0), lof_ratio=np.inf,
                      agree_z=np.inf, min_reads=8, smooth_misfit=smooth_misfit)


def test_gate_on_both_sides_of_its_threshold() -> None:
    # with exact rates the chi-square is 0, so z is inversely proportional to a common relative SE: set it so
    # that z lands 1 % above and 1 % below RATES_HILL_Z
    v = hill_rate(S_HILL)
    z1 = rates_hill_z(S_HILL, v, 1.0 * v)
    above, below = z1 / (RATES_HILL_Z * 1.01), z1 / (RATES_HILL_Z * 0.99)
    assert rates_hill_z(S_HILL, v, above * v) == pytest.approx(RATES_HILL_Z * 1.01, rel=1e-3)
    tried = _pool(above)
    assert tried.fit is not None
    assert tried.fit.family == "hill"
    assert tried.take.all()
    assert tried.fit.shape[0] == pytest.approx(HILL["h"], rel=0.05)
    assert _pool(below).fit is None


def test_low_signal_cooperative_plate_gets_the_plate_shape_from_its_rates() -> None:
    # a cooperative plate at a fifth of test_poolshape's signal, read noise 0.002: per well a Michaelis–Menten
    # curve fits within the noise, so without the rates gate no well reaches model 4 and step 9 never runs;
    # true v0 from the Hill law at S0. The plate shape must reach wells and lower the RMS error over the plates
    # (measured: 6.1 % against 7.3 %, dominated by the lowest levels, where the rate is near the noise)
    err_new, err_old, pooled = [], [], 0
    for seed in range(200, 204):
        y, v0 = plate(hill_rate, S_HILL, HILL["vmax"] / 5, 0.002, seed)
        new = model_choice(T, y, s0=S_HILL, signal_per_conc=SPC)
        old = model_choice(T, y, s0=S_HILL, signal_per_conc=SPC, pool_shape=False)
        assert not np.any(old.extra["model"] == 4.0)  # no per-well evidence: only the rates gate can pool
        pooled += int(np.sum(new.extra["model"] == 6.0))
        err_new.append(new.v0 / v0 - 1.0)
        err_old.append(old.v0 / v0 - 1.0)
    assert pooled >= 4 * 6
    rms_new, rms_old = np.sqrt(np.nanmean(np.square(err_new))), np.sqrt(np.nanmean(np.square(err_old)))
    assert rms_new < 0.9 * rms_old, (rms_new, rms_old)


def test_wells_of_the_plate_shape_carry_their_pool_and_the_shapes_loadings() -> None:
    # the rates table gets, for the wells that took the plate's shape (model 6), their pool and the shape's
    # loadings on ln v0 (for the fit's shared-error correction); the shape's part of each such well's variance,
    # (v0 |load|)², lies within its SE²; other wells have neither
    y, _ = plate(hill_rate, S_HILL, HILL["vmax"], 0.002, 41)
    r = model_choice(T, y, s0=S_HILL, signal_per_conc=SPC)
    took = r.extra["model"] == 6.0
    assert took.any()
    assert np.all(r.extra["shape_pool"][took] == 0.0)
    assert np.isnan(r.extra["shape_pool"][~took]).all()
    load = np.stack([r.extra["shape_load_1"], r.extra["shape_load_2"]], axis=1)
    assert np.isfinite(load[took]).all()
    assert np.isnan(load[~took]).all()
    part = (r.v0[took] * np.linalg.norm(load[took], axis=1)) ** 2
    assert np.all((part > 0) & (part < r.stderr[took] ** 2))
