"""Where the per-plate map of a batch runs: in this process, in a local process pool, or on a Dask cluster.

The plugin manager cannot be pickled (plugins are modules), so a worker receives only plain data, a
:class:`PlateTask` (the recipe's text and path, the plate's entry and its raw input bytes), rebuilds the
plugins from the recipe once per process and runs the plate-scoped steps there. Outcomes come back to the
driver, which alone writes the audit file. The same function runs the plate whatever the executor, so the
numbers are the same to the bit. A long batch sends a worker several plates per task (:func:`ordered`), so
that the driver's traffic with the executor is paid once for the lot.

* :class:`PoolExecutor`: ``--jobs N``, a :class:`concurrent.futures.ProcessPoolExecutor` of N processes.
* :class:`DaskExecutor`: ``--scheduler ADDRESS`` (``tcp://host:8786``) on a running Dask distributed
  cluster, or ``--scheduler local`` for a :class:`distributed.LocalCluster` on this machine. Dask is an
  optional extra (``pip install 'vzero[dask]'``), imported only here and only when asked for.

Workers on other machines must see the recipe's local plugin files at the same path (a shared folder);
installed plugin packages must be installed on every worker.
"""

from __future__ import annotations

import functools
import os
import pickle
from collections import deque
from collections.abc import Callable, Iterable, Iterator, Mapping
from dataclasses import dataclass
from typing import Any, Protocol

from vzero.errors import VzeroError
from vzero.recipe import PlateSpec
from vzero.stage import RawInput

#: Environment variables that keep each worker's numeric libraries on one thread (N workers, N cores).
_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


@dataclass(frozen=True)
class PlateTask:
    """Everything a worker needs for one plate, as plain picklable data."""

    recipe_text: str
    recipe_path: str
    plate: PlateSpec
    raws: Mapping[str, RawInput]
    run_id: str


class Future(Protocol):
    def result(self) -> Any: ...


class Executor(Protocol):
    """Runs :func:`run_plate_task` somewhere; ``workers`` is how many plates may run at once."""

    workers: int
    name: str

    def submit(self, fn: Callable[[PlateTask], Any], task: PlateTask) -> Future: ...

    def close(self) -> None: ...


def run_plate_task(task: PlateTask) -> Any:
    """Run one plate's plate-scoped steps in a worker (returns a :class:`vzero.run.steps.PlateOutcome`).

    A problem with the recipe or plugins in the worker becomes the plate's error, like a bad input file.
    """
    import time

    from vzero.run.steps import PlateOutcome, process_plate

    cpu = time.process_time()
    try:
        rec, plugins, steps = _worker_setup(task.recipe_text, task.recipe_path)
    except VzeroError as exc:
        return PlateOutcome(task.plate.name, {"exception": exc}, error=f"worker setup: {exc}")
    outcome = process_plate(task.plate, task.raws, rec, plugins, steps, task.run_id)
    if not outcome.error:
        _pack(outcome)
    raised = outcome.artifacts.get("exception")
    if raised is not None:
        try:
            pickle.loads(pickle.dumps(raised))
        except Exception:  # an exception type that cannot cross processes: keep its message
            outcome.artifacts = {"exception": VzeroError(str(raised))}
    outcome.cpu_seconds = time.process_time() - cpu
    return outcome


def _pack(outcome: Any) -> None:
    """Write the plate's step outputs into an in-memory HDF5 part here, in the worker, and keep only the
    tables, as plain column arrays (:mod:`vzero.run.packed`): encoding the arrays is most of the audit file's
    cost, and this way it runs in parallel."""
    from vzero.audit.writer import write_part
    from vzero.data import Table
    from vzero.run.packed import pack

    final = outcome.artifacts.get("traces")
    for record in outcome.records:
        if final is not None and any(v is final for v in record.outputs.values()):
            outcome.part_traces = record.spec.label
    outcome.part, outcome.part_digests = write_part(outcome.records)
    for record in outcome.records:
        record.outputs = {}
    outcome.artifacts = {k: pack(v) for k, v in outcome.artifacts.items() if isinstance(v, Table)}


@functools.lru_cache(maxsize=4)
def _worker_setup(recipe_text: str, recipe_path: str) -> tuple[Any, Any, list[Any]]:
    """Parse the recipe, build the plugins it names and validate its steps: once per worker process."""
    from vzero.manager import make_manager
    from vzero.recipe import check, parse

    rec = parse(recipe_text, recipe_path)
    plugins = make_manager(rec.plugin_entries, base_dir=rec.base_dir)
    check(rec, plugins.registry, plates=False)
    steps = [s for s in rec.steps if plugins.registry.get(s.kind, s.method).component.scope == "plate"]
    return rec, plugins, steps


