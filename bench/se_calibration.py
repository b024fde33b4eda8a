"""Measure the factor table of :data:`vzero.plugins.rates.shapegrid.BEND_KNOTS` (run on demand, not a test).

``python -m bench.se_calibration [--wells N] [--seed K]`` simulates replicate wells on a calibration grid of
invented Michaelis–Menten progress curves (the rate law integrated numerically by
:func:`vzero.plugins.kinetics.simulate.simulate_plate`, never the closed forms the fit uses), fits each
without S0 (:func:`vzero.plugins.rates.progress.progress_curve`, in signal units), and records per well the
bend statistic ``z`` (:func:`vzero.plugins.rates.shapegrid.profile_bend`), the profile's standard error of
v0 before the factor, and the error of v0 against the truth. In bins of ``z`` it prints how large the
standard error should have been: ``f = q95(|v0 - truth|/SE)/1.96`` (the factor that makes the 95 % interval
hold the truth 95 % of the time in the bin), the RMS of the standardised error beside it, and the knots
made monotone (non-decreasing in ``z``: ``scipy.optimize.isotonic_regression``, weighted by each bin's
share), at most 1, and 1 at the last bin (z >= 4), where the curve clearly bends.

The grid is not the conditions of tests/plugins/rates/test_se_calibration.py, which stay held out for the
validation: S0/Km in {0.5, 2, 5, 20, 50}, fraction of substrate converted by the last read in {1, 3, 5, 8,
12, 20 %}, signal change by the last read 0.08 or 0.4 (read noise 0.002, so two signal-to-noise levels),
40 reads every 15 s or 90 reads every 5 s, one seed per condition from ``--seed`` on. The conditions are
weighted so that each unit bin of a condition's own bend (the median z over its wells, up to
:data:`TRUE_BEND_MAX`, and one bin beyond) weighs the same, and the conditions within a bin equally: a
flat prior over how clearly a curve bends. The factor rests on that prior (a straight-looking well may
have its true curvature on the bound or a few SE from it, and no statistic of one well tells them apart);
counting every condition equally, most of them nearly straight, gave a factor of 0.5 below z = 0.5 that
made moderately curving wells' intervals too short (docs/rates.md, "Do the standard errors mean what they
say?"). Invented data only.
"""

from __future__ import annotations

import argparse
import itertools
from unittest import mock

import numpy as np
from scipy.optimize import brentq, isotonic_regression
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates import progress
from vzero.plugins.rates.shapegrid import BEND_KNOTS, bend_factor, profile_bend

S0_OVER_KM = (0.5, 2.0, 5.0, 20.0, 50.0)
FRACTIONS = (0.01, 0.03, 0.05, 0.08, 0.12, 0.20)
CHANGES = (0.08, 0.4)  # signal change by the last read (absorbance units)
READS = ((40, 15.0), (90, 5.0))  # (reads, interval in s)
NOISE = 0.002
#: Bin edges of z; the last bin is open-ended and its factor set to 1.
#: Bins of a condition's own bend (floor of the median z) counted separately; those above, one bin.
TRUE_BEND_MAX = 8
EDGES = (-np.inf, -0.5, 0.0, 0.5, 1.0, 1.5, 2.0, 3.0, 4.0, np.inf)


def condition_wells(s0_km: float, fraction: float, change: float, reads: tuple[int, float], n_wells: int,
                    seed: int) -> tuple[np.ndarray, np.ndarray, float]:
    """Time (s), ``n_wells`` noisy replicate curves and the true v0 (signal/s) of one grid condition
    (Km = 1, baseline 0.1, signal per unit product chosen for the signal change by the last read)."""
    n, dt = reads
    t = np.arange(n) * dt
    s0, km = s0_km, 1.0
    vmax = brentq(lambda v: 1 - progress.integrated_mm(t[-1], s0, km, v) / s0 - fraction, 1e-12, 1e3)
    spc = change / (fraction * s0)
    sim = simulate_plate(t, np.array([s0]), km, vmax, signal_per_conc=spc, baseline=0.1)
    rng = np.random.default_rng(seed)
    return t, sim.signal + NOISE * rng.standard_normal((n_wells, t.size)), float(sim.v0_true[0])


