"""Benchmark: global progress-curve fitting (``fit: {method: curves}``), speed and accuracy.

Run on demand (never part of the tests):  python -m bench.curves_bench [--draws N] [--quick]

Speed: a 384-well plate, 24 groups of 16 wells x 120 reads, fitted with Michaelis-Menten, Hill and
substrate inhibition by :func:`vzero.plugins.fit.curves.fit.fit_groups` (all groups at once), against

* the peer: per group, scipy ``least_squares`` over ``solve_ivp`` (RK45, rtol 1e-8; 16 wells as one ODE
  system; shared parameters plus one baseline per well; finite-difference Jacobian), the loop a lab would
  write, started where the curve fit starts (the rate law fitted to the initial rates); timed on
  ``PEER_GROUPS`` groups per model and scaled to 24 (said so in the output). It computes no intervals, so it
  is compared both with the fit alone and with the fit plus its profile intervals (the default);
* the two-step route: a per-well initial rate (quadratic through the first 3 minutes) then the batched rate
  fit (:func:`vzero.plugins.fit.engine.fit_batch`).

Accuracy: invented scenarios on simulated plates (scipy ``solve_ivp`` Radau curves; absorbance through
ε = 6220 /M/cm and 0.55 cm; read noise; a drift shared by all wells and measured by 8 blank wells that are
subtracted; readings rounded to 0.001 AU), many noise draws each, RMSE of each parameter relative to its
truth, two-step against curves.
"""

from __future__ import annotations

import argparse
import functools
import time
from dataclasses import dataclass

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import least_squares
from vzero.plugins.fit import engine
from vzero.plugins.fit.catalog import BY_NAME
from vzero.plugins.fit.curves.curve import Wells
from vzero.plugins.fit.curves.fit import CurveGroup, fit_groups
from vzero.plugins.fit.curves.start import from_rates

AU_PER_UM = 6220.0 * 1e-6 * 0.55  # ε·l: absorbance per µM of product (NADH at 340 nm, 0.55 cm)
T = np.arange(120) * 10.0  # s
PEER_GROUPS = 2
CLOCK = time.process_time
"""CPU seconds of this process (one BLAS thread): on a machine shared with other work, wall time measures the
neighbours as much as the code, CPU time much less so. Wall times are printed beside for reference."""


@dataclass(frozen=True)
class Scenario:
    name: str
    model: str
    truth: tuple[float, ...]
    s0: np.ndarray
    inhibitor: np.ndarray
    noise_au: float
    note: str


