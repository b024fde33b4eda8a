"""``python -m bench.mutate``: mutation testing of the numerical core, on demand (not in CI).

Each mutant is one small change to one module, made on its syntax tree: an arithmetic operator swapped
(+ and −, × and ÷, ** to ×), a comparison loosened or tightened (< and <=, > and >=, == and !=), ``and``
and ``or`` swapped, a ``not`` dropped, a unary minus dropped, or a number changed (an integer k to k + 1, a
float x to 2x, 0.0 to 1.0). The mutant is written into a private copy of the source tree (the checkout is
never touched) and the module's own targeted tests (:data:`TARGETS`, slow tests excluded) are run on it in a
fresh process with a timeout: a failing test kills the mutant; a timeout counts as killed too (the change
made the code hang). Survivors are written with their place and change; ``--effect`` then measures
whether each changes anything the product computes (below), instead of a person's judgment.

Budget: the machine is shared; ``--sample N`` takes N mutants per module (a seeded draw, the same every
time), ``--timeout`` bounds each mutant (300 s by default: with a shorter limit a slow run of the tests on a busy
machine is mistaken for a hang), and ``--jobs`` runs that many mutants at once (default 1).
Results: a JSON file (``--out``) with every mutant and its outcome, and a summary on stdout.

Examples::

    python -m bench.mutate --list                      # count mutants per module
    python -m bench.mutate --sample 3 --seed 6607 --jobs 2  # the last run recorded in docs/testing.md
    python -m bench.mutate --module plugins/fit/compare.py --sample 0
    python -m bench.mutate --sample 6 --seed N --jobs 2 --effect   # and measure every survivor's effect
    python -m bench.mutate --classify mutants.json --out effect.json  # the survivors of an earlier run

``--effect`` (and ``--classify``) replace a person's "equivalent in effect" by a measurement: the battery of
:mod:`bench.effect_battery` runs once on the unmutated copy (twice, to find outputs that are not
reproducible) and once per survivor on its mutant, each in a fresh process, and every output is compared
(floats within 1e-9 relative with a 1e-12 absolute floor, everything else exactly). Verdicts: "no effect"
(outputs the same and the mutated line executed by the battery: counted as equivalent in the second
score), "not reached by the battery" (no evidence either way) or "changes outputs by X (open)".
"""

from __future__ import annotations

import argparse
import ast
import concurrent.futures as cf
import json
import os
import random
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import asdict, dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

STATS = "tests/plugins/fit/test_statistics.py"
STAGE = "tests/plugins/fit/test_stage.py"
RATES = ["tests/plugins/rates/test_rate_fields.py", "tests/plugins/rates/test_lag_fields.py",
         "tests/plugins/rates/test_rate_thresholds.py",
         "tests/plugins/rates/test_se_quick.py", "tests/plugins/rates/test_rate_edges.py",
         "tests/plugins/rates/test_rate_parts.py",
         "tests/plugins/rates/test_rates_closed_form.py", "tests/plugins/rates/test_rates_kernels.py",
         "tests/plugins/rates/test_progress_signal_se.py", "tests/plugins/rates/test_shapegrid.py"]
CONVERT = ["tests/plugins/convert", "tests/plugins/test_builtin_stages.py"]
READERS = ["tests/plugins/importers/test_cell_values.py", "tests/plugins/importers/test_time_formats.py",
           "tests/plugins/importers/test_readers.py",
           "tests/plugins/importers/test_plain_numbers.py", "tests/plugins/importers/test_plain_numbers_route.py"]
