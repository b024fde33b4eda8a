"""Which rates method serves the demo plate best: ``python -m bench.demo_choice [--sims N]``.

The invented demo plate (plugins/demo/simulate.py: an ODE-integrated Hill enzyme, h 2.4, K0.5 150 µM, and
a Michaelis–Menten variant, K 220 µM) is simulated ``N`` times with fresh read noise; each copy runs through
the demo recipe (without its report step) once with the recipe's fixed 0–90 s window and once with the
default rates method (``model-choice``), the fit step's defaults otherwise. ``--quiet-blanks`` takes the
read noise off the substrate blanks (row G), to measure what their noise, shared by each level's three
replicates, costs the intervals. Printed per method and
parameter: median error, root-mean-square error over the simulations, and the share of simulations whose
95 % interval holds the truth. Run on demand (not a test); invented data, research use.
"""

from __future__ import annotations

import argparse
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import yaml
from vzero.plugins.demo import RECIPE
from vzero.plugins.demo.simulate import TRUTH, layout, simulate
from vzero.run.runner import run

#: The rates steps compared: the demo recipe's own and the default method with what it needs to know.
RATES = {
    "window 0-90 s": {"method": "window", "start": "0 s", "end": "90 s"},
    "model-choice (default)": {"method": "model-choice", "epsilon": "6220 M^-1 cm^-1", "pathlength": "0.55 cm"},
}
#: (group, model, parameter, true value): what is scored.
SCORED = [(TRUTH[0].group, "hill", "h", TRUTH[0].hill), (TRUTH[0].group, "hill", "K0.5", TRUTH[0].k_half_um),
          (TRUTH[0].group, "hill", "Vmax", TRUTH[0].vmax_um_per_min),
          (TRUTH[1].group, "michaelis-menten", "Km", TRUTH[1].k_half_um),
          (TRUTH[1].group, "michaelis-menten", "Vmax", TRUTH[1].vmax_um_per_min)]


def _recipe(rates: dict, fit: dict | None = None) -> str:
    data = yaml.safe_load(RECIPE.read_text("utf-8"))
    steps = [s for s in data["steps"] if "report" not in s]
    for s in steps:
        if "rates" in s:
            s["rates"] = dict(rates)
        if "fit" in s and fit:
            s["fit"] = {**s["fit"], **fit}
    data["steps"] = steps
    return yaml.safe_dump(data, sort_keys=False)


def quiet_blanks(seed: int) -> pd.DataFrame:
    """The demo plate of ``seed`` with its substrate-blank wells (row G) free of read noise: what the shared
    blank's noise costs the intervals (each level's one blank is subtracted from its three replicates)."""
    import vzero.plugins.demo.simulate as sim

    table = simulate(seed)
    noise = sim.READ_NOISE_AU
    sim.READ_NOISE_AU = 0.0
    try:
        clean = simulate(seed)
    finally:
        sim.READ_NOISE_AU = noise
    blanks = [f"G{c}" for c in range(1, 13)]
    table[blanks] = clean[blanks]
    return table


def one(folder: Path, seed: int, rates: dict, quiet: bool = False,
        fit: dict | None = None) -> dict[tuple[str, str, str], tuple[float, float, float]]:
    """(group, model, parameter) -> (estimate, ci_low, ci_high) of one simulated plate (``quiet``: blanks
    without read noise, :func:`quiet_blanks`; ``fit``: fit-step settings over the recipe's)."""
    folder.mkdir(parents=True, exist_ok=True)
    (quiet_blanks(seed) if quiet else simulate(seed)).to_csv(folder / "demo_plate.csv", index=False)
    layout().to_csv(folder / "demo_layout.csv", index=False)
    (folder / "demo.yaml").write_text(_recipe(rates, fit), "utf-8")
    fits = run(folder / "demo.yaml", folder / "run", force=True).fits
    out = {}
    for group, model, param, _ in SCORED:
        row = fits[(fits["group"] == group) & (fits["model"] == model) & (fits["parameter"] == param)]
        if len(row):
            r = row.iloc[0]
            out[(group, model, param)] = (float(r["estimate"]), float(r["ci_low"]), float(r["ci_high"]))
    return out


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sims", type=int, default=40, help="simulated plates (default 40)")
    ap.add_argument("--quiet-blanks", action="store_true",
                    help="substrate blanks (row G) without read noise: what their shared noise costs")
    ap.add_argument("--rate-error-share", type=float, default=None,
                    help="the fit's rate_error_share (default: the recipe's, 1 %%; the simulated plate has no "
                         "pipetting error, which that share stands for)")
    args = ap.parse_args(argv)
    fit = None if args.rate_error_share is None else {"rate_error_share": args.rate_error_share}
    results: dict[str, list] = {name: [] for name in RATES}
    with tempfile.TemporaryDirectory() as tmp:
        for seed in range(100, 100 + args.sims):
            for name, rates in RATES.items():
                results[name].append(one(Path(tmp) / f"{seed}-{len(results[name])}-{name[:5]}", seed, rates,
                                         args.quiet_blanks, fit))
    what = " with noise-free substrate blanks" if args.quiet_blanks else ""
    what += f", fit rate_error_share {args.rate_error_share}" if fit else ""
    print(f"{args.sims} simulations of the demo plate{what} (seeds 100-{99 + args.sims}); error in % of the truth\n")
    print("| rates | group | parameter | median error | RMSE | 95 % interval holds the truth |")
    print("| --- | --- | --- | --- | --- | --- |")
    for name, runs in results.items():
        for group, model, param, true in SCORED:
            got = np.array([r.get((group, model, param), (np.nan,) * 3) for r in runs])
            err = 100 * (got[:, 0] / true - 1)
            cover = np.mean((got[:, 1] <= true) & (true <= got[:, 2]))
            print(f"| {name} | {group} | {param} | {np.nanmedian(err):+.1f} | {np.sqrt(np.nanmean(err**2)):.1f} "
                  f"| {100 * cover:.0f} % |")


if __name__ == "__main__":
    main()
