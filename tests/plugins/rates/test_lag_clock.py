"""The active-time clock of the lag model: a hysteretic lag followed by irreversible first-order loss of the
active enzyme, against scipy's stiff ODE solver (an independent integration of the same scheme)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from vzero.plugins.rates.lagfit import active_time

T = np.linspace(0.0, 900.0, 91)


def _by_solve_ivp(tau: float, k: float) -> np.ndarray:
    """theta(t) = ∫a dt with dp/dt = -p/tau, da/dt = p/tau - k a (p(0) = 1, a(0) = 0 with a lag; a(0) = 1
    without), integrated by scipy's Radau at rtol 1e-11."""
    rate = 1.0 / tau if tau > 0 else 0.0

    def rhs(_t: float, z: np.ndarray) -> list[float]:
        p, a, _theta = z
        return [-p * rate, p * rate - k * a, a]

    z0 = [1.0, 0.0, 0.0] if tau > 0 else [0.0, 1.0, 0.0]
    sol = solve_ivp(rhs, (0.0, float(T[-1])), z0, method="Radau", t_eval=T, rtol=1e-11, atol=1e-13)
    return sol.y[2]


@pytest.mark.parametrize(("tau", "k"), [(60.0, 8e-4), (60.0, 0.0), (0.0, 8e-4), (0.0, 0.0), (30.0, 0.01),
                                        (60.0, 1.0 / 60.0), (60.0, 1.0 / 60.0 * (1 + 1e-9)), (240.0, 2e-3)])
def test_active_time_matches_the_integrated_scheme(tau: float, k: float):
    ref = _by_solve_ivp(tau, k)
    assert np.max(np.abs(active_time(T, tau, k) - ref)) <= 1e-8 * ref[-1]


def test_only_the_active_form_is_lost():
    """With a lag and inactivation the active time falls short of the lag-only clock by more than the
    reversible scheme's plateau would explain: half the active enzyme is gone by the end of a 900-s run at
    k = 8e-4 /s (exp(-0.72) = 0.49), so the last rate is about half the lag-only one."""
    with_decay = np.gradient(active_time(T, 60.0, 8e-4), T)
    lag_only = np.gradient(active_time(T, 60.0, 0.0), T)
    assert with_decay[-1] / lag_only[-1] == pytest.approx(np.exp(-8e-4 * 900) / (1 - 8e-4 * 60), rel=1e-2)
