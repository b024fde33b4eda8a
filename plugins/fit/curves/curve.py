"""Progress curves P(t) of any fit model, with their sensitivities: the one entry point of the integrators.

A well starts with substrate S0, inhibitor I and enzyme E; its product follows dP/dt = c·r·e^{−k·t}·v(S0 − P)
with v the model's rate law (in the unit of rates), c the factor from the rate's unit to concentration per
second, r = E/E_ref the well's enzyme level relative to the group's reference (1 for models that take the
enzyme concentration themselves) and k an optional first-order inactivation constant (1/s). Substituting
the effective time τ = c·r·(1 − e^{−kt})/k (τ = c·r·t when k = 0) leaves dS/dτ = −v(S), which every route
solves:

* ``"closed"``: the Michaelis-Menten family and Hill / substrate inhibition (:mod:`.closed`);
* ``"ode"``: any rate law, by the batched Dormand-Prince integrator (:mod:`.ode`).

``route="auto"`` takes the closed form where one exists and the integrator otherwise; a plugin model is
always integrated numerically, so it gets curve fitting without writing anything more than its rate law.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from vzero.plugins.fit.curves import closed, laws, ode

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


def route_of(model: Any) -> str:
    """``closed`` for a built-in with a closed form, ``ode`` otherwise."""
    if laws._is_builtin(model) and (model.name in laws.APPARENT or model.name in ("hill", "substrate-inhibition")):
        return "closed"
    return "ode"


def _per_point(theta: Sequence[Arr], shape: tuple[int, ...]) -> list[np.ndarray]:
    return [np.broadcast_to(np.asarray(p, float).reshape(-1, *([1] * (len(shape) - 1)))
                            if np.ndim(p) else np.asarray(p, float), shape) for p in theta]


def substrate(model: Any, theta: Sequence[Arr], wells: Wells, tau: np.ndarray, route: str = "auto",
              start: np.ndarray | None = None) -> tuple[np.ndarray, list[np.ndarray]]:
    """S and ∂S/∂θ (one array [n, n_time] per model parameter) at effective times ``tau``.

    ``theta``: one scalar or array [n] per model parameter; ``start`` [n, n_time] an optional guess of S for
    the closed forms solved by iteration (Hill, substrate inhibition): the result does not depend on it
    beyond rounding, only the number of iterations."""
    route = route_of(model) if route == "auto" else route
    shape = tau.shape
    if route == "closed":
        p = _per_point(theta, shape)
        s0 = np.broadcast_to(wells.s0[:, None], shape)
        if model.name in laws.APPARENT:
            vp, kp, dv, dk = laws.APPARENT[model.name](p, wells.x(s0))
            s, ds_dv, ds_dk = closed.michaelis_menten_family(vp, kp, s0, tau)
            return s, [ds_dv * a + ds_dk * b for a, b in zip(dv, dk, strict=True)]
        if model.name == "hill":
            return closed.hill(p, s0, tau, start)
        if model.name == "substrate-inhibition":
            return closed.substrate_inhibition(p, s0, tau, start)
        raise ValueError(f"no closed form for model {model.name!r}")
    n = shape[0]
    per_well = [np.broadcast_to(np.asarray(q, float), (n,)) for q in theta]
    npar = len(per_well)

    def rhs(s: np.ndarray, z: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        p = [q[rows] for q in per_well]
        x = {"substrate": s, "inhibitor": wells.inhibitor[rows], "enzyme": wells.enzyme[rows]}
        with np.errstate(all="ignore"):
            v = np.broadcast_to(np.asarray(model.evaluate(p, x), float), s.shape)
            dvs = np.broadcast_to(laws.dv_ds(model, p, x), s.shape)
            dvp = np.stack([np.broadcast_to(np.asarray(d, float), s.shape) for d in model.jacobian(p, x)], axis=1)
        return -v, -(dvs[:, None] * z + dvp)

    s, z = ode.integrate(rhs, wells.s0, npar, tau)
    return s, [z[:, :, j] for j in range(npar)]


def progress(model: Any, theta: Sequence[Arr], wells: Wells, kinact: Arr | None = None, route: str = "auto",
             start: np.ndarray | None = None) -> tuple[np.ndarray, list[np.ndarray]]:
    """Product P = S0 − S [n, n_time] and ∂P/∂θ for each model parameter (then ∂P/∂k when ``kinact`` is
    given): the curve a fit compares with the reads. ``start``: an optional guess of P (see :func:`substrate`)."""
    tau, dtau = effective_time(wells, kinact)
    guess = None if start is None else np.clip(np.where(np.isfinite(start), wells.s0[:, None] - start, 0.0),
                                               1e-6 * wells.s0[:, None], wells.s0[:, None])
    s, ds = substrate(model, theta, wells, tau, route, guess)
    p = wells.s0[:, None] - s
    grads = [-d for d in ds]
    if dtau is not None:
        with np.errstate(all="ignore"):
            v = np.asarray(model.evaluate(_per_point(theta, s.shape), wells.x(s)), float)
        grads.append(np.where(np.isfinite(v), v, 0.0) * dtau)
    return p, grads
