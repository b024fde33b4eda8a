"""The simulator's lag with inactivation, and what the default rates method makes of it.

In :func:`vzero.plugins.kinetics.simulate.simulate_plate` an inactive form turns active with time constant
``lag_tau`` and the active form is lost at ``k`` (first order, irreversible): ``dp/dt = -p/lag_tau``,
``da/dt = p/lag_tau - k a``, whose solution from ``p(0) = 1``, ``a(0) = 0`` is ``a(t) = (exp(-k t) -
exp(-t/lag_tau))/(1 - k lag_tau)`` (two first-order steps in series; any text on linear ODEs, e.g. the
Bateman solution of a decay chain). An earlier simulator let lost enzyme re-enter the activation step, so
its activity levelled off at ``1/(1 + k lag_tau)`` and its ``v0_true`` was never in the reads: on this plate
the default method then returned no decay and v0 about 9 % low, the simulator's fault. Invented plate.
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


def _active(t: float) -> float:
    """The closed-form active fraction of the module text (Bateman, two steps in series)."""
    return (np.exp(-K * t) - np.exp(-t / TAU)) / (1.0 - K * TAU)


def test_lag_then_irreversible_loss_matches_the_closed_form_activity() -> None:
    # reference: scipy's Radau on dS/dt = -a(t) v(S) with the closed-form a(t) above
    sim = simulate_plate(T, S0, KM, VMAX, lag_tau=TAU, k_inact=K, signal_per_conc=SPC, baseline=0.05)

    def rhs(t: float, s: np.ndarray) -> np.ndarray:
        return -_active(t) * VMAX * np.fmax(s, 0.0) / (KM + np.fmax(s, 0.0))

    ref = solve_ivp(rhs, (0.0, T[-1]), S0, method="Radau", t_eval=T, rtol=1e-11, atol=1e-15)
    assert ref.success
    np.testing.assert_allclose(sim.product, S0[:, None] - ref.y, rtol=0, atol=1e-8)
    # the activity peaks and then falls: the last interval's product is less than a plate without loss makes
    kept = simulate_plate(T, S0, KM, VMAX, lag_tau=TAU, signal_per_conc=SPC, baseline=0.05)
    assert np.all(np.diff(sim.product)[:, -1] < 0.9 * np.diff(kept.product)[:, -1])


def test_a_lag_alone_still_rises_to_full_activity() -> None:
    # without loss the two-state form is the one-state lag a(t) = 1 - exp(-t/lag_tau) (Radau reference)
    sim = simulate_plate(T, S0, KM, VMAX, lag_tau=TAU, signal_per_conc=SPC)

    def rhs(t: float, s: np.ndarray) -> np.ndarray:
        return np.expm1(-t / TAU) * VMAX * np.fmax(s, 0.0) / (KM + np.fmax(s, 0.0))

    ref = solve_ivp(rhs, (0.0, T[-1]), S0, method="Radau", t_eval=T, rtol=1e-11, atol=1e-15)
    np.testing.assert_allclose(sim.product, S0[:, None] - ref.y, rtol=0, atol=1e-8)


@pytest.mark.parametrize("seed", [0, 3])
def test_default_method_finds_the_lag_the_loss_and_the_rate(seed: int) -> None:
    # the lag clock (model 3) finds the plate's decay constant within 10 %, the median lag within 5 % of
    # 60 s, and v0 within 3.5 of its standard errors per well and 1.5 % over the plate (median)
    sim = simulate_plate(T, S0, KM, VMAX, lag_tau=TAU, k_inact=K, signal_per_conc=SPC, baseline=0.05,
                         noise=0.002, seed=seed)
    r = model_choice(T, sim.signal, s0=S0, signal_per_conc=SPC)
    assert np.all(r.extra["model"] == 3)
    assert np.all(np.abs(r.extra["k_decay"] / K - 1.0) < 0.1)
    assert abs(np.median(r.lag_s) / TAU - 1.0) < 0.05
    assert np.all(np.abs(r.v0 - sim.v0_true) <= 3.5 * r.stderr)
    assert abs(np.median(r.v0 / sim.v0_true) - 1.0) < 0.015
