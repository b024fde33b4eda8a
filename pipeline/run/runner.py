"""Executing a recipe: plates through the plate-scoped steps (a map), then pooled and final steps (a reduce),
with every raw input, step and result written to the audit file, atomically.

Use :func:`run` from Python (it returns the tables as DataFrames) or ``vzero run`` from a shell.
"""

from __future__ import annotations

import functools
import hashlib
import os
import shutil
import tempfile
import time
import uuid
from collections.abc import Callable, Iterable, Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol

import pandas as pd
from vzero.audit.codec import to_json
from vzero.data import Table, Traces
from vzero.errors import InputFileError, OutputExistsError, OutputWriteError, StageError, VzeroError
from vzero.manager import Plugins, make_manager
from vzero.recipe import PlateSpec, Recipe, StepSpec, check, load, parse
from vzero.run.executors import Executor, PlateStore, PlateTask, make_executor, ordered, run_plate_task
from vzero.run.outputs import CsvInWorkers, write_outputs
from vzero.run.steps import PlateOutcome, StepRecord, process_plate, run_step, stack_step_tables, utc_now
from vzero.run.swap import alive, exchange
from vzero.stage import RawInput


class InputSource(Protocol):
    """Where the raw bytes of input files come from: the disk, or an old audit file when rerunning."""

    def exists(self, rel: str) -> bool: ...

    def read(self, rel: str) -> bytes: ...

    def expand(self, pattern: str) -> list[str]: ...


#: How many bytes of input files a run reads at most unless told otherwise (``vzero run --max-input``).
MAX_INPUT_BYTES = 2 * 1024**3


@dataclass
class DiskInputs:
    """Input files on disk, relative to the recipe's folder.

    Files outside that folder (an absolute path, ``../``) are read when the recipe or its manifest names
    them, and each one is recorded in ``outside`` (resolved path, size in bytes) so that the run lists them
    on the console and in the audit file's warnings: a received recipe cannot take a file from elsewhere on
    this machine into its audit file unseen. At most ``budget`` bytes are read in all."""

    base: Path
    budget: int = MAX_INPUT_BYTES
    used: int = 0
    outside: dict[str, int] = field(default_factory=dict)

    @functools.cached_property
    def _root(self) -> Path:
        """The recipe's folder, resolved once (a batch reads two files a plate)."""
        return self.base.resolve()

    def exists(self, rel: str) -> bool:
        return (self.base / rel).is_file()

    def read(self, rel: str) -> bytes:
        path = self.base / rel
        try:
            size = path.stat().st_size
            if self.used + size > self.budget:
                raise InputFileError(
                    f"reading this file ({size} bytes) would take the run past its input budget of "
                    f"{self.budget} bytes ({self.used} read so far)", path=rel,
                    hint="Check that the recipe names the files you meant; pass --max-input (e.g. 8G) to "
                         "allow more.")
            data = path.read_bytes()
        except OSError as exc:
            raise InputFileError(f"cannot read the file: {exc.strerror}", path=rel) from None
        self.used += len(data)
        resolved = path.resolve()
        if not resolved.is_relative_to(self._root):
            self.outside[str(resolved)] = len(data)
        return data

    def expand(self, pattern: str) -> list[str]:
        import glob

        return sorted(str(Path(p).relative_to(self.base)) for p in glob.glob(str(self.base / pattern)))


@dataclass
class RunResult:
    """The outcome of a run: the final tables, where the audit file is, warnings and failed plates."""

    out_dir: Path
    audit_path: Path
    tables: dict[str, Table]
    warnings: list[str]
    failed: dict[str, str]
    audit_seconds: float = 0.0
    failed_items: list[str] = field(default_factory=list)
    csv_seconds: float = 0.0
    """Time this process spent formatting and writing the CSV exports (for the benchmarks)."""
    cpu: dict[str, float] = field(default_factory=dict)
    """Processor time in seconds (for the benchmarks): ``map`` this process (the driver) while plates ran,
    ``imports`` the part of ``map`` spent importing, in a thread, modules the pooled steps need later (a
    one-off; 0 if not finished by the map's end), ``run`` this process over the whole run, ``plates`` the
    worker processes on their plates (0 without workers), ``audit`` this process writing the audit file."""

    @property
    def rates(self) -> pd.DataFrame:
        return self.tables["rates"].frame if "rates" in self.tables else pd.DataFrame()

    @property
    def fits(self) -> pd.DataFrame:
        return self.tables["fits"].frame if "fits" in self.tables else pd.DataFrame()

    @property
    def exit_code(self) -> int:
        """0 when everything ran, 1 when the run finished but plates or wells failed."""
        return 1 if self.failed or self.failed_items else 0