#: the default rate method (model-choice) and the shared checks, with their helpers' field tests
HELPERS = "tests/plugins/rates/test_rate_helper_fields.py"
#: both sides of the rate kernels' decisions (lag-decay, decay pre-screen, early lag, curves' figures)
SIDES = "tests/plugins/rates/test_decision_sides.py"
CHOICE = [HELPERS, "tests/plugins/rates/test_choice_fields.py", "tests/plugins/rates/test_model_choice.py",
          "tests/plugins/rates/test_hillcurve.py", "tests/plugins/rates/test_same_reads.py",
          "tests/plugins/rates/test_sicurve.py", "tests/plugins/rates/test_disagrees.py",
          "tests/plugins/rates/test_choice_time_origin.py", "tests/plugins/rates/test_choice_triggers.py",
          "tests/plugins/rates/test_choice_shape_step.py", "tests/plugins/rates/test_choice_hill_step.py",
          "tests/plugins/rates/test_choice_power_step.py", "tests/plugins/rates/test_choice_reports.py",
          "tests/plugins/rates/test_choice_late_steps.py", "tests/plugins/rates/test_poolshape.py",
          "tests/plugins/rates/test_choice_lone_wells.py"]
#: the eleventh sample's tests (fit helpers; rate kernels' edges)
ELEVENTH_FIT = "tests/plugins/fit/test_eleventh_sample_fit.py"
ELEVENTH_RATES = "tests/plugins/rates/test_eleventh_sample.py"
#: the format-2 digest checks of verify (the stored example files are format 1.x), the two quickest
DIGESTS = ["tests/pipeline/test_verify_digests.py::test_fresh_file_verifies_with_every_digest_checked",
           "tests/pipeline/test_verify_digests.py::test_a_missing_results_group_is_reported"]

