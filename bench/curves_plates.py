"""Benchmark: curve fits against the two-step route on the rates benchmark's realistic plates.

Run on demand (never part of the tests):  python -m bench.curves_plates [--draws N] [--only a,b]

The plates are those of :mod:`bench.accuracy` (:mod:`bench.plates`: Radau-integrated curves, plate drift,
enzyme-free background, blanks per condition, read noise, spikes, rounding, a detector ceiling, a lag and
inactivation where the scenario has them). Both routes get what the pipeline would give them: reads minus
the mean of the blanks of the same condition (:func:`bench.accuracy.blank_corrected`), the substrate and
inhibitor per well and the signal per concentration.

* two-step: the default rate method (``model-choice``) per well, the wells the fit stage leaves out by
  default removed, then the scenario's rate law fitted to each draw's rates (:func:`bench.accuracy.fit_params`
  with the fit stage's default ``rate-error`` weights, as the rates benchmark does);
* curves: :func:`vzero.plugins.fit.curves.fit.fit_groups` on each draw's blank-corrected reads converted to
  concentration (reads at the ceiling are missing and left out; wells the curve stage excludes by default,
  by the rate method's flags, are left out), without profile intervals, the recipe's defaults otherwise
  (``lag: auto``, ``inactivation: auto``: each term a candidate where the rate method flagged its shape on a
  fitted well, kept on the AICc evidence, :mod:`vzero.plugins.fit.curves.terms`); on plates with
  inactivation also with ``inactivation: true``, on plates with a lag also with ``lag: true`` and with both
  (the other term off).

Printed: the RMSE of each parameter relative to its truth (%) for both routes, their ratio, and the share of
draws with the parameter within 5 % of the truth; after each scenario, how often the defaults fitted each
combination of terms. Invented data for benchmarking only.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402
from vzero.plugins.fit.catalog import BY_NAME  # noqa: E402
from vzero.plugins.fit.curves.curve import Wells  # noqa: E402
from vzero.plugins.fit.curves.fit import CurveGroup  # noqa: E402
from vzero.plugins.fit.curves.stage import CURVE_EXCLUDE  # noqa: E402
from vzero.plugins.fit.curves.terms import AUTO, Marks, fit_with_terms  # noqa: E402
from vzero.plugins.kinetics.flags import Flag, from_names  # noqa: E402

from bench.accuracy import (  # noqa: E402
    DEFAULT,
    DEFAULT_EXCLUDE,
    METHODS,
    blank_corrected,
    default_sigma,
    fit_params,
)
from bench.plates import Scenario, draw, integrate, scenarios  # noqa: E402

MODEL = {"mm": "michaelis-menten", "hill": "hill", "si": "substrate-inhibition", "competitive": "competitive"}
"""The catalog model of each simulator rate law; parameters in the simulator's order (vmax, km, h or ki)."""

CURVE_EXCLUDED = from_names(";".join(CURVE_EXCLUDE))


