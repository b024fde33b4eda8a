"""Accuracy benchmark: every rate method and the reference analysis on realistic simulated plates.

Run on demand (not a test): ``python -m bench.accuracy [--quick] [--draws N] [--write docs/rates.md]``.
Plates come from :mod:`bench.plates` (ODE-integrated, with drift, blanks with their own background rate,
noise, rounding, a ceiling, spikes); the reference is :mod:`bench.reference`. The methods get what the
pipeline would give them: reads minus the per-read mean of the blanks of the same condition (the blank
stage with ``match: substrate+inhibitor`` and its fallback for saturated blanks), the substrate per
well and the signal per concentration.

Printed per scenario: median and 95th percentile of |v0/true - 1| by substrate level (a well without a
rate counts as an infinite error, so a p95 of "-" means more than 5 % of wells got none), the ratio of
each method's root-mean-square relative error to the reference's, and the parameters fitted from each
draw's rates (scipy ``curve_fit`` weighted as the fit stage's default, ``rate-error`` with a 1 % share; the
reference, which has no standard errors, unweighted; wells the default exclusions remove left out): median bias,
robust spread (1.4826 x MAD) and the share of draws within 5 % of the truth. ``--write`` replaces the
section between the markers ``<!-- accuracy:start -->`` and ``<!-- accuracy:end -->`` of the file.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from collections.abc import Callable  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from scipy.optimize import OptimizeWarning, curve_fit  # noqa: E402
from vzero.plugins.blank.matching import plan_blanks  # noqa: E402
from vzero.plugins.fit.run import RATE_ERROR_SHARE, rate_error_sigma  # noqa: E402
from vzero.plugins.fit.stage import DEFAULT_EXCLUDE as FIT_DEFAULT_EXCLUDE  # noqa: E402
from vzero.plugins.kinetics.flags import Flag, from_names  # noqa: E402

from bench.plates import Scenario, draw, integrate, law_rate, scenarios  # noqa: E402
from bench.reference import reference_rates  # noqa: E402

#: Flags the fit step leaves out by default (the fit stage's ``exclude_flags``).
DEFAULT_EXCLUDE = from_names(";".join(FIT_DEFAULT_EXCLUDE))

Method = Callable[[np.ndarray, np.ndarray, np.ndarray, float], tuple[np.ndarray, np.ndarray, np.ndarray]]


def _kernel(name: str, **kw: object) -> Method:
    def run(t: np.ndarray, y: np.ndarray, s0: np.ndarray, spc: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        import importlib

        module, func = name.split(":")
        res = getattr(importlib.import_module(module), func)(t, y, s0=s0, signal_per_conc=spc, **kw)
        return res.v0, res.flags, res.stderr

    return run


#: The method a recipe gets when it names none (the rates stage's default).
DEFAULT = "model-choice"

METHODS: dict[str, Method] = {
    "model-choice": _kernel("vzero.plugins.rates.choice:model_choice"),
    "auto": _kernel("vzero.plugins.rates.auto:auto"),
    "progress": _kernel("vzero.plugins.rates.progress:progress_curve"),
    "progress-power": _kernel("vzero.plugins.rates.progress:progress_curve", model="power"),
    "lag-decay": _kernel("vzero.plugins.rates.lagdecay:lag_decay"),
}


def blank_corrected(sc: Scenario, sample: np.ndarray, blank: np.ndarray) -> np.ndarray:
    """Reads minus the per-read mean of the blanks the blank stage would use (``match: substrate+inhibitor``,
    with its fallback for blanks without usable reads: :func:`vzero.plugins.blank.matching.plan_blanks`); NaN
    where every blank read used is missing."""
    n_d, n_c, n_b, n_t = blank.shape
    wells = pd.DataFrame({"substrate": np.concatenate([sc.s0, np.repeat(sc.s0, n_b)]),
                          "inhibitor": np.concatenate([sc.inh, np.repeat(sc.inh, n_b)])})
    is_blank = np.arange(n_c * (1 + n_b)) >= n_c
    out = np.empty_like(sample)
    for k in range(n_d):
        b = blank[k].reshape(n_c * n_b, n_t)
        usable = np.concatenate([np.full(n_c, n_t), np.isfinite(b).sum(axis=1)])
        plan = plan_blanks(wells, is_blank, usable, "substrate+inhibitor")
        for i in range(n_c):
            rows = b[plan.used[i] - n_c]
            count = np.isfinite(rows).sum(axis=0)
            mean = np.where(count > 0, np.nansum(rows, axis=0) / np.maximum(count, 1), np.nan)
            out[k, i] = sample[k, i] - mean
    return out


def fit_params(sc: Scenario, v: np.ndarray, keep: np.ndarray, se: np.ndarray | None = None) -> np.ndarray:
    """Parameters (``sc.fit_names``) fitted to one draw's rates in mM/s (weighted by 1/se² when ``se``, the
    rates' sigmas, is given); NaN when the fit fails."""
    names = sc.fit_names
    ok = keep & np.isfinite(v)
    if se is not None:
        ok &= np.isfinite(se) & (se > 0)
    truth = np.array([sc.params[k] for k in names])
    if ok.sum() <= len(names):
        return np.full(len(names), np.nan)
    s, i = sc.s0[ok], sc.inh[ok]

    def model(x: np.ndarray, *q: float) -> np.ndarray:  # parameters as log(value / truth): well scaled
        p = truth * np.exp(np.asarray(q))
        return law_rate(sc.law, {**sc.params, **dict(zip(names, p, strict=True))}, s, i) / scale

    scale = float(np.nanmax(np.abs(v[ok])))
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            sigma = None if se is None else se[ok] / scale
            q, _ = curve_fit(model, s, v[ok] / scale, p0=np.full(truth.size, 0.2), sigma=sigma, maxfev=4000)
        return truth * np.exp(q)
    except (RuntimeError, ValueError, OptimizeWarning):
        return np.full(len(names), np.nan)


