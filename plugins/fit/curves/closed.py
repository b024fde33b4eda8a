"""Closed-form progress curves with exact parameter sensitivities.

Each function takes the parameters (a sequence of arrays broadcastable to the points), the points' initial
substrate ``s0``, inhibitor ``i`` and effective time ``tau`` (arrays of one shape, one entry per read), and
returns ``(S, dS/dθ per parameter)`` at every point.

* Michaelis-Menten family (apparent V', K', a model's ``apparent``): the integrated rate law
  K'·ln(S0/S) + (S0 − S) = V'·τ solves to S = K'·W((S0/K')·exp((S0 − V'τ)/K')) with W Lambert's function
  (Schnell & Mendoza 1997, J. Theor. Biol. 187:207). It is evaluated as K'·ω(ln(S0/K') + (S0 − V'τ)/K')
  with ω Wright's omega function (ω(y) = W(eʸ), scipy.special.wrightomega, accurate to a few units in the
  last place), which does not overflow when S0 ≫ K'.
* the same family with competitive product inhibition, v = V'·S/(K'·(1 + P/Kp) + S): Lambert W again,
  polished by Newton (:func:`michaelis_menten_product`);
* Hill and substrate inhibition (Haldane): the time to fall from S0 to S, τ = G(S) = ∫_S^S0 ds/v(s), has a
  closed form, G(S) = [Km·ln(S0/S) + (S0 − S) + (S0² − S²)/(2Ksi)]/V and
  G(S) = [K0.5^h·∫_S^S0 s^−h ds + (S0 − S)]/V; S(τ) is its root, found by safeguarded Newton iteration in
  ln S to 1e-14 relative.

Sensitivities come from the implicit function theorem on G(S; θ) = τ: ∂S/∂θ = v(S)·∂G/∂θ (since
∂G/∂S = −1/v), exact to rounding (no finite differences).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
from scipy import special

Arr = Any
NEWTON_TOL = 1e-14
"""Step in ln S at which the Newton iteration stops (relative change of S)."""
NEWTON_MAX = 60
QUADRATIC = 1e-8
"""A Newton step in ln S below this, after one at least a thousand times larger, ends the iteration: the
remaining error is about its square (1e-16)."""


def _q(x: np.ndarray, derivative: bool = True) -> tuple[np.ndarray, np.ndarray | None]:
    """q(x) = (1 − e^−x)/x and (when asked) q'(x) = (e^−x·(1 + x) − 1)/x², by a series for |x| < 1e-3."""
    small = np.abs(x) < 1e-3
    xs = np.where(small, 1.0, x)
    with np.errstate(over="ignore", invalid="ignore"):
        e = np.exp(-xs)
        q = (1 - e) / xs
        dq = (e * (1 + xs) - 1) / xs**2 if derivative else None
    if small.any():
        z = x[small]
        q[small] = 1 - z / 2 + z**2 / 6 - z**3 / 24 + z**4 / 120
        if dq is not None:
            dq[small] = -0.5 + z / 3 - z**2 / 8 + z**3 / 30 - z**4 / 144
    return q, dq


