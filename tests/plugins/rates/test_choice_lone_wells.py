"""Model choice where one well, or one read, decides: step 6c with exactly one misfit well, and the window of
wells that take the plate's shape (step 9) when their last reads are missing.

Sources: the clause table and fakes of ``test_choice_shape_step.py`` (step 6c's rule as its docstring states
it); the Hill plate of ``test_poolshape.py`` (scipy.integrate.solve_ivp, Radau; Hill 1910, K0.5 0.3 mM,
h 2.5). Wells are invented.
"""

from __future__ import annotations

import numpy as np
import pytest
from vzero.plugins.rates.choice import CENSORED_READS, model_choice

from tests.plugins.rates import test_choice_shape_step as shape_step
from tests.plugins.rates.test_poolshape import HILL, S_HILL, S_SI, SI, SPC, T, hill_rate, plate, si_rate


@pytest.mark.parametrize("order", [(0, 1), (1, 0)])
def test_shape_step_screens_a_lone_misfit_well(monkeypatch: pytest.MonkeyPatch, order: tuple[int, int]) -> None:
    # two wells: one whose every clause holds (misfit 5 > 3.84), one with its misfit just below the trigger;
    # the one misfit well must still be tried and replaced (code 4), the other left alone
    cases = [shape_step.CASES[i] for i in order]
    assert [c[0] for c in cases].count("every clause holds") == 1
    monkeypatch.setattr(shape_step, "CASES", cases)
    monkeypatch.setattr(shape_step, "N", 2)
    out, stat, seen = shape_step._run(monkeypatch, np.full(2, shape_step.SE_HILL))
    hit = order.index(0)
    assert out.code.tolist() == [4.0 if i == hit else 0.0 for i in range(2)]
    assert len(seen["calls"]) == 2 and seen["calls"][0][0].tolist() == [hit]
    np.testing.assert_array_equal(stat, [c[2] for c in cases])


#: models fitted to the whole curve (Michaelis–Menten 0, power law 1, Hill 4, substrate inhibition 5, the plate's
#: shape 6 and 7; docs/rates.md): their window is every counted read
WHOLE_CURVE = (0.0, 1.0, 4.0, 5.0, 6.0, 7.0)


@pytest.mark.parametrize(("family", "pooled", "must"), [("hill", True, (6.0,)), ("hill", False, (4.0,)),
                                                        ("si", False, (5.0,))])
def test_whole_curve_wells_report_the_reads_they_used(family: str, pooled: bool, must: tuple[float, ...]) -> None:
    # the cooperative (or substrate-inhibited) plate with each well's last reads missing (1 to 5 of them) and
    # some wells' first two: a well on a whole-curve model reports the window from its first counted read to
    # its last counted read and the number of counted reads, by hand from the mask: the finite reads less
    # CENSORED_READS beside each missing block at the start or end (choice.trim_censored's docstring)
    rate, s0, vmax = (hill_rate, S_HILL, HILL["vmax"]) if family == "hill" else (si_rate, S_SI, SI["vmax"])
    y, _ = plate(rate, s0, vmax, 0.002, 100)
    cut = 1 + np.arange(s0.size) % 5
    for i, c in enumerate(cut):
        y[i, -c:] = np.nan
    y[1::3, :2] = np.nan
    r = model_choice(T, y, s0=s0, signal_per_conc=SPC, pool_shape=pooled)
    model = np.asarray(r.extra["model"])
    assert np.isin(must, model).all() and np.isin(model[[1, 4]], WHOLE_CURVE).any()
    for i in np.flatnonzero(np.isin(model, WHOLE_CURVE)):
        finite = np.flatnonzero(np.isfinite(y[i]))
        lead = CENSORED_READS if finite[0] > 0 else 0
        counted = finite[lead:finite.size - CENSORED_READS]
        assert r.window_start_s[i] == T[counted[0]]
        assert r.window_end_s[i] == T[counted[-1]] == T[T.size - 1 - cut[i] - CENSORED_READS]
        assert r.n_points[i] == counted.size


def test_each_well_is_chosen_on_its_own_reads() -> None:
    # without the plate's shape (step 9) every step decides per well: a plate of six wells that end on six
    # different models (Michaelis–Menten 0, quadratic 2, power law 1, Hill 4, substrate inhibition 5, and a
    # decaying well, 3: Selwyn 1965's first-order loss of rate, half-life 208 s, 3 % conversion) gives each
    # well what it gets on a plate of its own, so every step also runs with exactly one well
    yh, _ = plate(hill_rate, S_HILL, HILL["vmax"], 0.002, 100)
    ys, _ = plate(si_rate, S_SI, SI["vmax"], 0.002, 100)
    k = 1.0 / 300.0
    yd = 0.05 + SPC * 5e-4 * -np.expm1(-k * T) / k + 0.002 * np.random.default_rng(9).standard_normal(T.size)
    y = np.vstack([yh[[0, 1, 2, 4]], ys[[7]], yd])
    s0 = np.r_[S_HILL[[0, 1, 2, 4]], S_SI[7], 5.0]
    r = model_choice(T, y, s0=s0, signal_per_conc=SPC, pool_shape=False)
    assert np.asarray(r.extra["model"]).tolist() == [0.0, 2.0, 1.0, 4.0, 5.0, 3.0]
    for i in range(s0.size):
        alone = model_choice(T, y[i:i + 1], s0=s0[i:i + 1], signal_per_conc=SPC, pool_shape=False)
        assert alone.extra["model"][0] == r.extra["model"][i] and alone.flags[0] == r.flags[i]
        np.testing.assert_allclose([alone.v0[0], alone.stderr[0]], [r.v0[i], r.stderr[i]], rtol=1e-8)
        assert alone.window_end_s[0] == r.window_end_s[i] and alone.n_points[0] == r.n_points[i]
