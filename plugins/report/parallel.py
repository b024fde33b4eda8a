"""Drawing the report's figures on every core the process may use.

Saving a figure as PNG and SVG is most of a report's time (about 0.15 s per figure), and each figure is
independent of the others. :func:`render_all` hands a share of the figures to forked child processes: a
child inherits the figures already made (nothing is pickled), draws its share, and sends the bytes back
through a pipe; the parent draws the rest meanwhile. The bytes are the same whoever drew them.

Forking is used only where it is safe and pays: on Linux, with no other thread running in this process (a
fork copies only the calling thread, so a lock held by another thread would stay locked in the child), more
than one usable core and more than one figure. Anywhere else, and for any figure whose child failed, the
parent draws the figure itself, so the report never depends on the children.
"""

from __future__ import annotations

import os
import struct
import sys
import threading
from collections.abc import Callable, Sequence
from typing import Any

MAX_CHILDREN = 3
"""Most child processes used at once (figures are few; more processes would mostly cost memory)."""

Render = Callable[[Any, int], tuple[bytes, bytes]]


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


def render_all(render: Render, figures: Sequence[tuple[Any, int]], weights: Sequence[float] | None = None,
               workers: int | None = None) -> list[tuple[bytes, bytes]]:
    """``render(fig, dpi)`` for every ``(fig, dpi)`` in ``figures``, in order, using up to ``workers``
    processes (default: the usable cores, at most ``MAX_CHILDREN`` + 1). ``weights`` estimate each figure's
    drawing cost, to balance the shares."""
    n = len(figures)
    workers = min(workers or usable_cores(), MAX_CHILDREN + 1, n)
    if workers < 2 or not can_fork():
        return [render(fig, dpi) for fig, dpi in figures]
    parts = shares(list(weights) if weights is not None else [1.0] * n, workers)
    mine, theirs = parts[0], [p for p in parts[1:] if p]
    children: list[tuple[int, int, list[int]]] = []  # (pid, read end, indices)
    for part in theirs:
        read, write = os.pipe()
        pid = os.fork()
        if pid == 0:  # child: draw this share, send it, leave without running the parent's exit handlers
            status = 1
            try:
                os.close(read)
                drawn = [render(*figures[i]) for i in part]  # all first: writing blocks until the parent reads
                with os.fdopen(write, "wb") as out:
                    for pair in drawn:
                        for blob in pair:
                            out.write(struct.pack("<Q", len(blob)))
                            out.write(blob)
                status = 0
            finally:
                os._exit(status)
        os.close(write)
        children.append((pid, read, part))

    results: list[tuple[bytes, bytes] | None] = [None] * n
    for i in mine:
        results[i] = render(*figures[i])
    for pid, read, part in children:
        got = _receive(read, len(part))
        _, status = os.waitpid(pid, 0)
        if got is not None and status == 0:
            for i, pair in zip(part, got, strict=True):
                results[i] = pair
    # a child that failed (or sent less than its share): its figures are drawn here
    return [r if r is not None else render(*figures[i]) for i, r in enumerate(results)]


def _receive(fd: int, count: int) -> list[tuple[bytes, bytes]] | None:
    """Read ``count`` (PNG, SVG) pairs written by a child; ``None`` if the pipe ended early."""
    with os.fdopen(fd, "rb") as pipe:
        blobs = []
        for _ in range(2 * count):
            head = pipe.read(8)
            if len(head) < 8:
                return None
            size = struct.unpack("<Q", head)[0]
            blob = pipe.read(size)
            if len(blob) < size:
                return None
            blobs.append(blob)
    return [(blobs[2 * k], blobs[2 * k + 1]) for k in range(count)]
