"""Drawing the report's figures on every core the process may use.

Making a figure and saving it as PNG and SVG is most of a report's time, and each
figure is independent of the others. :func:`run_all` hands a share of the figure jobs to forked child
processes: a child inherits the data and code the jobs need (nothing is pickled), runs its share, and sends
the bytes back through a pipe; the parent runs the rest meanwhile. The bytes are the same whoever made them.

Forking is used only where it is safe and pays: on Linux, with no other thread running in this process (a
fork copies only the calling thread, so a lock held by another thread would stay locked in the child), more
than one usable core and more than one job. Anywhere else, and for any job whose child failed, the parent
runs the job itself, so the report never depends on the children.
"""

from __future__ import annotations

import contextlib
import os
import signal
import struct
import sys
import threading
from collections.abc import Callable, Sequence
from typing import Any

MAX_CHILDREN = 3
"""Most child processes used at once (figures are few; more processes would mostly cost memory)."""

Job = Callable[[], tuple[bytes, ...]]
"""A figure job: makes one figure and returns its bytes (PNG, SVG and anything else, as bytes)."""


def usable_cores() -> int:
    """Cores this process may run on (its CPU affinity where the platform reports it)."""
    try:
        return len(os.sched_getaffinity(0))
    except (AttributeError, OSError):  # pragma: no cover - platforms without affinity
        return os.cpu_count() or 1


def can_fork() -> bool:
    """Whether forking children to draw figures is safe here (Linux, and this is the only thread)."""
    return sys.platform.startswith("linux") and hasattr(os, "fork") and threading.active_count() == 1


def shares(weights: Sequence[float], n: int) -> list[list[int]]:
    """Indices of ``weights`` split into ``n`` lists of about equal total weight (largest first, each to the
    lightest list so far), each list in ascending order."""
    bins: list[list[int]] = [[] for _ in range(n)]
    load = [0.0] * n
    for i in sorted(range(len(weights)), key=lambda k: -weights[k]):
        b = min(range(n), key=lambda k: load[k])
        bins[b].append(i)
        load[b] += weights[i]
    return [sorted(b) for b in bins]


def run_all(jobs: Sequence[Job], weights: Sequence[float] | None = None,
            workers: int | None = None) -> list[tuple[bytes, ...]]:
    """Every job's result, in order, using up to ``workers`` processes (default: the usable cores, at most
    ``MAX_CHILDREN`` + 1). ``weights`` estimate each job's cost, to balance the shares."""
    n = len(jobs)
    workers = min(workers or usable_cores(), MAX_CHILDREN + 1, n)
    if workers < 2 or not can_fork():
        return [job() for job in jobs]
    parts = shares(list(weights) if weights is not None else [1.0] * n, workers)
    mine, theirs = parts[0], [p for p in parts[1:] if p]
    children: list[tuple[int, int, list[int]]] = []  # (pid, read end, indices), until collected
    results: list[tuple[bytes, ...] | None] = [None] * n
    try:
        for part in theirs:
            read, write = os.pipe()
            pid = os.fork()
            if pid == 0:  # child: run this share, send it, leave without running the parent's exit handlers
                _child(jobs, part, read, write)
            os.close(write)
            children.append((pid, read, part))
        for i in mine:
            results[i] = jobs[i]()
        while children:
            pid, read, part = children[0]
            try:
                got = _receive(read, len(part))
            finally:
                children[0] = (pid, -1, part)  # _receive closed the read end
            children.pop(0)
            _, status = os.waitpid(pid, 0)
            if got is not None and status == 0:
                for i, blobs in zip(part, got, strict=True):
                    results[i] = blobs
    finally:  # a job of ours failed (or Ctrl-C): do not leave children blocked on a pipe nobody reads
        for pid, read, _ in children:
            if read >= 0:
                with contextlib.suppress(OSError):
                    os.close(read)
            with contextlib.suppress(OSError):
                os.kill(pid, signal.SIGKILL)
            with contextlib.suppress(OSError):
                os.waitpid(pid, 0)
    # a child that failed (or sent less than its share): its jobs are run here
    return [r if r is not None else jobs[i]() for i, r in enumerate(results)]


def _child(jobs: Sequence[Job], part: list[int], read: int, write: int) -> None:
    """In a forked child: run the jobs of ``part``, write their results to the pipe, and exit (status 0 when
    everything was sent). Never returns."""
    status = 1
    try:
        os.close(read)
        done = [jobs[i]() for i in part]  # all first: writing blocks until the parent reads
        with os.fdopen(write, "wb") as out:
            for blobs in done:
                out.write(struct.pack("<Q", len(blobs)))
                for blob in blobs:
                    out.write(struct.pack("<Q", len(blob)))
                    out.write(blob)
        status = 0
    finally:
        os._exit(status)


def _receive(fd: int, count: int) -> list[tuple[bytes, ...]] | None:
    """Read ``count`` job results written by a child; ``None`` if the pipe ended early."""

    def exact(pipe: Any, size: int) -> bytes | None:
        data = pipe.read(size)
        return data if len(data) == size else None

    out: list[tuple[bytes, ...]] = []
    with os.fdopen(fd, "rb") as pipe:
        for _ in range(count):
            head = exact(pipe, 8)
            if head is None:
                return None
            blobs = []
            for _ in range(struct.unpack("<Q", head)[0]):
                size = exact(pipe, 8)
                blob = exact(pipe, struct.unpack("<Q", size)[0]) if size is not None else None
                if blob is None:
                    return None
                blobs.append(blob)
            out.append(tuple(blobs))
    return out
