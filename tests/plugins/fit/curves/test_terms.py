"""``lag: auto`` and ``inactivation: auto`` in the curve fit: candidates from the rates step's flags, kept on
the AICc evidence (a term must lower the AICc by more than 10: Burnham & Anderson 2002, Model Selection and
Multimodel Inference, 2nd ed., section 2.6, where a model 10 units worse has essentially no support).

Curves for the whole-fit cases come from scipy's solve_ivp (Radau, rtol 1e-10) on the lag-then-inactivation
scheme (inactive precursor turns active with time constant λ, only the active form is lost at k), with a
random baseline per well and Gaussian read noise. Parameters and data are invented.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from vzero.plugins.fit.catalog import BY_NAME
from vzero.plugins.fit.curves import curve, terms
from vzero.plugins.fit.curves.fit import CurveGroup

SCALE = 1 / 60  # rates in uM/min, substrate in uM, time in s
MM = BY_NAME["michaelis-menten"]


def _fake(aicc: float, success: bool = True) -> SimpleNamespace:
    return SimpleNamespace(result=SimpleNamespace(aicc=aicc, success=success))


def test_candidates_follow_settings_and_flags() -> None:
    flagged, clean = terms.Marks(8, 3, 2), terms.Marks(8, 0, 0)
    assert terms.candidates("auto", "auto", flagged) == [(False, False), (False, True), (True, False), (True, True)]
    assert terms.candidates("auto", "auto", clean) == [(False, False)]
    assert terms.candidates(True, "auto", terms.Marks(8, 0, 1)) == [(True, False), (True, True)]
    assert terms.candidates(False, False, flagged) == [(False, False)]  # explicit settings are obeyed
    assert terms.marks(["lag", "lag;decay", "", float("nan"), "noisy;decay"]) == terms.Marks(5, 2, 2)


@pytest.mark.parametrize(("aicc", "kept"), [
    ({(False, False): 100.0, (True, False): 95.0}, (False, False)),  # 5 lower: not enough evidence
    ({(False, False): 100.0, (True, False): 89.0}, (True, False)),  # 11 lower: kept
    # both terms: 24 below neither but only 4 below lag alone, so the second term is not kept
    ({(False, False): 100.0, (False, True): 99.0, (True, False): 80.0, (True, True): 76.0}, (True, False)),
    ({(False, False): 100.0, (False, True): 99.0, (True, False): 80.0, (True, True): 60.0}, (True, True)),
])
def test_a_term_must_lower_the_aicc_by_more_than_ten(aicc: dict, kept: tuple[bool, bool]) -> None:
    choice = terms.choose({c: _fake(a) for c, a in aicc.items()}, "auto", "auto", terms.Marks(8, 4, 4))
    assert (choice.lag, choice.inactivation) == kept
    assert "AICc against neither" in choice.note and "more than 10" in choice.note


def test_a_combination_that_did_not_converge_is_not_kept() -> None:
    fits = {(False, False): _fake(100.0), (True, False): _fake(10.0, success=False)}
    choice = terms.choose(fits, "auto", False, terms.Marks(8, 4, 0))
    assert (choice.lag, choice.inactivation) == (False, False) and "lag did not converge" in choice.note
    assert terms.choose({(True, True): _fake(1.0)}, True, True, terms.Marks(8, 4, 4)).note == ""


def _radau(s0: float, theta: tuple[float, float], k: float, lam: float, time: np.ndarray) -> np.ndarray:
    """Product by scipy's Radau (rtol 1e-10) on the scheme: precursor y[1], active enzyme y[2]."""

    def rhs(_t: float, y: np.ndarray) -> list[float]:
        s = max(s0 - y[0], 0.0)
        v = theta[0] * s / (theta[1] + s) * SCALE
        return [v * y[2], -y[1] / lam, y[1] / lam - k * y[2]] if lam > 0 else [v * y[2], 0.0, -k * y[2]]

    start = [0.0, 1.0, 0.0] if lam > 0 else [0.0, 0.0, 1.0]
    sol = solve_ivp(rhs, (0.0, time[-1]), start, method="Radau", rtol=1e-10, atol=[1e-12 * s0, 1e-12, 1e-12],
                    t_eval=time)
    assert sol.success
    return sol.y[0]


def _group(k: float, lam: float, seed: int) -> CurveGroup:
    rng = np.random.default_rng(seed)
    time = np.arange(0.0, 900.0, 15.0)
    s0 = np.geomspace(4.0, 120.0, 6)
    theta = (5.0, 20.0)
    y = np.array([_radau(float(s), theta, k, lam, time) + rng.uniform(-0.5, 0.5)
                  + 0.02 * rng.standard_normal(time.size) for s in s0])
    wells = curve.Wells(s0, np.zeros(6), np.ones(6), np.tile(time, (6, 1)), np.full(6, SCALE))
    rates = MM.evaluate(list(theta), {"substrate": s0})
    return CurveGroup("g", wells, y, np.ones(y.shape, bool), rates, [("P1", f"A{j + 1}") for j in range(6)])


def test_auto_fits_the_terms_the_curves_need_and_only_those() -> None:
    lagged, plain = _group(1.2e-3, 60.0, seed=3), _group(0.0, 0.0, seed=4)
    flagged, clean = terms.Marks(6, 5, 4), terms.Marks(6, 0, 0)
    out = terms.fit_with_terms(MM, [lagged, plain, lagged], [flagged, flagged, clean],
                               [("auto", "auto")] * 3, profile=False)
    (fit_l, choice_l), (fit_p, choice_p), (fit_c, choice_c) = out
    # a 60-s lag and a 1.2e-3 /s loss of the active form: both terms bring far more than 10 AICc units
    assert (choice_l.lag, choice_l.inactivation) == (True, True), choice_l.note
    assert abs(fit_l.result.params["Vmax"].value / 5.0 - 1) < 0.02
    # the same flags on curves without either shape: the terms buy nothing and are left out
    assert (choice_p.lag, choice_p.inactivation) == (False, False), choice_p.note
    assert abs(fit_p.result.params["Vmax"].value / 5.0 - 1) < 0.02
    # no flag, no candidate: the plain fit alone, whatever the curves hold
    assert (choice_c.lag, choice_c.inactivation) == (False, False)
    assert set(fit_c.result.params) == {"Vmax", "Km"}
    assert "AICc" not in choice_c.note and "flagged lag on 0 and decay on 0 of 6" in choice_c.note
