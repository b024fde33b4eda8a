"""A fixed battery of product computations, for telling a surviving mutant's effect (``bench.mutate --effect``).

A mutant that no test kills either changes nothing the product computes (it is equivalent in effect) or
changes something no test looks at. This battery runs what the product computes, end to end and kernel by
kernel, on fixed invented inputs, and writes every output to a JSON file:

- every rate method on realistic simulated plates of :mod:`bench.plates` (Michaelis–Menten, low signal,
  Hill, substrate inhibition, lag with decay, falling signal, spikes with saturation), two draws each,
  blank-corrected as the pipeline would, with S0 and signal per concentration and without them;
- the whole pipeline (importers, blank, rates, convert, fit and its model comparison) on the demo recipe and
  on every cookbook recipe of configs/, with the invented plates of ``tests/cookbook_data.py``;
- the readers on the test suite's sample files (``tests/data/readers``);
- the pathlength helpers on every plate geometry and on a straight-walled well;
- the recipe check on every recipe of configs/ and ``verify`` on the stored audit files (``tests/data/audit``).

Run as ``python -m bench.effect_battery OUT.json [--trace FILE:LINE]`` from the root of a source copy (the
copy :mod:`bench.mutate` makes); ``--trace`` also records whether that line of that file was executed
(:class:`LineTracer`, restricted to the one file so the battery runs at nearly full speed). The outputs are
compared with :func:`compare`: numbers by their largest relative difference (with an absolute floor),
everything else exactly. A research tool's self-check, not a validation: the lab's own validated
procedures decide whether a result may be used.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import shutil  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import warnings  # noqa: E402
from collections.abc import Callable, Iterator  # noqa: E402
from contextlib import contextmanager, nullcontext  # noqa: E402
from pathlib import Path  # noqa: E402
from types import FrameType  # noqa: E402
from typing import Any  # noqa: E402

#: Relative difference (of the larger magnitude) within which two numbers count as the same output.
REL_TOL = 1e-9
#: Absolute floor of that comparison: numbers both smaller than this in magnitude count as the same (a
#: rate of 1e-300 and one of 0 are no different result).
ABS_FLOOR = 1e-12
#: Scenarios of :mod:`bench.plates` in the battery, and draws per scenario.
SCENARIOS = ("mm", "low-signal", "hill", "substrate-inhibition", "lag-decay", "falling", "spikes-saturation")
DRAWS = 2

Outputs = dict[str, list[Any]]


class LineTracer:
    """Records which of the watched lines run, via :func:`sys.settrace`: ``watch`` maps a file's path to
    the line numbers of interest in it.

    The global trace function returns a local tracer only for frames of the watched files, so the rest of
    the program runs untraced (calls still pass through the global function, which is cheap). Module-level
    lines count too when the tracer is started before the module is imported."""

    def __init__(self, watch: dict[str, set[int]]) -> None:
        self._given = list(watch)
        self.watch = {os.path.normcase(os.path.realpath(f)): set(lines) for f, lines in watch.items()}
        self.hits: dict[str, set[int]] = {f: set() for f in self.watch}
        self._files: dict[str, str | None] = {}

    def _which(self, filename: str) -> str | None:
        if filename not in self._files:
            real = os.path.normcase(os.path.realpath(filename))
            self._files[filename] = real if real in self.watch else None
        return self._files[filename]

    def _global(self, frame: FrameType, event: str, arg: Any) -> Callable[..., Any] | None:
        f = self._which(frame.f_code.co_filename)
        if f is None:
            return None
        lines, hits = self.watch[f], self.hits[f]
        if frame.f_code.co_firstlineno in lines:  # a def line (its defaults) or a decorator's
            hits.add(frame.f_code.co_firstlineno)

        def local(frame: FrameType, event: str, arg: Any) -> Callable[..., Any] | None:
            if event == "line" and frame.f_lineno in lines:
                hits.add(frame.f_lineno)
            return local

        return local

    def reached(self) -> list[str]:
        """The watched ``file:line`` that ran (paths as given)."""
        back = {os.path.normcase(os.path.realpath(f)): f for f in self._given}
        return sorted(f"{back[f]}:{n}" for f, lines in self.hits.items() for n in lines)

    @contextmanager
    def active(self) -> Iterator[LineTracer]:
        """Trace while the block runs (this thread; the battery runs in one)."""
        old = sys.gettrace()
        sys.settrace(self._global)
        try:
            yield self
        finally:
            sys.settrace(old)


def _plain(x: Any) -> Any:
    """A JSON-ready scalar: floats stay floats (NaN and infinities kept), numpy scalars become Python ones,
    anything else its text."""
    if x is None or isinstance(x, bool | int | float | str):
        return x
    item = getattr(x, "item", None)
    if callable(item):
        try:
            return _plain(item())
        except (TypeError, ValueError):
            pass
    return str(x)


def _flat(values: Any) -> list[Any]:
    import numpy as np

    return [_plain(v) for v in np.asarray(values, dtype=object).ravel().tolist()]


def _rate_methods() -> dict[str, Callable[..., Any]]:
    """Every rate kernel the rates stage offers, by name, with the arguments it needs beyond (t, y)."""
    from vzero.plugins.rates.auto import auto
    from vzero.plugins.rates.choice import model_choice
    from vzero.plugins.rates.lagdecay import lag_decay
    from vzero.plugins.rates.polynomial import polynomial
    from vzero.plugins.rates.progress import progress_curve

    return {"model-choice": model_choice, "auto": auto, "polynomial": polynomial, "progress": progress_curve,
            "progress-power": lambda t, y, **kw: progress_curve(t, y, model="power", **kw),
            "lag-decay": lag_decay}


def rates_part(out: Outputs) -> None:
    """Every rate method on two draws of each scenario, with and without S0, one plate per call."""
    import numpy as np
    from vzero.plugins.rates.window import window_slopes

    from bench.accuracy import blank_corrected
    from bench.plates import draw, integrate, scenarios

    by_name = {sc.name: sc for sc in scenarios()}
    for name in SCENARIOS:
        sc = by_name[name]
        d = draw(sc, integrate(sc), DRAWS, seed=20261203)
        y = blank_corrected(sc, d.sample, d.blank)
        for k in range(DRAWS):
            key = f"rates/{name}/{k}"
            win = window_slopes(sc.time, y[k], float(sc.time[0]), float(sc.time[sc.time.size // 3]))
            out[f"{key}/window/v0"] = _flat(win.v0)
            out[f"{key}/window/stderr"] = _flat(win.stderr)
            out[f"{key}/window/flags"] = _flat(win.flags)
            for method, fn in _rate_methods().items():
                for with_s0 in (True, False):
                    kw = {"s0": sc.s0, "signal_per_conc": sc.spc} if with_s0 else {}
                    tag = f"{key}/{method}/{'s0' if with_s0 else 'signal'}"
                    try:
                        res = fn(sc.time, y[k], **kw)
                    except Exception as exc:  # a mutant's error is an output to compare
                        out[f"{tag}/error"] = [f"{type(exc).__name__}: {exc}"]
                        continue
                    out[f"{tag}/v0"] = _flat(res.v0)
                    out[f"{tag}/stderr"] = _flat(res.stderr)
                    out[f"{tag}/flags"] = _flat(res.flags)
                    for extra, values in sorted(getattr(res, "extra", {}).items()):
                        if isinstance(values, np.ndarray) and values.dtype.kind in "biuf":
                            out[f"{tag}/extra/{extra}"] = _flat(values)


def _tables(out: Outputs, key: str, result: Any, folder: Path) -> None:
    for tname, table in sorted(result.tables.items()):
        frame = table.frame
        for col in frame.columns:
            out[f"{key}/{tname}/{col}"] = [_plain(v).replace(str(folder), "<out>") if isinstance(v, str) else _plain(v)
                                           for v in frame[col].tolist()]
    out[f"{key}/warnings"] = [w.replace(str(folder), "<out>") for w in result.warnings]
    out[f"{key}/failed"] = sorted(f"{k}: {v}".replace(str(folder), "<out>") for k, v in result.failed.items())


def pipeline_part(out: Outputs, root: Path) -> None:
    """The demo recipe and every cookbook recipe, run in full into a temporary folder."""
    sys.path.insert(0, str(root))
    from vzero.api import run
    from vzero.errors import VzeroError

    from tests.cookbook_data import WRITERS

    runs: list[tuple[str, Callable[[Path], Path]]] = []
    for name in sorted(WRITERS):
        def setup(folder: Path, name: str = name) -> Path:
            WRITERS[name](folder)
            shutil.copy(root / "configs" / "cookbook" / name, folder / name)
            return folder / name
        runs.append((f"cookbook/{name}", setup))

    def demo(folder: Path) -> Path:
        for f in ("demo.yaml", "demo_layout.csv", "demo_plate.csv"):
            shutil.copy(root / "configs" / f, folder / f)
        return folder / "demo.yaml"
    runs.append(("demo", demo))
    for key, setup in runs:
        with tempfile.TemporaryDirectory(prefix="vzero-effect-") as tmp:
            folder = Path(tmp)
            recipe = setup(folder)
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    result = run(recipe, folder / "out")
            except VzeroError as exc:
                out[f"pipeline/{key}/error"] = [str(exc).replace(str(folder), "<out>")]
                continue
            except Exception as exc:  # a mutant's crash is an output to compare
                out[f"pipeline/{key}/error"] = [f"{type(exc).__name__}: {str(exc).replace(str(folder), '<out>')}"]
                continue
            _tables(out, f"pipeline/{key}", result, folder)


def readers_part(out: Outputs, root: Path) -> None:
    """The readers on the suite's sample files: times, wells, reads, saturation, assumptions."""
    from vzero.plugins.importers.readers import read_table

    for path in sorted((root / "tests" / "data" / "readers").iterdir()):
        if path.suffix not in (".csv", ".tsv", ".txt") or path.name.startswith("layout"):
            continue
        key = f"readers/{path.name}"
        try:
            blocks = read_table(path.read_bytes(), source=path.name)
        except Exception as exc:  # an error is an output to compare
            out[f"{key}/error"] = [f"{type(exc).__name__}: {exc}"]
            continue
        for b in blocks:
            out[f"{key}/{b.name}/time_s"] = _flat(b.time_s)
            out[f"{key}/{b.name}/wells"] = list(b.wells)
            out[f"{key}/{b.name}/signal"] = _flat(b.signal)
            out[f"{key}/{b.name}/saturated"] = _flat(b.saturated)
            out[f"{key}/{b.name}/assumptions"] = list(b.assumptions)


