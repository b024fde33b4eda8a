"""The short-lag test's edges: too few reads, a single knee or none, wells with missing reads.

Each figure is checked against the module text of :mod:`vzero.plugins.rates.earlylag` and, where a hinge fit
is made, against numpy.linalg.lstsq of ``y = a + b t + c min(t - t_k, 0)`` written here (ordinary least
squares; the hinge t value ``-sign(change) c / (sigma sqrt((X'X)^-1_cc))``). Invented curves.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from vzero.plugins.rates import earlylag

T = np.arange(60) * 5.0  # s; window of 12 reads, knees 3..6
SIGMA = 0.02


def _lagged(seed: int) -> np.ndarray:
    """A rising well, slow for four reads then steady at 0.05 per s, with read noise SIGMA."""
    rng = np.random.default_rng(seed)
    return np.where(T < 20.0, 0.01 * T, 0.05 * T - 0.8) + rng.normal(0.0, SIGMA, T.size)


def _z_by_lstsq(t: np.ndarray, y: np.ndarray, knees: range) -> float:
    """Largest hinge t over ``knees`` (rising signal) by numpy.linalg.lstsq over the finite reads."""
    keep = np.isfinite(y)
    tc = t - t[0]
    best = -math.inf
    for k in knees:
        x = np.column_stack([np.ones_like(tc), tc, np.minimum(tc - tc[k], 0.0)])[keep]
        (_, _, c), *_ = np.linalg.lstsq(x, y[keep], rcond=None)
        best = max(best, -c / (SIGMA * math.sqrt(np.linalg.inv(x.T @ x)[2, 2])))
    return best


def test_fewer_than_eight_reads_are_not_tested_and_report_no_lag() -> None:
    # module text: the test needs eight reads; an untested usable well reports no lag (lag 0 s, knee 0) and
    # no statistic; a well that is not usable reports NaN for its lag
    t = np.arange(7) * 5.0
    y = np.vstack([_lagged(1)[:7], _lagged(2)[:7]])
    res = earlylag.early_lag(t, y, np.full(2, SIGMA), np.ones(2), np.array([True, False]))
    assert res.has.tolist() == [False, False]
    assert res.knee.tolist() == [0, 0]
    assert res.lag_s[0] == 0.0 and math.isnan(res.lag_s[1])
    assert np.isnan(res.z).all() and np.isnan(res.ratio).all()


def test_a_single_knee_is_still_tested_and_none_is_not() -> None:
    y = _lagged(3)[None, :]
    w = earlylag.window_reads(T.size)
    one = np.ones(1, bool)
    single = earlylag.early_lag(T, y, np.full(1, SIGMA), np.ones(1), one, first_knee=w // 2)
    # the one knee w // 2 = 6, by lstsq (the lag ends at read 4, so the statistic there is still large)
    assert single.z[0] == pytest.approx(_z_by_lstsq(T[:w], y[0, :w], range(w // 2, w // 2 + 1)), rel=1e-7)
    assert bool(single.has[0]) and single.knee[0] == w // 2
    none = earlylag.early_lag(T, y, np.full(1, SIGMA), np.ones(1), one, first_knee=w // 2 + 1)
    assert not none.has[0] and math.isnan(none.z[0]) and none.lag_s[0] == 0.0


def test_default_knees_start_at_the_third_read() -> None:
    y = _lagged(4)[None, :]
    w = earlylag.window_reads(T.size)
    res = earlylag.early_lag(T, y, np.full(1, SIGMA), np.ones(1), np.ones(1, bool))
    assert res.z[0] == pytest.approx(_z_by_lstsq(T[:w], y[0, :w], range(3, w // 2 + 1)), rel=1e-7)


@pytest.mark.parametrize(("n_missing", "tested"), [(3, True), (4, True), (5, False)])
def test_a_well_with_missing_reads_needs_eight_finite_ones_in_the_window(n_missing: int, tested: bool) -> None:
    # module text: wells with missing reads get their own normal equations when at least eight of the
    # window's reads are finite (12 reads here: 9, 8 and 7 finite)
    y = _lagged(5)
    y[[1, 8, 9, 10, 11][:n_missing]] = np.nan
    res = earlylag.early_lag(T, y[None, :], np.full(1, SIGMA), np.ones(1), np.ones(1, bool))
    if tested:
        assert res.z[0] == pytest.approx(_z_by_lstsq(T[:12], y[:12], range(3, 7)), rel=1e-7)
    else:
        assert math.isnan(res.z[0]) and not res.has[0]


def test_the_lag_is_measured_from_the_steady_line_and_the_first_read() -> None:
    # a noiseless lag: flat for 4 reads (20 s) then rising 0.05 per s; the steady line through the reads from
    # the knee meets the starting level at 20 s, whatever the start of the time axis
    y = np.where(T < 20.0, 0.0, 0.05 * (T - 20.0)) + np.tile([1e-4, -1e-4], 30)
    for offset in (0.0, 300.0):
        res = earlylag.early_lag(T + offset, y[None, :], np.full(1, SIGMA), np.ones(1), np.ones(1, bool))
        assert bool(res.has[0]) and res.knee[0] == 4
        assert res.lag_s[0] == pytest.approx(20.0, abs=0.1)
        assert res.ratio[0] == pytest.approx(0.0, abs=0.01)  # the early rate over the steady one
