"""The files a run writes beside its audit file: one CSV per final table, the files final steps returned and
the list of failed plates, every one flushed to disk before the run folder is renamed into place.

CSV text is pandas' ``to_csv`` text (the plain path, :func:`plain_csv_text`); the tables vzero writes most
are formatted by a private twin that gives the same characters several times faster
(:mod:`vzero.run._csv_fast`, compared with pandas in tests/pipeline/test_csv_text.py).
With a local process pool, large tables are written by the workers, each table split by rows over all of
them, and a table already final when the pooled steps start (the stacked rates) is begun then, while the
driver fits; the pieces are joined into one file at the end (:class:`CsvInWorkers`).
"""

from __future__ import annotations

import functools
import os
import shutil
import time
import uuid
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from vzero.data import Table
from vzero.run._csv_fast import handled
from vzero.run.executors import Executor
from vzero.spreadsheet import inert_frame

#: Final tables with at least this many rows are written to CSV by worker processes when the run has a local
#: process pool, split by rows into pieces of at least half as many rows, one piece per worker at most.
CSV_IN_WORKERS_ROWS = 5000


@dataclass
class _Pieces:
    """One table being written by workers: the table object (the file is used only if the run's final table is
    still this object), its pieces' paths in row order, and the workers' futures."""

    table: Table
    paths: list[Path]
    futures: list[Any]

    def wait(self) -> None:
        for future in self.futures:
            future.result()