def convert_part(out: Outputs) -> None:
    """The pathlength helpers on every plate geometry and on an invented straight-walled well: the height
    at 10-90 % of capacity, the volume back from heights, and water-peak pathlengths."""
    import numpy as np
    from vzero.plugins.convert.pathlength import (
        PLATE_GEOMETRIES,
        WellGeometry,
        pathlength_from_volume,
        pathlength_from_water_peak,
        volume_to_height_inverse,
    )

    wells = [*PLATE_GEOMETRIES.values(), WellGeometry("straight-invented", "square", 3.0, 3.0, 10.0, "invented")]
    for g in wells:
        key = f"convert/{g.name}"
        out[f"{key}/cm"] = _flat(pathlength_from_volume(g.capacity_ul * np.array([0.1, 0.5, 0.9]), g))
        out[f"{key}/ul"] = _flat(volume_to_height_inverse(g, g.depth_mm * np.array([0.0, 0.25, 0.5, 1.0])))
    out["convert/water"] = _flat(pathlength_from_water_peak(np.array([0.2, 0.1, 0.05]), np.array([0.02, 0.1, 0.01])))


def checks_part(out: Outputs, root: Path) -> None:
    """The recipe check on every recipe in configs/ and ``verify`` on every stored audit file."""
    from vzero.api import check, verify

    for path in sorted((root / "configs").rglob("*.yaml")):
        key = f"recipe/{path.relative_to(root).as_posix()}"
        try:
            rec = check(path)
            out[key] = [repr(rec.steps).replace(str(root), "<root>"), repr(rec.plates).replace(str(root), "<root>")]
        except Exception as exc:  # a refusal is an output to compare
            out[key] = [f"{type(exc).__name__}: {str(exc).replace(str(root), '<root>')}"]
    for path in sorted((root / "tests" / "data" / "audit").glob("*.h5")):
        rep = verify(path)
        out[f"verify/{path.name}"] = [rep.text().replace(str(root), "<root>")]


