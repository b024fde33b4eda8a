"""Competitive inhibition by the reaction's own product, for any rate law with a half-saturation constant.

The product P = S0 − S accumulates as the reaction runs; when it binds the free enzyme at the substrate's
site it raises the law's half-saturation constant (Km, K0.5) by the factor (1 + P/Kp), Kp the product's
dissociation constant in the substrate's concentration unit (Segel 1975, ch. 3: competitive inhibition
multiplies the apparent Km by 1 + I/Ki; here the inhibitor is the product). For Michaelis-Menten
v = Vmax·S/(Km·(1 + P/Kp) + S). The model names its half-saturation constant (``half_saturation`` in the
catalog); a law without one, or without a substrate, cannot take product inhibition and is refused.

With an inhibitor in the well too, the inhibitor's factor and the product's multiply (the two bind
independently): Km·(1 + I/Kic)·(1 + P/Kp) for the competitive law. Where the two exclude each other the
exact law has Km·(1 + I/Kic + P/Kp); the two differ by the term I·P/(Kic·Kp), which matters only where both
inhibitor and product are well above their constants.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from vzero.errors import FitError
from vzero.plugins.fit.curves import laws

KP = "Kp"
"""Name of the product's inhibition constant (concentration, the substrate's unit) when the recipe asks for
product inhibition."""


def scaled_parameter(model: Any) -> int:
    """Index of the parameter that product inhibition scales (the model's half-saturation constant)."""
    name = getattr(model, "half_saturation", "")
    if "substrate" not in model.variables or not name or name not in model.params:
        raise FitError(f"fit (curves): model {model.name} cannot take product inhibition: it has no "
                       "half-saturation constant of the substrate (Km or K0.5)",
                       hint="Leave product_inhibition off for this model, or fit it in a step of its own.")
    if KP in model.params:
        raise FitError(f"fit (curves): model {model.name} has a parameter called {KP!r} already, the name of the "
                       "product inhibition constant", hint="Leave product_inhibition off for this model.")
    return model.params.index(name)


def rate_terms(model: Any, p: Sequence[Any], x: Mapping[str, np.ndarray], s0: np.ndarray, kp: Any
               ) -> tuple[np.ndarray, np.ndarray, list[np.ndarray]]:
    """Rate v with product inhibition, its total derivative in S (product P = S0 − S moves with S) and its
    partial derivatives in each model parameter and then Kp, at the points of ``x`` (initial substrate
    ``s0`` per point)."""
    k = scaled_parameter(model)
    s = np.asarray(x["substrate"], float)
    prod = s0 - s
    factor = 1 + prod / kp
    pe = list(p)
    pe[k] = p[k] * factor
    shape = s.shape
    v = np.broadcast_to(np.asarray(model.evaluate(pe, x), float), shape)
    jac = [np.broadcast_to(np.asarray(d, float), shape) for d in model.jacobian(pe, x)]
    dvds = np.broadcast_to(laws.dv_ds(model, pe, x), shape) - jac[k] * p[k] / kp
    grads = list(jac)
    grads[k] = jac[k] * factor
    grads.append(-jac[k] * p[k] * prod / kp**2)
    return v, dvds, grads


def rate(model: Any, p: Sequence[Any], x: Mapping[str, np.ndarray], s0: np.ndarray, kp: Any | None) -> np.ndarray:
    """Rate at the points of ``x``, with product inhibition when ``kp`` is given."""
    if kp is None:
        return np.asarray(model.evaluate(p, x), float)
    pe = list(p)
    k = scaled_parameter(model)
    pe[k] = p[k] * (1 + (s0 - np.asarray(x["substrate"], float)) / kp)
    return np.asarray(model.evaluate(pe, x), float)
