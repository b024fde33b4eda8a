"""The standard curve's linearity test: the extra-sum-of-squares F-test of adding x² to the line, and when
there are too few points for it (invented data; scipy.stats.f and numpy.polyfit as the references)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from vzero.plugins.convert.standard_curve import _curvature_p


def test_curvature_p_is_the_extra_sum_of_squares_f_test() -> None:
    x = np.array([0.0, 1.0, 2.0, 3.0, 4.0, 5.0])
    y = np.array([0.02, 1.05, 1.98, 3.1, 3.85, 4.7])
    rss_lin = float(np.sum((y - np.polyval(np.polyfit(x, y, 1), x)) ** 2))
    rss_quad = float(np.sum((y - np.polyval(np.polyfit(x, y, 2), x)) ** 2))
    f = (rss_lin - rss_quad) / (rss_quad / (x.size - 3))
    assert _curvature_p(x, y, rss_lin) == pytest.approx(stats.f.sf(f, 1, x.size - 3), rel=1e-9)


@pytest.mark.parametrize(("x", "y"), [
    ([0.0, 1.0, 2.0], [0.0, 1.2, 1.9]),  # three levels, three points: a quadratic through them leaves no dof
    ([0.0, 0.0, 2.0, 2.0], [0.0, 0.1, 2.0, 2.1]),  # four points at two levels: no curvature to see
    ([0.0, 1.0, 1.0, 1.0], [0.0, 1.0, 1.1, 0.9]),
])
def test_no_linearity_test_with_fewer_than_four_points_or_three_levels(x: list[float], y: list[float]) -> None:
    xa, ya = np.asarray(x), np.asarray(y)
    rss_lin = float(np.sum((ya - np.polyval(np.polyfit(xa, ya, 1), xa)) ** 2))
    assert math.isnan(_curvature_p(xa, ya, rss_lin))


def test_levels_are_dropped_down_to_three_and_no_further() -> None:
    # invented standards 1-5 in duplicate on an exact parabola: every subset of three or more levels is
    # curved (the quadratic fits exactly, p = 0), so the top levels go one by one until three levels remain
    # (the default minimum); the line is then the least-squares line of levels 1-3 (numpy.polyfit)
    from vzero.plugins.convert.standard_curve import fit_standard_curve

    x = np.repeat(np.arange(1.0, 6.0), 2)
    y = x**2
    curve = fit_standard_curve(x, y)
    assert curve.dropped_levels == (5.0, 4.0)
    slope, intercept = np.polyfit(x[x <= 3], y[x <= 3], 1)
    assert curve.slope == pytest.approx(slope, rel=1e-12) and curve.intercept == pytest.approx(intercept, rel=1e-12)
    assert curve.n_points == 6 and curve.conc_range == (1.0, 3.0)
    # without the linearity check nothing is dropped; with a minimum of four levels only the top one
    assert fit_standard_curve(x, y, check_linearity=False).dropped_levels == ()
    assert fit_standard_curve(x, y, min_levels=4).dropped_levels == (5.0,)
    # an exact line (the quadratic term fits nothing: p = 1) keeps every level
    line = fit_standard_curve(x, 2 * x + 1)
    assert line.dropped_levels == () and line.curvature_p == 1.0
    # the reported p of the kept range: 0 for the exact parabola (the quadratic term explains everything)
    assert curve.curvature_p == 0.0
