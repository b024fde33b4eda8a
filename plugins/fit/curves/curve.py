"""Progress curves P(t) of any fit model, with their sensitivities: the one entry point of the integrators.

A well starts with substrate S0, inhibitor I and enzyme E; its product follows dP/dt = c·r·e^{−k·t}·v(S0 − P)
with v the model's rate law (in the unit of rates), c the factor from the rate's unit to concentration per
second, r = E/E_ref the well's enzyme level relative to the group's reference (1 for models that take the
enzyme concentration themselves) and k an optional first-order inactivation constant (1/s). Substituting
the effective time τ = c·r·(1 − e^{−kt})/k (τ = c·r·t when k = 0) leaves dS/dτ = −v(S), which every route
solves:

* ``"closed"``: a model that declares its apparent Michaelis-Menten constants (``apparent``: the
  Michaelis-Menten family, with or without competitive product inhibition, :mod:`.product`) or a closed-form
  curve of its own (``integrated``: Hill, substrate inhibition; :mod:`.closed`);
* ``"ode"``: any rate law, by the batched Dormand-Prince integrator (:mod:`.ode`).

``route="auto"`` takes the closed form where the model declares one and the integrator otherwise. The
choice goes by what the model declares, never by its name: a plugin model gets curve fitting from its rate
law alone (numerically), or a closed form by declaring one; a model that copies a built-in's name gets
nothing it does not declare.
"""

from __future__ import annotations

import functools
import inspect
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from vzero.plugins.fit.curves import closed, laws, ode, product

Arr = Any


@dataclass(frozen=True)
class Wells:
    """The wells of one integration: ``s0``, ``inhibitor``, ``enzyme`` [n] (concentrations in the units of
    the model's parameters), ``time`` [n, n_time] in s (non-decreasing, ≥ 0 from the reaction start) and
    ``rate_scale`` [n] = c·r, effective time per second."""

    s0: np.ndarray
    inhibitor: np.ndarray
    enzyme: np.ndarray
    time: np.ndarray
    rate_scale: np.ndarray

    def x(self, s: np.ndarray) -> dict[str, np.ndarray]:
        """The model's variables with substrate ``s`` (shape [n] or [n, n_time])."""
        shape = np.shape(s)
        expand = (lambda a: a[:, None]) if len(shape) == 2 else (lambda a: a)
        return {"substrate": s, "inhibitor": np.broadcast_to(expand(self.inhibitor), shape),
                "enzyme": np.broadcast_to(expand(self.enzyme), shape)}


def effective_time(wells: Wells, kinact: Arr | None) -> tuple[np.ndarray, np.ndarray | None]:
    """τ [n, n_time] and ∂τ/∂k (None without inactivation)."""
    t = wells.time
    c = wells.rate_scale[:, None]
    if kinact is None:
        return c * t, None
    k = np.broadcast_to(np.asarray(kinact, float), (len(t),))[:, None]
    q, dq = closed._q(k * t)
    return c * t * q, c * t * t * dq


def route_of(model: Any, product: bool = False) -> str:
    """``closed`` when the model declares a closed-form curve (with product inhibition: only the apparent
    Michaelis-Menten constants serve), ``ode`` otherwise."""
    if model.declared("apparent") is not None:
        return "closed"
    if not product and model.declared("integrated") is not None:
        return "closed"
    return "ode"


def _per_point(theta: Sequence[Arr], shape: tuple[int, ...]) -> list[np.ndarray]:
    return [np.broadcast_to(np.asarray(p, float).reshape(-1, *([1] * (len(shape) - 1)))
                            if np.ndim(p) else np.asarray(p, float), shape) for p in theta]


def _closed(model: Any, theta: Sequence[Arr], wells: Wells, tau: np.ndarray, kprod: Arr | None,
            start: np.ndarray | None = None) -> tuple[np.ndarray, list[np.ndarray]]:
    shape = tau.shape
    p = _per_point(theta, shape)
    s0 = np.broadcast_to(wells.s0[:, None], shape)
    apparent = model.declared("apparent")
    if apparent is not None:
        vp, kp, dv, dk = apparent(p, wells.x(s0))
        if kprod is None:
            s, ds_dv, ds_dk = closed.michaelis_menten_family(vp, kp, s0, tau)
            return s, [ds_dv * a + ds_dk * b for a, b in zip(dv, dk, strict=True)]
        kq = _per_point([kprod], shape)[0]
        s, (ds_dv, ds_dk, ds_dq) = closed.michaelis_menten_product(vp, kp, kq, s0, tau)
        return s, [*(ds_dv * a + ds_dk * b for a, b in zip(dv, dk, strict=True)), ds_dq]
    integrated = model.declared("integrated")
    if integrated is None or kprod is not None:
        raise ValueError(f"model {model.name!r} declares no closed-form progress curve"
                         + (" with product inhibition" if kprod is not None else ""))
    s, grads = integrated(p, s0, tau) if start is None or not _takes_start(integrated) else \
        integrated(p, s0, tau, start)
    return s, list(grads)


