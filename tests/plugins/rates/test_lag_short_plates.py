"""Lag phases on short plates: the block test needs three blocks of reads (blocks of max(4, n/8) reads), so a
plate of 12 reads (three blocks of four) is the shortest on which a lag is looked for, and one is found there.

Invented scenario: a quick kinetic read of 12 to 15 reads, 10 s apart; the product appears only after 35 s
(an enzyme that needs activating). A noise-free broken line, so the lag time is known by hand: the steepest
block's line, y = 0.1 + v (t - 35), meets the starting level 0.1 at t = 35 s.
"""

from __future__ import annotations

import numpy as np
import pytest
from vzero.plugins.rates.lagdecay import detect_lag
from vzero.plugins.rates.noise import screen

BREAK = 35.0  # s


@pytest.mark.parametrize("n_reads", [12, 15])
def test_a_lag_is_found_on_a_plate_of_three_blocks(n_reads: int) -> None:
    t = np.arange(n_reads) * 10.0
    y = 0.1 + 2e-3 * np.maximum(t - BREAK, 0.0)[None, :]
    start, lag_s, has = detect_lag(t, y, screen(y, min_points=8, time=t), early=False)
    assert has.tolist() == [True]
    # where the steepest block's line meets the first block's (by hand, above)
    assert lag_s[0] == pytest.approx(BREAK, rel=1e-9)
    # the steady part starts after the break, and two blocks of reads remain after it (n - 2 * width at most)
    assert t[start[0]] > BREAK
    assert start[0] <= n_reads - 2 * 4


def test_below_three_blocks_no_lag_is_looked_for() -> None:
    # 11 reads: fewer than three blocks of four, so the block test does not run and no lag is reported (lag 0,
    # the steady part from the first read), though the reads show one
    t = np.arange(11) * 10.0
    y = 0.1 + 2e-3 * np.maximum(t - BREAK, 0.0)[None, :]
    start, lag_s, has = detect_lag(t, y, screen(y, min_points=8, time=t), early=False)
    assert has.tolist() == [False]
    assert lag_s.tolist() == [0.0]
    assert start.tolist() == [0]
