"""How the lag clock's fit chooses between a well's own decay constant and the plate's (step 3 of the module
text of :mod:`vzero.plugins.rates.lagfit`), and when it withholds v0, with the fits replaced by designed
figures so that each rule is tested on its own from both sides.

The rules, as the module text states them: a well keeps its own decay constant where it differs from the
plate's by more than 3 standard errors of the difference (``hypot`` of the two standard errors), or where the
fit with the plate's constant failed; every other well takes the fit with the plate's constant held (which
starts from the plate's value); v0 is withheld where the fitted clock never has the enzyme half active at any
read (peak active fraction below 0.5, computed here from the clock written out by hand). Invented figures.
"""

from __future__ import annotations

import numpy as np
import pytest
from vzero.plugins.rates import lagfit

READS = np.arange(90) * 10.0  # s
K_PLATE, SE_PLATE = 1e-3, 2e-4  # 1/s
OWN_SE = 1e-4
EDGE = 3.0 * np.hypot(OWN_SE, SE_PLATE)  # the split threshold of the module text, by hand


def _peak(tau: float, k: float) -> float:
    """Largest mean active fraction between reads of the clock ((1 - e^-kt)/k - tau (1 - e^-t/tau))/(1 - k tau)."""
    theta = ((1.0 - np.exp(-k * READS)) / k - tau * (1.0 - np.exp(-READS / tau))) / (1.0 - k * tau)
    return float(np.max(np.diff(theta) / np.diff(READS)))


def _run(monkeypatch: pytest.MonkeyPatch, own_k: np.ndarray, shared_v0: np.ndarray,
         tau: np.ndarray) -> tuple[dict[str, np.ndarray], list[np.ndarray]]:
    """lag_clock_fit on four wells (the last never fitted) with designed grid, own, profile and shared fits."""
    n = own_k.size
    seen: list[np.ndarray] = []

    def grid(t: np.ndarray, y: np.ndarray, s0: np.ndarray, spc: float, tau_try: float,
             min_points: int) -> dict[str, np.ndarray]:
        seen.append(np.array([min_points]))
        seen.append(np.array([tau_try, 0.0]))
        ok = np.array([True] * n + [False])
        return {"rss": np.full(n + 1, abs(tau_try - 50.0)), "start": np.tile([0.05, -7.0, 0.3], (n + 1, 1)),
                "ok": ok}

    def joint(t: np.ndarray, y: np.ndarray, s0: np.ndarray, spc: float, p0: np.ndarray, sigma: np.ndarray,
              dt: float, span: float, k_se: float | None = None) -> dict[str, np.ndarray]:
        seen.append(p0.copy())
        seen.append(np.array([dt, span, 0.0]))
        own = k_se is None
        k = own_k if own else p0[:, 4]
        params = p0.copy()
        params[:, 3], params[:, 4] = tau, k
        return {"v0": np.arange(1.0, n + 1) if own else shared_v0,
                "stderr": np.full(n, 0.01 if own else 0.02), "rss": np.ones(n), "ratio": np.ones(n),
                "tau": tau.copy(), "tau_se": np.full(n, 2.0), "k": k, "k_se": np.full(n, OWN_SE if own else k_se),
                "params": params}

    monkeypatch.setattr(lagfit, "_grid_fit", grid)
    monkeypatch.setattr(lagfit, "_joint", joint)
    monkeypatch.setattr(lagfit, "_profile_decay", lambda *a: (K_PLATE, SE_PLATE))
    y = np.zeros((n + 1, READS.size))
    out = lagfit.lag_clock_fit(READS, y, np.ones(n + 1), 3.4, sigma=np.full(n + 1, 0.002))
    return out, seen


def test_a_well_keeps_its_own_decay_beyond_three_standard_errors_of_the_difference(
        monkeypatch: pytest.MonkeyPatch) -> None:
    own_k = K_PLATE + np.array([0.0, 1.01 * EDGE, 0.99 * EDGE, -1.01 * EDGE])
    shared = np.array([1.1, 2.2, 3.3, 4.4])
    out, seen = _run(monkeypatch, own_k, shared, np.full(4, 60.0))
    assert out["own_k"].tolist() == [False, True, False, True, False]
    np.testing.assert_allclose(out["v0"][:4], [1.1, 2.0, 3.3, 4.0])
    np.testing.assert_allclose(out["k"][:4], [K_PLATE, own_k[1], K_PLATE, own_k[3]])
    np.testing.assert_allclose(out["k_se"][:4], [SE_PLATE, OWN_SE, SE_PLATE, OWN_SE])
    np.testing.assert_allclose(out["stderr"][:4], [0.02, 0.01, 0.02, 0.01])
    assert float(out["k_plate"]) == K_PLATE
    # every grid fit asks for eight reads (the default), one per lag time of the grid
    grids = [int(x[0]) for x in seen if x.shape == (1,)]
    assert grids == [8] * len(lagfit.TAU_GRID)
    # lag times tried: the grid in read intervals of 10 s; the fits get the read interval and the run length
    tried = [float(x[0]) for x in seen if x.shape == (2,)]
    np.testing.assert_allclose(tried, np.array(lagfit.TAU_GRID) * 10.0)
    assert all(x.tolist() == [10.0, 890.0, 0.0] for x in seen if x.shape == (3,))
    fits = [x for x in seen if x.ndim == 2]
    # the shared fit starts from the plate's constant; the own fit from k = 0 at the grid's best lag time
    # (50 s: 5 read intervals)
    np.testing.assert_allclose(fits[0][:, 3:], [[50.0, 0.0]] * 4)
    np.testing.assert_allclose(fits[1][:, 4], K_PLATE)
    # the well the grid could not fit has no figures
    assert np.isnan(out["v0"][4]) and np.isnan(out["tau"][4]) and not out["own_k"][4]


def test_a_well_whose_shared_fit_failed_keeps_its_own(monkeypatch: pytest.MonkeyPatch) -> None:
    out, _ = _run(monkeypatch, np.full(2, K_PLATE), np.array([np.nan, 2.2]), np.full(2, 60.0))
    assert out["own_k"][:2].tolist() == [True, False]
    np.testing.assert_allclose(out["v0"][:2], [1.0, 2.2])


def test_v0_is_withheld_where_the_enzyme_is_never_half_active(monkeypatch: pytest.MonkeyPatch) -> None:
    # lag times chosen (by hand, from the written-out clock at the plate's k) so the peak activity is just
    # above and just below one half; the lag time and decay are still reported
    from scipy.optimize import brentq

    taus = [brentq(lambda tau, p=p: _peak(tau, K_PLATE) - p, 10.0, 5000.0, xtol=1e-9) for p in (0.505, 0.495)]
    out, _ = _run(monkeypatch, np.full(2, K_PLATE), np.array([1.1, 2.2]), np.array(taus))
    assert np.isfinite(out["v0"][0]) and np.isfinite(out["stderr"][0])
    assert np.isnan(out["v0"][1]) and np.isnan(out["stderr"][1])
    np.testing.assert_allclose(out["tau"][:2], taus)
    np.testing.assert_allclose(out["k"][:2], K_PLATE)


def test_a_plate_with_a_single_fitted_well_gets_its_figures(monkeypatch: pytest.MonkeyPatch) -> None:
    out, _ = _run(monkeypatch, np.array([K_PLATE]), np.array([1.1]), np.array([60.0]))
    np.testing.assert_allclose(out["v0"][:1], 1.1)
    assert np.isnan(out["v0"][1])