def default_sigma(r: dict, sc: Scenario, k: int) -> np.ndarray | None:
    """The fit stage's default sigma for draw ``k`` of a method's rates (``rate-error`` weighting with
    :data:`RATE_ERROR_SHARE`, in mM/s), or None (unweighted) where the rates carry no standard error: the
    reference analysis, or a draw without any usable SE (the fit stage then fits unweighted too)."""
    if "se" not in r:
        return None
    sig = rate_error_sigma(r["v0"][k] / sc.spc, r["se"][k] / abs(sc.spc), RATE_ERROR_SHARE)[0]
    return sig if np.all(np.isfinite(sig)) else None


def evaluate(sc: Scenario, n_draws: int, methods: dict[str, Method], seed: int = 1) -> dict:
    """Rates and fitted parameters of every method (and the reference) on ``n_draws`` plates of ``sc``."""
    truth = integrate(sc)
    d = draw(sc, truth, n_draws, seed=seed)
    t = sc.time
    n_c = sc.s0.size
    y = blank_corrected(sc, d.sample, d.blank).reshape(n_draws * n_c, t.size)
    s0 = np.tile(sc.s0, n_draws)
    saturated = (~np.isfinite(d.sample)).any(axis=2).reshape(-1)
    out: dict[str, dict] = {}
    ref = np.stack([reference_rates(t, d.sample[k], d.blank[k], sc.s0, sc.inh, sc.spc) for k in range(n_draws)])
    out["reference"] = {"v0": ref, "keep": np.isfinite(ref), "seconds": np.nan}
    for name, fn in methods.items():
        t0 = time.perf_counter()
        # one plate (draw) per call, as the rates stage calls a method: a method may pool the wells of a
        # plate (model-choice's plate decay constant after a lag), never those of other plates
        parts = [fn(t, y[k * n_c:(k + 1) * n_c], s0[k * n_c:(k + 1) * n_c], sc.spc) for k in range(n_draws)]
        v0, flags, se = (np.concatenate(x) for x in zip(*parts, strict=True))
        sec = time.perf_counter() - t0
        flags = flags | np.where(saturated, int(Flag.SATURATED), 0)
        keep = (flags & DEFAULT_EXCLUDE) == 0
        out[name] = {"v0": v0.reshape(n_draws, n_c), "keep": keep.reshape(n_draws, n_c), "seconds": sec,
                     "flags": flags.reshape(n_draws, n_c), "se": se.reshape(n_draws, n_c)}
    for r in out.values():
        r["err"] = r["v0"] / truth.v0[None, :] - 1.0
        r["params"] = np.stack([fit_params(sc, r["v0"][k] / sc.spc, r["keep"][k], default_sigma(r, sc, k))
                                for k in range(n_draws)])
    return {"scenario": sc, "truth": truth, "results": out}