@functools.lru_cache(maxsize=64)
def _takes_start(fn: Any) -> bool:
    """Whether a declared closed form accepts ``start``, a guess of S for its Newton iteration (the built-in
    Hill and substrate-inhibition forms do; a plugin's need not)."""
    try:
        return "start" in inspect.signature(fn).parameters
    except (TypeError, ValueError):
        return False


def substrate(model: Any, theta: Sequence[Arr], wells: Wells, tau: np.ndarray, route: str = "auto",
              kprod: Arr | None = None, start: np.ndarray | None = None) -> tuple[np.ndarray, list[np.ndarray]]:
    """S and ∂S/∂θ (one array [n, n_time] per model parameter, then ∂S/∂Kp with product inhibition) at
    effective times ``tau``.

    ``theta``: one scalar or array [n] per model parameter; ``kprod``: the product's inhibition constant
    (scalar or [n], substrate's unit) or None for no product inhibition; ``start`` [n, n_time] an optional
    guess of S for the closed forms solved by iteration (Hill, substrate inhibition): the result does not
    depend on it beyond rounding, only the number of iterations."""
    route = route_of(model, kprod is not None) if route == "auto" else route
    if route == "closed":
        return _closed(model, theta, wells, tau, kprod, start)
    n = tau.shape[0]
    per_well = [np.broadcast_to(np.asarray(q, float), (n,)) for q in theta]
    if kprod is not None:
        product.scaled_parameter(model)  # refuse a law without a half-saturation constant before integrating
        kq = np.broadcast_to(np.asarray(kprod, float), (n,))
    npar = len(per_well) + (kprod is not None)

    def rhs(s: np.ndarray, z: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        p = [q[rows] for q in per_well]
        x = {"substrate": s, "inhibitor": wells.inhibitor[rows], "enzyme": wells.enzyme[rows]}
        with np.errstate(all="ignore"):
            if kprod is None:
                v = np.broadcast_to(np.asarray(model.evaluate(p, x), float), s.shape)
                dvs = np.broadcast_to(laws.dv_ds(model, p, x), s.shape)
                dps = [np.broadcast_to(np.asarray(d, float), s.shape) for d in model.jacobian(p, x)]
            else:
                v, dvs, dps = product.rate_terms(model, p, x, wells.s0[rows], kq[rows])
            dvp = np.stack(dps, axis=1)
        return -v, -(dvs[:, None] * z + dvp)

    s, z = ode.integrate(rhs, wells.s0, npar, tau)
    return s, [z[:, :, j] for j in range(npar)]


def progress(model: Any, theta: Sequence[Arr], wells: Wells, kinact: Arr | None = None, route: str = "auto",
             kprod: Arr | None = None, scale_grad: bool = False, start: np.ndarray | None = None
             ) -> tuple[np.ndarray, list[np.ndarray]]:
    """Product P = S0 − S [n, n_time] and its derivatives: ∂P/∂θ for each model parameter, then ∂P/∂Kp
    (when ``kprod`` is given), ∂P/∂k (when ``kinact`` is given) and ∂P/∂ln c = v·τ, the derivative in the
    logarithm of the well's rate scale (when ``scale_grad``: an activity factor f of the well's enzyme
    multiplies c, so ∂P/∂f = v·τ/f): the curve a fit compares with the reads. ``start``: an optional guess
    of P (see :func:`substrate`)."""
    tau, dtau = effective_time(wells, kinact)
    guess = None if start is None else np.clip(np.where(np.isfinite(start), wells.s0[:, None] - start, 0.0),
                                               1e-6 * wells.s0[:, None], wells.s0[:, None])
    s, ds = substrate(model, theta, wells, tau, route, kprod, guess)
    p = wells.s0[:, None] - s
    grads = [-d for d in ds]
    if dtau is not None or scale_grad:
        with np.errstate(all="ignore"):
            kq = None if kprod is None else _per_point([kprod], s.shape)[0]
            v = product.rate(model, _per_point(theta, s.shape), wells.x(s), wells.s0[:, None], kq)
            v = np.where(np.isfinite(v), v, 0.0)
        if dtau is not None:
            grads.append(v * dtau)
        if scale_grad:
            grads.append(v * tau)
    return p, grads
