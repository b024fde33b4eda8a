"""The plate map on other executors: a local process pool and a Dask LocalCluster give the same numbers, to the
bit, as a serial run; streaming keeps a bounded number of plates in flight."""

from __future__ import annotations

import fcntl
import threading
from collections.abc import Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
from vzero.errors import VzeroError
from vzero.run.executors import PlateTask, make_executor, ordered
from vzero.run.runner import run

from tests.pipeline.test_batch import assert_same_h5, demo_batch


# Two LocalClusters of two worker processes each at once would oversubscribe the 2-core machine (and, before
# the executor asked for a free port for the scheduler's HTTP routes, clashed on Dask's default 8787). The Dask
# tests take a lock file shared by the parallel workers (`-n 2`: their temporary folders have one parent).
@pytest.fixture
def one_cluster_at_a_time(tmp_path_factory: pytest.TempPathFactory) -> Iterator[None]:
    with open(tmp_path_factory.getbasetemp().parent / "vzero-dask-cluster.lock", "a") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(lock, fcntl.LOCK_UN)


def _same_run(a: Any, b: Any) -> None:
    assert a.tables.keys() == b.tables.keys()
    for name in a.tables:
        pd.testing.assert_frame_equal(a.tables[name].frame, b.tables[name].frame, check_exact=True)
    assert a.failed == b.failed
    assert_same_h5(a.audit_path, b.audit_path)


def test_process_pool_matches_serial_to_the_bit(tmp_path: Path):
    recipe = demo_batch(tmp_path / "in", 4, broken=(2,))
    serial = run(recipe, tmp_path / "serial")
    pooled = run(recipe, tmp_path / "pool", jobs=2)
    assert list(pooled.failed) == ["plate-02"]
    _same_run(serial, pooled)


def test_process_pool_with_plates_in_chunks_matches_serial(tmp_path: Path, monkeypatch: pytest.MonkeyPatch):
    """Several plates per worker task (a failed plate among them), tables sent back as column arrays: the
    same tables, audit file and CSV bytes as a serial run, and the run.h5 verifies."""
    from vzero.audit.verify import verify
    from vzero.run import runner

    monkeypatch.setattr(runner, "plates_per_task", lambda n_plates, workers: 2)
    recipe = demo_batch(tmp_path / "in", 5, broken=(1,))
    serial = run(recipe, tmp_path / "serial")
    pooled = run(recipe, tmp_path / "pool", jobs=2)
    assert list(pooled.failed) == ["plate-01"]
    _same_run(serial, pooled)
    _same_csv_bytes(serial.out_dir, pooled.out_dir)
    assert verify(pooled.audit_path).ok


@pytest.mark.slow
@pytest.mark.usefixtures("one_cluster_at_a_time")
def test_dask_local_cluster_of_two_processes_matches_serial(tmp_path: Path):
    pytest.importorskip("distributed")
    from vzero.run.executors import DaskExecutor

    recipe = demo_batch(tmp_path / "in", 4)
    serial = run(recipe, tmp_path / "serial")
    executor = DaskExecutor("local", 2, processes=True)
    try:
        assert executor.workers == 2
        # the scheduler's HTTP routes on a port the system chose, not Dask's default 8787 (another cluster's)
        assert executor._cluster.scheduler.http_server.port != 8787
        on_dask = run(recipe, tmp_path / "dask", executor=executor)
    finally:
        executor.close()
    _same_run(serial, on_dask)
    _same_csv_bytes(serial.out_dir, on_dask.out_dir)


def _same_csv_bytes(a: Path, b: Path) -> None:
    """Every CSV file of two runs, byte for byte."""
    names = sorted(p.name for p in a.glob("*.csv"))
    assert names == sorted(p.name for p in b.glob("*.csv")) and "rates.csv" in names and "fits.csv" in names
    for name in names:
        assert (a / name).read_bytes() == (b / name).read_bytes(), name


