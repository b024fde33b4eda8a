"""Step 9's shape is pooled within one enzyme at one inhibitor level: the layout's ``group`` and ``inhibitor``
(plugins/rates/choice.py ``pool_groups``; plugins/rates ``pool_groups(plate)``).

Sources: every curve's substrate by scipy.integrate.solve_ivp (Radau), through the helpers of
``test_poolshape.py`` (a cooperative enzyme, Hill 1910, K0.5 0.3 mM and h 2.5; an enzyme following
Michaelis–Menten, Km 0.5 mM). Plates are invented.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from vzero.plugins.kinetics.methods import PlateView
from vzero.plugins.rates import pool_groups
from vzero.plugins.rates.choice import model_choice

from tests.plugins.rates.test_poolshape import HILL, S_HILL, SPC, T, hill_rate, mm_rate, plate

S_MM = np.array([0.05, 0.1, 0.2, 0.35, 0.5, 0.75, 1.0, 2.0, 3.0])


def _mixed(seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """One plate: a cooperative enzyme's wells (group 0), then a Michaelis–Menten enzyme's (group 1)."""
    y_h, _ = plate(hill_rate, S_HILL, HILL["vmax"], 0.002, seed)
    y_m, _ = plate(mm_rate, S_MM, 6e-4, 0.002, seed + 50)
    groups = np.r_[np.zeros(S_HILL.size, dtype=np.int64), np.ones(S_MM.size, dtype=np.int64)]
    return np.vstack([y_h, y_m]), np.r_[S_HILL, S_MM], groups


def test_each_group_gets_its_own_shape_and_no_other() -> None:
    # with the groups given, the cooperative wells get exactly what they get on a plate of their own (the
    # other enzyme's wells no longer enter their joint fit), and the Michaelis–Menten wells never take a
    # plate shape (models 6, 7)
    hits = 0
    for seed in (100, 101, 102):
        y, s0, groups = _mixed(seed)
        both = model_choice(T, y, s0=s0, signal_per_conc=SPC, pool_groups=groups)
        alone = model_choice(T, y[: S_HILL.size], s0=S_HILL, signal_per_conc=SPC)
        n = S_HILL.size
        np.testing.assert_allclose(both.v0[:n], alone.v0, rtol=1e-9)
        np.testing.assert_allclose(both.stderr[:n], alone.stderr, rtol=1e-9)
        np.testing.assert_array_equal(both.extra["model"][:n], alone.extra["model"])
        assert not np.any(both.extra["model"][n:] >= 6)
        hits += int(np.sum(alone.extra["model"] == 6))
    assert hits > 0  # the cooperative wells did take the plate's shape somewhere


def test_wells_outside_every_group_are_never_pooled() -> None:
    # a negative group number (blanks, standards) keeps a well out of the joint fit: with every well at -1
    # the result is the method without step 9
    y, s0, _ = _mixed(100)
    none = model_choice(T, y, s0=s0, signal_per_conc=SPC, pool_groups=np.full(s0.size, -1))
    off = model_choice(T, y, s0=s0, signal_per_conc=SPC, pool_shape=False)
    np.testing.assert_array_equal(none.v0, off.v0)
    np.testing.assert_array_equal(none.extra["model"], off.extra["model"])


def test_groups_of_the_wrong_length_are_refused() -> None:
    y, s0, groups = _mixed(100)
    with pytest.raises(ValueError, match="one integer per well"):
        model_choice(T, y, s0=s0, signal_per_conc=SPC, pool_groups=groups[:-1])


def _view(wells: pd.DataFrame) -> PlateView:
    return PlateView("p1", wells, {}, "AU", lambda _m: None)


def test_layout_groups_and_inhibitor_levels_number_the_sample_wells() -> None:
    wells = pd.DataFrame({
        "well": ["A1", "A2", "A3", "A4", "A5", "A6"],
        "role": ["sample", "sample", "sample", "blank", "sample", "standard"],
        "group": ["wt", "wt", "wt", "wt", "mut", "wt"],
        "inhibitor": [0.0, 0.0, 5.0, 0.0, 0.0, 0.0],
    })
    g = pool_groups(_view(wells))
    assert g.tolist()[3] == -1 and g.tolist()[5] == -1  # blank and standard: never pooled
    assert g[0] == g[1]  # same enzyme, same inhibitor level
    assert len({int(g[0]), int(g[2]), int(g[4])}) == 3  # another inhibitor level, another group
    assert (g[[0, 1, 2, 4]] >= 0).all()


def test_a_layout_without_groups_pools_its_sample_wells_together() -> None:
    wells = pd.DataFrame({"well": ["A1", "A2", "A3"], "role": ["sample", "blank", "sample"]})
    assert pool_groups(_view(wells)).tolist() == [0, -1, 0]
    assert pool_groups(_view(pd.DataFrame({"well": ["A1", "A2"]}))).tolist() == [0, 0]


def test_the_lag_and_decay_of_one_group_stay_in_that_group() -> None:
    # step 8's lag clock (lag time and decay constant shared by the wells of a pool): a hysteretic enzyme with
    # a 60-s lag and first-order inactivation (group 0) beside a stable enzyme without lag (group 1), integrated
    # by scipy's solve_ivp (simulate_plate). With the groups given, each group gets what it gets on a plate of
    # its own. As one pool (measured, seed 11/12), the stable enzyme's wells dilute the lag wells below the
    # third of the usable wells that carries the lag clock to wells whose lag the detector missed, and three
    # of the lagging enzyme's low wells lose the lag model.
    from vzero.plugins.kinetics.simulate import simulate_plate

    s0 = np.array([0.02, 0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0])
    lagging = simulate_plate(T, s0, 0.5, 6e-4, lag_tau=60.0, k_inact=8e-4, signal_per_conc=SPC, noise=0.002,
                             seed=11).signal
    stable = simulate_plate(T, s0, 0.5, 6e-4, signal_per_conc=SPC, noise=0.002, seed=12).signal
    y, s_all = np.vstack([lagging, stable]), np.r_[s0, s0]
    groups = np.r_[np.zeros(s0.size, dtype=np.int64), np.ones(s0.size, dtype=np.int64)]
    both = model_choice(T, y, s0=s_all, signal_per_conc=SPC, pool_groups=groups)
    n = s0.size
    for part, alone in ((slice(0, n), model_choice(T, lagging, s0=s0, signal_per_conc=SPC)),
                        (slice(n, 2 * n), model_choice(T, stable, s0=s0, signal_per_conc=SPC))):
        np.testing.assert_allclose(both.v0[part], alone.v0, rtol=1e-9)
        np.testing.assert_array_equal(both.flags[part], alone.flags)
        np.testing.assert_array_equal(both.extra["model"][part], alone.extra["model"])
    assert np.all(both.extra["model"][:n] == 3)  # every lagging well on the lag clock
    assert not np.any(both.extra["model"][n:] == 3)  # no stable well
