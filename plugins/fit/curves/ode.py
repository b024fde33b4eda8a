"""The numerical route: progress curves of any rate law by a Dormand-Prince 5(4) integrator batched over wells.

Solves dS/dτ = −v(S) for every well at once, together with the forward sensitivity equations
d(∂S/∂θ)/dτ = −(∂v/∂S·∂S/∂θ + ∂v/∂θ), so that the Jacobian of a fit comes with the curve. Each well keeps
its own step size (error control on S, the embedded 4th-order solution as the estimate, Hairer, Nørsett &
Wanner 1993, Solving ODEs I, section II.4 and II.5) and lands exactly on its read times, so no dense-output
interpolation is involved. Used for models without a closed form (a plugin's rate law) and as the
independent check of the closed forms.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

# Dormand-Prince 5(4) tableau (Dormand & Prince 1980; Hairer, Nørsett & Wanner 1993, table 5.2)
C = np.array([0.0, 1 / 5, 3 / 10, 4 / 5, 8 / 9, 1.0, 1.0])
A = [
    [],
    [1 / 5],
    [3 / 40, 9 / 40],
    [44 / 45, -56 / 15, 32 / 9],
    [19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729],
    [9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656],
    [35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84],
]
B5 = np.array([35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84, 0.0])
B4 = np.array([5179 / 57600, 0.0, 7571 / 16695, 393 / 640, -92097 / 339200, 187 / 2100, 1 / 40])
E = B5 - B4

Rhs = Callable[[np.ndarray, np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]
"""rhs(S [k], Z [k, p], rows [k]) -> (dS/dτ [k], dZ/dτ [k, p]) for the wells ``rows``."""

MAX_STEPS = 100_000


def integrate(rhs: Rhs, s0: np.ndarray, n_par: int, tau: np.ndarray, *, rtol: float = 1e-10,
              atol: float = 1e-14) -> tuple[np.ndarray, np.ndarray]:
    """S and ∂S/∂θ at the effective times ``tau`` [n_wells, n_time] (non-decreasing per well, ≥ 0).

    ``s0`` [n_wells] initial substrate; the sensitivities start at 0 (S0 is not a parameter). The error
    of each step is controlled on S with tolerance ``atol·S0 + rtol·|S|`` per well (the sensitivities ride
    along on the same steps). Returns (S [n_wells, n_time], Z [n_wells, n_time, n_par]).
    """
    n, nt = tau.shape
    s0 = np.asarray(s0, float)
    out_s = np.empty((n, nt))
    out_z = np.zeros((n, nt, n_par))
    s = s0.copy()
    z = np.zeros((n, n_par))
    t = np.zeros(n)
    k_next = np.zeros(n, int)
    scale = np.maximum(np.abs(s0), 1e-300)
    # reads at τ = 0 (or before any step) are the start values
    span = np.nanmax(tau, axis=1)
    f0, _ = rhs(s, z, np.arange(n))
    h = np.where(np.abs(f0) > 0, 0.01 * scale / np.maximum(np.abs(f0), 1e-300), span)
    h = np.clip(h, 1e-6 * np.maximum(span, 1e-300), np.maximum(span, 1e-300))
    active = np.ones(n, bool)

    def record() -> None:
        rows = np.flatnonzero(active)
        while rows.size:
            hit = tau[rows, np.minimum(k_next[rows], nt - 1)] <= t[rows] * (1 + 1e-15)
            hit &= k_next[rows] < nt
            rows = rows[hit]
            if not rows.size:
                break
            out_s[rows, k_next[rows]] = s[rows]
            out_z[rows, k_next[rows]] = z[rows]
            k_next[rows] += 1
        active[k_next >= nt] = False

    record()
    steps = 0
    fsal_s = np.full(n, np.nan)
    fsal_z = np.zeros((n, n_par))
    have_fsal = np.zeros(n, bool)
    while active.any():
        steps += 1
        if steps > MAX_STEPS:
            raise RuntimeError("progress-curve integration did not reach the last read")
        rows = np.flatnonzero(active)
        target = tau[rows, k_next[rows]]
        hh = np.minimum(h[rows], target - t[rows])
        land = hh >= target - t[rows]
        sr, zr = s[rows], z[rows]
        ks = np.empty((7, rows.size))
        kz = np.empty((7, rows.size, n_par))
        if have_fsal[rows].all():
            ks[0], kz[0] = fsal_s[rows], fsal_z[rows]
        else:
            ks[0], kz[0] = rhs(sr, zr, rows)
        for i in range(1, 7):
            a = A[i]
            si = sr + hh * sum(a[j] * ks[j] for j in range(i) if a[j])
            zi = zr + hh[:, None] * sum(a[j] * kz[j] for j in range(i) if a[j])
            ks[i], kz[i] = rhs(si, zi, rows)
        s_new = si  # stage 7 is evaluated at the 5th-order solution (FSAL)
        z_new = zi
        err = hh * np.abs(np.tensordot(E, ks, axes=1))
        tol = atol * scale[rows] + rtol * np.maximum(np.abs(sr), np.abs(s_new))
        ratio = err / tol
        ok = np.isfinite(ratio) & (ratio <= 1.0) & np.all(np.isfinite(z_new), axis=1)
        with np.errstate(divide="ignore"):
            factor = np.where(ratio > 0, 0.9 * ratio ** (-0.2), 5.0)
        factor = np.clip(np.where(np.isfinite(factor), factor, 0.2), 0.2, 5.0)
        acc = rows[ok]
        t[acc] = np.where(land[ok], target[ok], t[acc] + hh[ok])
        s[acc], z[acc] = s_new[ok], z_new[ok]
        fsal_s[acc], fsal_z[acc] = ks[6][ok], kz[6][ok]
        have_fsal[acc] = True
        # a refused step shrinks; an accepted one that was cut short to land on a read keeps its proposal
        grown = np.where(ok & land, np.maximum(h[rows], hh * factor), hh * factor)
        h[rows] = np.where(ok, grown, hh * np.minimum(factor, 0.9))
        record()
    return out_s, out_z