@pytest.mark.slow
@pytest.mark.usefixtures("one_cluster_at_a_time")
def test_dask_run_of_two_worker_processes_writes_the_serial_csv_bytes(tmp_path: Path):
    """``--scheduler local --jobs 2`` from the command line: a LocalCluster of two worker processes, whose
    workers write their plates' parts of the audit file; the CSV files are the serial run's, byte for byte,
    and the single run.h5 verifies."""
    pytest.importorskip("distributed")
    from vzero.audit.verify import verify
    from vzero.cli.main import main

    recipe = demo_batch(tmp_path / "in", 5)
    assert main(["run", str(recipe), "--out", str(tmp_path / "serial"), "-q"]) == 0
    assert main(["run", str(recipe), "--out", str(tmp_path / "dask"), "--scheduler", "local", "--jobs", "2",
                 "-q"]) == 0
    _same_csv_bytes(tmp_path / "serial", tmp_path / "dask")
    assert verify(tmp_path / "dask" / "run.h5").ok
    assert [p.name for p in (tmp_path / "dask").iterdir() if p.suffix == ".h5"] == ["run.h5"]


class CountingExecutor:
    """Threads standing in for workers; records the most plates ever in flight (a list of tasks is a chunk
    of plates) and how many times something was submitted."""

    name = "counting"

    def __init__(self, workers: int) -> None:
        self.workers = workers
        self._pool = ThreadPoolExecutor(workers)
        self._lock = threading.Lock()
        self.in_flight = 0
        self.most = 0
        self.submitted = 0

    def submit(self, fn: Any, task: Any) -> Future:
        n = len(task) if isinstance(task, list) else 1
        with self._lock:
            self.in_flight += n
            self.most = max(self.most, self.in_flight)
            self.submitted += 1
        return self._pool.submit(self._run, fn, task, n)

    def _run(self, fn: Any, task: Any, n: int) -> Any:
        try:
            return fn(task)
        finally:
            with self._lock:
                self.in_flight -= n

    def close(self) -> None:
        self._pool.shutdown()


def test_ordered_keeps_order_and_bounds_plates_in_flight():
    executor = CountingExecutor(3)
    drawn: list[int] = []

    def items():
        for i in range(40):
            drawn.append(i)
            yield PlateTask("", "", None, {}, str(i)) if i % 7 else f"failed-{i}"  # type: ignore[arg-type]

    def slow_echo(task: PlateTask) -> str:
        threading.Event().wait(0.001 * (int(task.run_id) % 5))
        return task.run_id

    out = []
    for result in ordered(executor, slow_echo, items(), window=4):
        out.append(result)
        assert len(drawn) - len(out) <= 4  # never more than the window read ahead
    executor.close()
    assert out == [str(i) if i % 7 else f"failed-{i}" for i in range(40)]
    assert executor.most <= 4


def test_ordered_in_chunks_keeps_order_and_bounds_plates_in_flight():
    executor = CountingExecutor(2)
    drawn: list[int] = []
    calls: list[int] = []

    def items():
        for i in range(45):
            drawn.append(i)
            yield PlateTask("", "", None, {}, str(i)) if i % 11 else f"failed-{i}"  # type: ignore[arg-type]

    def echo(task: PlateTask) -> str:
        calls.append(int(task.run_id))
        threading.Event().wait(0.001 * (int(task.run_id) % 3))
        return task.run_id

    out = []
    for result in ordered(executor, echo, items(), window=8, chunk=3):
        out.append(result)
        assert len(drawn) - len(out) <= 8  # never more plates read ahead than the window
    executor.close()
    assert out == [str(i) if i % 11 else f"failed-{i}" for i in range(45)]
    assert sorted(calls) == [i for i in range(45) if i % 11]
    assert executor.most <= 8
    assert executor.submitted < len(calls)  # plates went in groups


def test_plates_per_task_leaves_every_worker_enough_tasks():
    from vzero.run.runner import MAX_PLATES_PER_TASK, plates_per_task

    assert plates_per_task(1, 2) == 1
    assert plates_per_task(40, 2) == 2  # 20 tasks: at least 8 for each worker
    assert plates_per_task(200, 2) == MAX_PLATES_PER_TASK
    assert plates_per_task(200, 16) == 1


def test_batch_through_the_executor_interface_in_threads(tmp_path: Path):
    recipe = demo_batch(tmp_path / "in", 3, fit=False)
    serial = run(recipe, tmp_path / "serial")
    executor = CountingExecutor(2)
    threaded = run(recipe, tmp_path / "threads", executor=executor)
    executor.close()
    assert executor.most <= 4
    _same_run(serial, threaded)


