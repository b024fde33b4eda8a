"""Start values of every rate law, figure by figure, by hand (invented data).

A start value does not change the optimum a well-posed fit reaches, but it decides whether a hard fit gets
there (and how many iterations it takes), so each rule of vzero.plugins.fit.models is checked as written:
Vmax from the highest rate, Km (or K0.5) at the geometric midpoint of the two levels around half of it, Ksi
ten times the top substrate level, inhibition constants at the median positive inhibitor level, the logistic's
midpoint at the geometric median and its steepness sign from the direction of the curve. Each expected value
is worked out in the comment beside it (hand calculation).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from vzero.plugins.fit.catalog import BY_NAME

MM = "michaelis-menten"


def _start(name: str, y: list[float], **x: list[float]) -> list[float]:
    return BY_NAME[name].start({k: np.asarray(v, float) for k, v in x.items()}, np.asarray(y, float))


def test_michaelis_menten_start_at_the_geometric_midpoint_around_half_vmax() -> None:
    # Vmax = 3.5; half 1.75 first reached at S = 2 (v = 2), the level below is S = 1: Km = sqrt(2 * 1)
    assert _start(MM, [0, 1, 2, 3, 3.5], substrate=[0, 1, 2, 4, 8]) == pytest.approx([3.5, math.sqrt(2)])
    # the same data in another order (the rule sorts by substrate)
    assert _start(MM, [3, 1, 3.5, 0, 2], substrate=[4, 1, 8, 0, 2]) == pytest.approx([3.5, math.sqrt(2)])
    # half reached exactly (v = Vmax/2 counts as reached): S = 4, level below 2 -> sqrt(8)
    assert _start(MM, [1, 1.5, 2, 4], substrate=[1, 2, 4, 8]) == pytest.approx([4.0, math.sqrt(8)])


def test_michaelis_menten_start_edges() -> None:
    # half reached at the lowest level already: Km = that level
    assert _start(MM, [3, 3.2, 3.3], substrate=[1, 2, 4]) == pytest.approx([3.3, 1.0])
    # half first reached at S = 2, the level below is a zero-substrate control: Km = 2 itself
    assert _start(MM, [0, 2, 3, 3.5], substrate=[0, 2, 4, 8]) == pytest.approx([3.5, 2.0])
    # half reached at the zero-substrate level: the median positive level, median(1, 2, 5) = 2
    assert _start(MM, [2, 3, 3.1, 3.2], substrate=[0, 1, 2, 5]) == pytest.approx([3.2, 2.0])
    # no positive rate: Vmax 1, half 0.5 never reached, Km = median positive level, median(1, 3) = 2
    assert _start(MM, [-1, -2, -0.5], substrate=[0, 1, 3]) == pytest.approx([1.0, 2.0])
    # a zero top rate is not a Vmax either
    assert _start(MM, [0, 0, 0], substrate=[1, 2, 4])[0] == 1.0
    # no positive substrate level: Km = 1
    assert _start(MM, [1, 2], substrate=[0, 0]) == pytest.approx([2.0, 1.0])
    # every rate missing: Vmax = 1
    assert _start(MM, [np.nan, np.nan], substrate=[1, 2])[0] == 1.0


def test_hill_and_substrate_inhibition_starts() -> None:
    s, v = [0.5, 1, 2, 4, 8], [0.4, 1, 2.2, 3.6, 4]
    # Vmax 4, half 2 first reached at S = 2 (v = 2.2), level below 1: K0.5 = sqrt(2); h starts at 1
    assert _start("hill", v, substrate=s) == pytest.approx([4.0, math.sqrt(2), 1.0])
    # Ksi: ten times the top substrate level (8 -> 80)
    assert _start("substrate-inhibition", v, substrate=s) == pytest.approx([4.0, math.sqrt(2), 80.0])
    assert _start("substrate-inhibition", [1, 2], substrate=[0, 0])[2] == 1.0  # no positive level: 1


def test_inhibitor_model_starts_from_the_uninhibited_wells() -> None:
    # uninhibited wells (I = the lowest level, 0): S = 1, 2, 4 with v = 1, 2, 2.5 -> Vmax 2.5, half 1.25
    # first reached at S = 2 (level below 1): Km = sqrt(2); the inhibited wells' rates (up to 9) are ignored.
    # Kic (and Kiu) at the median positive inhibitor level: median(0.5, 0.5, 2, 2, 2, 8) = 2
    s = [1, 2, 4, 1, 2, 4, 1, 2, 4]
    i = [0, 0, 0, 0.5, 2, 8, 0.5, 2, 2]
    v = [1, 2, 2.5, 9, 9, 9, 9, 9, 9]
    assert _start("competitive", v, substrate=s, inhibitor=i) == pytest.approx([2.5, math.sqrt(2), 2.0])
    assert _start("mixed", v, substrate=s, inhibitor=i) == pytest.approx([2.5, math.sqrt(2), 2.0, 2.0])
    # every well at one inhibitor level: all are "uninhibited"; no positive inhibitor level: constants at 1
    assert _start("competitive", [1, 2, 2.5], substrate=[1, 2, 4], inhibitor=[0, 0, 0]) == pytest.approx(
        [2.5, math.sqrt(2), 1.0])
    # the lowest level is positive (no control): those wells (S = 1, 2; v = 1, 2) are the uninhibited ones,
    # Vmax 2 with half reached at the lowest level, Km = 1; Kic at median(1, 1, 4) = 1
    assert _start("competitive", [1, 2, 0.1], substrate=[1, 2, 4], inhibitor=[1, 1, 4]) == pytest.approx(
        [2.0, 1.0, 1.0])


def test_titration_starts() -> None:
    # Morrison: v0 at the top rate, Ki_app at the median positive inhibitor level, median(0.1, 1, 10) = 1
    assert _start("morrison", [5, 4, 2, 0.5], inhibitor=[0, 0.1, 1, 10], enzyme=[1, 1, 1, 1]) == pytest.approx([5, 1])
    assert _start("morrison", [-1, -2], inhibitor=[0, 0], enzyme=[1, 1]) == pytest.approx([1, 1])
    # logistic: midpoint at the geometric median of the positive levels, exp(median of ln 0.1 ... ln 100) = √10;
    # falling curve: [top, bottom, mid, +1]; rising: [bottom, top, mid, +1] (mean of the three highest-I rates
    # against the three lowest)
    i = [0, 0.1, 1, 10, 100]
    assert _start("logistic-4p", [10, 9, 5, 2, 1], inhibitor=i) == pytest.approx([10, 1, math.sqrt(10), 1.0])
    assert _start("logistic-4p", [1, 2, 5, 9, 10], inhibitor=i) == pytest.approx([1, 10, math.sqrt(10), 1.0])
    assert _start("logistic-4p", [4, 3, 1], inhibitor=[0.5, 8, 2]) == pytest.approx([4, 1, 2, 1.0])
    assert _start("logistic-4p", [4, 3], inhibitor=[0, 0])[2] == 1.0  # no positive level