def prepare(
    recipe: str | Path | Recipe,
    *,
    inputs: InputSource | None = None,
    extra_plugins: Iterable[tuple[str, object]] = (),
    skipped: list[str] | None = None,
) -> tuple[Recipe, Plugins, InputSource]:
    """Load the recipe, build the plugins it names, and validate it in full. Nothing is run or written.

    With a ``skipped`` list the recipe's own plugins (local files, modules) are not imported: the steps
    that need them are listed there unchecked (``vzero check`` runs no code a recipe names)."""
    rec = recipe if isinstance(recipe, Recipe) else load(recipe)
    local = rec.plugin_entries if skipped is None else []
    plugins = make_manager(local, base_dir=rec.base_dir, extra=extra_plugins)
    source = inputs or DiskInputs(rec.base_dir)

    def plugin_checks(r: Recipe) -> list[str]:
        names = [p.name for p in r.plates]
        found = plugins.hook.vzero_check_recipe(recipe=r.data, where=r.where, plates=names)
        return [msg for msgs in found for msg in msgs or []]

    check(rec, plugins.registry, exists=source.exists, expand=source.expand, extra_checks=plugin_checks,
          skipped=skipped if rec.plugin_entries else None)
    return rec, plugins, source


@dataclass(frozen=True)
class Progress:
    """A progress report from :func:`run`: ``done`` of ``total`` plates finished (``plate`` just now, with
    its ``error`` if it failed), or a pooled/final ``step`` starting; ``seconds`` since the run began."""

    done: int
    total: int
    plate: str | None = None
    error: str | None = None
    step: str | None = None
    seconds: float = 0.0


#: Batches with more plates than this keep only each plate's tables in memory (its traces and step outputs
#: are read back from the audit file being written when a final step needs them).
SPILL_AFTER = 1


