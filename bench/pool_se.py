"""Standard errors of model-choice's step-9 wells on the benchmark's Hill and substrate-inhibition plates.

Run on demand (not a test): ``python -m bench.pool_se [--draws N] [--seed S] [--only hill,...]``. Each draw is
one plate of :mod:`bench.plates` (drift, blanks, rounding, ceiling), blank-corrected as
:func:`bench.accuracy.evaluate` does, and the default rates method runs once per plate (one pool). Printed
per substrate level, on the wells that took the plate's shape (model 6 Hill, 7 substrate inhibition): the
wells, mean of z = (v0 - true)/SE, the SE ratio 1/SD(z) (1 when calibrated), RMS SE over SD of v0 and the
share of wells whose v0 ± 1.96 SE holds the true v0. The slow test
``tests/plugins/rates/test_pool_se_calibration.py`` checks the same on plates without the reader's extras
(docs/rates.md, "Step 9 of `model-choice`"). Invented plates for benchmarking only.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402

import numpy as np  # noqa: E402
from vzero.plugins.rates.choice import model_choice  # noqa: E402
from vzero.plugins.rates.poolshape import POOLED_CODES  # noqa: E402

from bench.accuracy import blank_corrected  # noqa: E402
from bench.plates import draw, integrate, scenarios  # noqa: E402

#: Benchmark scenario -> the shape family its plate takes.
FAMILY = {"hill": "hill", "substrate-inhibition": "substrate-inhibition"}


def pool_se_table(name: str, n_draws: int, seed: int) -> str:
    """Markdown rows, one per substrate level of scenario ``name``."""
    sc = next(s for s in scenarios() if s.name == name)
    truth = integrate(sc)
    d = draw(sc, truth, n_draws, seed=seed)
    y = blank_corrected(sc, d.sample, d.blank)
    res = [model_choice(sc.time, y[k], s0=sc.s0, signal_per_conc=sc.spc) for k in range(n_draws)]
    v0, se = np.stack([r.v0 for r in res]), np.stack([r.stderr for r in res])
    took = np.stack([r.extra["model"] for r in res]) == POOLED_CODES[FAMILY[name]]
    lines = []
    for i in range(sc.s0.size):
        m = took[:, i]
        if m.sum() < 3:
            lines.append(f"| {name} | {sc.s0[i]:g} | {int(m.sum())} | – | – | – | – |")
            continue
        z = (v0[m, i] - truth.v0[i]) / se[m, i]
        rms = np.sqrt(np.mean(se[m, i] ** 2)) / np.std(v0[m, i], ddof=1)
        lines.append(f"| {name} | {sc.s0[i]:g} | {int(m.sum())} | {np.mean(z):+.2f} | {1.0 / np.std(z, ddof=1):.2f} | "
                     f"{rms:.2f} | {np.mean(np.abs(z) <= 1.96):.3f} |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=300, help="plates per scenario")
    ap.add_argument("--seed", type=int, default=3, help="seed of the noise draws")
    ap.add_argument("--only", default=",".join(FAMILY), help="comma-separated scenario names")
    args = ap.parse_args(argv)
    names = [n for n in args.only.split(",") if n]
    unknown = sorted(set(names) - set(FAMILY))
    if unknown:
        ap.error(f"no step-9 scenario {', '.join(unknown)}: choose from {', '.join(FAMILY)}")
    print(f"{args.draws} draws, seed {args.seed} (`python -m bench.pool_se --draws {args.draws} --seed {args.seed}`)\n")
    print("| scenario | S0 (mM) | wells | mean z | SE ratio (z) | RMS SE / SD | 95 % coverage |")
    print("|---|---|---|---|---|---|---|")
    for name in names:
        print(pool_se_table(name, args.draws, args.seed), flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