def measure(t: np.ndarray, y: np.ndarray, truth: float) -> tuple[np.ndarray, np.ndarray]:
    """Per well: the bend statistic ``z`` and the standardised error ``(v0 - truth)/SE`` with the profile's
    SE before the factor (the reported SE divided by :func:`bend_factor` at ``z``). Every well here is
    usable, so the profile's rows are the wells."""
    seen: list[dict[str, np.ndarray]] = []
    real = progress.shape_profile

    def record(*args: object, **kwargs: object) -> dict[str, np.ndarray]:
        out = real(*args, **kwargs)  # type: ignore[arg-type]
        seen.append(out)
        return out

    with mock.patch.object(progress, "shape_profile", record):
        r = progress.progress_curve(t, y)
    z = profile_bend(seen[0]) if seen and seen[0]["rss"].shape[0] == y.shape[0] else np.full(y.shape[0], np.nan)
    se_raw = r.stderr / bend_factor(z)
    return z, (r.v0 - truth) / se_raw


def main() -> None:
    """Simulate the grid, print the per-bin table and the knots for :data:`BEND_KNOTS`."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--wells", type=int, default=400, help="replicate wells per grid condition")
    ap.add_argument("--seed", type=int, default=1000, help="first seed (one per condition)")
    ap.add_argument("--by-condition", action="store_true",
                    help="also judge every grid condition on its own (coverage and SE ratio, as the test does) with "
                         "the present knots and with the knots that do best in the worst condition")
    args = ap.parse_args()
    zs, es, weights = [], [], []
    grid = list(itertools.product(S0_OVER_KM, FRACTIONS, CHANGES, READS))
    for i, (s0_km, frac, change, reads) in enumerate(grid):
        t, y, truth = condition_wells(s0_km, frac, change, reads, args.wells, args.seed + i)
        z, e = measure(t, y, truth)
        ok = np.isfinite(z) & np.isfinite(e)
        zs.append(z[ok])
        es.append(e[ok])
    # the condition's own bend (the median of z over its wells, about z at the true curve), in unit bins up
    # to TRUE_BEND_MAX and one bin beyond: every bin weighs the same, and within a bin every condition
    true_bin = [min(int(np.floor(np.median(z))), TRUE_BEND_MAX) if z.size else -1 for z in zs]
    per_bin = {b: true_bin.count(b) for b in set(true_bin)}
    weights = [np.full(z.size, 1.0 / (per_bin[b] * max(z.size, 1))) for z, b in zip(zs, true_bin, strict=True)]
    z, e, w = np.concatenate(zs), np.concatenate(es), np.concatenate(weights)
    print("conditions per bin of their own bend:", dict(sorted(per_bin.items())))
    print(f"{len(grid)} conditions, {z.size} wells with a converged profile")
    print("| z bin | wells | median z | RMS(e/SE) | q95(|e|/SE)/1.96 |")
    print("|---|---|---|---|---|")
    centres, q95, rms, mass = [], [], [], []
    for lo, hi in itertools.pairwise(EDGES):
        m = (z >= lo) & (z < hi)
        if m.sum() < 50:
            continue
        order = np.argsort(np.abs(e[m]))
        cum = np.cumsum(w[m][order]) / w[m].sum()
        q = float(np.abs(e[m])[order][np.searchsorted(cum, 0.95)]) / 1.96
        r = float(np.sqrt(np.sum(w[m] * e[m] ** 2) / w[m].sum()))
        centres.append(float(np.median(z[m])))
        q95.append(q)
        rms.append(r)
        mass.append(float(w[m].sum()))
        print(f"| [{lo:g}, {hi:g}) | {int(m.sum())} | {centres[-1]:.2f} | {r:.2f} | {q:.2f} |")
    knots = isotonic_regression(np.array(q95[:-1]), weights=np.array(mass[:-1]), increasing=True).x
    knots = np.minimum(np.append(knots, 1.0), 1.0)
    print("BEND_KNOTS = (" + ", ".join(f"({c:.2f}, {f:.2f})" for c, f in zip(centres, knots, strict=True)) + ")")
    if args.by_condition:
        by_condition(zs, es)


#: Bands of a condition's own bend (median z over its wells) in the per-condition table.
BEND_BANDS = ((-np.inf, 0.5), (0.5, 1.5), (1.5, 3.0), (3.0, 6.0), (6.0, np.inf))


def condition_figures(zs: list[np.ndarray], es: list[np.ndarray], factors: np.ndarray) -> np.ndarray:
    """Per condition ``[median z, coverage, SE ratio]`` with the factor linear between the z of
    :data:`BEND_KNOTS` and ``factors`` there: coverage the share of ``|e|/f(z) <= 1.96``, SE ratio ``1/SD(e/f)``
    (the acceptance figures of tests/plugins/rates/test_se_calibration.py)."""
    zk = np.array([k[0] for k in BEND_KNOTS])
    rows = []
    for z, e in zip(zs, es, strict=True):
        s = e / np.interp(z, zk, factors)
        rows.append((float(np.median(z)), float(np.mean(np.abs(s) <= 1.96)), float(1.0 / np.std(s, ddof=1))))
    return np.array(rows)


def worst_miss(figures: np.ndarray) -> np.ndarray:
    """How far each condition is from the acceptance band, 1 on its edge: the larger of ``|coverage -
    0.95|/0.02`` and ``|ln(SE ratio)|/ln(1.25)``."""
    return np.maximum(np.abs(figures[:, 1] - 0.95) / 0.02, np.abs(np.log(figures[:, 2])) / np.log(1.25))


def by_condition(zs: list[np.ndarray], es: list[np.ndarray]) -> None:
    """Print, by band of the conditions' own bend, how many conditions meet the test's acceptance (coverage
    0.93-0.97 and SE ratio 0.8-1.25) with the present factor and with the factor at the same knots that
    minimises the worst condition's miss (a smooth maximum, Nelder-Mead from three starts). The second shows
    whether any factor of z alone could calibrate every condition: if it cannot, the limit is the bounded
    estimator's, not the table's."""
    from scipy.optimize import minimize

    keep = [i for i, z in enumerate(zs) if z.size >= 50]
    zs, es = [zs[i] for i in keep], [es[i] for i in keep]
    present = np.array([k[1] for k in BEND_KNOTS])

    def smooth_worst(p: np.ndarray) -> float:
        g = worst_miss(condition_figures(zs, es, np.clip(p, 0.3, 1.5)))
        return float(np.log(np.sum(np.exp(12.0 * g))) / 12.0)

    starts = (present, np.full(present.size, 0.8), np.linspace(0.6, 1.0, present.size))
    fits = [minimize(smooth_worst, x0, method="Nelder-Mead", options={"maxiter": 4000, "xatol": 1e-3, "fatol": 1e-4})
            for x0 in starts]
    best = np.clip(min(fits, key=lambda r: r.fun).x, 0.3, 1.5)
    for name, factors in (("present knots", present), ("best worst-case knots", best)):
        fig = condition_figures(zs, es, factors)
        print(f"\n{name}: " + ", ".join(f"{f:.2f}" for f in factors) + f"; worst miss {worst_miss(fig).max():.2f}")
        print("| median z of the condition | conditions | within both | coverage | SE ratio |")
        print("|---|---|---|---|---|")
        for lo, hi in BEND_BANDS:
            m = (fig[:, 0] >= lo) & (fig[:, 0] < hi)
            if not m.any():
                continue
            ok = (np.abs(fig[m, 1] - 0.95) <= 0.02) & (fig[m, 2] >= 0.8) & (fig[m, 2] <= 1.25)
            cov, ratio = fig[m, 1], fig[m, 2]
            print(f"| [{lo:g}, {hi:g}) | {int(m.sum())} | {int(ok.sum())} | {cov.min():.3f}-{cov.max():.3f} "
                  f"| {ratio.min():.2f}-{ratio.max():.2f} |")


if __name__ == "__main__":
    main()