#: module (path in the checkout) -> (functions to mutate, or () for the whole module; targeted tests, the
#: quickest that exercise the module, fastest first)
TARGETS: dict[str, tuple[tuple[str, ...], list[str]]] = {
    "plugins/fit/compare.py": ((), [STATS, "tests/plugins/fit/test_compare_rules.py", ELEVENTH_FIT]),
    "plugins/fit/engine.py": ((), [STATS, "tests/plugins/fit/test_engine_edges.py",
                                   "tests/plugins/fit/test_engine_summary.py", "tests/plugins/fit/test_engine_batch.py",
                                   "tests/plugins/fit/test_engine_nist.py"]),
    "plugins/fit/run.py": (("_sigma", "_saturation_problem", "_derived_row", "_ki_rows", "_derived", "_group_enzyme"),
                           ["tests/plugins/fit/test_run_helpers.py", STATS, STAGE,
                            "tests/plugins/fit/test_titration.py", ELEVENTH_FIT]),
    "plugins/fit/models.py": ((), ["tests/plugins/fit/test_start_values.py", "tests/plugins/fit/test_models.py",
                                   "tests/plugins/fit/test_model_edges.py",
                                   STATS, ELEVENTH_FIT]),
    "plugins/fit/shared.py": ((), ["tests/plugins/fit/test_shared_blanks.py",
                                   "tests/plugins/fit/test_shared_fields.py"]),
    "plugins/fit/diagnostics.py": (("_ols", "transforms", "band", "grid"),
                                   ["tests/plugins/fit/test_diagnostics_fields.py", STAGE]),
    "plugins/rates/noise.py": ((), RATES),
    "plugins/kinetics/readnoise.py": ((), [*RATES, "tests/plugins/fit/test_shared_blanks.py"]),
    "plugins/rates/window.py": ((), RATES),
    "plugins/rates/auto.py": ((), [*RATES, "tests/plugins/rates/test_twelfth_sample.py"]),
    "plugins/rates/polynomial.py": ((), [*RATES, "tests/plugins/rates/test_threshold_equality.py"]),
    "plugins/rates/progress.py": ((), [*RATES, "tests/plugins/rates/test_power_order_bounds.py",
                                       "tests/plugins/rates/test_progress_fields.py",
                                       "tests/plugins/rates/test_progress_bounded_se.py",
                                       "tests/plugins/rates/test_open_survivors.py", ELEVENTH_RATES,
                                       "tests/plugins/rates/test_progress_late_first_read.py",
                                       "tests/plugins/rates/test_power_conversion_switch.py",
                                       "tests/plugins/rates/test_twelfth_sample.py"]),
    "plugins/rates/shapegrid.py": ((), ["tests/plugins/rates/test_shapegrid.py"]),
    "plugins/rates/lagdecay.py": ((), [*RATES, SIDES, "tests/plugins/rates/test_threshold_equality.py",
                                       "tests/plugins/rates/test_lag_short_plates.py"]),
    "plugins/rates/choice.py": ((), [*CHOICE, ELEVENTH_RATES]),
    "plugins/rates/hillcurve.py": ((), [HELPERS, "tests/plugins/rates/test_hillcurve.py",
                                        "tests/plugins/rates/test_curve_jacobian_shape.py", ELEVENTH_RATES]),
    "plugins/rates/sicurve.py": ((), ["tests/plugins/rates/test_sicurve.py", *CHOICE[1:3],
                                      "tests/plugins/rates/test_curve_jacobian_shape.py", SIDES,
                                      "tests/plugins/rates/test_si_se_scatter.py"]),
    "plugins/rates/poolshape.py": ((), ["tests/plugins/rates/test_poolshape.py", SIDES,
                                        "tests/plugins/rates/test_pool_take_sides.py",
                                        "tests/plugins/rates/test_pool_start_weights.py",
                                        "tests/plugins/rates/test_pool_shape_range.py",
                                        "tests/plugins/rates/test_pool_rates_gate.py",
                                        "tests/plugins/rates/test_pool_shared_blanks.py"]),
    "plugins/rates/spikes.py": ((), [HELPERS, "tests/plugins/rates/test_choice_fields.py", ELEVENTH_RATES]),
    "plugins/rates/checks.py": ((), [HELPERS, "tests/plugins/rates/test_disagrees.py",
                                     "tests/plugins/rates/test_imprecise.py",
                                     "tests/plugins/rates/test_short_lag_and_decay.py",
                                     "tests/plugins/rates/test_lag_clock.py",
                                     "tests/plugins/rates/test_check_thresholds.py", SIDES,
                                     "tests/plugins/rates/test_disagrees_equality.py"]),
    "plugins/rates/lagfit.py": ((), [HELPERS, "tests/plugins/rates/test_lag_clock.py",
                                     "tests/plugins/rates/test_plate_clock_rules.py",
                                     "tests/plugins/rates/test_lag_clock_se.py",
                                     "tests/plugins/rates/test_lag_clock_choice.py",
                                     "tests/plugins/rates/test_open_survivors.py", ELEVENTH_RATES]),
    "plugins/rates/earlylag.py": ((), [HELPERS, "tests/plugins/rates/test_short_lag_and_decay.py",
                                       "tests/plugins/rates/test_early_lag_edges.py", SIDES,
                                       "tests/plugins/rates/test_threshold_equality.py"]),
    "plugins/convert/__init__.py": ((), CONVERT),
    "plugins/convert/pathlength.py": ((), CONVERT),
    "plugins/convert/standard_curve.py": ((), CONVERT),
    "plugins/blank/__init__.py": ((), ["tests/plugins/blank", "tests/plugins/test_builtin_stages.py",
                                       "tests/properties/test_core_props.py",
                                       "tests/plugins/fit/test_shared_blanks.py"]),
    "plugins/importers/readers.py": (("_cell_text", "_seconds_text", "_plain_numbers", "_numbers", "_times",
                                      "_check_increasing", "_detect_decimal"), READERS),
    "pipeline/recipe.py": (("_check", "_check_steps", "check"), ["tests/pipeline/test_recipe_rules.py",
                                                                  "tests/pipeline/test_recipe_steps.py",
                                                                  "tests/pipeline/test_recipe.py",
                                                                  "tests/pipeline/test_rerun_defaults.py"]),
    "pipeline/audit/verify.py": ((), ["tests/pipeline/test_recipe_rules.py", "tests/pipeline/test_verify.py",
                                      *DIGESTS]),
}

SWAP_BIN = {ast.Add: ast.Sub, ast.Sub: ast.Add, ast.Mult: ast.Div, ast.Div: ast.Mult, ast.Pow: ast.Mult}
SWAP_CMP = {ast.Lt: ast.LtE, ast.LtE: ast.Lt, ast.Gt: ast.GtE, ast.GtE: ast.Gt, ast.Eq: ast.NotEq, ast.NotEq: ast.Eq}