PARTS = ("rates", "pipeline", "readers", "convert", "checks")


def run_battery(root: Path, parts: tuple[str, ...] = PARTS) -> Outputs:
    """Every output of the battery (``parts`` of :data:`PARTS`), keyed by where it came from."""
    out: Outputs = {}
    if "rates" in parts:
        rates_part(out)
    if "pipeline" in parts:
        pipeline_part(out, root)
    if "readers" in parts:
        readers_part(out, root)
    if "convert" in parts:
        convert_part(out)
    if "checks" in parts:
        checks_part(out, root)
    return out


def _same(a: Any, b: Any, rel: float, floor: float) -> tuple[bool, float]:
    """Whether two scalars count as the same output, and their relative difference (0 for equal non-numbers,
    infinity for differing ones)."""
    num = (int, float)
    if isinstance(a, num) and isinstance(b, num) and not isinstance(a, bool) and not isinstance(b, bool):
        fa, fb = float(a), float(b)
        if isinstance(a, int) and isinstance(b, int) and a != b:  # counts and flags: exactly
            return False, math.inf
        if math.isnan(fa) or math.isnan(fb):
            return (math.isnan(fa) and math.isnan(fb)), (0.0 if math.isnan(fa) and math.isnan(fb) else math.inf)
        if fa == fb:
            return True, 0.0
        if math.isinf(fa) or math.isinf(fb):
            return False, math.inf
        scale = max(abs(fa), abs(fb))
        if scale < floor:
            return True, 0.0
        d = abs(fa - fb) / scale
        return d <= rel, d
    return (a == b and type(a) is type(b)), (0.0 if a == b and type(a) is type(b) else math.inf)


