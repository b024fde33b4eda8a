"""The simulator's lag with inactivation, and what the default rates method makes of it.

In :func:`vzero.plugins.kinetics.simulate.simulate_plate` the active fraction follows
``da/dt = (1 - a)/lag_tau - k a``, a linear first-order ODE whose solution from ``a(0) = 0`` is
``a(t) = (1 - exp(-(1/lag_tau + k) t)) / (1 + k lag_tau)`` (any text on linear ODEs): the activity levels off
at ``1/(1 + k lag_tau)`` and never decays. So the plate is the same as one with a lag of
``lag_tau/(1 + k lag_tau)``, no inactivation and ``Vmax/(1 + k lag_tau)``, and the rate at full activity is
not in the reads. On such a plate (60-s lag, k = 1/600 s) the default method's lag clock returned no decay
and v0 about 9 % under the simulator's ``v0_true``: the answer the reads support. Invented plate.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates.choice import model_choice

T = np.arange(90) * 10.0
S0 = np.array([0.1, 0.2, 0.5, 1.0, 2.0, 5.0])  # mM, invented
KM, VMAX, SPC = 0.5, 6e-4, 3.4  # mM, mM/s, AU/mM (invented)
TAU, K = 60.0, 1.0 / 600.0  # s, 1/s
LEVEL = 1.0 + K * TAU  # 1.1: the activity levels off at 1/LEVEL


def test_lag_with_loss_is_a_shorter_lag_at_a_lower_rate() -> None:
    # reference: scipy's Radau on dS/dt = -a(t) v(S) with the closed-form a(t) of the module text
    sim = simulate_plate(T, S0, KM, VMAX, lag_tau=TAU, k_inact=K, signal_per_conc=SPC, baseline=0.05)
    same = simulate_plate(T, S0, KM, VMAX / LEVEL, lag_tau=TAU / LEVEL, signal_per_conc=SPC, baseline=0.05)

    def rhs(t: float, s: np.ndarray) -> np.ndarray:
        a = -np.expm1(-t * LEVEL / TAU) / LEVEL
        return -a * VMAX * np.fmax(s, 0.0) / (KM + np.fmax(s, 0.0))

    ref = solve_ivp(rhs, (0.0, T[-1]), S0, method="Radau", t_eval=T, rtol=1e-11, atol=1e-15)
    assert ref.success
    np.testing.assert_allclose(sim.product, S0[:, None] - ref.y, rtol=0, atol=1e-8)
    np.testing.assert_allclose(sim.signal, same.signal, rtol=0, atol=1e-9)
    assert same.v0_true == pytest.approx(sim.v0_true / LEVEL, rel=1e-12)


@pytest.mark.parametrize("seed", [0, 3])
def test_default_method_returns_the_rate_the_reads_support(seed: int) -> None:
    # the lag clock finds the shorter lag and no decay, and v0 is the levelled-off rate v0_true/1.1 (about
    # 9 % under v0_true): within 3.5 of its standard errors per well, within 1.5 % over the plate (median);
    # the reference is the exact equivalence above
    sim = simulate_plate(T, S0, KM, VMAX, lag_tau=TAU, k_inact=K, signal_per_conc=SPC, baseline=0.05,
                         noise=0.002, seed=seed)
    r = model_choice(T, sim.signal, s0=S0, signal_per_conc=SPC)
    level = sim.v0_true / LEVEL
    assert np.all(r.extra["model"] == 3)
    assert np.all(np.abs(r.extra["k_decay"]) < 3e-4)  # no decay after the lag (K is 1.7e-3 /s)
    assert abs(np.median(r.lag_s) / (TAU / LEVEL) - 1.0) < 0.05
    assert np.all(np.abs(r.v0 - level) <= 3.5 * r.stderr)
    assert abs(np.median(r.v0 / level) - 1.0) < 0.015