@dataclass
class Mutant:
    module: str
    line: int
    col: int
    change: str
    index: int  # the n-th mutation site in the module, in walk order
    outcome: str = ""
    seconds: float = 0.0
    detail: str = ""


def _in_scope(tree: ast.Module, functions: tuple[str, ...]) -> list[ast.AST]:
    """The nodes that may be mutated: the named functions' bodies (all module code when none are named),
    without docstrings, annotations or decorators."""
    roots: list[ast.AST] = [tree] if not functions else [
        n for n in ast.walk(tree) if isinstance(n, ast.FunctionDef) and n.name in functions]
    skip: set[int] = set()
    for root in roots:
        for n in ast.walk(root):
            if isinstance(n, ast.FunctionDef | ast.AsyncFunctionDef | ast.ClassDef | ast.Module):
                body = n.body
                if body and isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant):
                    skip.update(id(x) for x in ast.walk(body[0]))
                for d in getattr(n, "decorator_list", []):
                    skip.update(id(x) for x in ast.walk(d))
                if isinstance(n, ast.FunctionDef | ast.AsyncFunctionDef):
                    if n.returns is not None:
                        skip.update(id(x) for x in ast.walk(n.returns))
                    for a in [*n.args.args, *n.args.kwonlyargs, *n.args.posonlyargs]:
                        if a.annotation is not None:
                            skip.update(id(x) for x in ast.walk(a.annotation))
            if isinstance(n, ast.AnnAssign):
                skip.update(id(x) for x in ast.walk(n.annotation))
            if isinstance(n, ast.JoinedStr):  # text of messages
                skip.update(id(x) for x in ast.walk(n))
    seen: set[int] = set()
    out = []
    for root in roots:
        for n in ast.walk(root):
            if id(n) not in skip and id(n) not in seen:
                seen.add(id(n))
                out.append(n)
    return out


def _sites(node: ast.AST) -> list[str]:
    """The mutations possible at one node, as short descriptions (applied by :func:`_apply`)."""
    if isinstance(node, ast.BinOp) and type(node.op) in SWAP_BIN:
        return [f"{type(node.op).__name__} -> {SWAP_BIN[type(node.op)].__name__}"]
    if isinstance(node, ast.Compare) and len(node.ops) == 1 and type(node.ops[0]) in SWAP_CMP:
        return [f"{type(node.ops[0]).__name__} -> {SWAP_CMP[type(node.ops[0])].__name__}"]
    if isinstance(node, ast.BoolOp):
        return ["And -> Or" if isinstance(node.op, ast.And) else "Or -> And"]
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.Not | ast.USub):
        return [f"drop {type(node.op).__name__}"]
    if isinstance(node, ast.Constant) and type(node.value) in (int, float):
        v = node.value
        new = v + 1 if isinstance(v, int) else (1.0 if v == 0 else 2 * v)
        return [f"{v!r} -> {new!r}"]
    return []


def _apply(node: ast.AST, change: str) -> ast.AST:
    """The mutated replacement for ``node``."""
    if isinstance(node, ast.BinOp):
        return ast.BinOp(node.left, SWAP_BIN[type(node.op)](), node.right)
    if isinstance(node, ast.Compare):
        return ast.Compare(node.left, [SWAP_CMP[type(node.ops[0])]()], node.comparators)
    if isinstance(node, ast.BoolOp):
        return ast.BoolOp(ast.Or() if isinstance(node.op, ast.And) else ast.And(), node.values)
    if isinstance(node, ast.UnaryOp):
        return node.operand
    if isinstance(node, ast.Constant):
        v = node.value
        return ast.Constant(v + 1 if isinstance(v, int) else (1.0 if v == 0 else 2 * v))
    raise ValueError(change)


def mutants(module: str) -> list[Mutant]:
    functions, _ = TARGETS[module]
    tree = ast.parse((ROOT / module).read_text(encoding="utf-8"))
    out = []
    for node in _in_scope(tree, functions):
        for change in _sites(node):
            out.append(Mutant(module, getattr(node, "lineno", 0), getattr(node, "col_offset", 0), change, len(out)))
    return out