def _mm_start(vm: np.ndarray, km: np.ndarray, s0: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """Start values for Newton: the Michaelis-Menten curve with the same V and half-saturation constant."""
    with np.errstate(all="ignore"):
        y = np.log(np.where(s0 > 0, s0, 1.0) / km) + (s0 - vm * tau) / km
        s = km * special.wrightomega(y)
    return np.where(np.isfinite(s) & (s > 0), np.minimum(s, s0), 0.5 * s0)


def _newton(g: Callable[[np.ndarray, np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]], s0: np.ndarray,
            tau: np.ndarray, start: np.ndarray, g_floor: np.ndarray | None = None) -> np.ndarray:
    """Root S in (0, S0] of G(S) = tau, G decreasing from G(S0) = 0; ``g(S, ln S, idx)`` returns (G, v(S)) at
    the points ``idx`` (flat indices into ``s0``) only.

    Newton's method in u = ln S (dG/du = −S/v) inside a bracket [lo, hi] that shrinks with every
    evaluation; a step leaving the bracket is replaced by bisection. ``g_floor`` is G(0+) when finite (the
    substrate runs out in finite time): S = 0 where tau reaches it. Each iteration works on the points still
    iterating only (most converge in a few steps, a few deep-conversion points take more).
    """
    s0 = np.asarray(s0, float)
    out = np.array(s0, float, copy=True)
    todo = (tau > 0) & (s0 > 0)
    if g_floor is not None:
        gone = todo & (tau >= g_floor)
        out[gone] = 0.0
        todo &= ~gone
    idx = np.flatnonzero(todo)
    a0 = s0[idx]
    hi = np.log(a0)
    lo = hi - 745.0  # below the smallest positive double relative to S0
    u = np.minimum(np.log(np.clip(start[idx], a0 * 1e-300, a0).clip(1e-320)), hi)
    ta = tau[idx]
    prev = np.full(u.shape, np.inf)
    with np.errstate(all="ignore"):
        for _ in range(NEWTON_MAX):
            if idx.size == 0:
                break
            s = np.exp(u)
            gv, v = g(s, u, idx)
            f = gv - ta
            up = f > 0
            lo = np.where(up, u, lo)
            hi = np.where(up, hi, u)
            step = f * v / s  # Newton: f / (dG/du), with dG/du = −S/v
            un = u + step
            size = np.abs(step)
            # converged: a step below the tolerance; or a Newton step below QUADRATIC, after which the error is
            # of the order of its square (Newton converges quadratically there), far below NEWTON_TOL; or a
            # small step that no longer shrinks (the rounding level of G itself, which for deep conversion lies
            # above NEWTON_TOL)
            small = (size <= NEWTON_TOL * np.maximum(1.0, np.abs(u))) | ((size < 1e-9) & (size >= 0.5 * prev)) \
                | ((size < QUADRATIC) & (size < 1e-3 * prev))
            prev = size
            bad = ~np.isfinite(un) | (un < lo) | (un > hi)
            u = np.where(bad, 0.5 * (lo + hi), un)
            fin = small | (hi - lo < 1e-15)
            if fin.any():
                out[idx[fin]] = np.exp(u[fin])
                keep = ~fin
                idx, u, lo, hi, prev, ta = idx[keep], u[keep], lo[keep], hi[keep], prev[keep], ta[keep]
        out[idx] = np.exp(u)  # still moving at the iteration cap: the last iterate
    return out


def michaelis_menten_family(vp: Arr, kp: Arr, s0: np.ndarray, tau: np.ndarray
                            ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """S(τ) for v = V'·S/(K' + S), and ∂S/∂V', ∂S/∂K' (arrays of the shape of ``tau``)."""
    vp, kp, s0 = (np.broadcast_to(np.asarray(a, float), tau.shape) for a in (vp, kp, s0))
    with np.errstate(all="ignore"):
        y = np.log(np.where(s0 > 0, s0, 1.0) / kp) + (s0 - vp * tau) / kp
        s = kp * special.wrightomega(y)
        s = np.where(s0 > 0, np.clip(s, 0.0, s0), 0.0)
        v = vp * s / (kp + s)
        lg = np.where(s > 0, np.log(np.where(s0 > 0, s0, 1.0)) - np.log(np.where(s > 0, s, 1.0)), 0.0)
        ds_dv = np.where(s > 0, -v * tau / vp, 0.0)  # v·∂G/∂V' with ∂G/∂V' = −G/V' = −τ/V'
        ds_dk = np.where(s > 0, v * lg / vp, 0.0)
    return s, ds_dv, ds_dk


def michaelis_menten_product(vp: Arr, kp: Arr, kprod: Arr, s0: np.ndarray, tau: np.ndarray
                             ) -> tuple[np.ndarray, list[np.ndarray]]:
    """S(τ) for v = V'·S/(K'·(1 + P/Kp) + S), P = S0 − S (competitive inhibition by the product), and
    ∂S/∂(V', K', Kp).

    With A = K'·(1 + S0/Kp) and α = 1 − K'/Kp the law is v = V'·S/(A + α·S), whose integrated form
    G(S) = [A·ln(S0/S) + α·(S0 − S)]/V' = τ is solved by Lambert's W: with u = α·S/A,
    u·e^u = (α·S0/A)·exp((α·S0 − V'τ)/A). For α > 0 (Kp > K') u = ω(ln(α·S0/A) + (α·S0 − V'τ)/A) (Wright
    omega, no overflow); for α < 0 the right side lies in (−1/e, 0) (|α·S0/A| < 1 always) and u is on the
    principal branch W₀; for α = 0 the curve is exponential, S = S0·exp(−V'τ/A). Near W's branch point the
    principal branch loses digits, so the value is polished by the safeguarded Newton iteration on G (one or
    two steps). Sensitivities as for the other closed forms, ∂S/∂θ = v(S)·∂G/∂θ:
    ∂G/∂V' = −τ/V', ∂G/∂K' = [(1 + S0/Kp)·L − (S0 − S)/Kp]/V', ∂G/∂Kp = K'·[(S0 − S) − S0·L]/(Kp²·V'),
    L = ln(S0/S).
    """
    vp, kp, kq, s0b = (np.broadcast_to(np.asarray(a, float), tau.shape).ravel() for a in (vp, kp, kprod, s0))
    t = tau.ravel()
    with np.errstate(all="ignore"):
        big_a = kp * (1 + s0b / kq)
        alpha = 1 - kp / kq
        pos = s0b > 0
        ratio = np.where(pos, alpha * s0b / big_a, 0.0)
        expo = (alpha * s0b - vp * t) / big_a
        up = special.wrightomega(np.log(np.where(ratio > 0, ratio, 1.0)) + expo)
        un = special.lambertw(np.where(ratio < 0, ratio * np.exp(expo), -0.1), 0).real
        safe_alpha = np.where(alpha != 0, alpha, 1.0)
        s = np.where(alpha > 0, big_a * up / safe_alpha, np.where(alpha < 0, big_a * un / safe_alpha,
                                                                  s0b * np.exp(-vp * t / big_a)))
        start = np.where(np.isfinite(s) & (s > 0), np.minimum(s, s0b), 0.5 * s0b)

        ls0 = np.log(np.where(pos, s0b, 1.0))

        def g(x: np.ndarray, u: np.ndarray, i: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
            a, al, v = big_a[i], alpha[i], vp[i]
            return (a * (ls0[i] - u) + al * (s0b[i] - x)) / v, v * x / (a + al * x)

        # where the Lambert value has underflowed to 0 the substrate is gone to rounding: keep 0 there
        gone = np.where(np.isfinite(s) & (s == 0) & pos, t, np.inf)
        s = _newton(g, s0b, t, start, gone)
        s = np.where(pos, np.clip(s, 0.0, s0b), 0.0)
        ok = s > 0
        v = vp * s / (big_a + alpha * s)
        lg = np.where(ok, np.log(np.where(pos, s0b, 1.0)) - np.log(np.where(ok, s, 1.0)), 0.0)
        d = [-v * t / vp, v * ((1 + s0b / kq) * lg - (s0b - s) / kq) / vp,
             v * kp * ((s0b - s) - s0b * lg) / (kq**2 * vp)]
    shape = tau.shape
    return s.reshape(shape), [np.where(ok, di, 0.0).reshape(shape) for di in d]


def substrate_inhibition(p: Sequence[Arr], s0: np.ndarray, tau: np.ndarray, start: np.ndarray | None = None
                         ) -> tuple[np.ndarray, list[np.ndarray]]:
    """S(τ) for v = V·S/(Km + S + S²/Ksi) and ∂S/∂(V, Km, Ksi); ``start`` (shape of ``tau``) a guess of S
    for the Newton iteration, such as the curve at nearby parameters (default: the Michaelis-Menten curve)."""
    vm, km, ksi = (np.broadcast_to(np.asarray(a, float), tau.shape).ravel() for a in p)
    s0f = np.broadcast_to(s0, tau.shape).ravel()

    ls0 = np.log(np.where(s0f > 0, s0f, 1.0))

    def g(s: np.ndarray, u: np.ndarray, i: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        v, k, ki, a = vm[i], km[i], ksi[i], s0f[i]
        return (k * (ls0[i] - u) + (a - s) + (a * a - s * s) / (2 * ki)) / v, v * s / (k + s + s * s / ki)

    with np.errstate(all="ignore"):
        guess = _mm_start(vm, km, s0f, tau.ravel()) if start is None else np.asarray(start, float).ravel()
        s = _newton(g, s0f, tau.ravel(), guess)
        pos = s > 0
        v = vm * s / (km + s + s * s / ksi)
        lg = np.where(pos, np.log(s0f) - np.log(np.where(pos, s, 1.0)), 0.0)
        gv = (km * lg + (s0f - s) + (s0f**2 - s**2) / (2 * ksi)) / vm
        d = [-v * gv / vm, v * lg / vm, -v * (s0f**2 - s**2) / (2 * ksi**2 * vm)]
    shape = tau.shape
    return s.reshape(shape), [np.where(pos, di, 0.0).reshape(shape) for di in d]


def _hill_start(vm: np.ndarray, kh: np.ndarray, h: np.ndarray, s0: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """A lower bound of S(τ) for the Hill law, tight at both ends: the larger of the zero-order solution
    S0 − Vτ (rate V, an upper bound of the Hill rate) and the power-law solution of dS/dτ = −(V/K^h)·S^h
    (also an upper bound of the rate); Newton from below then needs a few steps only."""
    with np.errstate(all="ignore"):
        zero = s0 - vm * tau
        hm1 = h - 1
        z = hm1 * vm * tau / s0 * np.exp(h * np.log(s0 / kh))
        power = np.where(np.abs(hm1) > 1e-12, s0 * np.exp(-np.log1p(np.maximum(z, -1.0)) / np.where(
            np.abs(hm1) > 1e-12, hm1, 1.0)), s0 * np.exp(-vm * tau / kh))
        start = np.maximum(np.where(np.isfinite(power), power, 0.0), zero)
    return np.where(start > 0, np.minimum(start, s0), 0.5 * s0 * np.exp(-1.0))


def hill(p: Sequence[Arr], s0: np.ndarray, tau: np.ndarray, start: np.ndarray | None = None
         ) -> tuple[np.ndarray, list[np.ndarray]]:
    """S(τ) for v = V·S^h/(K^h + S^h) and ∂S/∂(V, K0.5, h); ``start`` (shape of ``tau``) a guess of S for the
    Newton iteration, such as the curve at nearby parameters (default: a lower bound, see :func:`_hill_start`).

    With L = ln(S0/S) and x = (1 − h)·L, K^h·∫_S^S0 s^−h ds = K·e^{(1−h)ln(S0/K)}·L·q(x), q(x) = (1 − e^−x)/x,
    a form without overflow or cancellation at h = 1. For h < 1 the substrate runs out at the finite time
    G(0+) = [K^h·S0^{1−h}/(1 − h) + S0]/V, after which S = 0.
    """
    vm, kh, h = (np.broadcast_to(np.asarray(a, float), tau.shape).ravel() for a in p)
    s0f = np.broadcast_to(s0, tau.shape).ravel()
    with np.errstate(all="ignore"):
        lsk = np.log(s0f / kh)
        e1 = kh * np.exp((1 - h) * lsk)  # K·(S0/K)^{1−h} = K^h·S0^{1−h}

        ls0, lkh = np.log(np.where(s0f > 0, s0f, 1.0)), np.log(kh)

    def hh(s: np.ndarray, derivative: bool = False) -> tuple[np.ndarray, np.ndarray, Any]:
        lg = np.log(s0f) - np.log(s)  # not log(S0/S): the ratio overflows where S has fallen below 1e-308·S0
        q, dq = _q((1 - h) * lg, derivative)
        return e1 * lg * q, lg, dq

    def g(s: np.ndarray, lns: np.ndarray, i: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        lg, hi = ls0[i] - lns, h[i]
        q, _ = _q((1 - hi) * lg, False)
        u = np.exp(hi * (lns - lkh[i]))
        return (e1[i] * lg * q + s0f[i] - s) / vm[i], vm[i] * u / (1 + u)

    with np.errstate(all="ignore"):
        floor = np.where(h < 1, (e1 / (1 - h) + s0f) / vm, np.inf)
        guess = _hill_start(vm, kh, h, s0f, tau.ravel()) if start is None else np.asarray(start, float).ravel()
        s = _newton(g, s0f, tau.ravel(), guess, floor)
        pos = s > 0
        sp = np.where(pos, s, 1.0)
        term, lg, dq = hh(sp, True)
        u = np.exp(h * np.log(sp / kh))
        v = vm * u / (1 + u)
        gv = (term + s0f - sp) / vm
        d_h = (-term * lsk - e1 * lg**2 * dq) / vm
        d = [-v * gv / vm, v * h * term / (kh * vm), v * d_h]
    shape = tau.shape
    return s.reshape(shape), [np.where(pos, di, 0.0).reshape(shape) for di in d]