def _levels(n: int, lo: float, hi: float) -> np.ndarray:
    return np.repeat(np.geomspace(lo, hi, n // 2), 2)


SCENARIOS = [
    Scenario("Michaelis-Menten, good signal", "michaelis-menten", (10.0, 50.0), _levels(16, 5, 500), np.zeros(16),
             0.002, "Vmax 10 uM/min, Km 50 uM, 8 levels x 2"),
    Scenario("low-signal wells", "michaelis-menten", (1.0, 50.0), _levels(16, 5, 500), np.zeros(16), 0.003,
             "Vmax 1 uM/min: total change of the lowest wells a few times the noise"),
    Scenario("substrate inhibition", "substrate-inhibition", (10.0, 20.0, 100.0), _levels(16, 5, 1000),
             np.zeros(16), 0.002, "Km 20 uM, Ksi 100 uM"),
    Scenario("Hill, h = 2.2", "hill", (10.0, 50.0, 2.2), _levels(16, 5, 500), np.zeros(16), 0.002,
             "K0.5 50 uM, strong cooperativity: the rate falls steeply as substrate is used"),
    Scenario("inhibitor matrix (competitive)", "competitive", (10.0, 50.0, 5.0),
             np.tile([20.0, 50.0, 150.0, 400.0], 4), np.repeat([0.0, 3.0, 10.0, 30.0], 4), 0.002,
             "4 substrate x 4 inhibitor levels, Kic 5 uM"),
]


@functools.cache
def _product(name: str) -> np.ndarray:
    """Noise-free product [16, 120] (µM) of the scenario ``name`` by solve_ivp (Radau, rtol 1e-10): the same
    for every draw, so integrated once."""
    sc = next(c for c in SCENARIOS if c.name == name)
    m = BY_NAME[sc.model]
    prod = np.empty((len(sc.s0), T.size))
    for i, (s0, inh) in enumerate(zip(sc.s0, sc.inhibitor, strict=True)):
        def rhs(_t: float, y: np.ndarray, s0: float = s0, inh: float = inh) -> list[float]:
            s = np.array([max(s0 - y[0], 0.0)])
            return [float(m.evaluate(list(sc.truth), {"substrate": s, "inhibitor": np.array([inh])})[0]) / 60]

        prod[i] = solve_ivp(rhs, (0, T[-1]), [0.0], method="Radau", rtol=1e-10, atol=1e-12, t_eval=T).y[0]
    return prod


def simulate(sc: Scenario, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Blank-subtracted absorbance [16, 120] and its conversion to µM, from solve_ivp (Radau) curves."""
    prod = _product(sc.name)
    drift = 2e-5 * T + 0.01 * np.sin(T / 300)
    offset = rng.uniform(0.03, 0.08, (len(sc.s0), 1))
    reads = np.round(offset + prod * AU_PER_UM + drift + sc.noise_au * rng.standard_normal(prod.shape), 3)
    blanks = np.round(0.05 + drift + sc.noise_au * rng.standard_normal((8, T.size)), 3)
    signal = reads - blanks.mean(axis=0)
    return signal, signal / AU_PER_UM


def _initial_rates(conc: np.ndarray, minutes: float = 5.0, degree: int = 2) -> np.ndarray:
    """Two-step route, step one: slope at t = 0 of a polynomial (``degree`` 1: a straight line; 2: curvature
    allowed) through the first ``minutes`` of reads (µM/min)."""
    k = T <= minutes * 60
    a = np.stack([T[k] ** d for d in range(degree + 1)], axis=1)
    coef, *_ = np.linalg.lstsq(a, conc[:, k].T, rcond=None)
    return coef[1] * 60


TWO_STEP = {"line 0-3 min": (3.0, 1), "quadratic 0-5 min": (5.0, 2)}
"""The two-step variants compared: a straight line through the first 3 minutes (biased low where the curve
bends), and a quadratic through the first 5 minutes (curvature-aware, noisier)."""


def group_of(sc: Scenario, conc: np.ndarray, rates: np.ndarray, name: str) -> CurveGroup:
    n = len(sc.s0)
    wells = Wells(sc.s0, sc.inhibitor, np.ones(n), np.tile(T, (n, 1)), np.full(n, 1 / 60))
    return CurveGroup(name, wells, conc, np.ones(conc.shape, bool), rates, [("P1", f"W{k}") for k in range(n)])


def accuracy(draws: int, seed: int = 11, only: list[str] | None = None) -> list[str]:
    lines = ["| scenario | parameter | truth | " + " | ".join(f"RMSE two-step, {k} (%)" for k in TWO_STEP)
             + " | RMSE curves (%) | best two-step / curves |", "|---|---|---|---|---|---|---|"]
    for sc in [c for c in SCENARIOS if not only or c.name in only]:
        rng = np.random.default_rng(seed)
        m = BY_NAME[sc.model]
        groups, concs = [], []
        for d in range(draws):
            _, conc = simulate(sc, rng)
            concs.append(conc)
            groups.append(group_of(sc, conc, _initial_rates(conc), f"d{d}"))
        xs = {"substrate": np.tile(sc.s0, (draws, 1)), "inhibitor": np.tile(sc.inhibitor, (draws, 1))}
        two = {}
        for label, (minutes, degree) in TWO_STEP.items():
            ys = np.array([_initial_rates(c, minutes, degree) for c in concs])
            p0 = np.array([m.start({k: v[0] for k, v in xs.items() if k in m.variables}, y) for y in ys])
            two[label] = np.array([r.values for r in engine.fit_batch(
                m.evaluate, m.jacobian, {k: xs[k] for k in m.variables}, ys, np.ones(ys.shape, bool), p0, m.params,
                bounds=m.bounds)])
        cur = np.array([c.result.values for c in fit_groups(m, groups, profile=False)])
        for j, name in enumerate(m.params):
            true = sc.truth[j]
            r2 = [100 * np.sqrt(np.nanmean((v[:, j] / true - 1) ** 2)) for v in two.values()]
            rc = 100 * np.sqrt(np.nanmean((cur[:, j] / true - 1) ** 2))
            lines.append(f"| {sc.name} | {name} | {true:g} | " + " | ".join(f"{r:.3g}" for r in r2)
                         + f" | {rc:.3g} | {min(r2) / rc:.1f}x |")
        print("\n".join(lines[-len(m.params):]), flush=True)
    return lines


def _peer(model: str, group: CurveGroup) -> np.ndarray:
    """The peer: least_squares over solve_ivp for one group (kinetic parameters and baselines together),
    started where the curve fit starts (the rate law fitted to the group's initial rates)."""
    m = BY_NAME[model]
    s0, inh = group.wells.s0, group.wells.inhibitor
    n = len(s0)

    def curves(theta: np.ndarray) -> np.ndarray:
        def rhs(_t: float, p: np.ndarray) -> np.ndarray:
            return m.evaluate(list(theta), {"substrate": np.maximum(s0 - p, 0.0), "inhibitor": inh}) / 60

        return solve_ivp(rhs, (0, T[-1]), np.zeros(n), t_eval=T, rtol=1e-8, atol=1e-10).y

    k = len(m.params)

    def resid(q: np.ndarray) -> np.ndarray:
        return (curves(q[:k]) + q[k:, None] - group.y).ravel()

    guess = np.array([m.start({"substrate": s0}, group.rates)], float)
    lo = np.array([m.bounds.get(n, (-np.inf, np.inf))[0] for n in m.params])
    hi = np.array([m.bounds.get(n, (-np.inf, np.inf))[1] for n in m.params])
    start = from_rates(m, [group], np.clip(guess, lo, hi), np.ones(k, bool), lo, hi)[0]
    q0 = np.concatenate([start, group.y[:, 0]])
    return least_squares(resid, q0).x[:k]


def speed(seed: int = 5, peer_groups: int = PEER_GROUPS) -> list[str]:
    """CPU seconds for the 384-well plate: curve fit without and with profile intervals (the default), the
    peer loop (scaled from ``peer_groups`` groups to 24) and the two-step route's rate fits."""
    rng = np.random.default_rng(seed)
    lines = []
    tot = dict.fromkeys(("fit", "prof", "peer", "two"), 0.0)
    for sc in (SCENARIOS[0], SCENARIOS[3], SCENARIOS[2]):
        m = BY_NAME[sc.model]
        groups = []
        for g in range(24):
            _, conc = simulate(sc, rng)
            groups.append(group_of(sc, conc, _initial_rates(conc), f"g{g}"))
        w0, t0 = time.perf_counter(), CLOCK()
        fit_groups(m, groups, profile=False)
        t_vz, w_vz = CLOCK() - t0, time.perf_counter() - w0
        w0, t0 = time.perf_counter(), CLOCK()
        fit_groups(m, groups, profile=True)
        t_prof, w_prof = CLOCK() - t0, time.perf_counter() - w0
        t0 = CLOCK()
        for g in groups[:peer_groups]:
            _peer(sc.model, g)
        t_peer = (CLOCK() - t0) * 24 / peer_groups
        t0 = CLOCK()
        ys = np.array([_initial_rates(g.y) for g in groups])
        xs = {"substrate": np.tile(sc.s0, (24, 1))}
        p0 = np.array([m.start({"substrate": sc.s0}, y) for y in ys])
        engine.fit_batch(m.evaluate, m.jacobian, xs, ys, np.ones(ys.shape, bool), p0, m.params, bounds=m.bounds)
        t_two = CLOCK() - t0
        for key, val in zip(tot, (t_vz, t_prof, t_peer, t_two), strict=True):
            tot[key] += val
        lines.append(f"| {sc.model} | {t_vz:.3f} (wall {w_vz:.3f}) | {t_prof:.3f} (wall {w_prof:.3f}) | {t_peer:.1f} "
                     f"| {t_peer / t_vz:.0f}x | {t_peer / t_prof:.0f}x | {t_two:.3f} |")
        print(lines[-1], flush=True)
    lines.append(f"| all three | {tot['fit']:.3f} | {tot['prof']:.3f} | {tot['peer']:.1f} "
                 f"| {tot['peer'] / tot['fit']:.0f}x | {tot['peer'] / tot['prof']:.0f}x | {tot['two']:.3f} |")
    head = ["| model (24 groups x 16 wells x 120 reads), CPU s | curves, no intervals | curves with profile intervals "
            f"(default) | peer (scaled from {peer_groups} groups) | peer / curves | peer / curves with profiles "
            "| two-step (rate fits only) |", "|---|---|---|---|---|---|---|"]
    return head + lines


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=50, help="noise draws per accuracy scenario")
    ap.add_argument("--skip-speed", action="store_true")
    ap.add_argument("--peer-groups", type=int, default=PEER_GROUPS, help="groups the peer loop is timed on")
    ap.add_argument("--skip-accuracy", action="store_true")
    ap.add_argument("--only", default=None, help="accuracy scenarios to run, separated by ';'")
    args = ap.parse_args(argv)
    if not args.skip_speed:
        print("\n".join(speed(peer_groups=args.peer_groups)))
    if not args.skip_accuracy:
        print("\n".join(accuracy(args.draws, only=args.only.split(";") if args.only else None)))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
