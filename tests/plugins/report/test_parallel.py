"""Figure jobs run in forked children come back whole, in order, and a failed child costs nothing but time."""

from __future__ import annotations

import functools
import os

import pytest

from plugins.report import parallel

needs_fork = pytest.mark.skipif(not parallel.can_fork(), reason="forking children needs Linux and a single thread")


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


@needs_fork
def test_children_return_the_same_bytes_in_order() -> None:
    figures = [(k, 100 + k) for k in range(7)]
    assert parallel.run_all(_jobs(figures), workers=3) == [_fake(*f) for f in figures]


@needs_fork
def test_a_failing_child_leaves_its_figures_to_the_parent() -> None:
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
