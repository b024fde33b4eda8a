"""Benchmark: fitting many groups at once vs a per-group scipy ``curve_fit`` loop.

Run on demand (never part of the tests):  python bench/fit_bench.py [n_groups] [n_points]

Simulates invented Michaelis-Menten and Hill data (noise SD 2 % of Vmax), then times

* a per-group ``scipy.optimize.curve_fit`` loop (default settings, finite-difference Jacobian): the baseline;
* :func:`vzero.plugins.fit.engine.fit_batch` (vectorised Levenberg-Marquardt over groups, analytic Jacobian,
  tolerances 1e-13 relative);
* a per-group :func:`vzero.plugins.fit.engine.fit` loop (scipy least_squares, tolerances 1e-15);
* the extra cost of profile-likelihood intervals for the asymmetric parameters
  (:func:`vzero.plugins.fit.engine.profile_batch`, all groups at once);
* the whole fit stage (Michaelis-Menten and Hill, profiles on: the default) on a plate of 30 groups.

Prints seconds, the speed ratio batch / curve_fit, and the largest relative difference between the batch and
curve_fit estimates.
"""

from __future__ import annotations

import sys
import time

import numpy as np
from scipy.optimize import curve_fit
from vzero.plugins.fit import engine
from vzero.plugins.fit.catalog import BY_NAME


def simulate(model: str, truth: list[float], n_groups: int, n_points: int, seed: int = 1):
    rng = np.random.default_rng(seed)
    levels = np.geomspace(0.5, 100, n_points // 3)
    s = np.tile(np.repeat(levels, 3), (n_groups, 1))
    scale = rng.uniform(0.7, 1.3, (n_groups, 1))
    p = [np.asarray(t) * scale if k < 2 else np.asarray(t) for k, t in enumerate(truth)]
    y = BY_NAME[model].evaluate(p, {"substrate": s})
    return s, y + 0.02 * truth[0] * rng.standard_normal(y.shape)


def best_of(fn, repeat: int = 5) -> tuple[float, object]:
    """Shortest wall time of ``repeat`` calls (the machine is shared) and the last result."""
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), out


def bench(model_name: str, truth: list[float], n_groups: int, n_points: int) -> None:
    m = BY_NAME[model_name]
    s, y = simulate(model_name, truth, n_groups, n_points)
    p0 = np.array([m.start({"substrate": s[g]}, y[g]) for g in range(n_groups)])

    def f(x, *p):
        return m.evaluate(list(p), {"substrate": x})

    t_cf, ref = best_of(lambda: np.array([curve_fit(f, s[g], y[g], p0=p0[g])[0] for g in range(n_groups)]))
    t_batch, batch = best_of(lambda: engine.fit_batch(m.evaluate, m.jacobian, {"substrate": s}, y,
                                                      np.ones_like(y, bool), p0, m.params, bounds=m.bounds))
    t_single, single = best_of(lambda: [engine.fit(m.evaluate, m.jacobian, {"substrate": s[g]}, y[g], p0[g],
                                                   m.params, bounds=m.bounds) for g in range(n_groups)], 1)

    def profiles() -> list[list[tuple[float, float, str]]]:
        return [engine.profile_batch(m.evaluate, m.jacobian, {"substrate": s}, y, np.ones_like(y, bool), batch,
                                     name, bounds=m.bounds) for name in m.profile]

    t_prof, limits = best_of(profiles, 3)
    n_capped = sum("approximate" in note or "open" in note for per in limits for _, _, note in per)

    est = np.array([r.values for r in batch])
    diff = np.max(np.abs(est - ref) / np.abs(ref))
    agree = np.max(np.abs(est - np.array([r.values for r in single])) / np.abs(est))
    n_fallback = sum(not r.message.startswith("converged (batched") for r in batch)
    print(f"{model_name}: {n_groups} groups x {n_points} points")
    print(f"  curve_fit loop      {t_cf:8.4f} s   (best of 5)")
    print(f"  fit_batch           {t_batch:8.4f} s   ratio batch/curve_fit = {t_batch / t_cf:.3f}"
          f"   ({n_fallback} groups refitted singly)")
    print(f"  engine.fit loop     {t_single:8.4f} s   ratio = {t_single / t_cf:.3f}")
    print(f"  profile intervals   {t_prof:8.4f} s   (+{t_prof / t_batch:.1f}x the batch fit; "
          f"{len(m.profile)} parameter(s) per group, batched over groups; {n_capped} sides open or capped)")
    print(f"  max rel. difference batch vs curve_fit {diff:.2e}; batch vs single {agree:.2e}")


def bench_stage(n_groups: int = 30) -> None:
    """The fit stage as a recipe runs it by default (Michaelis-Menten and Hill, profile intervals on)."""
    import pandas as pd
    from vzero.data import Table
    from vzero.plugins.fit.run import run_fit
    from vzero.stage import StageInput

    s, y = simulate("hill", [10.0, 5.0, 1.5], n_groups, 24)
    frame = pd.DataFrame({"group": np.repeat([f"g{k}" for k in range(n_groups)], s.shape[1]),
                          "substrate": s.ravel(), "rate": y.ravel(), "role": "sample"})
    units = {"rate": "uM/min", "substrate": "uM"}

    def run(profile: bool) -> object:
        data = StageInput({"rates": Table(frame, units)}, None, {}, {}, None, lambda _: None)
        return run_fit({"profile": profile, "enzyme": False}, data)

    t_off, _ = best_of(lambda: run(False), 3)
    t_on, _ = best_of(lambda: run(True), 3)
    print(f"fit stage, {n_groups} groups x 24 points, models michaelis-menten + hill")
    print(f"  profile: false      {t_off:8.4f} s")
    print(f"  profile: true       {t_on:8.4f} s   (the default)")


def main(argv: list[str]) -> int:
    n_groups = int(argv[0]) if argv else 100
    n_points = int(argv[1]) if len(argv) > 1 else 24
    bench("michaelis-menten", [10.0, 5.0], n_groups, n_points)
    bench("hill", [10.0, 5.0, 2.0], n_groups, n_points)
    bench_stage()
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