class CsvInWorkers:
    """CSV files of large tables written by the worker processes of a local pool, started as soon as a table is
    known. Nothing is sent to remote workers (Dask), which may not see this disk."""

    def __init__(self, executor: Executor | None, tmp: Path) -> None:
        self.executor = executor if executor is not None and getattr(executor, "shares_disk", False) else None
        self.tmp = tmp
        self.started: dict[str, _Pieces] = {}
        self.stale: list[_Pieces] = []

    def start(self, tables: Mapping[str, Any]) -> None:
        """Start writing every large table of ``tables`` not already being written as that very object."""
        if self.executor is None:
            return
        for name, table in tables.items():
            if not isinstance(table, Table) or len(table.frame) < CSV_IN_WORKERS_ROWS:
                continue
            old = self.started.get(name)
            if old is not None:
                if old.table is table:
                    continue
                self.stale.append(old)  # replaced by a later step: written again, the old pieces dropped
            n = len(table.frame)
            k = max(1, min(self.executor.workers, n // max(CSV_IN_WORKERS_ROWS // 2, 1)))
            if not handled(table.frame):
                k = 1  # pandas writes it, and decides some formats (dates) from all the rows it sees
            edges = np.linspace(0, n, k + 1).astype(int).tolist()
            tag = uuid.uuid4().hex[:8]
            paths = [self.tmp / f".{name}.csv.{tag}.{i}" for i in range(k)]
            futures = [self.executor.submit(functools.partial(write_csv, str(path), header=i == 0),  # type: ignore[arg-type]
                                            table.frame.iloc[edges[i]:edges[i + 1]])
                       for i, path in enumerate(paths)]
            self.started[name] = _Pieces(table, paths, futures)

    def detach(self) -> None:
        """Let the pieces already begun finish, and start no more (the pool is about to close). A piece that
        failed is dealt with by :meth:`take` (the caller then writes that table)."""
        for pieces in self.started.values():
            try:
                pieces.wait()
            except Exception:
                pass
        self.executor = None

    def take(self, name: str, table: Table, target: Path) -> bool:
        """Join the pieces of ``name`` into ``target`` if the workers wrote exactly ``table``; False if not (or
        if a piece failed), and the caller writes it."""
        pieces = self.started.get(name)
        if pieces is None or pieces.table is not table:
            return False
        try:
            pieces.wait()
        except Exception:  # a worker could not write its piece (a broken pool): the caller writes the table
            self.stale.append(self.started.pop(name))
            return False
        with open(target, "wb") as out:
            for path in pieces.paths:
                with open(path, "rb") as part:
                    shutil.copyfileobj(part, out, 1 << 20)
                path.unlink()
        del self.started[name]
        return True

    def finish(self) -> None:
        """Wait for every piece still being written and remove the unused ones (the run's folder may then be
        removed safely: no worker writes into it any more). An interrupt while waiting is raised again once
        every piece is accounted for."""
        interrupted: BaseException | None = None
        for pieces in [*self.stale, *self.started.values()]:
            for future in pieces.futures:
                try:
                    future.result()
                except Exception:  # the piece is dropped either way
                    pass
                except BaseException as exc:  # Ctrl-C: still wait for the others, then stop
                    interrupted = interrupted or exc
            for path in pieces.paths:
                path.unlink(missing_ok=True)
        self.stale, self.started = [], {}
        if interrupted is not None:
            raise interrupted


#: Rows formatted at a time when writing a CSV file: the text of a large batch's tables (millions of cells) is
#: never all in memory at once.
CSV_BLOCK_ROWS = 20_000


def plain_csv_text(frame: pd.DataFrame, header: bool = True) -> str:
    """The plain path: pandas' CSV text of ``frame`` without its index, with text cells a spreadsheet would
    evaluate made inert (:mod:`vzero.spreadsheet`)."""
    return str(inert_frame(frame).to_csv(index=False, header=header, lineterminator=os.linesep))


def write_csv(path: str, frame: pd.DataFrame, header: bool = True) -> None:
    """Write ``frame`` to ``path`` as pandas' CSV text (:func:`plain_csv_text`), a block of rows at a time;
    also run in worker processes. Without ``header`` only the rows (a piece of a file split by rows). Tables
    of the column types :func:`vzero.run._csv_fast.csv_text` handles are formatted by it (the same text,
    faster); others are written by pandas in one go (pandas chooses some formats, such as dates with or
    without a time of day, from all the rows)."""
    from vzero.run._csv_fast import csv_text

    if not handled(frame):
        inert_frame(frame).to_csv(path, index=False, header=header)
        return
    with open(path, "w", encoding="utf-8", newline="") as out:
        for start in range(0, max(len(frame), 1), CSV_BLOCK_ROWS):
            out.write(csv_text(frame.iloc[start:start + CSV_BLOCK_ROWS], header=header and start == 0) or "")


def write_outputs(tmp: Path, tables: Mapping[str, Table], files: Mapping[str, bytes],
                  failed: Mapping[str, str], workers: CsvInWorkers | None = None) -> float:
    """One CSV per final table (those the ``workers`` wrote are joined from their pieces), the files final steps
    returned, the list of failed plates; every file in ``tmp`` is on disk (fsync) when this returns. Returns
    the seconds spent formatting and writing CSV files here.

    The fsync calls wait on the disk, not on the processor, and release the GIL: a thread flushes run.h5 and
    each file as soon as it is written while this thread formats the next, so the flushing costs almost no
    time of its own."""
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="vzero-fsync") as flusher:
        syncs = [flusher.submit(_fsync, tmp / "run.h5")]

        def written(path: Path) -> None:
            syncs.append(flusher.submit(_fsync, path))

        csv_seconds = 0.0
        # tables the workers are not writing first, so that they have time to finish theirs
        order = sorted(tables, key=lambda name: workers is not None and name in workers.started)
        for name in order:
            target = tmp / f"{name}.csv"
            if workers is None or not workers.take(name, tables[name], target):
                t0 = time.perf_counter()
                write_csv(str(target), tables[name].frame)
                csv_seconds += time.perf_counter() - t0
            written(target)
        if workers is not None:
            workers.finish()
        for rel, data in files.items():
            target = tmp / rel
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_bytes(data)
            written(target)
        if failed:
            target = tmp / "failed_plates.txt"
            target.write_text("".join(f"{k}: {v}\n" for k, v in failed.items()), "utf-8")
            written(target)
        for sync in syncs:
            sync.result()
    return csv_seconds


def _fsync(path: Path) -> None:
    """Flush one file's data to disk (the run is renamed into place only once every file is)."""
    with open(path, "rb") as fh:
        os.fsync(fh.fileno())
