"""Progress curves P(t) of any fit model, with their sensitivities: the one entry point of the integrators.

A well starts with substrate S0, inhibitor I and enzyme E; its product follows dP/dt = c·r·a(t)·v(S0 − P)
with v the model's rate law (in the unit of rates), c the factor from the rate's unit to concentration per
second, r = E/E_ref the well's enzyme level relative to the group's reference (1 for models that take the
enzyme concentration themselves) and a(t) the active fraction of the enzyme: 1, or e^{−k·t} with an optional
first-order inactivation constant k (1/s); with an optional hysteretic lag (time constant λ, s) the enzyme
turns active at rate 1/λ and only its active form is lost, a(t) = (e^{−kt} − e^{−t/λ})/(1 − kλ).
Substituting the effective time τ = c·r·∫₀ᵗ a(u) du (τ = c·r·(1 − e^{−kt})/k without a lag, c·r·t when
k = 0 too; :func:`effective_time`) leaves dS/dτ = −v(S), which every route solves:

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

    Without a lag the active fraction of the enzyme is a(t) = e^{−kt} (k = ``kinact``, 1/s). With a
    hysteretic lag of time constant λ (``lag``, s) the enzyme starts in an inactive form that turns active
    at rate 1/λ, and only the active form is lost (at k; the inactive precursor is stable): the sequential
    scheme dp/dt = −p/λ, da/dt = p/λ − k·a, p(0) = 1, a(0) = 0, whose active fraction is
    a(t) = (e^{−kt} − e^{−t/λ})/(1 − kλ) (Bateman's solution for two first-order steps in series).
    τ = c·r·∫₀ᵗ a dt: c·r·t·q(kt) without a lag, q(x) = (1 − e^{−x})/x, and with one see
    :func:`_sequential`. At λ = 0 the lag terms vanish and ∂τ/∂λ = −c·r·e^{−kt}: the limit is taken exactly,
    not approached."""
    t = wells.time
    c = wells.rate_scale[:, None]
    if kinact is None and lag is None:
        return c * t, None, None
    n = len(t)
    k = np.zeros((n, 1)) if kinact is None else np.broadcast_to(np.asarray(kinact, float), (n,))[:, None]
    if lag is None:
        q, dq = closed._q(k * t)
        return c * t * q, c * t * t * dq, None
    lam = np.broadcast_to(np.asarray(lag, float), (n,))[:, None]
    mean, dk, dlag = _sequential(t, k, lam)
    return c * t * mean, (None if kinact is None else c * dk), c * dlag


_HUGE = 1e300
"""Stands in for t/λ at λ = 0: q(1e300) = 1e-300 is q(∞) = 0 to double precision, and no ∞·0 arises."""

_SERIES_BELOW = 1e-3
"""Where both x = kt and m = t/λ are below this, :func:`_sequential` takes its series (error < 1e-15)."""


