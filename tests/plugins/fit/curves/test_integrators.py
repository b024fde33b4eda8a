"""Progress curves against an outside integrator: scipy's solve_ivp (Radau, rtol 1e-10) as the reference.

Every rate law is integrated over 120 reads, with curves run to 99 % conversion and beyond; the numerical
route must agree with Radau to 1e-7 relative over the whole curve, and the closed forms with the numerical
route to 1e-9 (values and parameter sensitivities). Parameters are invented.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from vzero.plugins.fit.catalog import BY_NAME, Model
from vzero.plugins.fit.curves import curve

T = np.linspace(0.0, 1800.0, 120)
S0 = np.array([0.5, 3.0, 12.0, 60.0, 400.0])
I_LEVEL = 4.0
E_LEVEL = 0.02
CASES = {
    "michaelis-menten": [30.0, 8.0],
    "hill": [30.0, 8.0, 2.4],
    "hill-negative": [30.0, 8.0, 0.55],
    "substrate-inhibition": [30.0, 8.0, 25.0],
    "competitive": [30.0, 8.0, 2.0],
    "uncompetitive": [30.0, 8.0, 3.0],
    "mixed": [30.0, 8.0, 2.0, 6.0],
    "noncompetitive": [30.0, 8.0, 5.0],
    "morrison": [2.0, 0.01],
}


def _model(case: str) -> Model:
    return BY_NAME[case.removesuffix("-negative")]


def _wells() -> curve.Wells:
    n = len(S0)
    # rate unit uM/min, substrate in uM: 1 s of read time is 1/60 min of rate time
    return curve.Wells(S0, np.full(n, I_LEVEL), np.full(n, E_LEVEL), np.tile(T, (n, 1)), np.full(n, 1 / 60))


def _radau(model: Model, theta: list[float], s0: float, kinact: float = 0.0) -> np.ndarray:
    """Product by scipy's Radau at rtol 1e-10 (the independent reference)."""
    x = {"inhibitor": np.array([I_LEVEL]), "enzyme": np.array([E_LEVEL])}

    def rhs(t: float, y: np.ndarray) -> list[float]:
        s = np.array([max(s0 - y[0], 0.0)])
        return [float(model.evaluate(theta, {"substrate": s, **x})[0]) / 60 * np.exp(-kinact * t)]

    sol = solve_ivp(rhs, (0.0, T[-1]), [0.0], method="Radau", rtol=1e-10, atol=1e-14 * s0, t_eval=T)
    assert sol.success
    return sol.y[0]


@pytest.mark.parametrize("case", list(CASES))
def test_numerical_route_matches_radau(case: str) -> None:
    model, theta = _model(case), CASES[case]
    p, _ = curve.progress(model, theta, _wells(), route="ode")
    for i, s0 in enumerate(S0):
        ref = _radau(model, theta, s0)
        # scipy solve_ivp Radau rtol 1e-10: agreement to 1e-7 of the curve's range, every read
        np.testing.assert_allclose(p[i], ref, rtol=0, atol=1e-7 * max(np.max(np.abs(ref)), 1e-300))


def test_curves_reach_deep_conversion() -> None:
    # the check above must cover curves run to 99 % conversion, or it proves little
    p, _ = curve.progress(BY_NAME["michaelis-menten"], CASES["michaelis-menten"], _wells(), route="ode")
    assert np.max(p[:, -1] / S0) > 0.99 and np.min(p[:, -1] / S0) > 0.99


@pytest.mark.parametrize("case", [c for c in CASES if curve.route_of(_model(c)) == "closed"])
def test_closed_forms_match_numerical_route(case: str) -> None:
    model, theta = _model(case), CASES[case]
    pc, gc = curve.progress(model, theta, _wells(), route="closed")
    po, go = curve.progress(model, theta, _wells(), route="ode")
    np.testing.assert_allclose(pc, po, rtol=0, atol=1e-9 * np.max(np.abs(po)))
    for a, b in zip(gc, go, strict=True):
        # sensitivities: closed-form derivative against forward sensitivity equations; for h < 1 the
        # substrate runs out in finite time and dS/dθ is singular there, so the check is looser
        tol = 1e-6 if case == "hill-negative" else 1e-8
        np.testing.assert_allclose(a, b, rtol=0, atol=tol * max(np.max(np.abs(b)), 1e-300))


def test_inactivation_matches_radau() -> None:
    model, theta = BY_NAME["hill"], CASES["hill"]
    k = 1e-3  # 1/s
    for route in ("closed", "ode"):
        p, grads = curve.progress(model, theta, _wells(), kinact=k, route=route)
        for i, s0 in enumerate(S0):
            ref = _radau(model, theta, s0, kinact=k)
            np.testing.assert_allclose(p[i], ref, rtol=0, atol=1e-7 * np.max(np.abs(ref)))
        assert len(grads) == 4


def test_sensitivities_against_central_differences() -> None:
    # an independent check of the derivative itself (a central difference with a relative step of 1e-6
    # is accurate to about 1e-8 here)
    model, theta = BY_NAME["substrate-inhibition"], CASES["substrate-inhibition"]
    _, grads = curve.progress(model, theta, _wells(), kinact=2e-4, route="closed")
    for j in range(4):
        up, down = [*theta, 2e-4], [*theta, 2e-4]
        h = 1e-6 * up[j]
        up[j] += h
        down[j] -= h
        pu, _ = curve.progress(model, up[:3], _wells(), kinact=up[3], route="closed")
        pd_, _ = curve.progress(model, down[:3], _wells(), kinact=down[3], route="closed")
        np.testing.assert_allclose(grads[j], (pu - pd_) / (2 * h), rtol=0,
                                   atol=1e-6 * np.max(np.abs(grads[j])))


def test_plugin_model_gets_curves_from_its_rate_law() -> None:
    # a rate law a lab might register: Michaelis-Menten with a second, non-saturable path (invented)
    def func(p, x):
        s = x["substrate"]
        return p[0] * s / (p[1] + s) + p[2] * s

    def jac(p, x):
        s = x["substrate"]
        return [s / (p[1] + s), -p[0] * s / (p[1] + s) ** 2, s]

    model = Model("two-path", ("Vmax", "Km", "k1"), {"Vmax": "rate", "Km": "substrate", "k1": ""},
                  ("substrate",), func, jac, lambda x, y: [1.0, 1.0, 0.0], "v = Vmax·S/(Km + S) + k1·S")
    theta = [30.0, 8.0, 0.5]
    assert curve.route_of(model) == "ode"
    p, grads = curve.progress(model, theta, _wells())
    for i, s0 in enumerate(S0):
        np.testing.assert_allclose(p[i], _radau(model, theta, s0), rtol=0, atol=1e-7 * s0)
    assert len(grads) == 3 and all(np.all(np.isfinite(g)) for g in grads)