class _Swap(ast.NodeTransformer):
    """Replaces one node (by identity) with another."""

    def __init__(self, old: ast.AST, new: ast.AST) -> None:
        self.old, self.new = old, new

    def visit(self, node: ast.AST) -> ast.AST:
        return self.new if node is self.old else super().visit(node)


def mutated_source(m: Mutant) -> str:
    functions, _ = TARGETS[m.module]
    tree = ast.parse((ROOT / m.module).read_text(encoding="utf-8"))
    k = 0
    for node in _in_scope(tree, functions):
        for change in _sites(node):
            if k == m.index:
                tree = ast.fix_missing_locations(_Swap(node, ast.copy_location(_apply(node, change), node)).visit(tree))
                return ast.unparse(tree)
            k += 1
    raise IndexError(m.index)


def _copy_tree(dest: Path) -> None:
    """A private importable copy: dest/vzero (pipeline/) with dest/vzero/plugins (plugins/), the tests, and
    bench/ (the effect battery and the plates it simulates)."""
    ignore = shutil.ignore_patterns("__pycache__", "*.pyc", ".ruff_cache")
    shutil.copytree(ROOT / "pipeline", dest / "vzero", ignore=ignore)
    shutil.copytree(ROOT / "plugins", dest / "vzero" / "plugins", ignore=ignore)
    shutil.copytree(ROOT / "tests", dest / "tests", ignore=ignore)
    for name in ("pyproject.toml", "configs", "docs", "bench"):
        src = ROOT / name
        (shutil.copytree(src, dest / name, ignore=ignore) if src.is_dir() else shutil.copy(src, dest / name))


def _in_copy(module: str) -> str:
    return "vzero/" + module.removeprefix("pipeline/") if module.startswith("pipeline/") else "vzero/" + module


def _pytest(copy: Path, tests: list[str], timeout: float) -> tuple[str, str]:
    env = {**os.environ, "PYTHONPATH": str(copy), "OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1",
           "PYTHONDONTWRITEBYTECODE": "1"}
    cmd = [sys.executable, "-m", "pytest", "-x", "-q", "-p", "no:cacheprovider", "-m", "not slow and not browser",
           "--no-header", *tests]
    try:
        proc = subprocess.run(cmd, cwd=copy, env=env, capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return "killed (timeout)", ""
    tail = proc.stdout.strip().splitlines()[-1:] or [""]
    if proc.returncode == 0:
        return "survived", tail[0]
    if proc.returncode == 1:
        return "killed", tail[0]
    return f"error (exit {proc.returncode})", (proc.stdout + proc.stderr)[-400:]


def run_one(m: Mutant, timeout: float) -> Mutant:
    start = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="vzero-mut-") as tmp:
        copy = Path(tmp)
        _copy_tree(copy)
        try:
            source = mutated_source(m)
        except (SyntaxError, ValueError) as exc:  # a mutation that does not make valid Python
            m.outcome, m.detail = "invalid", str(exc)
            return m
        (copy / _in_copy(m.module)).write_text(source, encoding="utf-8")
        m.outcome, m.detail = _pytest(copy, TARGETS[m.module][1], timeout)
    m.seconds = round(time.perf_counter() - start, 1)
    return m


def check_baseline(timeout: float) -> None:
    """The targeted tests must pass on the unmutated copy (else every mutant looks killed)."""
    with tempfile.TemporaryDirectory(prefix="vzero-mut-") as tmp:
        copy = Path(tmp)
        _copy_tree(copy)
        probe = subprocess.run([sys.executable, "-c", "import vzero, vzero.plugins.fit; print(vzero.__file__)"],
                               cwd=copy, env={**os.environ, "PYTHONPATH": str(copy)}, capture_output=True, text=True)
        if not probe.stdout.strip().startswith(str(copy)):
            raise SystemExit(f"the copy is not what gets imported ({probe.stdout.strip() or probe.stderr[-300:]})")
        tests = sorted({t for _, ts in TARGETS.values() for t in ts})
        outcome, detail = _pytest(copy, tests, timeout * 4)
        if outcome != "survived":
            raise SystemExit(f"targeted tests fail without any mutation: {outcome} {detail}")


