"""Standard error of v0 from a signal-unit progress curve by a profile over its shape.

Without the substrate concentration the Michaelis–Menten curve is fitted in signal units with four
parameters (:func:`vzero.plugins.rates.progress.progress_curve`): baseline, ln v0, the initial curvature
``c1 = -(dv/dP)/v0`` and the shape ``r = A/(Km + A)`` (A the apparent amplitude), through the integrated rate
law ``v0 t = r P + (1 - r)(-ln(1 - a P))/a`` with ``a = c1/(1 - r)``. Far from completion the shape is barely
determined by the curve, and v0 does not follow it linearly, so the delta method over all four parameters
describes an unbounded, linearised estimate and overstates v0's scatter (docs/rates.md, "Do the standard
errors mean what they say?").

Here the shape is profiled instead: the curve is fitted again at a few fixed shapes (:data:`SHAPE_GRID`), each
a three-parameter fit (baseline, ln v0, c1 with c1 >= 0; the model :func:`fixed_shape_model`, the fits
:func:`vzero.plugins.rates.progress.shape_profile`), all wells and shapes in one batch; at each shape
v0's variance allows for the curvature's bound at zero (a straight line) as
:func:`vzero.plugins.rates.progress.bounded_ln_v0_var` does for known S0; and the variances are mixed with
weights from each shape's likelihood, ``exp(-(RSS_r - RSS_min)/(2 sigma^2))`` (every shape in [0, 1) equally
likely beforehand, as with known S0 every curvature is): the mean squared distance of ln v0 at the shapes the
curve allows from the reported ln v0. That SE is then multiplied by an empirical factor at how clearly the
curve bends (:func:`profile_bend`, :func:`bend_factor`, :data:`BEND_KNOTS`, measured by ``python -m
bench.se_calibration``): the profile alone overstated the scatter of nearly straight curves. Measured on
simulated replicate wells only: calibrated on curving and moderately curving wells, still up to 1.45x the
scatter on nearly straight ones, where nothing bounds the curvature from above without S0 (docs/rates.md).
Research use; defer to the lab's own validated procedures.
"""

from __future__ import annotations

import numpy as np
from vzero.plugins.kinetics import lsq

SHAPE_GRID = (0.0, 0.25, 0.5, 0.75, 0.95)
"""Fixed shapes r = A/(Km + A) of the profile, equally weighted beforehand: first order (r = 0; a curve whose
enzyme is being lost also fits best there), three points between, and nearly zero order (r = 1 itself is
degenerate at any curvature: a straight line that stops at the amplitude). Measured against the midpoints
(0.1, 0.3, ..., 0.9) on 500 wells per condition: the same SE ratios within 0.04, coverage on inactivating
wells 0.964 against 0.952."""

_NEWTON_STEPS = 60
"""Most Newton steps of :func:`shape_conversion`; it stops once every step is below 1e-14 of L (the next
would be below 1e-28: convergence is quadratic), after 5-8 steps on the grid's shapes."""