def _one_thread() -> None:
    """Process-pool initializer: one BLAS/OpenMP thread per worker (libraries not yet loaded honour it)."""
    for var in _THREAD_VARS:
        os.environ.setdefault(var, "1")


class PoolExecutor:
    """A local pool of ``jobs`` worker processes."""

    name = "process pool"
    shares_disk = True  # workers see this machine's files (the run may hand them output files to write)

    def __init__(self, jobs: int) -> None:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        self.workers = jobs
        self._context = multiprocessing.get_context()
        self._pool = ProcessPoolExecutor(max_workers=jobs, initializer=_one_thread, mp_context=self._context)

    def start(self, recipe_text: str, recipe_path: Any) -> None:
        """Start the workers warm: where worker processes are forked (Linux), first build the plugins and
        import what a plate's steps use, here, so that every worker inherits them instead of spending about
        half a second of CPU on the same imports. Call before opening the audit file (a forked worker then
        holds no open HDF5 file)."""
        if self._context.get_start_method() == "fork":
            import vzero.audit.writer  # noqa: F401  (h5py and the part writer)

            try:
                _worker_setup(recipe_text, recipe_path)
            except VzeroError:
                pass  # each worker reports it for its plates
        for future in [self._pool.submit(_ready) for _ in range(self.workers)]:
            future.result()

    def submit(self, fn: Callable[[PlateTask], Any], task: PlateTask) -> Future:
        return self._pool.submit(fn, task)

    def close(self) -> None:
        self._pool.shutdown(wait=True, cancel_futures=True)


def _ready() -> bool:
    """A task that does nothing: submitting it makes the pool start its worker processes."""
    return True


class DaskExecutor:
    """Plates on a Dask distributed cluster: a scheduler address, or ``"local"`` for a LocalCluster."""

    name = "dask"

    def __init__(self, address: str, jobs: int | None = None, *, processes: bool = True, timeout: str = "20s") -> None:
        try:
            from distributed import Client, LocalCluster
        except ImportError:
            raise VzeroError(
                "--scheduler needs Dask distributed, which is not installed",
                hint="Install it with: pip install 'vzero[dask]'",
            ) from None
        self._cluster = None
        try:
            if address == "local":
                # No dashboard; the scheduler's HTTP routes still need a port, and Dask's default (8787) would
                # clash with any other cluster on the machine, so the system picks a free one.
                self._cluster = LocalCluster(
                    n_workers=jobs or 2, threads_per_worker=1, processes=processes, dashboard_address=None,
                    scheduler_kwargs={"dashboard_address": ":0"},
                )
                self._client = Client(self._cluster)
            else:
                self._client = Client(address, timeout=timeout)
        except OSError as exc:
            raise VzeroError(
                f"cannot reach the Dask scheduler at {address!r}: {exc}",
                hint="Check the address (like tcp://host:8786) and that the scheduler is running, "
                     "or use --scheduler local.",
            ) from None
        n = len(self._client.scheduler_info().get("workers", {}))
        self.workers = max(1, n)

    def submit(self, fn: Callable[[PlateTask], Any], task: PlateTask) -> Future:
        return self._client.submit(fn, task, pure=False)

    def close(self) -> None:
        self._client.close()
        if self._cluster is not None:
            self._cluster.close()


def make_executor(jobs: int = 1, scheduler: str | None = None) -> Executor | None:
    """The executor for ``--jobs``/``--scheduler``; ``None`` means run plates in this process."""
    if jobs < 1:
        raise VzeroError(f"--jobs must be 1 or more, got {jobs}")
    if scheduler:
        return DaskExecutor(scheduler, jobs if jobs > 1 else None)
    if jobs > 1:
        return PoolExecutor(jobs)
    return None


@dataclass(frozen=True)
class _Done:
    """A result known without running anything (a plate that failed before it could be sent)."""

    value: Any

    def result(self) -> Any:
        return self.value


