"""What model-choice reports beside v0: the model codes, the lag wells' flags, and what it needs to know
(invented data; plates simulated by ODE integration, :func:`vzero.plugins.kinetics.simulate.simulate_plate`,
scipy.integrate.solve_ivp).
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates.choice import MODEL_CODES, model_choice

T = np.arange(90) * 10.0  # s
SPC = 3.4  # AU/mM, invented
DOCS = Path(__file__).resolve().parents[3] / "docs" / "rates.md"


def test_model_codes_are_the_ones_the_documentation_gives() -> None:
    # docs/rates.md, model-choice's extra columns: "`model` (0 Michaelis–Menten, 1 power law, 2 quadratic, 3 lag
    # model, 4 Hill, 5 substrate inhibition, 6 Hill with the plate's shape, 7 ...)": the codes a reader of the
    # rates table looks up
    text = " ".join(DOCS.read_text(encoding="utf-8").split())
    listed = re.search(r"`model` \((0 [^)]*)\)", text)
    assert listed is not None
    # a remark after a colon ("...: the last two from step 9") is not part of the label
    doc = {int(m.group(1)): m.group(2).split(":")[0].strip() for m in re.finditer(r"(\d) ([^,]+)", listed.group(1))}
    names = {"Michaelis–Menten": "michaelis-menten", "power law": "power", "quadratic": "quadratic",
             "lag model": "lag-decay", "Hill": "hill", "substrate inhibition": "substrate-inhibition",
             "Hill with the plate's shape": "plate-hill",
             "substrate inhibition with the plate's shape": "plate-substrate-inhibition"}
    assert {names[label]: code for code, label in doc.items()} == MODEL_CODES


def test_lag_wells_without_decay_are_not_flagged_decay() -> None:
    # a hysteretic lag of 60 s and a stable enzyme: every well gets the lag model (code 3) with no decay: k_decay
    # 0 and no DECAY flag, also on the low-signal wells that take the plate's lag (the detector sees none there)
    s0 = np.array([0.5, 1.0, 2.0, 5.0, 0.05, 0.02])
    p = simulate_plate(T, s0, 0.5, 6e-4, lag_tau=60.0, signal_per_conc=SPC, noise=0.001, seed=4)
    r = model_choice(T, p.signal, s0=s0, signal_per_conc=SPC)
    assert (r.extra["model"] == MODEL_CODES["lag-decay"]).all()
    assert (r.flags & Flag.LAG).all()
    assert not (r.flags & Flag.DECAY).any()
    np.testing.assert_array_equal(r.extra["k_decay"], 0.0)
    np.testing.assert_allclose(r.lag_s, 60.0, rtol=0.10)


def test_substrate_or_signal_scale_alone_is_as_good_as_neither() -> None:
    # the whole-curve models in concentration need both S0 and the signal per concentration (docs/rates.md);
    # given one without the other, the method works in signal units exactly as given neither
    s0 = np.array([0.2, 0.5, 1.0, 2.0])
    y = simulate_plate(T, s0, 0.5, 6e-4, signal_per_conc=SPC, noise=0.002, seed=9).signal
    neither = model_choice(T, y)
    for alone in (model_choice(T, y, s0=s0), model_choice(T, y, signal_per_conc=SPC)):
        for name in ("v0", "stderr", "window_start_s", "window_end_s", "goodness", "flags", "n_points", "lag_s"):
            np.testing.assert_array_equal(getattr(alone, name), getattr(neither, name), err_msg=name)
        np.testing.assert_array_equal(alone.extra["model"], neither.extra["model"])
    both = model_choice(T, y, s0=s0, signal_per_conc=SPC)
    assert not np.array_equal(both.v0, neither.v0)  # knowing both changes the estimate (the window, the curves)


def test_lag_wells_without_the_substrate_report_the_lag_decay_fit() -> None:
    # without S0 and the signal scale the lag clock cannot be fitted in concentration: the lag wells take
    # lag_decay's fit (docs/rates.md), every figure as lag_decay gives it for those wells (its own figures are
    # checked in the lag-decay tests); the LAG flag and code 3
    from vzero.plugins.rates.lagdecay import lag_decay

    s0 = np.array([0.5, 1.0, 2.0, 5.0])
    p = simulate_plate(T, s0, 0.5, 6e-4, lag_tau=60.0, signal_per_conc=SPC, noise=0.001, seed=4)
    r = model_choice(T, p.signal)
    assert (r.flags & Flag.LAG).all() and (r.extra["model"] == MODEL_CODES["lag-decay"]).all()
    ld = lag_decay(T, p.signal, min_points=8, fail_ratio=np.inf)
    for name in ("v0", "stderr", "window_start_s", "window_end_s", "n_points"):
        np.testing.assert_array_equal(getattr(r, name), getattr(ld, name), err_msg=name)
    np.testing.assert_array_equal(r.extra["rmse_over_noise"], ld.extra["rmse_over_noise"])
    # the lag time there is the detector's (a rougher estimate than the lag clock's: 46-56 s here)
    assert ((r.lag_s > 30.0) & (r.lag_s < 70.0)).all()
