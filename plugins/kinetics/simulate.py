"""The one progress-curve simulator: plates integrated numerically with ``scipy.integrate.solve_ivp``.

Used by the demo generator (:mod:`vzero.plugins.demo.simulate`) and by the tests and benchmarks. The rate
law is integrated as an ODE (never through the closed form the progress-curve kernel uses), so the tests
compare the kernels against an independent computation. The model per well::

    dS/dt = -a(t) * Vmax * S^h / (Km^h + S^h)          (Hill; h = 1 is Michaelis–Menten)
    dp/dt = -p / lag_tau                                (enzyme not yet active; p(0) = 1 - a0 with a lag)
    da/dt = p / lag_tau - k_inact * a                   (active enzyme fraction; a(0) = a0)

``lag_tau > 0`` gives a hysteretic lag (activity rising from ``a0`` to 1, the steady-state line meeting the
baseline at ``t = lag_tau`` when ``a0 = 0`` and depletion is negligible); ``k_inact > 0`` gives first-order,
irreversible inactivation of the active form (Selwyn-type: ``P = v0/k (1 - exp(-k t))`` when depletion is
negligible and there is no lag). With both, enzyme turns active and is lost in turn, ``a(t) = (exp(-k t) -
exp(-t/lag_tau))/(1 - k lag_tau)`` from ``a0 = 0``: the model of :mod:`vzero.plugins.rates.lagfit`. Lost enzyme does not
return (an earlier version let it re-enter the activation step, so the activity levelled off at ``1/(1 +
k lag_tau)`` and ``v0_true`` was never reached). The signal is
``baseline + signal_per_conc * P`` plus Gaussian read noise; reads at or above ``ceiling`` become NaN and are
marked saturated. Invented data only: never a stand-in for measured curves.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class SimulatedPlate:
    """A simulated plate: ``signal`` ``[n_wells, n_time]``, the noise-free ``product`` (concentration),
    the true initial rate ``v0_true`` in signal/s (rate at t = 0 with a = 1, i.e. the steady-state rate a
    lag phase leads to, or the rate before inactivation), and ``saturated`` reads."""

    time: np.ndarray
    signal: np.ndarray
    product: np.ndarray
    v0_true: np.ndarray
    saturated: np.ndarray


def simulate_plate(
    time: np.ndarray,
    s0: np.ndarray,
    km: np.ndarray | float,
    vmax: np.ndarray | float,
    *,
    hill: np.ndarray | float = 1.0,
    lag_tau: np.ndarray | float = 0.0,
    a0: np.ndarray | float | None = None,
    k_inact: np.ndarray | float = 0.0,
    signal_per_conc: float = 1.0,
    baseline: np.ndarray | float = 0.0,
    noise: float = 0.0,
    ceiling: float | None = None,
    seed: int | None = 0,
    rtol: float = 1e-10,
    atol: float | None = None,
) -> SimulatedPlate:
    """Integrate all wells in one ``solve_ivp`` call (LSODA) and add read noise.

    Concentrations in any consistent unit, ``vmax`` in that unit per second, ``time`` in seconds (the
    reaction starts at t = 0; reads may start later). ``a0`` defaults to 0 where ``lag_tau > 0``, else 1.
    ``rtol``/``atol`` are the integrator's tolerances (``atol`` by default 1e-14 of the largest ``s0``).
    """
    from scipy.integrate import solve_ivp  # here: registering the demo plugin must not import scipy

    t = np.asarray(time, dtype=float)
    s0 = np.atleast_1d(np.asarray(s0, dtype=float))
    n = s0.size
    km_, vm, h, tau, ki = (np.broadcast_to(np.asarray(x, dtype=float), (n,)) for x in
                           (km, vmax, hill, lag_tau, k_inact))
    a_start = np.where(tau > 0, 0.0, 1.0) if a0 is None else np.broadcast_to(np.asarray(a0, float), (n,))
    inv_tau = np.where(tau > 0, 1.0 / np.where(tau > 0, tau, 1.0), 0.0)

    p_start = np.where(tau > 0, 1.0 - a_start, 0.0)

    def rhs(_t: float, z: np.ndarray) -> np.ndarray:
        s, p, a = np.maximum(z[:n], 0.0), z[n:2 * n], z[2 * n:]
        sh = s**h
        return np.concatenate([-a * vm * sh / (km_**h + sh), -p * inv_tau, p * inv_tau - ki * a])

    t_eval = t if t[0] == 0 else np.concatenate([[0.0], t])
    sol = solve_ivp(rhs, (0.0, float(t[-1])), np.concatenate([s0, p_start, a_start]), method="LSODA",
                    t_eval=t_eval, rtol=rtol, atol=1e-14 * max(float(s0.max()), 1.0) if atol is None else atol)
    s_t = sol.y[:n, -t.size:]
    product = s0[:, None] - s_t
    rng = np.random.default_rng(seed)
    signal = np.broadcast_to(np.asarray(baseline, float), (n,))[:, None] + signal_per_conc * product
    signal = signal + noise * rng.standard_normal(signal.shape)
    saturated = np.zeros(signal.shape, dtype=bool)
    if ceiling is not None:
        saturated = signal >= ceiling
        signal = np.where(saturated, np.nan, signal)
    v0 = signal_per_conc * vm * s0**h / (km_**h + s0**h)
    return SimulatedPlate(t, signal, product, v0, saturated)
