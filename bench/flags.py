"""Do the flags mean something? Each flag's firing rate on good and on bad rates, per method, on the benchmark.

Run on demand (not a test): ``python -m bench.flags [--draws N] [--write docs/rates.md]``.

The plates, blank correction and reference analysis are those of :mod:`bench.accuracy`. Each rates method is
run as the rates stage runs it (the stage's own kernel with its default settings, the substrate and the
signal per concentration given, so the shared lag and decay checks of :mod:`vzero.plugins.rates.checks` run
as in a recipe). A well's tolerance is the larger of 5 % and twice the reference analysis's RMSE for that
well's condition (the issue's definition); a rate is *in tolerance* when ``|v0/true - 1|`` is within it and
*bad* when beyond twice it. Wells without a rate are in neither group (they are counted apart).

Printed (and written between ``<!-- flags:start -->`` and ``<!-- flags:end -->``): per method and flag, the
share of in-tolerance and of bad wells that carry it, summed over every scenario; the same for the union of
the flags the fit stage excludes by default; the median signed error of the wells carrying each flag; and
three threshold sweeps, of |v0|/SE for NOISY, of the model-free gap for DISAGREES
(:func:`vzero.plugins.rates.checks.model_free_gap`) and of the distance from the model-free estimate in
model-free tolerances for IMPRECISE (:func:`vzero.plugins.rates.checks.imprecision`), the last two measured
on every method's rates, ``model-choice``'s too.
Invented plates for benchmarking only.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
from collections.abc import Callable  # noqa: E402
from dataclasses import dataclass, field  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from vzero.params import validate  # noqa: E402
from vzero.plugins import rates  # noqa: E402
from vzero.plugins.kinetics.flags import FLAG_NAMES, Flag  # noqa: E402
from vzero.plugins.kinetics.methods import PlateView  # noqa: E402
from vzero.plugins.rates.checks import IMPRECISE_SE_SHARE, imprecision, model_free, model_free_gap  # noqa: E402

from bench.accuracy import DEFAULT_EXCLUDE, blank_corrected, write_section  # noqa: E402
from bench.plates import Scenario, draw, integrate, scenarios  # noqa: E402
from bench.reference import reference_rates  # noqa: E402

#: The stage methods measured, with the recipe settings each gets besides the conversion (defaults otherwise).
STAGES: dict[str, tuple[type, dict[str, object]]] = {
    "model-choice": (rates.ModelChoiceRates, {}),
    "auto": (rates.AutoRates, {}),
    "window": (rates.WindowRates, {}),
    "polynomial": (rates.PolynomialRates, {}),
    "progress": (rates.ProgressRates, {}),
    "progress-power": (rates.ProgressRates, {"model": "power"}),
    "lag-decay": (rates.LagDecayRates, {}),
}

#: Flags a rate method sets on a sample well that has a rate (the others mean no rate, or come from the recipe).
RATE_FLAGS = ("saturated", "high_conversion", "curvature", "lag", "decay", "noisy", "spike", "unmodelled",
              "disagrees", "imprecise")


Runner = Callable[[Scenario, np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray, np.ndarray]]

#: Thresholds of |v0| / SE tried for NOISY (the rates methods use :data:`vzero.plugins.rates.noise.NOISY_MIN_T`).
NOISY_SWEEP = (3.0, 5.0, 10.0, 20.0)

#: Thresholds tried for DISAGREES: the model-free gap of :func:`vzero.plugins.rates.checks.model_free_gap`
#: (standard errors of the difference beyond the quadratic's bias; the check uses
#: :data:`vzero.plugins.rates.checks.DISAGREE_Z`).
DISAGREE_SWEEP = (2.0, 3.0, 4.0, 5.0, 7.0, 10.0)

#: Thresholds tried for IMPRECISE: the distance from the model-free estimate in model-free tolerances (the
#: check uses :data:`vzero.plugins.rates.checks.IMPRECISE_K`), each with the SE shares of :data:`SE_SHARES`
#: (the check uses :data:`vzero.plugins.rates.checks.IMPRECISE_SE_SHARE`; 0: distance alone).
IMPRECISE_SWEEP = (1.0, 1.25, 1.5, 2.0, 3.0)
SE_SHARES = (0.0, IMPRECISE_SE_SHARE, 1.0)


def stage_runner(name: str) -> Runner:
    """A function (scenario, time, reads [n_wells, n_time]) -> (v0, flags, stderr) running the named stage's
    kernel."""
    cls, extra = STAGES[name]

    def run(sc: Scenario, t: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        n_c = sc.s0.size
        given = {**extra, "signal_per_conc": f"{abs(sc.spc)} 1/mM",
                 "direction": "decrease" if sc.spc < 0 else "increase"}
        settings, problems = validate(cls.params, given)
        if problems:
            raise SystemExit(f"bench.flags: {name}: {problems}")
        n_rep = y.shape[0] // n_c
        wells = pd.DataFrame({"well": [f"W{i}" for i in range(n_c)], "role": "sample", "substrate": sc.s0})
        plate = PlateView(sc.name, wells, {"substrate": "mM"}, "AU", lambda _m: None)
        # one plate (draw) per call, as the rates stage runs a method (a method may pool a plate's wells)
        res = [cls(**settings).kernel(t.copy(), y[k * n_c:(k + 1) * n_c].copy(), plate) for k in range(n_rep)]
        return (np.concatenate([np.asarray(r.v0, float) for r in res]),
                np.concatenate([np.asarray(r.flags, np.int64) for r in res]),
                np.concatenate([np.asarray(r.stderr, float) for r in res]))

    return run


@dataclass
class Tally:
    """Counts of one method over the scenarios: wells in tolerance, bad, without a rate; per flag the wells
    carrying it in each group and their signed errors."""

    good: int = 0
    bad: int = 0
    no_rate: int = 0
    on_good: dict[str, int] = field(default_factory=dict)
    on_bad: dict[str, int] = field(default_factory=dict)
    errors: dict[str, list[np.ndarray]] = field(default_factory=dict)
    snr_good: list[np.ndarray] = field(default_factory=list)
    snr_bad: list[np.ndarray] = field(default_factory=list)
    gap_good: list[np.ndarray] = field(default_factory=list)
    gap_bad: list[np.ndarray] = field(default_factory=list)
    share_good: list[np.ndarray] = field(default_factory=list)
    share_bad: list[np.ndarray] = field(default_factory=list)
    far_good: list[np.ndarray] = field(default_factory=list)
    far_bad: list[np.ndarray] = field(default_factory=list)

    def add(self, err: np.ndarray, tol: np.ndarray, flags: np.ndarray, snr: np.ndarray, gap: np.ndarray,
            share: np.ndarray, far: np.ndarray) -> None:
        has = np.isfinite(err)
        good = has & (np.abs(err) <= tol)
        bad = has & (np.abs(err) > 2.0 * tol)
        self.good += int(good.sum())
        self.bad += int(bad.sum())
        self.no_rate += int((~has).sum())
        self.snr_good.append(snr[good])
        self.snr_bad.append(snr[bad])
        # wells flagged LAG are not compared (module text of vzero.plugins.rates.checks): NaN, never flagged
        lag = (flags & int(Flag.LAG)) != 0
        gap, far = np.where(lag, np.nan, gap), np.where(lag, np.nan, far)
        self.gap_good.append(gap[good])
        self.gap_bad.append(gap[bad])
        self.share_good.append(share[good])
        self.share_bad.append(share[bad])
        self.far_good.append(far[good])
        self.far_bad.append(far[bad])
        marks = {name: (flags & int(FLAG_NAMES[name])) != 0 for name in RATE_FLAGS}
        marks["default exclusions"] = (flags & DEFAULT_EXCLUDE) != 0
        marks["noisy or unmodelled"] = marks["noisy"] | marks["unmodelled"]
        marks["noisy or disagrees"] = marks["noisy"] | marks["disagrees"]
        marks["disagrees or imprecise"] = marks["disagrees"] | marks["imprecise"]
        marks["any flag above"] = np.logical_or.reduce([marks[n] for n in RATE_FLAGS])
        for name, m in marks.items():
            self.on_good[name] = self.on_good.get(name, 0) + int((m & good).sum())
            self.on_bad[name] = self.on_bad.get(name, 0) + int((m & bad).sum())
            self.errors.setdefault(name, []).append(err[m & has])


def measure(chosen: list[Scenario], n_draws: int, methods: list[str]) -> dict[str, Tally]:
    """Run every method on ``n_draws`` plates of each scenario and tally its flags against its errors."""
    out = {m: Tally() for m in methods}
    runners = {m: stage_runner(m) for m in methods}
    for sc in chosen:
        truth = integrate(sc)
        d = draw(sc, truth, n_draws, seed=7)
        t = sc.time
        n_c = sc.s0.size
        ref = np.stack([reference_rates(t, d.sample[k], d.blank[k], sc.s0, sc.inh, sc.spc) for k in range(n_draws)])
        with np.errstate(invalid="ignore"):
            ref_rmse = np.sqrt(np.nanmean((ref / truth.v0[None, :] - 1.0) ** 2, axis=0))
        tol = np.tile(np.fmax(0.05, 2.0 * np.nan_to_num(ref_rmse, nan=np.inf)), n_draws)
        y = blank_corrected(sc, d.sample, d.blank).reshape(n_draws * n_c, t.size)
        saturated = (~np.isfinite(d.sample)).any(axis=2).reshape(-1)
        ref = model_free(t, y, s0=np.tile(sc.s0, n_draws), signal_per_conc=abs(sc.spc))
        for m in methods:
            v0, flags, se = runners[m](sc, t, y)
            flags = flags | np.where(saturated, int(Flag.SATURATED), 0)
            err = v0 / np.tile(truth.v0, n_draws) - 1.0
            gap = model_free_gap(t, y, v0, se, s0=np.tile(sc.s0, n_draws), signal_per_conc=abs(sc.spc), ref=ref)
            with np.errstate(invalid="ignore", divide="ignore"):
                out[m].add(err, tol, flags, np.abs(v0 / se), gap, *imprecision(v0, se, ref))
        print(f"({sc.name} done)", flush=True)
    return out


def _share(k: int, n: int) -> str:
    return "-" if n == 0 else f"{100.0 * k / n:.1f} %"


def table(tallies: dict[str, Tally]) -> str:
    """Markdown: one row per method and flag that fired at least once."""
    lines = ["| method | flag | on in-tolerance rates | on bad rates (beyond 2 x tolerance) | flagged rates: "
             "median error, share off by > 5 % |", "| --- | --- | --- | --- | --- |"]
    for m, tl in tallies.items():
        lines.append(f"| **{m}** | (wells: {tl.good} in tolerance, {tl.bad} bad, {tl.no_rate} without a rate) "
                     "| | | |")
        for name in (*RATE_FLAGS, "noisy or unmodelled", "noisy or disagrees", "disagrees or imprecise",
                     "default exclusions", "any flag above"):
            errs = np.concatenate(tl.errors.get(name, [np.empty(0)]))
            if errs.size == 0 and name in RATE_FLAGS:
                continue
            med = (f"{100 * np.median(errs):+.1f} %, {_share(int((np.abs(errs) > 0.05).sum()), errs.size)}"
                   if errs.size else "-")
            lines.append(f"| {m} | {name} | {_share(tl.on_good[name], tl.good)} | {_share(tl.on_bad[name], tl.bad)}"
                         f" | {med} |")
    return "\n".join(lines) + "\n"


def _sweep(tallies: dict[str, Tally], thresholds: tuple[float, ...], label: str, values: str,
           below: bool) -> str:
    """Markdown: for each method, the share of in-tolerance and of bad rates whose ``values`` (the tally's
    ``<values>_good`` and ``<values>_bad`` lists) lie below (``below``) or above each threshold."""
    head = " | ".join(f"{label} {'<' if below else '>'} {x:g}" for x in thresholds)
    lines = [f"| method | {head} |", "| --- |" + " --- |" * len(thresholds)]
    for m, tl in tallies.items():
        good = np.concatenate(getattr(tl, f"{values}_good"))
        bad = np.concatenate(getattr(tl, f"{values}_bad"))
        cells = []
        for x in thresholds:
            g, b = (good < x, bad < x) if below else (good > x, bad > x)
            cells.append(f"{_share(int(g.sum()), good.size)} / {_share(int(b.sum()), bad.size)}")
        lines.append(f"| {m} | " + " | ".join(cells) + " |")
    return "\n".join(lines) + "\n"


def noisy_sweep(tallies: dict[str, Tally]) -> str:
    """Markdown: for each method, the share of in-tolerance and of bad rates with |v0|/SE below each
    threshold of :data:`NOISY_SWEEP`."""
    return _sweep(tallies, NOISY_SWEEP, "t", "snr", below=True)


def disagree_sweep(tallies: dict[str, Tally]) -> str:
    """Markdown: for each method, the share of in-tolerance and of bad rates whose model-free gap exceeds each
    threshold of :data:`DISAGREE_SWEEP` (wells flagged LAG are not compared; ``model-choice`` is measured
    here although the stage skips the check after it)."""
    return _sweep(tallies, DISAGREE_SWEEP, "gap", "gap", below=False)


def imprecise_sweep(tallies: dict[str, Tally]) -> str:
    """Markdown: for each method and SE share of :data:`SE_SHARES`, the share of in-tolerance and of bad rates
    whose SE exceeds that share of the model-free tolerance and whose distance from the model-free estimate
    exceeds each threshold of :data:`IMPRECISE_SWEEP` (wells flagged LAG are not compared)."""
    head = " | ".join(f"distance > {x:g}" for x in IMPRECISE_SWEEP)
    lines = [f"| method | SE share above | {head} |", "| --- | --- |" + " --- |" * len(IMPRECISE_SWEEP)]
    for m, tl in tallies.items():
        groups = [(np.concatenate(getattr(tl, f"share_{g}")), np.concatenate(getattr(tl, f"far_{g}")))
                  for g in ("good", "bad")]
        for c in SE_SHARES:
            cells = []
            for x in IMPRECISE_SWEEP:
                with np.errstate(invalid="ignore"):
                    hits = [int(((share > c) & (far > x)).sum()) for share, far in groups]
                cells.append(f"{_share(hits[0], groups[0][0].size)} / {_share(hits[1], groups[1][0].size)}")
            lines.append(f"| {m} | {c:g} | " + " | ".join(cells) + " |")
    return "\n".join(lines) + "\n"


def lag_power(n_wells: int = 2000, seed: int = 3) -> str:
    """Markdown: share of designed curves the shared lag detector flags (120 reads at 5 s; the first k read
    intervals at 70 % or 50 % of the steady rate, then the steady rate), by the per-read change over the read
    noise; and the share of clean straight curves flagged."""
    from vzero.plugins.rates.lagdecay import detect_lag
    from vzero.plugins.rates.noise import screen

    rng = np.random.default_rng(seed)
    t = np.arange(120) * 5.0
    designs = [(r, k) for r in (0.7, 0.5) for k in (3, 4, 5)]
    lines = ["| per-read change / noise | " + " | ".join(f"{100 * r:.0f} % for {k} reads" for r, k in designs)
             + " | clean curves |", "| --- |" + " --- |" * (len(designs) + 1)]
    for snr in (2.0, 3.0, 5.0, 8.0, 15.0):
        cells = []
        for r, k in [*designs, (1.0, 0)]:
            tk = t[k]
            y = np.where(t < tk, r * t, r * tk + (t - tk)) * snr * 0.002 / 5.0
            y = y[None, :] + 0.002 * rng.standard_normal((n_wells, t.size))
            sc = screen(y, min_points=8, time=t)
            cells.append(f"{100 * detect_lag(t, y, sc)[2].mean():.1f} %")
        lines.append(f"| {snr:g} | " + " | ".join(cells) + " |")
    lines += ["", "False alarms on the benchmark's scenarios without a lag (blank-corrected reads, 200 draws):", "",
              "| scenario | wells flagged LAG |", "| --- | --- |"]
    for sc in scenarios():
        if sc.lag_tau > 0:
            continue
        d = draw(sc, integrate(sc), 200, seed=7)
        y = blank_corrected(sc, d.sample, d.blank).reshape(-1, sc.n_time)
        found = detect_lag(sc.time, y, screen(y, min_points=8, time=sc.time))[2]
        lines.append(f"| {sc.name} | {100 * found.mean():.2f} % |")
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=200, help="noise draws per scenario")
    ap.add_argument("--only", default=None, help="comma-separated scenario names")
    ap.add_argument("--methods", default=",".join(STAGES), help="comma-separated methods")
    ap.add_argument("--write", type=Path, default=None, help="markdown file whose flags section to replace")
    ap.add_argument("--lags", action="store_true", help="only the lag detector on designed curves")
    args = ap.parse_args(argv)
    if args.lags:
        print(lag_power())
        return 0
    chosen = [s for s in scenarios() if args.only is None or s.name in args.only.split(",")]
    tallies = measure(chosen, args.draws, args.methods.split(","))
    text = (f"{args.draws} noise draws of each of {len(chosen)} scenarios (`python -m bench.flags --draws "
            f"{args.draws}`); tolerance per condition: the larger of 5 % and twice the reference's RMSE.\n\n"
            + table(tallies) + "\nNOISY threshold sweep: share of in-tolerance / of bad rates whose |v0|/SE is "
            "below each threshold:\n\n" + noisy_sweep(tallies)
            + "\nDISAGREES threshold sweep: share of in-tolerance / of bad rates whose model-free gap exceeds each "
            "threshold:\n\n" + disagree_sweep(tallies)
            + "\nIMPRECISE threshold sweep: share of in-tolerance / of bad rates whose SE exceeds the given share of "
            "the model-free tolerance and whose distance from the model-free estimate exceeds each threshold (in "
            "model-free tolerances):\n\n" + imprecise_sweep(tallies))
    print(text)
    if args.write:
        write_section(args.write, text, "flags")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
