"""Lag times and rates on the lag plate with other lag times: does the default recover the lag and v0?

Run on demand (not a test): ``python -m bench.lag_times [--draws N] [--lags 30,60,120,240]``. Each plate is the
benchmark's ``lag-decay`` scenario (:mod:`bench.plates`: Michaelis–Menten, hysteretic lag, irreversible
first-order loss of the active enzyme at 8e-4 /s, 10-s reads) with the lag time replaced; the default rates
method runs once per plate, as the rates stage runs it. Printed per lag time and substrate level: the share
of wells whose ``lag_s`` is set (a lag seen by the detector or carried from the plate's other wells), the
median fitted lag over the true one, the median and 95th percentile of |v0/true - 1| and the RMSE ratio to
the reference analysis. Invented plates for benchmarking only.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import dataclasses  # noqa: E402

import numpy as np  # noqa: E402
from vzero.plugins.rates.choice import model_choice  # noqa: E402

from bench.accuracy import blank_corrected  # noqa: E402
from bench.plates import draw, integrate, scenarios  # noqa: E402
from bench.reference import reference_rates  # noqa: E402


def lag_table(lag_s: float, n_draws: int, seed: int = 5) -> str:
    """Markdown rows for one lag time (s)."""
    base = next(s for s in scenarios() if s.name == "lag-decay")
    sc = dataclasses.replace(base, lag_tau=lag_s)
    truth = integrate(sc)
    d = draw(sc, truth, n_draws, seed=seed)
    t, n_c = sc.time, sc.s0.size
    y = blank_corrected(sc, d.sample, d.blank)
    res = [model_choice(t, y[k], s0=sc.s0, signal_per_conc=sc.spc) for k in range(n_draws)]
    v0 = np.stack([r.v0 for r in res])
    lag = np.stack([r.lag_s for r in res])
    ref = np.stack([reference_rates(t, d.sample[k], d.blank[k], sc.s0, sc.inh, sc.spc) for k in range(n_draws)])
    err, ref_err = v0 / truth.v0 - 1.0, ref / truth.v0 - 1.0
    lines = []
    for i in range(n_c):
        seen = lag[:, i] > 0
        ratio = np.nanmedian(lag[seen, i]) / lag_s if seen.any() else np.nan
        e = np.abs(np.where(np.isfinite(err[:, i]), err[:, i], np.inf))
        rmse = np.sqrt(np.nanmean(err[:, i] ** 2)) / np.sqrt(np.nanmean(ref_err[:, i] ** 2))
        lines.append(f"| {lag_s:g} s ({lag_s / sc.dt:g}) | {sc.s0[i]:g} | {100 * seen.mean():.0f} % | {ratio:.3f} | "
                     f"{100 * np.median(e):.1f} / {100 * np.percentile(e, 95):.1f} | {rmse:.2f} |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=40, help="noise draws per lag time")
    ap.add_argument("--lags", default="30,60,120,240", help="comma-separated lag times, s")
    args = ap.parse_args(argv)
    print(f"{args.draws} draws per lag time (`python -m bench.lag_times --draws {args.draws}`)\n")
    print("| lag (read intervals) | S0 (mM) | lag found | fitted / true lag (median) | v0 |error| % median / p95 "
          "| RMSE ratio to the reference |")
    print("| --- | --- | --- | --- | --- | --- |")
    for lag in (float(x) for x in args.lags.split(",")):
        print(lag_table(lag, args.draws), flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
