"""Competitive product inhibition in the progress curves, against scipy's solve_ivp (Radau, rtol 1e-10).

The reference rate laws are written out here by hand (the textbook competitive forms, Segel 1975 ch. 3,
with the product P = S0 − S as the inhibitor), independently of the code under test; scipy's Radau
integrates them. The closed form (Lambert W with apparent constants) must agree with Radau to 1e-7 of the
curve's range and with the numerical route to 1e-9, values and sensitivities, on curves run past 99 %
conversion, for a product that binds more weakly (Kp > K') and more tightly (Kp < K') than the substrate.
Parameters are invented.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from vzero.errors import FitError
from vzero.plugins.fit.catalog import BY_NAME
from vzero.plugins.fit.curves import curve

T = np.linspace(0.0, 12 * 3600.0, 120)
S0 = np.array([0.5, 3.0, 12.0, 60.0, 400.0])
I_LEVEL = 4.0


def _wells() -> curve.Wells:
    n = len(S0)
    # rates in uM/min, substrate in uM: one second of read time is 1/60 min of rate time
    return curve.Wells(S0, np.full(n, I_LEVEL), np.full(n, 0.02), np.tile(T, (n, 1)), np.full(n, 1 / 60))


# rate laws with competitive product inhibition, written out: v(S, P; theta + [Kp])
LAWS: dict[str, Callable[[list[float], float, float], float]] = {
    "michaelis-menten": lambda q, s, p: q[0] * s / (q[1] * (1 + p / q[2]) + s),
    "competitive": lambda q, s, p: q[0] * s / (q[1] * (1 + I_LEVEL / q[2]) * (1 + p / q[3]) + s),
    "uncompetitive": lambda q, s, p: q[0] * s / (q[1] * (1 + p / q[3]) + s * (1 + I_LEVEL / q[2])),
    "mixed": lambda q, s, p: q[0] * s / (q[1] * (1 + I_LEVEL / q[2]) * (1 + p / q[4]) + s * (1 + I_LEVEL / q[3])),
    "noncompetitive": lambda q, s, p: q[0] * s / ((q[1] * (1 + p / q[3]) + s) * (1 + I_LEVEL / q[2])),
    "hill": lambda q, s, p: q[0] * s ** q[2] / ((q[1] * (1 + p / q[3])) ** q[2] + s ** q[2]),
    "substrate-inhibition": lambda q, s, p: q[0] * s / (q[1] * (1 + p / q[3]) + s + s * s / q[2]),
}
THETA = {
    "michaelis-menten": [30.0, 8.0], "competitive": [30.0, 8.0, 2.0], "uncompetitive": [30.0, 8.0, 3.0],
    "mixed": [30.0, 8.0, 2.0, 6.0], "noncompetitive": [30.0, 8.0, 5.0], "hill": [30.0, 8.0, 2.4],
    "substrate-inhibition": [30.0, 8.0, 25.0],
}
KP_LEVELS = {"weak": 40.0, "tight": 3.0}
"""Kp above K' (α = 1 − K'/Kp > 0: the Wright-omega branch) and below (α < 0: the W₀ branch)."""


def _radau(name: str, theta: list[float], kp: float, s0: float) -> np.ndarray:
    law = LAWS[name]

    def rhs(t: float, y: np.ndarray) -> list[float]:
        p = min(y[0], s0)
        return [law([*theta, kp], s0 - p, p) / 60]

    sol = solve_ivp(rhs, (0.0, T[-1]), [0.0], method="Radau", rtol=1e-10, atol=1e-14 * s0, t_eval=T)
    assert sol.success
    return sol.y[0]


@pytest.mark.parametrize("kp", list(KP_LEVELS))
@pytest.mark.parametrize("name", list(LAWS))
def test_both_routes_match_radau(name: str, kp: str) -> None:
    model, theta = BY_NAME[name], THETA[name]
    routes = ["ode", "closed"] if curve.route_of(model, product=True) == "closed" else ["ode"]
    refs = [_radau(name, theta, KP_LEVELS[kp], s0) for s0 in S0]  # integrated once, compared with every route
    for route in routes:
        p, grads = curve.progress(model, theta, _wells(), route=route, kprod=KP_LEVELS[kp])
        assert len(grads) == len(theta) + 1
        for i, ref in enumerate(refs):
            # scipy solve_ivp Radau rtol 1e-10: agreement to 1e-7 of the curve's range, every read
            np.testing.assert_allclose(p[i], ref, rtol=0, atol=1e-7 * np.max(np.abs(ref)), err_msg=route)


def test_checks_reach_deep_conversion() -> None:
    # the comparisons above must include curves run past 99 % conversion, on both branches
    for kp in KP_LEVELS.values():
        p, _ = curve.progress(BY_NAME["competitive"], THETA["competitive"], _wells(), kprod=kp)
        assert np.min(p[:, -1] / S0) > 0.99


@pytest.mark.parametrize("kp", [40.0, 3.0, 8.0])  # 8.0: Kp = K' exactly (α = 0, the exponential curve)
@pytest.mark.parametrize("name", ["michaelis-menten", "competitive", "uncompetitive", "mixed", "noncompetitive"])
def test_closed_form_matches_numerical_route(name: str, kp: float) -> None:
    model, theta = BY_NAME[name], THETA[name]
    pc, gc = curve.progress(model, theta, _wells(), route="closed", kprod=kp, kinact=1e-4, scale_grad=True)
    po, go = curve.progress(model, theta, _wells(), route="ode", kprod=kp, kinact=1e-4, scale_grad=True)
    np.testing.assert_allclose(pc, po, rtol=0, atol=1e-9 * np.max(np.abs(po)))
    assert len(gc) == len(go) == len(theta) + 3
    for a, b in zip(gc, go, strict=True):
        # closed-form derivative against the forward sensitivity equations (whose step control watches S
        # only, so they carry about 1e-7 of error of their own)
        np.testing.assert_allclose(a, b, rtol=0, atol=3e-7 * max(np.max(np.abs(b)), 1e-300))


def test_kp_sensitivity_against_central_differences() -> None:
    # an independent check of ∂P/∂Kp and ∂P/∂Km (central differences, relative step 1e-6)
    model, theta, kp = BY_NAME["michaelis-menten"], THETA["michaelis-menten"], 3.0
    _, grads = curve.progress(model, theta, _wells(), kprod=kp)
    h = 1e-6 * kp
    up, _ = curve.progress(model, theta, _wells(), kprod=kp + h)
    down, _ = curve.progress(model, theta, _wells(), kprod=kp - h)
    np.testing.assert_allclose(grads[2], (up - down) / (2 * h), rtol=0, atol=1e-6 * np.max(np.abs(grads[2])))
    hk = 1e-6 * theta[1]
    up, _ = curve.progress(model, [theta[0], theta[1] + hk], _wells(), kprod=kp)
    down, _ = curve.progress(model, [theta[0], theta[1] - hk], _wells(), kprod=kp)
    np.testing.assert_allclose(grads[1], (up - down) / (2 * hk), rtol=0, atol=1e-6 * np.max(np.abs(grads[1])))


def test_product_inhibition_slows_the_curve() -> None:
    # a tighter-binding product leaves more substrate at every read (sanity of the direction)
    model, theta = BY_NAME["michaelis-menten"], THETA["michaelis-menten"]
    free, _ = curve.progress(model, theta, _wells())
    weak, _ = curve.progress(model, theta, _wells(), kprod=40.0)
    tight, _ = curve.progress(model, theta, _wells(), kprod=3.0)
    assert np.all(tight <= weak * (1 + 1e-12)) and np.all(weak <= free * (1 + 1e-12))
    mid = (T > 0) & (free[-1] < 0.99 * S0[-1])  # reads before the largest S0 runs out without inhibition
    assert mid.sum() >= 1
    assert np.all(tight[-1, mid] < weak[-1, mid]) and np.all(weak[-1, mid] < free[-1, mid])


def test_law_without_half_saturation_is_refused() -> None:
    with pytest.raises(FitError, match="cannot take product inhibition"):
        curve.progress(BY_NAME["logistic-4p"], [1.0, 0.1, 2.0, 1.0], _wells(), kprod=3.0)


@pytest.mark.parametrize("name, theta", [("michaelis-menten", THETA["michaelis-menten"]), ("hill", THETA["hill"]),
                                         ("hill", [30.0, 8.0, 1.0]),
                                         ("substrate-inhibition", THETA["substrate-inhibition"])])
def test_sensitivities_stay_finite_past_underflow(name: str, theta: list[float]) -> None:
    # assays long enough that the substrate left falls below the smallest double (S0·e^-745): the closed
    # forms must give S = 0 or a tiny S with finite derivatives, or one well poisons a whole group's Jacobian
    model = BY_NAME[name]
    n = 3
    wells = curve.Wells(np.array([0.5, 0.05, 5.0]), np.zeros(n), np.zeros(n),
                        np.tile(np.linspace(0.0, 3 * 86400.0, 40), (n, 1)), np.full(n, 1 / 60))
    for kprod in ((None, 40.0) if name == "michaelis-menten" else (None,)):
        p, grads = curve.progress(model, theta, wells, route="closed", kprod=kprod)
        assert np.all(np.isfinite(p)) and all(np.all(np.isfinite(g)) for g in grads)
        if name != "hill" or theta[2] <= 1:  # with h > 1 the rate falls as S^h: the substrate lasts
            np.testing.assert_allclose(p[:, -1], wells.s0, rtol=1e-12)  # ran to completion