#: Verdicts of :func:`effect_verdict` (the summary counts the first as equivalent in effect).
NO_EFFECT = "no effect (outputs within 1e-9 relative, line executed)"
NOT_REACHED = "not reached by the battery"


def _battery(copy: Path, out: Path, trace: list[str], timeout: float) -> dict:
    """Run :mod:`bench.effect_battery` in a fresh process on ``copy``; its JSON (``outputs``, ``reached``),
    or ``{"error": ...}`` when it crashed or hung (a mutant that breaks the battery changes its outputs)."""
    env = {**os.environ, "PYTHONPATH": str(copy), "OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1",
           "PYTHONDONTWRITEBYTECODE": "1", "PYTHONHASHSEED": "0"}
    cmd = [sys.executable, "-m", "bench.effect_battery", str(out), *(a for t in trace for a in ("--trace", t))]
    try:
        proc = subprocess.run(cmd, cwd=copy, env=env, capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return {"error": "timeout"}
    if proc.returncode != 0:
        return {"error": f"exit {proc.returncode}: {proc.stderr.strip().splitlines()[-1:] or ''}"}
    return json.loads(out.read_text(encoding="utf-8"))


class EffectBaseline:
    """The battery's outputs on the unmutated copy (run twice: outputs that differ between the two runs
    are left out of every comparison and counted in ``unstable``), and which survivors' lines it reached."""

    def __init__(self, survivors: list[Mutant], timeout: float) -> None:
        from bench.effect_battery import compare

        trace = sorted({f"{_in_copy(m.module)}:{m.line}" for m in survivors})
        with tempfile.TemporaryDirectory(prefix="vzero-eff-") as tmp:
            copy = Path(tmp)
            _copy_tree(copy)
            first = _battery(copy, copy / "first.json", trace, timeout)
            second = _battery(copy, copy / "second.json", [], timeout)
        if "error" in first or "error" in second:
            raise SystemExit(f"the effect battery fails without any mutation: {first.get('error') or second['error']}")
        self.outputs: dict = first["outputs"]
        self.unstable = set(compare(first["outputs"], second["outputs"]))
        self.reached = set(first["reached"])


def effect_verdict(m: Mutant, base: EffectBaseline, timeout: float) -> tuple[str, dict[str, float]]:
    """The measured verdict on a survivor: :data:`NO_EFFECT`, :data:`NOT_REACHED`, or "changes outputs by X
    (open)" (X the largest relative difference); and the outputs that changed with their differences."""
    from bench.effect_battery import compare

    with tempfile.TemporaryDirectory(prefix="vzero-eff-") as tmp:
        copy = Path(tmp)
        _copy_tree(copy)
        (copy / _in_copy(m.module)).write_text(mutated_source(m), encoding="utf-8")
        got = _battery(copy, copy / "mutant.json", [], timeout)
    if "error" in got:
        return f"changes outputs: the battery fails ({got['error']}) (open)", {"<battery>": float("inf")}
    diffs = {k: d for k, d in compare(base.outputs, got["outputs"]).items() if k not in base.unstable}
    if diffs:
        worst = max(diffs.values())
        by = f"by {worst:.3g}" if worst < float("inf") else "(a text, flag, count, NaN or length differs)"
        return f"changes outputs {by} (open)", diffs
    if f"{_in_copy(m.module)}:{m.line}" not in base.reached:
        return NOT_REACHED, {}
    return NO_EFFECT, {}


def classify(survivors: list[Mutant], timeout: float, jobs: int) -> list[dict]:
    """:func:`effect_verdict` for every survivor (``jobs`` at a time); one record per survivor."""
    base = EffectBaseline(survivors, timeout)
    print(f"effect battery: {len(base.outputs)} outputs, {len(base.unstable)} unstable between two unmutated runs; "
          f"{len(base.reached)} of {len(survivors)} survivors' lines reached", flush=True)

    def one(m: Mutant) -> dict:
        verdict, diffs = effect_verdict(m, base, timeout)
        worst = sorted(diffs.items(), key=lambda kv: -kv[1])[:5]
        return {**asdict(m), "effect": verdict, "changed": len(diffs), "worst": worst}

    records = []
    with cf.ThreadPoolExecutor(jobs) as pool:
        for r in pool.map(one, survivors):
            records.append(r)
            print(f"  {r['module']}:{r['line']} {r['change']}: {r['effect']}"
                  + (f" [{r['changed']} outputs, e.g. {r['worst'][0][0]}]" if r["changed"] else ""), flush=True)
    return records


def score(results: list[Mutant], records: list[dict]) -> str:
    """The score both ways: strictly (every survivor counts against it), and with the survivors measured
    to have no effect counted as equivalent (left out of the denominator)."""
    killed = sum(r.outcome.startswith("killed") for r in results)
    valid = sum(r.outcome != "invalid" and not r.outcome.startswith("error") for r in results)
    none = sum(r["effect"] == NO_EFFECT for r in records)
    return (f"strict: {killed} of {valid} killed ({killed / max(valid, 1):.1%}); no-effect survivors as equivalent: "
            f"{killed} of {valid - none} ({killed / max(valid - none, 1):.1%}; {none} measured without effect)")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m bench.mutate", description=__doc__.splitlines()[0])
    ap.add_argument("--module", action="append", help="only this module (repeatable); default: all targets")
    ap.add_argument("--sample", type=int, default=25, help="mutants per module (seeded draw; 0 = all)")
    ap.add_argument("--seed", type=int, default=20261203)
    ap.add_argument("--timeout", type=float, default=300.0, help="seconds per mutant (generous: on a busy machine a "
                    "targeted run takes over a minute, and a timeout counts as killed)")
    ap.add_argument("--jobs", type=int, default=1)
    ap.add_argument("--out", default="mutants.json")
    ap.add_argument("--list", action="store_true", help="count the mutants per module and stop")
    ap.add_argument("--effect", action="store_true", help="measure every survivor's effect on the outputs of "
                    "bench/effect_battery.py (a fresh process each for the unmutated copy and for the mutant)")
    ap.add_argument("--classify", metavar="RESULTS.json", help="measure the effect of the survivors of an earlier "
                    "run (its --out file) without running the tests again; the sample options are not used")
    args = ap.parse_args(argv)
    if args.classify:
        results = [Mutant(**r) for r in json.loads(Path(args.classify).read_text(encoding="utf-8"))]
        records = classify([r for r in results if r.outcome == "survived"], args.timeout, args.jobs)
        Path(args.out).write_text(json.dumps(records, indent=1), encoding="utf-8")
        print(score(results, records))
        return 0
    modules = args.module or list(TARGETS)
    chosen: list[Mutant] = []
    for mod in modules:
        every = mutants(mod)
        pick = every if args.sample <= 0 or args.sample >= len(every) else sorted(
            random.Random(f"{args.seed}:{mod}").sample(every, args.sample), key=lambda m: m.index)
        print(f"{mod}: {len(every)} mutants, {len(pick)} run")
        chosen += pick
    if args.list:
        return 0
    check_baseline(args.timeout)
    results: list[Mutant] = []
    with cf.ThreadPoolExecutor(args.jobs) as pool:
        for m in pool.map(lambda m: run_one(m, args.timeout), chosen):
            results.append(m)
            print(f"{m.outcome:18s} {m.module}:{m.line} {m.change} ({m.seconds} s)", flush=True)
            Path(args.out).write_text(json.dumps([asdict(r) for r in results], indent=1), encoding="utf-8")
    killed = sum(r.outcome.startswith("killed") for r in results)
    valid = sum(r.outcome != "invalid" and not r.outcome.startswith("error") for r in results)
    print(f"\nkilled {killed} of {valid} mutants ({killed / max(valid, 1):.0%}); survivors:")
    for r in results:
        if r.outcome == "survived":
            print(f"  {r.module}:{r.line}:{r.col} {r.change}")
    if args.effect:
        records = classify([r for r in results if r.outcome == "survived"], args.timeout, args.jobs)
        Path(args.out).with_suffix(".effect.json").write_text(json.dumps(records, indent=1), encoding="utf-8")
        print(score(results, records))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