#: Shares of the rate combined with its SE in ``rate-error`` weighting that the comparison tries: the fit
#: stage's default (:data:`vzero.plugins.fit.run.RATE_ERROR_SHARE`) and 3 %; the environment variable
#: ``BENCH_RATE_ERROR_SHARES`` (comma-separated fractions) tries others.
SHARES = tuple(float(x) for x in os.environ.get("BENCH_RATE_ERROR_SHARES", f"{RATE_ERROR_SHARE},0.03").split(","))

#: How the parameters are fitted from the rates, for the weighting comparison (docs/fitting.md).
WEIGHTINGS = ("unweighted", "weighted by 1/SE²", *(f"rate-error, {100 * f:g} %" for f in SHARES),
              "insignificant rates left out")


def weighting_row(ev: dict, method: str) -> str:
    """Share of draws within 5 % of the truth per parameter for each fitting choice, one method's rates."""
    sc, r = ev["scenario"], ev["results"][method]
    truth = np.array([sc.params[k] for k in sc.fit_names])
    cells = []
    for params in _weighted(sc, r).values():
        rel = np.abs(np.nan_to_num(params / truth - 1.0, nan=np.inf))
        cells.append(", ".join(f"{k} {100 * np.mean(rel[:, j] <= 0.05):.0f} %" for j, k in enumerate(sc.fit_names)))
    return f"| {sc.name} | " + " | ".join(cells) + " |"


def _weighted(sc: Scenario, r: dict) -> dict[str, np.ndarray]:
    n = r["v0"].shape[0]
    v, se, keep = r["v0"] / sc.spc, r["se"] / abs(sc.spc), r["keep"]
    with np.errstate(invalid="ignore", divide="ignore"):
        significant = np.abs(v / se) >= 2.0
    out = {
        WEIGHTINGS[0]: np.stack([fit_params(sc, v[k], keep[k]) for k in range(n)]),
        WEIGHTINGS[1]: np.stack([fit_params(sc, v[k], keep[k], se[k]) for k in range(n)]),
    }
    for j, share in enumerate(SHARES):
        sig = np.stack([rate_error_sigma(v[k], se[k], share)[0] for k in range(n)])
        out[WEIGHTINGS[2 + j]] = np.stack([fit_params(sc, v[k], keep[k], sig[k]) for k in range(n)])
    out[WEIGHTINGS[-1]] = np.stack([fit_params(sc, v[k], keep[k] & significant[k]) for k in range(n)])
    return out


def _pct(x: float) -> str:
    if not np.isfinite(x):
        return "-"
    return f"{100 * x:.1f}" if abs(x) < 9.995 else f"{100 * x:.0f}"


def level_label(sc: Scenario, i: int) -> str:
    s = f"{sc.s0[i]:g}"
    return s if sc.inhibitor is None else f"{s} / I {sc.inh[i]:g}"


