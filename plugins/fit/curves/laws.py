"""What the progress-curve integrators need from a rate law, for the built-in models and any plugin model.

Every model in the catalog is a rate ``v(S; θ, I, E)`` in the unit of rates. A progress curve follows
dS/dτ = −v(S), with τ the *effective time* (read time in the rate's time unit, scaled by the well's enzyme
level and by first-order inactivation, see :mod:`.curve`). The integrators need, besides ``v`` and ∂v/∂θ
(the model's own ``func`` and ``jac``):

* ∂v/∂S, analytic for the built-ins (:data:`DVDS`); for a plugin model a central difference in S with a
  relative step of 1e-6 (the sensitivity it feeds is then accurate to about 1e-10 relative);
* for the Michaelis-Menten family, the apparent constants (V', K') with v = V'·S/(K' + S) and their
  derivatives (:data:`APPARENT`): competitive K' = Km(1 + I/Kic); uncompetitive V' = V/(1 + I/Kiu),
  K' = Km/(1 + I/Kiu); mixed V' = V/b, K' = Km·a/b with a = 1 + I/Kic, b = 1 + I/Kiu; noncompetitive
  V' = V/(1 + I/Ki) (Segel 1975, ch. 3, the usual apparent-constant forms).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np

Arr = Any
X = Mapping[str, np.ndarray]


def _dvds_mm(p: Sequence[Arr], x: X) -> np.ndarray:
    s = x["substrate"]
    return p[0] * p[1] / (p[1] + s) ** 2


def _dvds_hill(p: Sequence[Arr], x: X) -> np.ndarray:
    s = np.asarray(x["substrate"], float)
    with np.errstate(divide="ignore", invalid="ignore"):
        u = np.exp(p[2] * (np.log(np.where(s > 0, s, 1.0)) - np.log(p[1])))
        d = np.where(s > 0, p[0] * p[2] * u / (np.where(s > 0, s, 1.0) * (1 + u) ** 2), 0.0)
    return d


def _dvds_si(p: Sequence[Arr], x: X) -> np.ndarray:
    s = x["substrate"]
    d = p[1] + s + s**2 / p[2]
    return p[0] * (p[1] - s**2 / p[2]) / d**2


def _dvds_apparent(name: str) -> Callable[[Sequence[Arr], X], np.ndarray]:
    def f(p: Sequence[Arr], x: X) -> np.ndarray:
        vp, kp, _, _ = APPARENT[name](p, x)
        return vp * kp / (kp + x["substrate"]) ** 2

    return f


def _zero(p: Sequence[Arr], x: X) -> np.ndarray:
    return np.zeros(np.shape(x["substrate"]))


Apparent = Callable[[Sequence[Arr], X], tuple[Arr, Arr, list[Arr], list[Arr]]]


def _app_mm(p: Sequence[Arr], x: X) -> tuple[Arr, Arr, list[Arr], list[Arr]]:
    return p[0], p[1], [1.0, 0.0], [0.0, 1.0]


def _app_competitive(p: Sequence[Arr], x: X) -> tuple[Arr, Arr, list[Arr], list[Arr]]:
    i = x["inhibitor"]
    a = 1 + i / p[2]
    return p[0], p[1] * a, [1.0, 0.0, 0.0], [0.0, a, -p[1] * i / p[2] ** 2]


def _app_uncompetitive(p: Sequence[Arr], x: X) -> tuple[Arr, Arr, list[Arr], list[Arr]]:
    i = x["inhibitor"]
    b = 1 + i / p[2]
    q = i / (p[2] ** 2 * b**2)
    return p[0] / b, p[1] / b, [1 / b, 0.0, p[0] * q], [0.0, 1 / b, p[1] * q]


def _app_mixed(p: Sequence[Arr], x: X) -> tuple[Arr, Arr, list[Arr], list[Arr]]:
    i = x["inhibitor"]
    a = 1 + i / p[2]
    b = 1 + i / p[3]
    q = i / (p[3] ** 2 * b**2)
    return (p[0] / b, p[1] * a / b, [1 / b, 0.0, 0.0, p[0] * q],
            [0.0, a / b, -p[1] * i / (p[2] ** 2 * b), p[1] * a * q])


def _app_noncompetitive(p: Sequence[Arr], x: X) -> tuple[Arr, Arr, list[Arr], list[Arr]]:
    i = x["inhibitor"]
    f = 1 + i / p[2]
    return p[0] / f, p[1], [1 / f, 0.0, p[0] * i / (p[2] ** 2 * f**2)], [0.0, 1.0, 0.0]


APPARENT: dict[str, Apparent] = {
    "michaelis-menten": _app_mm,
    "competitive": _app_competitive,
    "uncompetitive": _app_uncompetitive,
    "mixed": _app_mixed,
    "noncompetitive": _app_noncompetitive,
}
"""Models that are Michaelis-Menten with apparent constants: name -> p, x -> (V', K', dV'/dθ, dK'/dθ)."""

DVDS: dict[str, Callable[[Sequence[Arr], X], np.ndarray]] = {
    "michaelis-menten": _dvds_mm,
    "hill": _dvds_hill,
    "substrate-inhibition": _dvds_si,
    **{n: _dvds_apparent(n) for n in ("competitive", "uncompetitive", "mixed", "noncompetitive")},
    "morrison": _zero,
    "logistic-4p": _zero,
}
"""∂v/∂S of the built-in rate laws, by model name."""


def dv_ds(model: Any, p: Sequence[Arr], x: X) -> np.ndarray:
    """∂v/∂S: analytic for a built-in, else a central difference (relative step 1e-6) on ``model.evaluate``;
    a model that does not use the substrate has 0."""
    if "substrate" not in model.variables:
        return _zero(p, x)
    f = DVDS.get(model.name)
    if f is not None and _is_builtin(model):
        return np.asarray(f(p, x), float)
    s = np.asarray(x["substrate"], float)
    h = 1e-6 * np.maximum(np.abs(s), 1e-12)
    up = model.evaluate(p, {**x, "substrate": s + h})
    down = model.evaluate(p, {**x, "substrate": np.maximum(s - h, 0.0)})
    return (np.asarray(up, float) - np.asarray(down, float)) / (s + h - np.maximum(s - h, 0.0))


def _is_builtin(model: Any) -> bool:
    """Whether ``model`` is the built-in of that name (a plugin may register a model of its own under
    another name only; the catalog refuses duplicates, but a Model built by hand may reuse a name)."""
    from vzero.plugins.fit.catalog import BY_NAME

    return BY_NAME.get(model.name) is model