def run(
    recipe: str | Path | Recipe,
    out: str | Path,
    *,
    force: bool = False,
    inputs: InputSource | None = None,
    extra_plugins: Iterable[tuple[str, object]] = (),
    derived_from: Mapping[str, Any] | None = None,
    progress: Callable[[Progress], None] | None = None,
    jobs: int = 1,
    scheduler: str | None = None,
    executor: Executor | None = None,
    spill: bool | None = None,
    max_input_bytes: int = MAX_INPUT_BYTES,
) -> RunResult:
    """Run ``recipe`` and write ``out``/run.h5 and one CSV per final table (rates.csv, fits.csv, ...).

    Plates go through the plate-scoped steps one by one (a map), in ``jobs`` local processes, on the Dask
    cluster at ``scheduler`` (``"local"`` starts one on this machine) or on a given ``executor``; the pooled
    and final steps then run once on the stacked tables (the reduce). A plate that fails is reported by name
    in ``RunResult.failed`` and the others go on. Each finished plate is written to the audit file at once;
    with more than one plate only its tables stay in memory (``spill`` forces either way), so memory does not
    grow with the batch. Only this process writes the audit file; the numbers do not depend on where plates
    ran.

    The run is written to a temporary folder beside ``out`` and renamed into place only when complete, so
    a failed or killed run leaves nothing at ``out`` (and a previous run there untouched). An existing run
    at ``out`` is replaced only with ``force=True``.
    """
    rec, plugins, source = prepare(recipe, inputs=inputs, extra_plugins=extra_plugins)
    if isinstance(source, DiskInputs):
        source.budget = max_input_bytes
    out_dir = Path(out)
    _check_output_folder(out_dir, force, rec)
    t_start = time.perf_counter()
    cpu_start = time.process_time()
    started = utc_now()
    run_id = uuid.uuid4().hex
    warnings: list[str] = list(rec.notices)  # notices of the check (old plate keys)
    plate_steps = [s for s in rec.steps if _scope(plugins, s) == "plate"]
    later_steps = [s for s in rec.steps if _scope(plugins, s) != "plate"]

    own_executor = executor is None
    executor = executor if executor is not None else make_executor(jobs, scheduler)
    if executor is not None and list(extra_plugins):
        raise VzeroError("plugins handed to run() in Python cannot be sent to worker processes",
                         hint="Name them in the recipe's plugins list, or run with one job.")
    if spill is None:
        spill = len(rec.plates) > SPILL_AFTER
    start_workers = getattr(executor, "start", None)
    if start_workers is not None:
        start_workers(rec.text, rec.path)
    warm: dict[str, float] = {}
    if executor is not None and later_steps:
        import threading

        threading.Thread(target=_warm_imports, args=(warm,), daemon=True).start()
    from vzero.audit.writer import AuditWriter

    tmp = _temporary_folder(out_dir)
    writer: AuditWriter | None = None
    csv_workers: CsvInWorkers | None = None
    try:
        writer = AuditWriter(tmp / "run.h5", rec, plugins, run_id)
        store = PlateStore(writer, hold=not spill)
        total = len(rec.plates)
        for outcome in _map_plates(rec, plugins, source, plate_steps, run_id, executor, store):
            store.add(outcome)
            if progress:
                progress(Progress(len(store.outcomes), total, outcome.plate, outcome.error,
                                  seconds=time.perf_counter() - t_start))
        outcomes = store.outcomes
        outside = dict(getattr(source, "outside", {}))
        warnings.extend(f"read a file outside the recipe's folder: {p} ({n} bytes)" for p, n in outside.items())
        cpu = {"map": time.process_time() - cpu_start, "plates": sum(o.cpu_seconds for o in outcomes),
               "imports": warm.get("cpu", 0.0)}
        failed = {o.plate: o.error for o in outcomes if o.error}
        ok = [o for o in outcomes if not o.error]
        for o in outcomes:
            warnings.extend(f"{o.plate}: {w}" for w in o.warnings)
        if not ok:
            if len(outcomes) == 1:
                raise _reraise(outcomes[0])
            raise StageError("every plate failed:\n" + "\n".join(f"  {k}: {v}" for k, v in failed.items()))

        pooled: dict[str, Any] = _pool(ok, store.traces())
        # large stacked tables (the rates of every plate) go to CSV in idle workers while the driver fits
        csv_workers = CsvInWorkers(executor, tmp)
        csv_workers.start(pooled)
        records: list[StepRecord] = [r for o in ok for r in o.records]
        files: dict[str, bytes] = {}
        stacked: set[str] = set()  # tables of stacking steps (several fit steps add up)
        for spec in later_steps:
            if own_executor and executor is not None and _scope(plugins, spec) == "final" \
                    and getattr(executor, "shares_disk", False):
                # a final step (the report) may share its work out to forked processes, which is safe only
                # once the pool's own threads are gone; its idle workers are not needed any more
                csv_workers.detach()  # the pool's last work: the CSV pieces it has begun
                executor.close()
                executor = None
            if progress:
                progress(Progress(len(outcomes), total, step=f"{spec.kind}:{spec.method}",
                                  seconds=time.perf_counter() - t_start))
            info = _run_info(rec, plugins, run_id, started, store, records, warnings, failed)
            output, record = run_step(spec, plugins, None, pooled, {}, rec, run_id, info)
            warnings.extend(record.warnings)
            schema = plugins.registry.schema(spec.kind)
            pooled.update(stack_step_tables(pooled, output.artifacts, stacked) if schema is not None
                          and schema.stacks else output.artifacts)
            files.update(output.files)
            records.append(record)
            writer.add_record(record)

        final_tables = {k: v for k, v in pooled.items() if isinstance(v, Table)}
        failed_items = [item for r in records for item in r.failed]
        writer.failed_items = failed_items
        csv_workers.start(final_tables)
        writer.finish(final_tables, warnings, failed, derived_from)
        csv_seconds = write_outputs(tmp, final_tables, files, failed, csv_workers)
        _swap_into_place(tmp, out_dir, force)
        cpu["run"] = time.process_time() - cpu_start
        cpu["audit"] = writer.cpu_seconds
        return RunResult(out_dir, out_dir / "run.h5", dict(final_tables), warnings, dict(failed),
                         audit_seconds=writer.seconds, failed_items=failed_items, csv_seconds=csv_seconds, cpu=cpu)
    except BaseException as exc:
        if writer is not None:
            writer.close()
        if csv_workers is not None:  # let workers finish writing into tmp before it is removed
            csv_workers.finish()
        shutil.rmtree(tmp, ignore_errors=True)
        if isinstance(exc, OSError | OutputWriteError):
            raise _at_target(exc, tmp, out_dir) from None
        raise
    finally:
        if own_executor and executor is not None:
            executor.close()