def compare(base: Outputs, other: Outputs, rel: float = REL_TOL, floor: float = ABS_FLOOR) -> dict[str, float]:
    """The outputs that differ, each with its largest relative difference (infinity where a key, a length,
    a text, an integer or a NaN differs). Floats count as the same within ``rel`` of the larger magnitude,
    or when both are below ``floor`` in magnitude; ints, bools and texts only when equal."""
    diffs: dict[str, float] = {}
    for key in sorted(set(base) | set(other)):
        a, b = base.get(key), other.get(key)
        if a is None or b is None or len(a) != len(b):
            diffs[key] = math.inf
            continue
        worst, same = 0.0, True
        for x, y in zip(a, b, strict=True):
            ok, d = _same(x, y, rel, floor)
            same &= ok
            if not ok:
                worst = max(worst, d)
        if not same:
            diffs[key] = worst
    return diffs


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m bench.effect_battery", description=__doc__.splitlines()[0])
    ap.add_argument("out", help="JSON file for the outputs (and the lines reached)")
    ap.add_argument("--trace", action="append", default=[], help="FILE:LINE (repeatable): also record whether "
                    "this line runs (FILE relative to the folder the battery runs in, as imported, e.g. "
                    "vzero/plugins/rates/progress.py in the copy bench.mutate makes)")
    ap.add_argument("--parts", default=",".join(PARTS), help=f"comma-separated subset of {', '.join(PARTS)}")
    args = ap.parse_args(argv)
    root = Path.cwd()
    parts = tuple(p for p in args.parts.split(",") if p)
    watch: dict[str, set[int]] = {}
    for item in args.trace:
        file, _, line = item.rpartition(":")
        watch.setdefault(file, set()).add(int(line))
    tracer = LineTracer({str(root / f): lines for f, lines in watch.items()})
    with tracer.active() if watch else nullcontext():
        outputs = run_battery(root, parts)
    reached = [r.removeprefix(str(root) + os.sep) for r in tracer.reached()]
    Path(args.out).write_text(json.dumps({"reached": reached, "outputs": outputs}), encoding="utf-8")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
