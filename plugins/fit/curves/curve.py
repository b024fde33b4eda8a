"""Progress curves P(t) of any fit model, with their sensitivities: the one entry point of the integrators.

A well starts with substrate S0, inhibitor I and enzyme E; its product follows dP/dt = c·r·e^{−k·t}·v(S0 − P)
with v the model's rate law (in the unit of rates), c the factor from the rate's unit to concentration per
second, r = E/E_ref the well's enzyme level relative to the group's reference (1 for models that take the
enzyme concentration themselves) and k an optional first-order inactivation constant (1/s); an optional
hysteretic lag (time constant λ, s) multiplies the rate by 1 − e^{−t/λ} as well. Substituting the effective
time τ = c·r·∫₀ᵗ (1 − e^{−u/λ})·e^{−ku} du (τ = c·r·(1 − e^{−kt})/k without a lag, c·r·t when k = 0 too;
:func:`effective_time`) leaves dS/dτ = −v(S), which every route solves:

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


def effective_time(wells: Wells, kinact: Arr | None, lag: Arr | None = None
                   ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None]:
    """τ [n, n_time] (s of fully active enzyme, times c·r), ∂τ/∂k (None without inactivation) and ∂τ/∂λ
    (None without a lag).

    The active fraction of the enzyme is a(t) = e^{−kt} (k = ``kinact``, 1/s) or, with a hysteretic lag of
    time constant λ (``lag``, s), a(t) = (1 − e^{−t/λ})·e^{−kt}; τ = c·r·∫₀ᵗ a dt. In closed form, with
    q(x) = (1 − e^{−x})/x and z = (k + 1/λ)·t: τ = c·r·t·(q(kt) − q(z)), ∂τ/∂k = c·r·t²·(q'(kt) − q'(z)) and
    ∂τ/∂λ = −c·r·(1 − (1 + z)·e^{−z})/(1 + kλ)². At λ = 0 (z = ∞) the lag terms vanish and ∂τ/∂λ = −c·r:
    the limit is taken exactly, not approached."""
    t = wells.time
    c = wells.rate_scale[:, None]
    if kinact is None and lag is None:
        return c * t, None, None
    n = len(t)
    k = np.zeros((n, 1)) if kinact is None else np.broadcast_to(np.asarray(kinact, float), (n,))[:, None]
    q, dq = closed._q(k * t)
    if lag is None:
        return c * t * q, c * t * t * dq, None
    lam = np.broadcast_to(np.asarray(lag, float), (n,))[:, None]
    mean, tdq_lag, r_lag = _lag_terms(t, k, lam)
    tau = c * t * mean
    d_lag = -c * r_lag / (1 + k * lam) ** 2
    return tau, (None if kinact is None else c * (t * t * dq - tdq_lag)), d_lag


def _lag_terms(t: np.ndarray, k: np.ndarray, lam: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """With x = kt, m = t/λ and z = x + m: the mean active fraction over [0, t], q(x) − q(z); t²·q'(z); and
    1 − (1 + z)·e^{−z}; finite for every λ ≥ 0 and t ≥ 0 (m = ∞ at λ = 0, t > 0; m = 0 at t = 0).

    q(x) − q(z) is taken as m·(q(x) − e^{−x}·q(m))/z, which has no cancellation when m ≪ x (a long lag
    after strong inactivation), by a series for z < 1e-3 (as :func:`.closed._q`), and as q(x) − 1/z where
    e^{−m} underflows (m > 700: q(z) = 1/z to double precision, 0 at λ = 0)."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        x = k * t
        m = np.where(t > 0, t / lam, 0.0)
        z = x + m
        big = m > 700.0
        small = z < 1e-3
        zs = np.where(big | small, 1.0, z)
        ms = np.where(big | small, 1.0, m)
        qx, _ = closed._q(x, False)
        qm, _ = closed._q(ms, False)
        mean = m * (qx - np.exp(-x) * qm) / zs
        series = m * (0.5 - (z + x) / 6 + (z * z + z * x + x * x) / 24 - (z + x) * (z * z + x * x) / 120)
        mean = np.where(small, series, np.where(big, qx - 1 / z, mean))
        _, dqz = closed._q(zs)
        # where z is large, t/z = λ/(1 + kλ) keeps t²·q'(z) = −(t/z)² finite as λ → 0
        span = lam / (1 + k * lam)
        tdq = np.where(big, -(span**2), np.where(small, t * t * (-0.5 + z / 3 - z * z / 8), t * t * dqz))
        r = np.where(small, z * z * (0.5 - z / 3 + z * z / 8 - z**3 / 30), -np.expm1(-zs) - zs * np.exp(-zs))
        r = np.where(big, 1.0, r)
    return mean, tdq, r


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
             kprod: Arr | None = None, scale_grad: bool = False, start: np.ndarray | None = None,
             lag: Arr | None = None) -> tuple[np.ndarray, list[np.ndarray]]:
    """Product P = S0 − S [n, n_time] and its derivatives: ∂P/∂θ for each model parameter, then ∂P/∂Kp
    (when ``kprod`` is given), ∂P/∂k (when ``kinact`` is given), ∂P/∂λ (when ``lag``, the hysteretic lag's
    time constant in s, is given; see :func:`effective_time`) and ∂P/∂ln c = v·τ, the derivative in the
    logarithm of the well's rate scale (when ``scale_grad``: an activity factor f of the well's enzyme
    multiplies c, so ∂P/∂f = v·τ/f): the curve a fit compares with the reads. ``start``: an optional guess
    of P (see :func:`substrate`)."""
    tau, dtau, dlag = effective_time(wells, kinact, lag)
    guess = None if start is None else np.clip(np.where(np.isfinite(start), wells.s0[:, None] - start, 0.0),
                                               1e-6 * wells.s0[:, None], wells.s0[:, None])
    s, ds = substrate(model, theta, wells, tau, route, kprod, guess)
    p = wells.s0[:, None] - s
    grads = [-d for d in ds]
    if dtau is not None or dlag is not None or scale_grad:
        with np.errstate(all="ignore"):
            kq = None if kprod is None else _per_point([kprod], s.shape)[0]
            v = product.rate(model, _per_point(theta, s.shape), wells.x(s), wells.s0[:, None], kq)
            v = np.where(np.isfinite(v), v, 0.0)
        if dtau is not None:
            grads.append(v * dtau)
        if dlag is not None:
            grads.append(v * dlag)
        if scale_grad:
            grads.append(v * tau)
    return p, grads
