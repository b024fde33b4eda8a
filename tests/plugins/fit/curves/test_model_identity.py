"""The closed form goes with what a model declares, never with its name.

A hand-built model that reuses a built-in's name with a different rate law must be integrated from its own
law (checked against scipy's solve_ivp, Radau, rtol 1e-10); a plugin model that declares apparent
Michaelis-Menten constants gets the Lambert-W closed form (checked against the numerical route to 1e-9).
Rate laws and parameters are invented.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from vzero.plugins.fit.catalog import BY_NAME, Model
from vzero.plugins.fit.curves import curve
from vzero.testing import check_model

T = np.linspace(0.0, 1800.0, 60)
S0 = np.array([2.0, 20.0, 200.0])


def _wells() -> curve.Wells:
    n = len(S0)
    return curve.Wells(S0, np.full(n, 3.0), np.full(n, 0.01), np.tile(T, (n, 1)), np.full(n, 1 / 60))


def _two_path(p: Any, x: Any) -> Any:
    s = x["substrate"]
    return p[0] * s / (p[1] + s) + p[2] * s


def _two_path_jac(p: Any, x: Any) -> list[Any]:
    s = x["substrate"]
    return [s / (p[1] + s), -p[0] * s / (p[1] + s) ** 2, s]


def test_a_copied_name_does_not_borrow_a_closed_form() -> None:
    impostor = Model("hill", ("Vmax", "K0.5", "h"), {"Vmax": "rate", "K0.5": "substrate", "h": ""},
                     ("substrate",), _two_path, _two_path_jac, lambda x, y: [1.0, 1.0, 0.0],
                     "v = Vmax·S/(K0.5 + S) + h·S")
    assert curve.route_of(BY_NAME["hill"]) == "closed"
    assert curve.route_of(impostor) == "ode"
    theta = [30.0, 8.0, 0.05]
    p, _ = curve.progress(impostor, theta, _wells())
    for i, s0 in enumerate(S0):
        sol = solve_ivp(lambda t, y, s0=s0: [_two_path(theta, {"substrate": max(s0 - y[0], 0.0)}) / 60],
                        (0.0, T[-1]), [0.0], method="Radau", rtol=1e-10, atol=1e-14 * s0, t_eval=T)
        # scipy solve_ivp Radau rtol 1e-10 on the impostor's own law
        np.testing.assert_allclose(p[i], sol.y[0], rtol=0, atol=1e-7 * s0)


def _apparent(p: Any, x: Any) -> tuple[Any, Any, list[Any], list[Any]]:
    # a lab's activator law (invented): v = Vmax·S/(Km/(1 + A/Ka) + S), A the "inhibitor" column's compound
    a = 1 + x["inhibitor"] / p[2]
    return p[0], p[1] / a, [1.0, 0.0, 0.0], [0.0, 1 / a, p[1] * x["inhibitor"] / (p[2] ** 2 * a**2)]


def _activator(p: Any, x: Any) -> Any:
    vp, kp, _, _ = _apparent(p, x)
    return vp * x["substrate"] / (kp + x["substrate"])


def _activator_jac(p: Any, x: Any) -> list[Any]:
    vp, kp, dv, dk = _apparent(p, x)
    s = x["substrate"]
    return [a * s / (kp + s) - vp * s / (kp + s) ** 2 * b for a, b in zip(dv, dk, strict=True)]


def test_a_declared_closed_form_is_used() -> None:
    model = Model("activator", ("Vmax", "Km", "Ka"), {"Vmax": "rate", "Km": "substrate", "Ka": "inhibitor"},
                  ("substrate", "inhibitor"), _activator, _activator_jac, lambda x, y: [1.0, 1.0, 1.0],
                  "v = Vmax·S/(Km/(1 + I/Ka) + S)", half_saturation="Km", apparent=_apparent)
    assert curve.route_of(model) == "closed"
    theta = [30.0, 8.0, 1.5]
    for kprod in (None, 5.0):
        pc, gc = curve.progress(model, theta, _wells(), route="auto", kprod=kprod)
        po, go = curve.progress(model, theta, _wells(), route="ode", kprod=kprod)
        # closed form against the batched Dormand-Prince route (itself checked against scipy Radau elsewhere)
        np.testing.assert_allclose(pc, po, rtol=0, atol=1e-9 * np.max(po))
        for a, b in zip(gc, go, strict=True):
            np.testing.assert_allclose(a, b, rtol=0, atol=3e-7 * np.max(np.abs(b)))


def test_conformance_kit_checks_what_a_model_declares() -> None:
    # a declaration that contradicts the model's own rate law is caught before it can bend a curve fit
    x = {"substrate": np.array([1.0, 5.0, 20.0, 80.0]), "inhibitor": np.array([0.0, 1.0, 2.0, 4.0])}
    y = np.array([3.0, 10.0, 20.0, 25.0])
    good = Model("activator", ("Vmax", "Km", "Ka"), {"Vmax": "rate", "Km": "substrate", "Ka": "inhibitor"},
                 ("substrate", "inhibitor"), _activator, _activator_jac, lambda x, y: [30.0, 8.0, 1.5],
                 "v = Vmax·S/(Km/(1 + I/Ka) + S)", half_saturation="Km", apparent=_apparent)
    check_model(good, x, y)
    wrong_slope = Model(**{**good.__dict__, "rate_slope": lambda p, x: np.ones_like(x["substrate"])})
    with pytest.raises(AssertionError, match="rate_slope differs"):
        check_model(wrong_slope, x, y)
    wrong_apparent = Model(**{**good.__dict__, "apparent": lambda p, x: (p[0], p[1], [], [])})
    with pytest.raises(AssertionError, match="apparent constants"):
        check_model(wrong_apparent, x, y)