def ordered(
    executor: Executor, fn: Callable[[PlateTask], Any], items: Iterable[Any], window: int, chunk: int = 1
) -> Iterator[Any]:
    """Submit the :class:`PlateTask` items with at most ``window`` plates in flight and yield results in order.

    Items that are not tasks are passed through in their place. Items are drawn from the iterable only as
    room frees up, so a long batch never holds more than ``window`` plates' raw bytes and outcomes at once;
    yielding in order keeps the output identical to a serial run. With ``chunk`` > 1, up to ``chunk``
    consecutive tasks go to a worker together (``fn`` is then called on each of them there, in order): fewer
    round trips, the same results.
    """
    pending: deque[tuple[Future, int]] = deque()  # a future and how many results it holds
    group: list[PlateTask] = []
    it = iter(items)
    in_flight = 0

    def send() -> None:
        nonlocal group
        if len(group) == 1:
            pending.append((executor.submit(fn, group[0]), 1))
        elif group:
            pending.append((executor.submit(functools.partial(_each, fn), group), len(group)))  # type: ignore[arg-type]
        group = []

    def put(item: Any) -> None:
        nonlocal in_flight
        in_flight += 1
        if isinstance(item, PlateTask):
            group.append(item)
            if len(group) >= chunk:
                send()
        else:
            send()
            pending.append((_Done(item), 1))

    def fill() -> None:
        while in_flight < window:
            item = next(it, None)
            if item is None:
                break
            put(item)
        if in_flight < window or not pending:  # the iterable is spent (or the window is smaller than a chunk)
            send()

    fill()
    while pending:
        future, n = pending.popleft()
        result = future.result()
        for value in result if n > 1 else [result]:
            in_flight -= 1
            yield value
        fill()


def _each(fn: Callable[[PlateTask], Any], tasks: list[PlateTask]) -> list[Any]:
    """``fn`` on each task, in order (a chunk of plates sent to one worker)."""
    return [fn(task) for task in tasks]


# -- streaming outcomes ------------------------------------------------------------------------------------


@dataclass(frozen=True)
class RawInfo:
    """What the run remembers of a raw input once its bytes are in the audit file."""

    key: str
    name: str
    sha256: str
    size: int


class TracesOnDisk(Mapping[str, Any]):
    """Each plate's final traces, read back from the audit file being written when a pooled or final step
    asks (so a long batch does not hold every plate's traces in memory)."""

    def __init__(self, h5: Any, paths: Mapping[str, str]) -> None:
        self._h5, self._paths = h5, dict(paths)

    def __getitem__(self, plate: str) -> Any:
        from vzero.audit.codec import read_traces

        return read_traces(self._h5[self._paths[plate]])

    def __iter__(self) -> Iterator[str]:
        return iter(self._paths)

    def __len__(self) -> int:
        return len(self._paths)


class PlateStore:
    """Finished plates: written to the audit file as they arrive, kept in memory only as far as needed.

    Every plate's raw inputs and step outputs go to the :class:`vzero.audit.AuditWriter` at once. With
    ``hold`` (a single plate, the quick path) the outcomes stay in memory as they are; without it only the
    per-plate tables that the pooled steps stack are kept, and traces are read back from the file when a
    final step (the report) asks for them. Either way the audit file is the same.
    """

    def __init__(self, writer: Any, hold: bool = True) -> None:
        self.writer = writer
        self.hold = hold
        self.outcomes: list[Any] = []
        self.raws: dict[str, RawInfo] = {}
        self._traces: dict[str, str] = {}

    @property
    def input_plates(self) -> Mapping[str, list[str]]:
        return self.writer.input_plates

    def add_raws(self, plate: str, raws: Mapping[str, RawInput]) -> None:
        for raw in raws.values():
            self.writer.add_input(raw, plate)
            self.raws.setdefault(raw.sha256, RawInfo(raw.key, raw.name, raw.sha256, len(raw.data)))

    def add(self, outcome: Any) -> None:
        """Keep ``outcome``: write its steps to the audit file (successful plates only) and let go of what the
        pooled steps do not need unless holding."""
        if not outcome.error and outcome.part is not None:  # written by a worker: copy it in
            subs = self.writer.add_part(outcome.records, outcome.part, outcome.part_digests)
            if outcome.part_traces in subs:
                self._traces[outcome.plate] = f"{subs[outcome.part_traces]}/traces"
            outcome.part = None
        elif not outcome.error:
            from vzero.data import Table

            final = outcome.artifacts.get("traces")
            for record in outcome.records:
                sub = self.writer.add_record(record)
                for name, value in record.outputs.items():
                    if final is not None and value is final:
                        self._traces[outcome.plate] = f"{sub.name}/{name}"
                if not self.hold:
                    record.outputs = {}
            if not self.hold:
                outcome.artifacts = {k: v for k, v in outcome.artifacts.items() if isinstance(v, Table)}
                self.writer.forget_plate()
        self.outcomes.append(outcome)

    def traces(self) -> Mapping[str, Any]:
        """Every successful plate's final traces, by plate name."""
        from vzero.data import Traces

        held = {o.plate: o.artifacts["traces"] for o in self.outcomes
                if not o.error and isinstance(o.artifacts.get("traces"), Traces)}
        if self.hold and len(held) == len(self._traces):
            return held
        return TracesOnDisk(self.writer.f, self._traces)
