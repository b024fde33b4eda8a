"""Figure jobs run in forked children come back whole, in order, and a failed child costs nothing but time."""

from __future__ import annotations

import functools
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest
from vzero.plugins.report import parallel

needs_fork = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="forking children needs Linux")


def _elsewhere(name: str) -> bool:
    """Run test ``name`` of this file in a new Python process when this one cannot fork safely (earlier tests
    that start Dask leave two of its threads running in this process); True when that is what happened."""
    if parallel.can_fork():
        return False
    root = Path(__file__).resolve().parents[3]
    done = subprocess.run([sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", f"{__file__}::{name}"],
                          capture_output=True, text=True, cwd=root, timeout=300)
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-3000:]
    return True


def _fake(fig: int, dpi: int) -> tuple[bytes, ...]:
    """Bytes that depend only on the figure (and are big enough to fill a pipe's buffer several times); the
    number of parts varies, as jobs may return a caption note or not."""
    return (bytes([fig % 256]) * (100_000 + fig), f"<svg {fig} {dpi}/>".encode()) + ((b"",) if fig % 2 else ())


def _jobs(figures: list[tuple[int, int]]) -> list:
    return [functools.partial(_fake, *f) for f in figures]


def test_shares_balance_the_weights() -> None:
    parts = parallel.shares([5.0, 1.0, 1.0, 1.0, 1.0, 1.0], 2)
    assert sorted(i for p in parts for i in p) == list(range(6))
    assert parts == [[0], [1, 2, 3, 4, 5]]  # the heavy figure alone balances the five light ones


def _with_pid(fig: int, dpi: int) -> tuple[bytes, ...]:
    return (*_fake(fig, dpi), str(os.getpid()).encode())


@needs_fork
def test_children_return_the_same_bytes_in_order() -> None:
    if _elsewhere("test_children_return_the_same_bytes_in_order"):
        return
    figures = [(k, 100 + k) for k in range(7)]
    got = parallel.run_all([functools.partial(_with_pid, *f) for f in figures], workers=3)
    assert [g[:-1] for g in got] == [_fake(*f) for f in figures]
    pids = {int(g[-1]) for g in got}
    assert os.getpid() in pids and len(pids) == 3  # the parent and two children each ran a share


@needs_fork
def test_a_failing_job_here_leaves_no_child_behind(tmp_path) -> None:
    """The parent's own job fails while a child holds more bytes than a pipe buffers: the child must not be
    left blocked on its pipe (it is stopped and reaped before the error goes on)."""
    if _elsewhere("test_a_failing_job_here_leaves_no_child_behind"):
        return
    parent = os.getpid()

    def job(k: int) -> tuple[bytes, ...]:
        if os.getpid() == parent:
            for _ in range(500):  # let the child start and block on its pipe first
                if any(tmp_path.glob("child-*")):
                    break
                time.sleep(0.01)
            raise RuntimeError("a figure that cannot be drawn")
        # written under another name and renamed, so that the parent never sees the file before its pid is in
        # it (the parent fails, and the child is killed, as soon as the file appears)
        (tmp_path / f"partial-{k}").write_text(str(os.getpid()))
        (tmp_path / f"partial-{k}").replace(tmp_path / f"child-{k}")
        return (b"x" * 1_000_000,)

    with pytest.raises(RuntimeError, match="cannot be drawn"):
        parallel.run_all([functools.partial(job, 0), functools.partial(job, 1)], [2.0, 1.0], workers=2)
    children = [int(p.read_text()) for p in tmp_path.glob("child-*")]
    assert children
    for pid in children:
        with pytest.raises(ProcessLookupError):  # reaped: no such process any more
            os.kill(pid, 0)


@needs_fork
def test_a_failing_child_leaves_its_figures_to_the_parent() -> None:
    if _elsewhere("test_a_failing_child_leaves_its_figures_to_the_parent"):
        return
    parent = os.getpid()

    def job(fig: int) -> tuple[bytes, ...]:
        if os.getpid() != parent:
            raise RuntimeError("a child that fails")
        return _fake(fig, 72)

    assert parallel.run_all([functools.partial(job, k) for k in range(4)], workers=2) == [
        _fake(k, 72) for k in range(4)]


def test_one_figure_or_one_worker_is_drawn_here() -> None:
    calls: list[int] = []

    def job(fig: int) -> tuple[bytes, ...]:
        calls.append(os.getpid())
        return _fake(fig, 72)

    assert parallel.run_all([functools.partial(job, 1)]) == [_fake(1, 72)]
    assert parallel.run_all([functools.partial(job, 1), functools.partial(job, 2)], workers=1) == [
        _fake(1, 72), _fake(2, 72)]
    assert calls == [os.getpid()] * 3