def _sequential(t: np.ndarray, k: np.ndarray, lam: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The lag-then-inactivation clock (see :func:`effective_time`): T = τ/(c·r·t), the mean active
    fraction over [0, t]; t²·∂T/∂x (= ∂τ/∂k over c·r); and −m²·∂T/∂m (= ∂τ/∂λ over c·r), with x = kt and
    m = t/λ; finite for every k ≥ 0, λ ≥ 0, t ≥ 0 (m = ∞ at λ = 0, t > 0; m = 0 at t = 0).

    T = m·(q(x) − q(m))/(m − x) has a removable singularity at x = m (kλ = 1). Written with the smaller
    of the two rates, lo = min(x, m), and their gap g = |m − x| it has none: T = D(x, g) when m ≥ x and
    T = (m/x)·D(m, g) when m < x, with D(lo, g) = q(lo) − e^{−lo}·q(g) smooth through g = 0 (at kλ = 1,
    T = q(x) − e^{−x}). Where both x and m are small, D loses digits to cancellation and the series
    T = m·Σₙ (−1)ⁿ·hₙ(x, m)/(n + 2)! is taken (hₙ: the sum of the monomials xʲ·mⁿ⁻ʲ, j = 0..n; T is m
    times the divided difference −q′[x, m])."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
        x = k * t
        m = np.where(t > 0, np.minimum(t / lam, _HUGE), 0.0)
        m = np.where(np.isnan(m), _HUGE, m)
        ahead = m >= x  # activation outpaces inactivation (the usual case)
        lo = np.where(ahead, x, m)
        g = np.where(ahead, m, x) - lo
        q_lo, dq_lo = closed._q(lo)
        q_g, dq_g = closed._q(g)
        e_lo = np.exp(-lo)
        d = q_lo - e_lo * q_g
        d_lo = dq_lo + e_lo * q_g  # ∂D/∂lo
        d_g = -e_lo * dq_g  # ∂D/∂g
        # m ≥ x: T = D(x, m − x); −m²·∂T/∂m = m²·e^{−x}·q′(g), taken as −e^{−x}·(m/g)²·(1 − (1 + g)·e^{−g})
        # once g ≥ 1 (m may be 1e300 there; m/g = 1/(1 − x/m))
        m_over_g = 1.0 / (1.0 - x / np.where(m > 0, m, 1.0))
        r_g = -np.expm1(-g) - g * np.exp(-g)
        dlag_a = np.where(g >= 1.0, -e_lo * m_over_g**2 * r_g, e_lo * m * m * dq_g)
        # m < x (so x > 0): T = (m/x)·D(m, x − m)
        xs = np.where(ahead, 1.0, x)
        mean = np.where(ahead, d, m / xs * d)
        dk = np.where(ahead, t * t * (d_lo - d_g), m * (t / xs) ** 2 * (xs * d_g - d))
        # −m²·∂T/∂m = −m²·(D + m·(∂D/∂lo − ∂D/∂g))/x there, which is −m²·e^{−m}·(g − 1 + e^{−g})/g² without
        # the cancellation of the first form (m·q(m) has the derivative e^{−m}, and g + m = x)
        dlag = np.where(ahead, dlag_a, -m * m * np.exp(-m) * _p2(g))
        small = np.maximum(x, m) < _SERIES_BELOW
        if small.any():
            xs_, ms_ = x[small], m[small]
            s_mean, s_dx, s_dm = _sequential_series(xs_, ms_)
            tt = np.broadcast_to(t, x.shape)[small]
            mean[small], dk[small], dlag[small] = s_mean, tt * tt * s_dx, -ms_ * ms_ * s_dm
    return mean, dk, dlag


def _p2(g: np.ndarray) -> np.ndarray:
    """(g − 1 + e^{−g})/g² (1/2 at g = 0), by its series Σₙ (−g)ⁿ/(n + 2)! below g = 0.1."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        gs = np.where(g < 0.1, 1.0, g)
        out = (gs + np.expm1(-gs)) / gs**2
        series = np.zeros_like(g)
        term = np.full_like(g, 0.5)
        for n in range(12):
            series += term
            term = term * -g / (n + 3)
    return np.where(g < 0.1, series, out)


def _sequential_series(x: np.ndarray, m: np.ndarray, terms: int = 6) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """T = m·Σₙ (−1)ⁿ·hₙ(x, m)/(n + 2)! and its partial derivatives in x and m (see :func:`_sequential`),
    for small x and m (the first omitted term is below 1e-18 of T for x, m < 1e-3)."""
    total, d_x, d_m = np.zeros_like(x), np.zeros_like(x), np.zeros_like(x)
    fact = 2.0
    for n in range(terms):
        h = sum(x**j * m ** (n - j) for j in range(n + 1))
        hx = sum(j * x ** (j - 1) * m ** (n - j) for j in range(1, n + 1)) if n else 0.0 * x
        hm = sum((n - j) * x**j * m ** (n - j - 1) for j in range(n)) if n else 0.0 * x
        sign = (-1.0) ** n / fact
        total += sign * h
        d_x += sign * hx
        d_m += sign * hm
        fact *= n + 3
    return m * total, m * d_x, total + m * d_m


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