def tables(ev: dict) -> str:
    """Markdown tables for one evaluated scenario."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # empty columns (a condition no method rated)
        return _tables(ev)


def _tables(ev: dict) -> str:
    sc, res = ev["scenario"], ev["results"]
    names = list(res)
    ref_err = res["reference"]["err"]
    lines = [f"#### {sc.name}: {sc.text}", "",
             "v0 |error| % by condition (median / 95th percentile; RMSE ratio to the reference in brackets):", "",
             "| S0 (mM) | " + " | ".join(names) + " |", "| --- |" + " --- |" * len(names)]
    for i in range(sc.s0.size):
        cells = []
        ref_rmse = np.sqrt(np.nanmean(ref_err[:, i] ** 2))
        for n in names:
            e = np.abs(res[n]["err"][:, i])
            e = np.where(np.isfinite(e), e, np.inf)
            med, p95 = np.percentile(e, 50), np.percentile(e, 95)
            rmse = np.sqrt(np.nanmean(res[n]["err"][:, i] ** 2))
            ratio = "" if n == "reference" else f" ({rmse / ref_rmse:.2f})"
            cells.append(f"{_pct(med)} / {_pct(p95)}{ratio}")
        lines.append(f"| {level_label(sc, i)} | " + " | ".join(cells) + " |")
    lines += ["", "Parameters fitted from the rates (bias % ± spread %, share of draws within 5 %):", "",
              "| method | " + " | ".join(sc.fit_names) + " |", "| --- |" + " --- |" * len(sc.fit_names)]
    truth = np.array([sc.params[k] for k in sc.fit_names])
    for n in names:
        rel = res[n]["params"] / truth - 1.0
        cells = []
        for j in range(truth.size):
            r = rel[:, j]
            fin = r[np.isfinite(r)]
            if fin.size == 0:
                cells.append("no fit")
                continue
            med = np.median(fin)
            spread = 1.4826 * np.median(np.abs(fin - med))
            within = np.mean(np.abs(np.where(np.isfinite(r), r, np.inf)) <= 0.05)
            cells.append(f"{100 * med:+.1f} ± {100 * spread:.1f}, {100 * within:.0f} %")
        lines.append(f"| {n} | " + " | ".join(cells) + " |")
    return "\n".join(lines) + "\n"


def write_section(path: Path, text: str, name: str = "accuracy") -> None:
    """Replace the section of ``path`` marked ``<!-- name:start -->`` ... ``<!-- name:end -->`` with ``text``."""
    start, end = f"<!-- {name}:start -->", f"<!-- {name}:end -->"
    doc = path.read_text()
    if start not in doc or end not in doc:
        raise SystemExit(f"{path}: no {start} ... {end} markers to replace")
    head, rest = doc.split(start, 1)
    _, tail = rest.split(end, 1)
    path.write_text(f"{head}{start}\n{text}{end}{tail}")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="30 draws per scenario instead of 200")
    ap.add_argument("--draws", type=int, default=None, help="noise draws per scenario")
    ap.add_argument("--only", default=None, help="comma-separated scenario names")
    ap.add_argument("--write", type=Path, default=None, help="markdown file whose accuracy section to replace")
    args = ap.parse_args(argv)
    n = args.draws or (30 if args.quick else 200)
    chosen = [s for s in scenarios() if args.only is None or s.name in args.only.split(",")]
    parts = [f"{n} noise draws per scenario (`python -m bench.accuracy --draws {n}`).\n"]
    weights = ["Fitting the default's rates: share of draws within 5 % of the truth (`" + DEFAULT + "`):", "",
               "| scenario | " + " | ".join(WEIGHTINGS) + " |", "| --- |" + " --- |" * len(WEIGHTINGS)]
    for sc in chosen:
        t0 = time.perf_counter()
        ev = evaluate(sc, n, METHODS)
        text = tables(ev)
        print(text, flush=True)
        print(f"({sc.name}: {time.perf_counter() - t0:.1f} s)\n", flush=True)
        parts.append(text)
        weights.append(weighting_row(ev, DEFAULT))
    print("\n".join(weights))
    parts.append("\n".join(weights) + "\n")
    if args.write:
        write_section(args.write, "\n".join(parts))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
