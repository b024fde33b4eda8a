"""model-choice's step 3 (which wells are left unfitted) and step 5's edge-of-order trigger, both sides of each
threshold (invented data).

Step 3 (:func:`vzero.plugins.rates.choice._skippable`) is checked on hand-made wells whose early quadratic has
a chosen local order ``n = -P'' S0 / v0²`` and third-order bias (the formula of the module text, evaluated here
by hand). Step 5's trigger is checked on a plate simulated by ODE integration
(:func:`vzero.plugins.kinetics.simulate.simulate_plate`, scipy.integrate.solve_ivp) whose Michaelis–Menten fits
are given chosen orders ``u = Km/(Km + S0)`` at and beside :data:`U_EDGE` and ``1 - U_EDGE``.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np
import pytest
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates import choice
from vzero.plugins.rates.choice import BIAS_SHARE, U_EDGE, EarlyQuadratic, _skippable
from vzero.plugins.rates.noise import Screen

from tests.plugins.rates.choice_spy import rows_of, spy_quadratic

# exact binary fractions, so that the order n = -curvature S0 spc / v0² is exact where a case sits on 0 or 1.5
V0, S0, SPC = 0.5, 1.0, 2.0  # signal/s, mM, signal/mM (invented)
N_T = 40


def _well(order: float, x: float, se: float, n_q: int = N_T, usable: bool = True) -> tuple[EarlyQuadratic, Screen]:
    """One well: an early quadratic with local order ``order`` through ``n_q`` of ``N_T`` reads, a change of
    ``x`` of full conversion over the run, and SE ``se`` (signal/s)."""
    q = EarlyQuadratic(np.array([V0]), np.array([se]), np.array([-order * V0**2 / (S0 * SPC)]),
                       np.array([float(n_q)]), np.array([n_q]), np.array([1.0]), np.array([0.99]))
    sc = Screen(np.ones((1, N_T), bool), np.array([N_T]), np.array([0.01]), np.array([x * SPC * S0]),
                np.zeros(1, np.int64), np.array([usable]), np.array([30.0]))
    return q, sc


def _bias_share(order: float, x: float) -> float:
    """The quadratic's third-order bias as a share of v0 (the module text: the larger of |n (2n - 1)| and
    |n (3n - 2)|, times x²/10), by hand."""
    return 0.1 * max(abs(order * (2 * order - 1)), abs(order * (3 * order - 2))) * x**2


@pytest.mark.parametrize(("order", "skipped"), [(1.4, True), (1.5, True), (1.6, False), (2.5, False),
                                                (0.05, True), (0.0, True), (-0.05, False)])
def test_step_3_leaves_unfitted_only_orders_from_0_to_1_5(order: float, skipped: bool) -> None:
    # a falling rate of order 0-1.5 is depletion; a faster fall (a cooperative or decaying well) or a rising
    # rate must reach the whole-curve models even where the bias is negligible (here below 1e-4 of the SE)
    q, sc = _well(order, x=0.01, se=1.0)
    n, _ = choice.quadratic_bias(q, np.abs(sc.change), np.array([S0]), SPC)
    assert n[0] == order  # exact by construction
    assert bool(_skippable(q, sc, np.array([S0]), SPC, BIAS_SHARE)[0]) is skipped


@pytest.mark.parametrize(("factor", "skipped"), [(0.95, True), (1.05, False)])
def test_step_3_needs_the_bias_below_its_share_of_the_se(factor: float, skipped: bool) -> None:
    # n = 1 (Michaelis-Menten far below Km), x = 0.15: bias share 0.1 * 1 * 0.0225 of v0 (hand); the SE is set
    # so that the bias is `factor` times 0.3 of it (the share docs/rates.md, model-choice step 3, states; the
    # product's constant is what model_choice passes)
    x = 0.15
    bias = _bias_share(1.0, x) * V0
    q, sc = _well(1.0, x=x, se=bias / (factor * 0.3))
    assert bool(_skippable(q, sc, np.array([S0]), SPC, BIAS_SHARE)[0]) is skipped


def test_step_3_needs_every_read_in_the_window_and_a_usable_well() -> None:
    for n_q, usable, skipped in [(N_T, True, True), (N_T - 1, True, False), (N_T, False, False)]:
        q, sc = _well(0.5, x=0.01, se=1.0, n_q=n_q, usable=usable)
        assert bool(_skippable(q, sc, np.array([S0]), SPC, BIAS_SHARE)[0]) is skipped, (n_q, usable)


def _km_for(u: float, s0: float) -> float:
    """A Km (mM) for which ``km / (km + s0)`` is exactly ``u`` in floating point where one is near
    ``u s0 / (1 - u)`` (searched over neighbouring floats), else the nearest."""
    km = u * s0 / (1.0 - u)
    for _ in range(64):
        if km / (km + s0) == u:
            return km
        km = float(np.nextafter(km, np.inf if km / (km + s0) < u else -np.inf))
    return km


T = np.arange(60) * 10.0  # s
SPC_PLATE, KM_TRUE = 2.5, 0.5  # AU/mM, mM (invented)


def test_power_law_is_tried_at_the_edges_of_the_michaelis_menten_orders(monkeypatch: pytest.MonkeyPatch) -> None:
    # step 5: the power law is fitted where the Michaelis-Menten curve's order u = Km/(Km + S0) is at most
    # U_EDGE = 0.1 or at least 1 - U_EDGE (docs/rates.md, model-choice step 5), or where the curve leaves more
    # than lof_ratio = 1.4 read noises. Ten wells at S0 = 0.5 mM whose fits describe them; each fit is given a
    # Km for the order below (and the last two a residual RMS at and just above 1.4), and its v0 set to the
    # quadratic's (so the disagreement trigger cannot fire): only the wells at or beyond an edge go on to the
    # power law; the others keep the Michaelis-Menten curve (model 0)
    u_cases = [0.08, 0.1, 0.12, 0.5, 0.5, 0.88, 0.9, 0.92, 0.5, 0.5]
    ratios = {8: 1.4, 9: 1.4 * 1.01}
    s0 = np.full(10, 0.5)
    kms = np.array([_km_for(u, 0.5) for u in u_cases])
    assert kms[1] / (kms[1] + 0.5) == U_EDGE == 0.1 and kms[6] / (kms[6] + 0.5) == 1.0 - U_EDGE
    y = simulate_plate(T, s0, KM_TRUE, 4e-4, signal_per_conc=SPC_PLATE, noise=0.0005, seed=3).signal
    real_fit = choice.progress_curve
    seen: dict[str, Any] = {"power": []}
    quadratic = spy_quadratic(seen)

    def index(rows: np.ndarray) -> np.ndarray:
        return rows_of(y, rows)

    def fit(t: np.ndarray, yy: np.ndarray, **k: Any) -> Any:
        res = real_fit(t, yy, **k)
        if k.get("model") == "power":
            seen["power"] += index(yy).tolist()
            return res
        if "mm" in seen:
            return res
        rows = index(yy)
        seen["mm"] = rows
        assert (res.extra["rmse_over_noise"] <= 1.3).all()  # every curve describes its well
        ratio = np.array([ratios.get(int(w), r) for w, r in zip(rows, res.extra["rmse_over_noise"], strict=True)])
        extra = dict(res.extra, km=kms[rows], rmse_over_noise=ratio)
        return dataclasses.replace(res, v0=seen["q"].v0[rows].copy(), extra=extra)

    monkeypatch.setattr(choice, "early_quadratic", quadratic)
    monkeypatch.setattr(choice, "progress_curve", fit)
    r = choice.model_choice(T, y, s0=s0, signal_per_conc=SPC_PLATE, find_lag=False)
    assert seen["mm"].tolist() == list(range(10))
    assert sorted(seen["power"]) == [0, 1, 6, 7, 9]
    kept = [2, 3, 4, 5, 8]
    assert (r.extra["model"][kept] == 0).all()
    np.testing.assert_array_equal(r.v0[kept], seen["q"].v0[kept])  # the (moved) curve's v0 is what they report
    assert r.extra["rmse_over_noise"][8] == 1.4