def _at_target(exc: OSError | OutputWriteError, tmp: Path, out_dir: Path) -> OutputWriteError:
    """The error of a failed write, naming the file at the target rather than in the temporary folder."""
    cause = exc.__cause__ if isinstance(exc, OutputWriteError) else exc
    path = getattr(exc, "path", None) or getattr(cause, "filename", None) or tmp
    try:
        shown = out_dir / Path(str(path)).relative_to(tmp)
    except ValueError:
        shown = Path(str(path))
    if isinstance(cause, OSError):
        return OutputWriteError.from_os(cause, shown)
    return OutputWriteError(str(exc).replace(str(tmp), str(out_dir)))


def _run_info(
    rec: Recipe,
    plugins: Plugins,
    run_id: str,
    started: str,
    store: Any,
    records: list[StepRecord],
    warnings: list[str],
    failed: Mapping[str, str | None],
) -> dict[str, Any]:
    """What a pooled or final stage may know about the run so far (see :class:`vzero.stage.StageInput`)."""
    steps: dict[str, dict[str, Any]] = {}
    for r in records:
        entry = plugins.registry.get(r.spec.kind, r.spec.method)
        item = steps.setdefault(r.spec.label, {"label": r.spec.label, "plugin": entry.source.plugin,
                                               "distribution": entry.source.distribution,
                                               "version": str(getattr(entry.component, "version", "")),
                                               "seconds": 0.0, "parameters": to_json(dict(r.spec.written))})
        item["seconds"] += r.seconds
    inputs = [{"name": raw.name, "key": raw.key, "sha256": sha, "size": raw.size,
               "plates": list(store.input_plates.get(sha, []))} for sha, raw in store.raws.items()]
    return {"run_id": run_id, "started": started, "recipe_text": rec.text, "recipe_sha256": rec.sha256,
            "inputs": inputs, "warnings": list(warnings), "failed": dict(failed), "steps": list(steps.values())}


def _map_plates(
    rec: Recipe,
    plugins: Plugins,
    source: InputSource,
    steps: list[StepSpec],
    run_id: str,
    executor: Executor | None,
    store: PlateStore,
) -> Iterator[PlateOutcome]:
    """Each plate's outcome, in recipe order, computed here or by ``executor`` (bounded number in flight).

    A plate whose input files cannot be read fails alone. The manifests that listed plates are stored as
    inputs of every plate they list.
    """
    manifest_raws = {f"manifest{i or ''}": _raw(source, "manifest", rel) for i, rel in enumerate(rec.manifests)}

    def read(plate: PlateSpec) -> dict[str, RawInput] | PlateOutcome:
        try:
            raws = {key: _raw(source, key, rel) for key, rel in plate.files.items()}
        except VzeroError as exc:
            return PlateOutcome(plate.name, {"exception": exc}, error=str(exc))
        store.add_raws(plate.name, raws)
        return raws

    if manifest_raws:
        for plate in rec.plates:
            store.add_raws(plate.name, manifest_raws)
    if executor is None:
        for plate in rec.plates:
            raws = read(plate)
            yield raws if isinstance(raws, PlateOutcome) else process_plate(plate, raws, rec, plugins, steps, run_id)
        return

    def tasks() -> Iterator[PlateTask | PlateOutcome]:
        for plate in rec.plates:
            raws = read(plate)
            yield raws if isinstance(raws, PlateOutcome) else PlateTask(rec.text, rec.path, plate, raws, run_id)

    chunk = plates_per_task(len(rec.plates), executor.workers)
    yield from ordered(executor, run_plate_task, tasks(), window=2 * executor.workers * chunk, chunk=chunk)


