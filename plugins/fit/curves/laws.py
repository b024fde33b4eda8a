"""What the progress-curve integrators need from a rate law, for the built-in models and any plugin model.

Every model in the catalog is a rate ``v(S; θ, I, E)`` in the unit of rates. A progress curve follows
dS/dτ = −v(S), with τ the *effective time* (read time in the rate's time unit, scaled by the well's enzyme
level and by first-order inactivation, see :mod:`.curve`). The integrators need, besides ``v`` and ∂v/∂θ
(the model's own ``func`` and ``jac``):

* ∂v/∂S, analytic where the model declares it (``rate_slope``, every built-in with a substrate); else a
  central difference in S with a relative step of 1e-6 (the sensitivity it feeds is then accurate to about
  1e-10 relative);
* for the Michaelis-Menten family, the apparent constants (V', K') with v = V'·S/(K' + S) and their
  derivatives (the model's ``apparent``): competitive K' = Km(1 + I/Kic); uncompetitive V' = V/(1 + I/Kiu),
  K' = Km/(1 + I/Kiu); mixed V' = V/b, K' = Km·a/b with a = 1 + I/Kic, b = 1 + I/Kiu; noncompetitive
  V' = V/(1 + I/Ki) (Segel 1975, ch. 3, the usual apparent-constant forms).

The built-in models name these functions in their catalog entries (:mod:`vzero.plugins.fit.catalog`); the
integrators find them through the model, never by its name.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np

Arr = Any
X = Mapping[str, np.ndarray]


def slope_mm(p: Sequence[Arr], x: X) -> np.ndarray:
    """∂v/∂S of Michaelis-Menten (rate per concentration)."""
    s = x["substrate"]
    return p[0] * p[1] / (p[1] + s) ** 2


def slope_hill(p: Sequence[Arr], x: X) -> np.ndarray:
    """∂v/∂S of the Hill equation (0 at S = 0)."""
    s = np.asarray(x["substrate"], float)
    with np.errstate(divide="ignore", invalid="ignore"):
        u = np.exp(p[2] * (np.log(np.where(s > 0, s, 1.0)) - np.log(p[1])))
        d = np.where(s > 0, p[0] * p[2] * u / (np.where(s > 0, s, 1.0) * (1 + u) ** 2), 0.0)
    return d


def slope_substrate_inhibition(p: Sequence[Arr], x: X) -> np.ndarray:
    """∂v/∂S of Haldane substrate inhibition."""
    s = x["substrate"]
    d = p[1] + s + s**2 / p[2]
    return p[0] * (p[1] - s**2 / p[2]) / d**2


Apparent = Callable[[Sequence[Arr], X], tuple[Arr, Arr, list[Arr], list[Arr]]]


def apparent_mm(p: Sequence[Arr], x: X) -> tuple[Arr, Arr, list[Arr], list[Arr]]:
    """Michaelis-Menten: V' = Vmax, K' = Km."""
    return p[0], p[1], [1.0, 0.0], [0.0, 1.0]


def apparent_competitive(p: Sequence[Arr], x: X) -> tuple[Arr, Arr, list[Arr], list[Arr]]:
    """Competitive inhibition: V' = Vmax, K' = Km·(1 + I/Kic)."""
    i = x["inhibitor"]
    a = 1 + i / p[2]
    return p[0], p[1] * a, [1.0, 0.0, 0.0], [0.0, a, -p[1] * i / p[2] ** 2]


def apparent_uncompetitive(p: Sequence[Arr], x: X) -> tuple[Arr, Arr, list[Arr], list[Arr]]:
    """Uncompetitive inhibition: V' = Vmax/(1 + I/Kiu), K' = Km/(1 + I/Kiu)."""
    i = x["inhibitor"]
    b = 1 + i / p[2]
    q = i / (p[2] ** 2 * b**2)
    return p[0] / b, p[1] / b, [1 / b, 0.0, p[0] * q], [0.0, 1 / b, p[1] * q]


def apparent_mixed(p: Sequence[Arr], x: X) -> tuple[Arr, Arr, list[Arr], list[Arr]]:
    """Mixed inhibition: V' = Vmax/b, K' = Km·a/b with a = 1 + I/Kic, b = 1 + I/Kiu."""
    i = x["inhibitor"]
    a = 1 + i / p[2]
    b = 1 + i / p[3]
    q = i / (p[3] ** 2 * b**2)
    return (p[0] / b, p[1] * a / b, [1 / b, 0.0, 0.0, p[0] * q],
            [0.0, a / b, -p[1] * i / (p[2] ** 2 * b), p[1] * a * q])


def apparent_noncompetitive(p: Sequence[Arr], x: X) -> tuple[Arr, Arr, list[Arr], list[Arr]]:
    """Pure noncompetitive inhibition: V' = Vmax/(1 + I/Ki), K' = Km."""
    i = x["inhibitor"]
    f = 1 + i / p[2]
    return p[0] / f, p[1], [1 / f, 0.0, p[0] * i / (p[2] ** 2 * f**2)], [0.0, 1.0, 0.0]


def _slope_apparent(apparent: Apparent) -> Callable[[Sequence[Arr], X], np.ndarray]:
    def f(p: Sequence[Arr], x: X) -> np.ndarray:
        vp, kp, _, _ = apparent(p, x)
        return vp * kp / (kp + x["substrate"]) ** 2

    f.__doc__ = f"∂v/∂S = V'·K'/(K' + S)² with the apparent constants of :func:`{apparent.__name__}`."
    return f


slope_competitive = _slope_apparent(apparent_competitive)
slope_uncompetitive = _slope_apparent(apparent_uncompetitive)
slope_mixed = _slope_apparent(apparent_mixed)
slope_noncompetitive = _slope_apparent(apparent_noncompetitive)


def _zero(p: Sequence[Arr], x: X) -> np.ndarray:
    return np.zeros(np.shape(x["substrate"]))


def dv_ds(model: Any, p: Sequence[Arr], x: X) -> np.ndarray:
    """∂v/∂S: the model's declared ``rate_slope``, else a central difference (relative step 1e-6) on
    ``model.evaluate``; a model that does not use the substrate has 0."""
    if "substrate" not in model.variables:
        return _zero(p, x)
    f = model.declared("rate_slope")
    if f is not None:
        return np.asarray(f(p, x), float)
    s = np.asarray(x["substrate"], float)
    h = 1e-6 * np.maximum(np.abs(s), 1e-12)
    up = model.evaluate(p, {**x, "substrate": s + h})
    down = model.evaluate(p, {**x, "substrate": np.maximum(s - h, 0.0)})
    return (np.asarray(up, float) - np.asarray(down, float)) / (s + h - np.maximum(s - h, 0.0))