def test_jobs_must_be_positive_and_python_plugins_stay_local(tmp_path: Path):
    with pytest.raises(VzeroError, match="--jobs must be 1 or more"):
        make_executor(0)
    assert make_executor(1) is None
    recipe = demo_batch(tmp_path / "in", 2, fit=False)
    with pytest.raises(VzeroError, match="cannot be sent to worker processes"):
        run(recipe, tmp_path / "out", jobs=2, extra_plugins=[("x", object())])


def test_unreachable_scheduler_is_one_clear_error():
    pytest.importorskip("distributed")
    from vzero.run.executors import DaskExecutor

    with pytest.raises(VzeroError, match="cannot reach the Dask scheduler"):
        DaskExecutor("tcp://127.0.0.1:9", timeout="1s")


def _link_encodings(path: Path) -> dict[str, int]:
    """The character set HDF5 records for every link name under /steps (ASCII 0, UTF-8 1)."""
    import h5py

    out: dict[str, int] = {}
    with h5py.File(path) as f:
        for label in f["steps"]:
            step = f["steps"][label]
            for name in step:
                out[f"{label}/{name}"] = step.id.links.get_info(name.encode("utf-8")).cset
    return out


def test_a_plate_name_beyond_ascii_is_stored_alike_by_every_executor(tmp_path: Path):
    recipe = demo_batch(tmp_path / "in", 2)
    manifest = tmp_path / "in" / "plates" / "manifest.csv"
    manifest.write_text(manifest.read_text("utf-8").replace("plate-00", "Platte-ä"), "utf-8")
    serial = run(recipe, tmp_path / "serial")
    pooled = run(recipe, tmp_path / "pool", jobs=2)
    _same_run(serial, pooled)
    names = _link_encodings(serial.audit_path)
    assert names == _link_encodings(pooled.audit_path)
    assert {v for k, v in names.items() if k.endswith("/Platte-ä")} == {1}  # UTF-8, as h5py marks such names


def test_the_process_pool_is_closed_before_a_final_step(tmp_path: Path, monkeypatch):
    """The report may fork processes to draw figures, which is safe only once the pool's threads are gone:
    a run with --jobs closes its pool before the first final step (the report still gets every figure)."""
    import threading
    from concurrent.futures import process

    from vzero.plugins.report import parallel

    recipe = demo_batch(tmp_path / "in", 2)
    recipe.write_text(recipe.read_text("utf-8") + "  - report: {method: html}\n", "utf-8")
    pool_threads: list[int] = []
    run_all = parallel.run_all

    def watching(*args: Any, **kwargs: Any) -> Any:
        pool_threads.append(sum(isinstance(t, process._ExecutorManagerThread) for t in threading.enumerate()))
        return run_all(*args, **kwargs)

    monkeypatch.setattr(parallel, "run_all", watching)
    result = run(recipe, tmp_path / "pool", jobs=2)
    assert pool_threads and set(pool_threads) == {0}
    assert (result.out_dir / "report.html").is_file() and len(list((result.out_dir / "figures").glob("*.png"))) >= 4


@pytest.mark.parametrize("report", [False, True])
def test_csv_files_written_in_pieces_by_the_pool_match_serial(tmp_path: Path, monkeypatch, report: bool):
    """With a process pool, large tables' CSV files are written by the workers, split by rows (the stacked
    rates as soon as the plates are in, while the driver fits); the files are the serial run's, byte for byte,
    also when the pool closes early for a report, and no piece is left in the run folder."""
    from vzero.run import outputs

    recipe = demo_batch(tmp_path / "in", 3)
    if report:
        recipe.write_text(recipe.read_text("utf-8") + "  - report: {method: html}\n", "utf-8")
    serial = run(recipe, tmp_path / "serial")
    monkeypatch.setattr(outputs, "CSV_IN_WORKERS_ROWS", 10)  # every stacked table goes to the workers
    pooled = run(recipe, tmp_path / "pool", jobs=2)
    csvs = sorted(p.name for p in serial.out_dir.glob("*.csv"))
    assert "rates.csv" in csvs and csvs == sorted(p.name for p in pooled.out_dir.glob("*.csv"))
    for name in csvs:
        assert (pooled.out_dir / name).read_bytes() == (serial.out_dir / name).read_bytes(), name
    assert not [p.name for p in pooled.out_dir.iterdir() if p.name.startswith(".")]