def evaluate(sc: Scenario, n_draws: int, seed: int = 1) -> dict[str, np.ndarray]:
    """Parameters [n_draws, n_params] of both routes on ``n_draws`` plates of ``sc`` (NaN where a fit failed)."""
    truth = integrate(sc)
    d = draw(sc, truth, n_draws, seed=seed)
    t = sc.time
    n_c = sc.s0.size
    y = blank_corrected(sc, d.sample, d.blank)  # [n_draws, n_c, n_time]
    v0, flags, se = METHODS[DEFAULT](t, y.reshape(n_draws * n_c, t.size), np.tile(sc.s0, n_draws), sc.spc)
    saturated = (~np.isfinite(d.sample)).any(axis=2)
    v0, flags = v0.reshape(n_draws, n_c) / sc.spc, flags.reshape(n_draws, n_c)
    keep = (flags & DEFAULT_EXCLUDE) == 0
    rated = {"v0": v0 * sc.spc, "se": se.reshape(n_draws, n_c)}
    two = np.stack([fit_params(sc, v0[k], keep[k] & ~saturated[k], default_sigma(rated, sc, k))
                    for k in range(n_draws)])
    model = BY_NAME[MODEL[sc.law]]
    conc = y / sc.spc  # mM of product, baseline left to the fit
    groups, marks = [], []
    wells = Wells(sc.s0, sc.inh, np.ones(n_c), np.tile(t, (n_c, 1)), np.ones(n_c))  # rates in mM/s
    for k in range(n_draws):
        fitted = (flags[k] & CURVE_EXCLUDED) == 0
        use = fitted[:, None] & np.isfinite(conc[k])
        rates = np.where(keep[k], v0[k], np.nan)
        groups.append(CurveGroup(f"d{k}", wells, conc[k], use, rates, [("P", f"W{i}") for i in range(n_c)]))
        marks.append(Marks(int(fitted.sum()), int(np.sum(fitted & ((flags[k] & Flag.LAG) != 0))),
                           int(np.sum(fitted & ((flags[k] & Flag.DECAY) != 0)))))
    out: dict[str, np.ndarray] = {"two-step": two}
    variants = (("curves", AUTO, AUTO), ("curves, inactivation: true", False, True),
                ("curves, lag: true", True, False), ("curves, lag: true, inactivation: true", True, True))
    for label, lag, kinact in variants:
        if (kinact is True and sc.k_inact == 0) or (lag is True and sc.lag_tau == 0):
            continue
        pairs = fit_with_terms(model, groups, marks, [(lag, kinact)] * n_draws, profile=False)
        out[label] = np.array([f.result.values[:len(model.params)] if f.result.success
                               else np.full(len(model.params), np.nan) for f, _ in pairs])
        if label == "curves":
            out["terms"] = np.array([2 * c.lag + c.inactivation for _, c in pairs])
    return out


def _cell(rel: np.ndarray) -> tuple[float, str]:
    """RMSE of relative errors ``rel`` and its table cell: RMSE %, share within 5 %, failed fits."""
    failed = int(np.sum(~np.isfinite(rel)))
    rmse = float(np.sqrt(np.nanmean(rel**2)))
    within = float(np.mean(np.abs(np.nan_to_num(rel, nan=np.inf)) <= 0.05))
    return rmse, f"{100 * rmse:.3g} ({100 * within:.0f} %{f', {failed} failed' if failed else ''})"


def rows(sc: Scenario, est: dict[str, np.ndarray]) -> list[str]:
    """Markdown rows: per parameter, RMSE (%) of the two-step route and of each curve variant, the ratio and
    the share of draws within 5 %."""
    truth = np.array([sc.params[k] for k in sc.fit_names])
    model = BY_NAME[MODEL[sc.law]]
    out = []
    for route in [r for r in est if r not in ("two-step", "terms")]:
        label = sc.name if route == "curves" else f"{sc.name} ({route.split(', ', 1)[1]})"
        for j, name in enumerate(model.params):
            r2, c2 = _cell(est["two-step"][:, j] / truth[j] - 1.0)
            rc, cc = _cell(est[route][:, j] / truth[j] - 1.0)
            out.append(f"| {label} | {name} | {truth[j]:g} | {c2} | {cc} | {r2 / rc:.2g}x |")
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=200, help="noise draws per scenario")
    ap.add_argument("--only", default=None, help="comma-separated scenario names")
    args = ap.parse_args(argv)
    print(f"{args.draws} noise draws per scenario (`python -m bench.curves_plates --draws {args.draws}`)\n")
    print("| scenario | parameter | truth | RMSE two-step (%) (within 5 %) | RMSE curves (%) (within 5 %) "
          "| two-step / curves |\n|---|---|---|---|---|---|", flush=True)
    for sc in scenarios():
        if args.only and sc.name not in args.only.split(","):
            continue
        t0 = time.perf_counter()
        est = evaluate(sc, args.draws)
        print("\n".join(rows(sc, est)), flush=True)
        counts = np.bincount(est["terms"], minlength=4)
        print(f"<!-- {sc.name} defaults fitted: neither {counts[0]}, inactivation {counts[1]}, lag {counts[2]}, "
              f"both {counts[3]} of {args.draws} draws -->", flush=True)
        print(f"<!-- {sc.name}: {time.perf_counter() - t0:.0f} s -->", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
