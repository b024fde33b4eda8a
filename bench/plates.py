"""Realistic simulated plates for the accuracy benchmark (bench only, never on the runtime path).

Each scenario is a plate layout of substrate (and inhibitor) levels with enzyme-free blanks. The rate law is
integrated numerically, once per distinct well, with a stiff ODE solver (``scipy.integrate.solve_ivp``,
method Radau), never through the closed forms the rate methods use::

    dS/dt = -a(t) * v(S, I)                      (Michaelis–Menten, Hill, substrate inhibition, competitive)
    dp/dt = -p / lag_tau                         (enzyme not yet active: p(0) = 1 with a lag, else 0)
    da/dt = p / lag_tau - k_inact * a            (active enzyme fraction; a(0) = 0 with a lag, else 1)

The lag is a hysteretic activation (the enzyme turns active with time constant ``lag_tau``) and the
inactivation is first-order and irreversible (active enzyme is lost at ``k_inact``, whatever the lag): with
both, the activity rises, peaks and then decays, and no fraction of it is ever regained.

Every noise draw then adds what a real reader adds: a plate drift common to all wells (warming optics:
``drift * (1 - exp(-t / 300 s))`` with ``drift`` drawn per plate), the enzyme-free background rate of the
substrate (in blanks and samples alike), Gaussian read noise, single-read spikes (bubbles, where the scenario
has them), rounding to the reader's resolution, and a detector ceiling (reads at or above it become NaN, as
the importer masks them). Invented data for benchmarking only; nothing here is real lab data.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.integrate import solve_ivp


@dataclass(frozen=True)
class Scenario:
    """One kind of plate. Concentrations in mM, rates in mM/s, signal in absorbance units (AU).

    ``s0`` and ``inhibitor`` list the sample conditions (one well per condition and draw); ``law`` names the
    rate law (``mm``, ``hill``, ``si`` substrate inhibition, ``competitive``) with ``params`` (``vmax``,
    ``km``, ``h``, ``ki``). Signal = ``base + sub_abs * S0 + spc * P`` (``spc`` < 0: a signal that falls).
    """

    name: str
    text: str
    s0: np.ndarray
    law: str
    params: dict[str, float]
    spc: float = 3.4
    inhibitor: np.ndarray | None = None
    base: float = 0.05
    sub_abs: float = 0.0
    n_time: int = 90
    dt: float = 10.0
    noise: float = 0.002
    resolution: float = 0.001
    ceiling: float = 3.5
    lag_tau: float = 0.0
    k_inact: float = 0.0
    spikes: bool = False
    background: float = 4e-7  # enzyme-free signal change, AU/s per mM substrate
    drift: float = 0.01  # typical plate drift amplitude, AU
    n_blanks: int = 2
    fit_names: tuple[str, ...] = field(default=("vmax", "km"))

    @property
    def time(self) -> np.ndarray:
        return np.arange(self.n_time) * self.dt

    @property
    def inh(self) -> np.ndarray:
        return np.zeros_like(self.s0) if self.inhibitor is None else self.inhibitor


def law_rate(law: str, p: dict[str, float], s: np.ndarray, i: np.ndarray) -> np.ndarray:
    """Rate (mM/s) of the named law at substrate ``s`` and inhibitor ``i`` (used by the ODE and the fits)."""
    s = np.maximum(s, 0.0)
    if law == "mm":
        return p["vmax"] * s / (p["km"] + s)
    if law == "hill":
        sh = s ** p["h"]
        return p["vmax"] * sh / (p["km"] ** p["h"] + sh)
    if law == "si":
        return p["vmax"] * s / (p["km"] + s + s * s / p["ki"])
    if law == "competitive":
        return p["vmax"] * s / (p["km"] * (1.0 + i / p["ki"]) + s)
    raise ValueError(f"unknown rate law {law!r}")


@dataclass(frozen=True)
class Truth:
    """The noise-free part of a scenario: product ``[n_cond, n_time]`` (mM) and the true v0 in AU/s
    (rate at t = 0 with fully active enzyme: after a lag, the rate of the enzyme once active, before any is
    lost to inactivation)."""

    product: np.ndarray
    v0: np.ndarray


def integrate(sc: Scenario) -> Truth:
    """Integrate every condition of ``sc`` at once (Radau, stiff) to the read times."""
    t = sc.time
    n = sc.s0.size
    inh = sc.inh
    inv_tau = 1.0 / sc.lag_tau if sc.lag_tau > 0 else 0.0
    a0 = 0.0 if sc.lag_tau > 0 else 1.0

    def rhs(_t: float, z: np.ndarray) -> np.ndarray:
        s, p, a = z[:n], z[n:2 * n], z[2 * n:]
        return np.concatenate([-a * law_rate(sc.law, sc.params, s, inh), -p * inv_tau,
                               p * inv_tau - sc.k_inact * a])

    z0 = np.concatenate([sc.s0, np.full(n, 1.0 - a0), np.full(n, a0)])
    sol = solve_ivp(rhs, (0.0, float(t[-1])), z0, method="Radau", t_eval=t, rtol=1e-9,
                    atol=1e-13 * max(float(sc.s0.max()), 1.0))
    if not sol.success:
        raise RuntimeError(f"{sc.name}: {sol.message}")
    product = sc.s0[:, None] - sol.y[:n]
    v0 = sc.spc * law_rate(sc.law, sc.params, sc.s0, inh)
    return Truth(product, v0)


@dataclass(frozen=True)
class Draws:
    """``n_draws`` noisy plates of one scenario. ``sample`` ``[n_draws, n_cond, n_time]``, ``blank``
    ``[n_draws, n_cond, n_blanks, n_time]`` (one set of enzyme-free blanks per condition), NaN where the
    ceiling censored a read."""

    sample: np.ndarray
    blank: np.ndarray


def draw(sc: Scenario, truth: Truth, n_draws: int, seed: int = 0) -> Draws:
    """Add drift, background, noise, spikes, rounding and the ceiling to ``n_draws`` copies of ``truth``."""
    rng = np.random.default_rng(seed)
    t = sc.time
    n_c = sc.s0.size
    drift = sc.drift * rng.uniform(0.0, 2.0, (n_draws, 1, 1)) * (1.0 - np.exp(-t / 300.0))
    level = sc.base + sc.sub_abs * sc.s0[None, :, None] + sc.background * sc.s0[None, :, None] * t + drift
    sample = level + sc.spc * truth.product[None] + sc.noise * rng.standard_normal((n_draws, n_c, t.size))
    blank = level[:, :, None, :] + sc.noise * rng.standard_normal((n_draws, n_c, sc.n_blanks, t.size))
    if sc.spikes:  # one spike per sample well: 10-60 reads of noise, either sign, at a random inner read
        where = rng.integers(2, t.size - 2, (n_draws, n_c))
        size = sc.noise * rng.uniform(10.0, 60.0, (n_draws, n_c)) * rng.choice([-1.0, 1.0], (n_draws, n_c))
        np.put_along_axis(sample, where[..., None],
                          np.take_along_axis(sample, where[..., None], axis=2) + size[..., None], axis=2)

    def read(x: np.ndarray) -> np.ndarray:
        x = np.round(x / sc.resolution) * sc.resolution
        return np.where(x >= sc.ceiling, np.nan, x)

    return Draws(read(sample), read(blank))


def scenarios() -> list[Scenario]:
    """The eight kinds of plate of the benchmark (docs/rates.md, section "Accuracy on realistic plates")."""
    levels = np.array([0.05, 0.1, 0.2, 0.35, 0.5, 0.75, 1.0, 2.0, 3.0, 5.0])
    mm = {"vmax": 6e-4, "km": 0.5}
    s_m = np.array([0.05, 0.1, 0.25, 0.5, 1.0, 2.5])
    i_m = np.array([0.0, 0.05, 0.15, 0.5])
    return [
        Scenario("mm", "Michaelis–Menten, S0 0.1-10 Km, 10-66 % conversion in 15 min", levels, "mm", mm),
        Scenario("low-signal", "Michaelis–Menten with low substrate levels (total change 0.015-0.07 AU), "
                 "up to 80 % conversion, noise 0.003 AU",
                 np.array([0.005, 0.01, 0.02, 0.05, 0.1, 0.2, 0.5, 1.0, 2.0]), "mm",
                 {"vmax": 9e-4, "km": 0.5}, noise=0.003),
        Scenario("hill", "Hill, h = 2.5, K0.5 = 0.3 mM", np.array([0.05, 0.1, 0.15, 0.2, 0.3, 0.4, 0.6, 1.0, 1.5]),
                 "hill", {"vmax": 4e-4, "km": 0.3, "h": 2.5}, fit_names=("vmax", "km", "h")),
        Scenario("substrate-inhibition", "substrate inhibition Ki = 3 mM, strongly absorbing substrate (late "
                 "saturation at the top levels)",
                 np.array([0.05, 0.1, 0.2, 0.4, 0.8, 1.5, 3.0, 6.0, 12.0, 20.0]), "si",
                 {"vmax": 8e-4, "km": 0.3, "ki": 3.0}, sub_abs=0.13, ceiling=2.8, fit_names=("vmax", "km", "ki")),
        Scenario("inhibitor-matrix", "competitive inhibitor, Ki = 0.05 mM, I = 0-10 Ki (high-inhibitor wells "
                 "at low signal)", np.tile(s_m, i_m.size), "competitive", {"vmax": 5e-4, "km": 0.5, "ki": 0.05},
                 inhibitor=np.repeat(i_m, s_m.size), fit_names=("vmax", "km", "ki")),
        Scenario("falling", "falling signal (chromogenic substrate consumed), top level above the ceiling "
                 "at the start: its blanks are saturated throughout",
                 np.array([0.1, 0.2, 0.35, 0.5, 0.75, 1.0, 2.0, 3.0, 4.0, 5.0]), "mm", mm, spc=-0.6, sub_abs=0.6,
                 base=0.1, ceiling=3.0),
        Scenario("lag-decay", "Michaelis–Menten with a 60-s hysteretic lag (6 read intervals) and irreversible "
                 "first-order inactivation (k = 8e-4 /s)", levels, "mm", mm, lag_tau=60.0, k_inact=8e-4),
        Scenario("spikes-saturation", "Michaelis–Menten, one single-read spike per well, top levels reach "
                 "the ceiling late", levels, "mm", {"vmax": 1.2e-3, "km": 0.5}, ceiling=2.5, spikes=True),
    ]
