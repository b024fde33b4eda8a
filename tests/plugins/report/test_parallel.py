"""Figures drawn in forked children come back whole, in order, and a failed child costs nothing but time."""

from __future__ import annotations

import os

import pytest

from plugins.report import parallel

needs_fork = pytest.mark.skipif(not parallel.can_fork(), reason="forking children needs Linux and a single thread")


def _fake_render(fig: int, dpi: int) -> tuple[bytes, bytes]:
    """Bytes that depend only on the figure (and are big enough to fill a pipe's buffer several times)."""
    return bytes([fig % 256]) * (100_000 + fig), f"<svg {fig} {dpi}/>".encode()


def test_shares_balance_the_weights() -> None:
    parts = parallel.shares([5.0, 1.0, 1.0, 1.0, 1.0, 1.0], 2)
    assert sorted(i for p in parts for i in p) == list(range(6))
    assert parts == [[0], [1, 2, 3, 4, 5]]  # the heavy figure alone balances the five light ones


@needs_fork
def test_children_return_the_same_bytes_in_order() -> None:
    figures = [(k, 100 + k) for k in range(7)]
    serial = [_fake_render(*f) for f in figures]
    assert parallel.render_all(_fake_render, figures, workers=3) == serial


@needs_fork
def test_a_failing_child_leaves_its_figures_to_the_parent() -> None:
    parent = os.getpid()

    def render(fig: int, dpi: int) -> tuple[bytes, bytes]:
        if os.getpid() != parent:
            raise RuntimeError("a child that fails")
        return _fake_render(fig, dpi)

    figures = [(k, 72) for k in range(4)]
    assert parallel.render_all(render, figures, workers=2) == [_fake_render(*f) for f in figures]


def test_one_figure_or_one_worker_is_drawn_here() -> None:
    calls: list[int] = []

    def render(fig: int, dpi: int) -> tuple[bytes, bytes]:
        calls.append(os.getpid())
        return _fake_render(fig, dpi)

    assert parallel.render_all(render, [(1, 72)]) == [_fake_render(1, 72)]
    assert parallel.render_all(render, [(1, 72), (2, 72)], workers=1) == [_fake_render(1, 72), _fake_render(2, 72)]
    assert calls == [os.getpid()] * 3
