"""Check that a change meant only for speed leaves model-choice's results as they were.

Run on demand (not a test): ``python -m bench.choice_identity save FILE`` with one version of the code, then
``python -m bench.choice_identity compare FILE`` with the other. It runs
:func:`vzero.plugins.rates.choice.model_choice` on the plates of :mod:`bench.plates` (every scenario, one call
per simulated plate, blank-corrected as :func:`bench.accuracy.evaluate` does) and on the synthetic plates of
:mod:`bench.rates_bench` (96 x 60, 384 x 120, 1536 x 200; with and without the substrate per well), and keeps
every array of each :class:`vzero.plugins.kinetics.rate_result.RateResult` (``extra`` included). The
comparison reports, per array, the wells whose values differ beyond ``--rtol`` (NaN counts equal to NaN;
flags and read counts must match exactly). Invented plates only (simulated, see :mod:`bench.plates`).
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
from collections.abc import Iterator  # noqa: E402

import numpy as np  # noqa: E402
from vzero.plugins.kinetics.rate_result import RateResult  # noqa: E402
from vzero.plugins.rates.choice import model_choice  # noqa: E402

from bench.accuracy import blank_corrected  # noqa: E402
from bench.plates import draw, integrate, scenarios  # noqa: E402
from bench.rates_bench import SPC, make_plate  # noqa: E402

#: Arrays compared exactly (integers).
EXACT = ("flags", "n_points")


def plates(n_draws: int) -> Iterator[tuple[str, np.ndarray, np.ndarray, np.ndarray | None, float | None]]:
    """``(label, time, signal, s0, signal_per_conc)`` of every plate the check runs on."""
    for sc in scenarios():
        d = draw(sc, integrate(sc), n_draws, seed=1)
        n_c = sc.s0.size
        y = blank_corrected(sc, d.sample, d.blank).reshape(n_draws * n_c, sc.time.size)
        for k in range(n_draws):
            yield f"{sc.name}/{k}", sc.time, y[k * n_c:(k + 1) * n_c], sc.s0, sc.spc
    for n_w, n_t in ((96, 60), (384, 120), (1536, 200)):
        for seed in (0, 1):
            t, y, s0, _ = make_plate(n_w, n_t, seed=seed)
            yield f"speed {n_w}x{n_t}/{seed}", t, y, s0, SPC
        yield f"speed {n_w}x{n_t}/no-s0", t, y, None, None


def arrays(res: RateResult) -> dict[str, np.ndarray]:
    """Every per-well array of a result, by name (``extra`` entries as ``extra.NAME``)."""
    out = {name: np.asarray(getattr(res, name)) for name in
           ("v0", "stderr", "window_start_s", "window_end_s", "goodness", "flags", "n_points", "lag_s")}
    out.update({f"extra.{k}": np.asarray(v) for k, v in res.extra.items()})
    return out


def collect(n_draws: int) -> dict[str, np.ndarray]:
    """Model-choice's arrays on every plate, keyed ``label|array``."""
    out: dict[str, np.ndarray] = {}
    for label, t, y, s0, spc in plates(n_draws):
        res = model_choice(t, y, s0=s0, signal_per_conc=spc)
        out.update({f"{label}|{k}": v for k, v in arrays(res).items()})
    return out


def compare(old: dict[str, np.ndarray], new: dict[str, np.ndarray], rtol: float) -> list[str]:
    """Lines describing every difference between two collections (empty when they agree)."""
    lines = [f"missing in the new run: {k}" for k in sorted(set(old) - set(new))]
    lines += [f"new in this run: {k}" for k in sorted(set(new) - set(old))]
    worst = 0.0
    for key in sorted(set(old) & set(new)):
        a, b = old[key], new[key]
        if a.shape != b.shape:
            lines.append(f"{key}: shape {a.shape} -> {b.shape}")
            continue
        if key.split("|")[1] in EXACT:
            diff = a != b
        else:
            both_nan = np.isnan(a) & np.isnan(b)
            with np.errstate(invalid="ignore"):
                rel = np.abs(a - b) / np.fmax(np.abs(a), 1e-300)
            rel = np.where(both_nan | (a == b), 0.0, np.where(np.isnan(rel), np.inf, rel))
            worst = max(worst, float(rel.max(initial=0.0)))
            diff = rel > rtol
        if diff.any():
            idx = np.flatnonzero(diff)
            lines.append(f"{key}: {idx.size} well(s) differ, e.g. well {idx[0]}: {a[idx[0]]!r} -> {b[idx[0]]!r}")
    lines.append(f"largest relative difference of any value: {worst:.2e}")
    return lines


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("action", choices=("save", "compare"))
    ap.add_argument("file", help="results file (.npz) to write (save) or to compare with (compare)")
    ap.add_argument("--draws", type=int, default=20, help="simulated plates per scenario (default 20)")
    ap.add_argument("--rtol", type=float, default=1e-9, help="relative tolerance (default 1e-9)")
    args = ap.parse_args(argv)
    new = collect(args.draws)
    if args.action == "save":
        np.savez_compressed(args.file, **new)
        print(f"saved {len(new)} arrays")
        return 0
    with np.load(args.file) as f:
        old = {k: f[k] for k in f.files}
    lines = compare(old, new, args.rtol)
    print("\n".join(lines))
    return 1 if len(lines) > 1 else 0


if __name__ == "__main__":
    raise SystemExit(main())