#: At most this many plates go to a worker in one task. Each task costs the driver a round trip through the
#: executor (the task and its result sent, queued and woken up for), which is most of its work per plate
#: after the audit file; a few plates per task divide that, while the last tasks of a batch stay short.
MAX_PLATES_PER_TASK = 8


def plates_per_task(n_plates: int, workers: int) -> int:
    """How many plates to send a worker at once: up to :data:`MAX_PLATES_PER_TASK`, and few enough that
    every worker gets at least eight tasks (so the batch still ends with all workers busy)."""
    return max(1, min(MAX_PLATES_PER_TASK, n_plates // (8 * max(1, workers))))


def _reraise(outcome: PlateOutcome) -> BaseException:
    exc = outcome.artifacts.get("exception")
    return exc if isinstance(exc, BaseException) else StageError(outcome.error or "plate failed")


def _scope(plugins: Plugins, spec: StepSpec) -> str:
    return str(plugins.registry.get(spec.kind, spec.method).component.scope)


def _raw(source: InputSource, key: str, rel: str) -> RawInput:
    data = source.read(rel)
    return RawInput(key=key, name=rel, data=data, sha256=hashlib.sha256(data).hexdigest())


def _pool(outcomes: list[PlateOutcome], traces: Mapping[str, Traces]) -> dict[str, Any]:
    """Stack each plate's tables and keep traces per plate. Every row names its plate as the recipe does: a
    table without a ``plate`` column gets one first; one whose ``plate`` column says otherwise (a plugin that
    named its traces differently) is given the recipe's name."""
    from vzero.run.packed import PackedTable, stack

    pooled: dict[str, Any] = {}
    names = {k for o in outcomes for k, v in o.artifacts.items() if isinstance(v, Table | PackedTable)}
    for name in sorted(names):
        found = [(o.plate, o.artifacts.get(name)) for o in outcomes]
        packed = [t for _, t in found if isinstance(t, PackedTable)]
        if len(packed) == len(found) and "plate" in packed[0].names \
                and all(bool((t.column("plate") == plate).all()) for plate, t in found):  # type: ignore[union-attr]
            stacked = stack(packed)  # a worker's tables, already naming the recipe's plates: stacked at once
            if stacked is not None:
                pooled[name] = stacked
                continue
        tables = []
        for o in outcomes:
            t = o.artifacts.get(name)
            if isinstance(t, PackedTable):
                t = t.unpack()
            if isinstance(t, Table):
                frame = t.frame
                if "plate" in frame.columns and bool((frame["plate"].astype(str) == o.plate).all()):
                    tables.append(t)  # already names the recipe's plate (the built-in rates tables do)
                    continue
                frame = frame.copy()
                if "plate" in frame.columns:  # the recipe's plate name is the one every output uses
                    frame["plate"] = o.plate
                else:
                    frame.insert(0, "plate", o.plate)
                tables.append(t.with_frame(frame))
        pooled[name] = Table.concat(tables)
    pooled["traces"] = traces
    return pooled


def _check_output_folder(out_dir: Path, force: bool, rec: Recipe) -> None:
    """Refuse an output folder that would lose something: a file in its place, a folder with files (without
    ``force``), and even with ``force`` a folder that is not a previous vzero run, or that holds the recipe.
    What a killed run left beside the target is cleaned up (or put back) first."""
    if out_dir.resolve().parent.is_dir():
        _recover(out_dir, out_dir.resolve().parent)
    if not out_dir.exists():
        return
    if not out_dir.is_dir():
        raise OutputExistsError(f"--out {str(out_dir)!r} is a file, not a folder", hint="Choose a folder name.")
    if not any(out_dir.iterdir()):
        return
    if not force:
        raise OutputExistsError(f"output folder {str(out_dir)!r} already holds files",
                                hint="Choose another --out, or pass --force to replace it.")
    here = out_dir.resolve()
    recipe_path = Path(rec.path).resolve()
    if here == recipe_path.parent or here in recipe_path.parents:
        raise OutputExistsError(f"output folder {str(out_dir)!r} holds the recipe; --force would delete it",
                                hint="Write runs to a folder of their own.")
    if not _is_vzero_run(out_dir):
        raise OutputExistsError(
            f"output folder {str(out_dir)!r} holds files but no vzero run (no run.h5 made by vzero)",
            hint="--force replaces only a previous run; choose another --out.",
        )


def _is_vzero_run(folder: Path) -> bool:
    """Whether ``folder/run.h5`` is a vzero audit file (any version)."""
    target = folder / "run.h5"
    if not target.is_file():
        return False
    try:
        import h5py

        with h5py.File(target, "r") as f:
            from vzero.audit.codec import FORMAT_NAME

            return bool(f.attrs.get("format") == FORMAT_NAME)
    except OSError:
        return False


def _parent(out_dir: Path) -> Path:
    """The folder that holds ``out_dir`` (created if missing): temporary files go there, on the same disk."""
    parent = out_dir.resolve().parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:  # a file where a folder should be, a read-only disk, no permission
        raise OutputWriteError.from_os(exc, exc.filename or parent) from None
    return parent


def _temporary_folder(out_dir: Path) -> Path:
    """A new folder beside ``out_dir`` (same file system, so the final rename is atomic), with the ordinary
    permissions of a folder the user makes (mkdtemp makes it private).

    Its name carries this process's id. A run that was killed outright (SIGKILL, power loss) cannot remove
    its folder; the next run into the same target removes the partial folders of processes that are gone
    (and puts back a previous run that a killed ``--force`` had moved aside: :func:`_recover`).
    """
    parent = _parent(out_dir)
    _recover(out_dir, parent)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.partial-{os.getpid()}-", dir=parent))
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o777 & ~umask)
    return tmp


#: Modules the built-in pooled steps import on first use. With worker processes the driver mostly waits while
#: plates run, so it imports them then, in a thread. (scipy.optimize is left out: the fit imports it only for
#: the rare group its batched iteration hands to scipy's solver.)
WARM_IMPORTS = ("scipy.special",)


def _warm_imports(done: dict[str, float]) -> None:
    """Import :data:`WARM_IMPORTS`; record in ``done["cpu"]`` the processor time it took (a one-off cost of
    the pooled steps, paid while plates run: the benchmarks report it apart from the driver's work per
    plate)."""
    import importlib

    t0 = time.thread_time()
    for name in WARM_IMPORTS:
        try:
            importlib.import_module(name)
        except ImportError:  # pragma: no cover - then the step that needs it says so
            pass
    done["cpu"] = time.thread_time() - t0


def _swap_into_place(tmp: Path, out_dir: Path, force: bool) -> None:
    """Put the finished run at ``out_dir``. A previous run there (``force``) is swapped out in one atomic
    step where the system can (Linux ``renameat2`` with ``RENAME_EXCHANGE``), so a kill at any moment leaves
    either the old or the new run at the target; the old run then sits in the temporary folder, which the
    next run removes. Elsewhere it is moved aside under a name that carries this process's id first: if the
    process dies between the two renames, the next run into the same target moves it back (see
    :func:`_recover`)."""
    if out_dir.exists():
        if not force and any(out_dir.iterdir()):
            raise OutputExistsError(f"output folder {str(out_dir)!r} already holds files", hint="Pass --force.")
        if exchange(tmp, out_dir):
            shutil.rmtree(tmp, ignore_errors=True)  # now the old run
            return
        old = out_dir.parent / f".{out_dir.name}.old-{os.getpid()}-{uuid.uuid4().hex[:8]}"
        os.replace(out_dir, old)
        os.replace(tmp, out_dir)
        shutil.rmtree(old, ignore_errors=True)
    else:
        os.replace(tmp, out_dir)


def _recover(out_dir: Path, parent: Path) -> None:
    """Clean up after runs into ``out_dir`` that were killed: their partial folders are removed, and a
    previous run moved aside by a ``--force`` that died before its new run was in place is moved back (or
    removed, when a run is at the target)."""
    for stale in sorted(parent.glob(f".{out_dir.name}.partial-*")) + sorted(parent.glob(f".{out_dir.name}.old-*")):
        rest = stale.name.removeprefix(f".{out_dir.name}.").split("-", 2)
        if len(rest) < 2 or not rest[1].isdigit() or alive(int(rest[1])):
            continue
        if rest[0] == "old" and not out_dir.exists():
            os.replace(stale, out_dir)  # the old run back where it was
        else:
            shutil.rmtree(stale, ignore_errors=True)


def check_recipe(recipe: str | Path, *, load_plugins: bool = False) -> Recipe:
    """Validate a recipe and its input files without running it (``vzero check``); see :func:`check_inputs`."""
    return check_inputs(recipe, load_plugins=load_plugins).recipe


@dataclass
class CheckResult:
    """What ``vzero check`` found: the validated ``recipe``, the ``warnings`` a run would give at its start
    (per plate) and the checks ``skipped`` (steps from recipe-named plugin files)."""

    recipe: Recipe
    warnings: list[str]
    skipped: list[str]


def check_inputs(
    recipe: str | Path | Recipe, *, inputs: InputSource | None = None, load_plugins: bool = False
) -> CheckResult:
    """Validate the recipe, then read every plate's data and layout and run each plate step's preflight
    (:meth:`vzero.stage.Stage.preflight`): everything a run would reject at its start, without running.

    Every plate is checked and every problem is reported together (one :class:`VzeroError`, one line per
    plate). The plugins a recipe names (local files, modules) are not even imported unless ``load_plugins``
    (a check runs no code a recipe names): the steps that need them are listed in ``skipped``. With
    ``load_plugins``, their steps are validated but their input checks still do not run.
    """
    from vzero.errors import join_sentences
    from vzero.run.steps import preflight_plate

    unchecked: list[str] | None = None if load_plugins else []
    rec, plugins, source = prepare(recipe, inputs=inputs, skipped=unchecked)
    known = [s for s in rec.steps if (s.kind, s.method) in plugins.registry]
    plate_steps = [s for s in known if _scope(plugins, s) == "plate"]

    def local(spec: StepSpec) -> bool:
        return bool(plugins.registry.get(spec.kind, spec.method).source.path)

    skipped = [f"{where}: not validated, its plugin was not imported" for where in unchecked or []]
    skipped += [f"step {s.index} ({s.kind}: {s.method}) comes from the plugin file "
               f"{plugins.registry.get(s.kind, s.method).source.path}; its input checks were not run"
               for s in plate_steps if local(s)]
    problems: list[str] = []
    warnings: list[str] = list(rec.notices)
    for plate in rec.plates:
        try:
            raws = {key: _raw(source, key, rel) for key, rel in plate.files.items()}
            found = preflight_plate(plate, raws, rec, plugins, plate_steps, skip=local)
        except VzeroError as exc:
            problems.append(f"{plate.name}: {join_sentences(str(exc), None)}")
            continue
        warnings.extend(f"{plate.name}: {w}" for w in found)
    if problems:
        head = "" if len(problems) == 1 else f"{len(problems)} plates would fail:\n"
        raise InputFileError(head + "\n".join(problems), hint="Nothing was run.")
    return CheckResult(rec, warnings, skipped)


def parse_recipe_text(text: str, path: str) -> Recipe:
    return parse(text, path)
