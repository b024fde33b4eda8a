"""The fit stage's helpers at the edges an eleventh mutation sample found untested: one well with an enzyme
concentration (kcat needs it), and the F-test note of the selection reason, which names the chosen model's own
test only (not those of the other nested pairs)."""

from __future__ import annotations

import re

import numpy as np
import pytest
from scipy import stats
from vzero.plugins.fit import compare
from vzero.plugins.fit import run as fit_run
from vzero.plugins.fit.catalog import BY_NAME

from tests.plugins.fit.test_statistics import _rss_for_p, _stub


def test_one_well_with_an_enzyme_concentration_gives_that_concentration() -> None:
    # a group whose only finite enzyme concentration is one well's: that value is the group's (kcat = Vmax/E
    # needs it); only an empty group (no finite value) has none
    assert fit_run._group_enzyme(np.array([2.5e-9])) == 2.5e-9
    assert fit_run._group_enzyme(np.array([np.nan, 2.5e-9, np.nan])) == 2.5e-9
    assert np.isnan(fit_run._group_enzyme(np.array([], float)))


def test_the_reason_quotes_only_the_chosen_models_f_test() -> None:
    # invented set of 30 points: Hill (3 parameters) has the lowest RSS and AICc; both 3-parameter models
    # beat Michaelis-Menten at p < 0.05, so Hill is kept and its reason quotes its own test against MM
    n = 30
    mm = _stub(_rss_for_p(0.001, 10.0, n), n, 2)
    hill, si = _stub(10.0, n, 3), _stub(10.5, n, 3)
    fits = {"michaelis-menten": mm, "hill": hill, "substrate-inhibition": si}
    nests = {"hill": {"michaelis-menten": ""}, "substrate-inhibition": {"michaelis-menten": ""}}
    _, chosen, reason = compare.compare_set(fits, nests)
    assert chosen == "hill"
    notes = re.findall(r"F-test against ([\w-]+): p = ([0-9.eE+-]+)", reason)
    assert len(notes) == 1, reason
    # extra-sum-of-squares F of MM against Hill, p from scipy.stats.f (independent of the module)
    f = (mm.rss - hill.rss) / 1 / (hill.rss / (n - 3))
    assert notes[0][0] == "michaelis-menten"
    assert float(notes[0][1]) == pytest.approx(stats.f.sf(f, 1, n - 3), rel=1e-2)


def test_logistic_start_direction_from_the_three_rates_at_each_end() -> None:
    # the rule as written (vzero.plugins.fit.models, start values): the curve falls when the mean of the three
    # highest-inhibitor rates lies below that of the three lowest (falling: [top, bottom, mid, +1]; rising:
    # [bottom, top, mid, +1]). Invented 8-level data, each with one stray rate next to an end, so that four
    # rates at that end would give the other direction. Midpoint: the geometric median of the seven positive
    # levels 0.1 ... 1000, 10**(median of -1, -0.5, ..., 2) = 10**0.5 (hand calculation).
    i = {"inhibitor": np.array([0, 0.1, 10**-0.5, 1, 10**0.5, 10, 100, 1000])}
    start = BY_NAME["logistic-4p"].start
    # low end 7, 7, 7 (then a stray 1: four would give 5.5) against 6, 6, 6 at the high end: falling
    assert start(i, np.array([7, 7, 7, 1, 6.5, 6, 6, 6], float)) == pytest.approx([7, 1, 10**0.5, 1.0])
    # low end 5, 5, 5 against 1, 1, 1 (after a stray 20: four would give 5.75 against 3.75): falling
    assert start(i, np.array([5, 5, 5, 0, 20, 1, 1, 1], float)) == pytest.approx([20, 0, 10**0.5, 1.0])