def shape_conversion(tau: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Fraction ``x = a P`` of the apparent amplitude converted, solving ``r x - (1 - r) ln(1 - x) = tau``
    (the integrated Michaelis–Menten law scaled by ``a = c1/(1 - r)``, ``tau = a v0 t >= 0``), broadcasting.

    Solved for ``L = -ln(1 - x)``, where ``g(L) = r (1 - exp(-L)) + (1 - r) L - tau`` is increasing and
    concave: Newton's method from a point below the root, ``L0 = max(tau, (tau - r)/(1 - r))`` (since
    ``r (1 - exp(-L))`` is below both ``r L`` and ``r``), climbs to it without overshooting, and ``x = 1 -
    exp(-L)`` by ``expm1`` keeps every digit when ``tau`` is tiny (x = tau to first order). ``r = 0`` (first
    order) takes one step: ``x = 1 - exp(-tau)``. Clipped below 1 (a curve past completion to double
    precision).
    """
    tau = np.asarray(tau, dtype=float)
    r = np.broadcast_to(np.asarray(r, dtype=float), tau.shape)
    b = 1.0 - r
    with np.errstate(over="ignore", invalid="ignore"):
        big = np.fmax(tau, (tau - r) / b)
        for _ in range(_NEWTON_STEPS):
            e = np.exp(-big)
            step = (-r * np.expm1(-big) + b * big - tau) / (r * e + b)
            big = big - step
            if not np.any(np.abs(step) > 1e-14 * np.fmax(big, 1e-300)):
                break
        return np.clip(-np.expm1(-big), 0.0, 1.0 - 1e-16)


def _drop_term(x: np.ndarray) -> np.ndarray:
    """``j(x) = (x + (1 - x) ln(1 - x))/x²`` for ``0 <= x < 1`` (``dP/dc1 = -P² j(x)/(1 - r x)``), by its
    series ``sum x^(n-2)/(n (n - 1))`` (n >= 2, five terms) below 1e-3, where the closed form loses digits."""
    small = x < 1e-3
    xs = np.where(small, 0.5, x)
    closed = (xs + (1.0 - xs) * np.log1p(-xs)) / (xs * xs)
    series = 0.5 + x * (1 / 6 + x * (1 / 12 + x * (1 / 20 + x / 30)))
    return np.where(small, series, closed)


def fixed_shape_model(t: np.ndarray, d: np.ndarray, r: np.ndarray) -> lsq.Model:
    """``baseline + d P(t)`` at the fixed shape ``r`` per problem, as a batched least-squares model with
    parameters (baseline, ln v0, c1), c1 >= 0 (``c1 = 0`` is the straight line ``P = v0 t``).

    ``t`` ``[n]`` shared or ``[problems, n]`` one grid per problem (block means); ``d`` (+1/-1) and ``r``
    ``[problems]``. With ``x = a P`` (:func:`shape_conversion`), by implicit differentiation of the rate law:
    ``dP/d ln v0 = v0 t (1 - x)/(1 - r x)`` (the rate times t) and ``dP/dc1 = -P² j(x)/(1 - r x)``
    (:func:`_drop_term`), both finite at ``c1 = 0``.
    """
    def model(p: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        tt = t[None, :] if t.ndim == 1 else t[rows]
        rr = r[rows, None]
        v0t = np.exp(p[:, 1:2]) * tt
        a = np.fmax(p[:, 2:3], 0.0) / (1.0 - rr)
        tau = a * v0t
        x = shape_conversion(tau, rr)
        with np.errstate(divide="ignore", invalid="ignore"):
            g = np.where(tau > 0, x / tau, 1.0)  # P/(v0 t)
        prod = v0t * g
        slow = 1.0 / (1.0 - rr * x)
        jac = np.empty((rows.size, 3, tt.shape[-1]))
        jac[:, 0] = 1.0
        jac[:, 1] = d[rows, None] * v0t * (1.0 - x) * slow
        jac[:, 2] = -d[rows, None] * prod * prod * _drop_term(x) * slow
        return p[:, 0:1] + d[rows, None] * prod, jac

    return model


def mixed_ln_v0_var(profile: dict[str, np.ndarray], ln_v0: np.ndarray, scale2: np.ndarray) -> np.ndarray:
    """Variance of the reported ``ln_v0`` ``[wells]`` over the shapes of a
    :func:`vzero.plugins.rates.progress.shape_profile`: ``sum_r
    w_r (var_r + (ln v0_r - ln_v0)²)`` with ``w_r`` proportional to ``exp(-(RSS_r - RSS_min)/(2 scale2))``
    (each shape's likelihood; a flat prior over the grid). Shapes whose fit failed take no weight; NaN where
    none is left."""
    rss, var, lv = profile["rss"], profile["var"], profile["ln_v0"]
    ok = np.isfinite(rss) & np.isfinite(var) & np.isfinite(lv) & profile["converged"]
    with np.errstate(invalid="ignore"):
        best = np.min(np.where(ok, rss, np.inf), axis=1)
        lw = np.where(ok, -(rss - best[:, None]) / (2.0 * scale2[:, None]), -np.inf)
        wt = np.exp(lw)
        wt /= wt.sum(axis=1, keepdims=True)
        terms = np.where(ok, var + (lv - ln_v0[:, None]) ** 2, 0.0)
        return np.where(ok.any(axis=1), (wt * terms).sum(axis=1), np.nan)


def profile_bend(profile: dict[str, np.ndarray]) -> np.ndarray:
    """How clearly each well's curve bends, scale-free: ``c_free/sd_c`` at the best converged shape of a
    :func:`vzero.plugins.rates.progress.shape_profile` (``c_free`` the curvature at the optimum without
    bounds, ``sd_c`` its standard error from the read noise; negative where the optimum lies past the
    straight line). In the linear approximation this is the signed root of the likelihood-ratio statistic
    for a straight line against the curve, the same at every shape to first order in the curvature. NaN
    where no shape's fit converged."""
    ok = np.isfinite(profile["rss"]) & profile["converged"] & np.isfinite(profile["bend"])
    best = np.argmin(np.where(ok, profile["rss"], np.inf), axis=1)
    z = profile["bend"][np.arange(best.size), best]
    return np.where(ok.any(axis=1), z, np.nan)


BEND_KNOTS: tuple[tuple[float, float], ...] = (
    (-0.94, 0.78), (-0.23, 0.83), (0.24, 0.92), (0.74, 0.97), (1.23, 0.97), (1.73, 0.97), (2.42, 0.97),
    (3.43, 0.97), (6.63, 1.00),
)
"""Knots ``(z, factor)`` of :func:`bend_factor`, measured by ``python -m bench.se_calibration --wells 1000``
(seed 1000; 120 conditions, 119371 wells): the median ``z`` of each bin of :func:`profile_bend`, and the
factor that makes the profile's 95 % interval hold the truth 95 % of the time in that bin
(``q95(|v0 - truth|/SE)/1.96``), made non-decreasing, and 1 from the last bin's median z on (that bin,
z >= 4, measured 0.90: the curve clearly bends, and the profile is left as it is). Empirical, not
derived: on the calibration grid of that script (S0/Km 0.5-50, 1-20 % converted, two signal-to-noise
levels, 40 and 90 reads; never the test's conditions), with conditions weighted so that every unit of a
condition's own bend (its median z, up to 8) counts the same: a flat prior over how clearly a curve
bends, in units of its standard error. Why a prior at all: a curve that looks straight (z near 0) may be
one whose true curvature sits on the bound (its SE then about 0.5-0.6 of what the profile says) or one
that bends by one or two SE (about 1.4): no statistic of one well tells them apart, so the factor depends
on how often each occurs. Research use; docs/rates.md has the validation on held-out conditions."""


def bend_factor(z: np.ndarray, knots: tuple[tuple[float, float], ...] = BEND_KNOTS) -> np.ndarray:
    """Factor on the profile's standard error of v0 at the bend statistic ``z`` (:func:`profile_bend`):
    linear between the knots of :data:`BEND_KNOTS`, their end values beyond them, 1 where ``z`` is not
    finite (no shape converged: the four-parameter SE is kept as it is)."""
    zk = np.array([k[0] for k in knots])
    fk = np.array([k[1] for k in knots])
    z = np.asarray(z, dtype=float)
    return np.where(np.isfinite(z), np.interp(np.where(np.isfinite(z), z, 0.0), zk, fk), 1.0)
