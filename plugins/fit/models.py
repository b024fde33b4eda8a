"""Rate-law implementations for the built-in models: functions, analytic Jacobians, start values.

The model descriptions (names, parameters, unit roles, bounds) live in :mod:`vzero.plugins.fit.catalog`, which
refers to these functions by name so that registering the models does not import numpy. Functions are
vectorised: each parameter may be a scalar or an array ``[n_groups, 1]`` broadcasting against data arrays
``[n_groups, n_points]``.

Equations (textbook forms; see docs/fitting.md for sources):

* michaelis-menten: v = Vmax·S/(Km + S)
* hill: v = Vmax·S^h/(K0.5^h + S^h)
* substrate-inhibition: v = Vmax·S/(Km + S + S²/Ksi)
* competitive: v = Vmax·S/(Km(1 + I/Kic) + S)
* uncompetitive: v = Vmax·S/(Km + S(1 + I/Kiu))
* mixed: v = Vmax·S/(Km(1 + I/Kic) + S(1 + I/Kiu))
* noncompetitive: v = Vmax·S/((Km + S)(1 + I/Ki))
* morrison: v = v0·(1 − 2I/(B + √(B² − 4·E·I))), B = E + I + Ki_app (the tight-binding quadratic, in the
  cancellation-free form of ((B − √(B² − 4EI))/(2E)) = 2I/(B + √(B² − 4EI)))
* logistic-4p: v = v_residual + (v_uninhibited − v_residual)/(1 + (I/IC50)^n)
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np

Arr = Any
X = Mapping[str, np.ndarray]
INF = float("inf")


# -- start values (from the data alone) ------------------------------------------------------------------


def _half_point(s: np.ndarray, v: np.ndarray, vmax: float) -> float:
    """Substrate level where the rate first reaches half of ``vmax`` (geometric midpoint of its neighbours),
    or the median positive level when the data never get there."""
    order = np.argsort(s)
    s, v = s[order], v[order]
    pos = s[s > 0]
    if pos.size == 0:
        return 1.0
    above = np.flatnonzero(v >= vmax / 2)
    if above.size and above[0] > 0 and s[above[0] - 1] > 0:
        return float(np.sqrt(s[above[0]] * s[above[0] - 1]))
    if above.size:
        return float(s[above[0]]) if s[above[0]] > 0 else float(np.median(pos))
    return float(np.median(pos))


def _mm_start(x: X, y: np.ndarray) -> tuple[float, float]:
    s = np.asarray(x["substrate"], float)
    vmax = float(np.nanmax(y)) if np.any(np.isfinite(y)) else 1.0
    vmax = vmax if vmax > 0 else 1.0
    return vmax, _half_point(s, y, vmax)


def _uninhibited(x: X, y: np.ndarray) -> tuple[X, np.ndarray]:
    i = np.asarray(x["inhibitor"], float)
    low = i <= np.nanmin(i) if np.any(np.isfinite(i)) else np.ones(i.shape, bool)
    return {"substrate": np.asarray(x["substrate"])[low]}, y[low]


def _typical_inhibitor(x: X) -> float:
    i = np.asarray(x["inhibitor"], float)
    pos = i[np.isfinite(i) & (i > 0)]
    return float(np.median(pos)) if pos.size else 1.0


# -- substrate-only models -------------------------------------------------------------------------------


def _mm(p: Sequence[Arr], x: X) -> np.ndarray:
    s = x["substrate"]
    return p[0] * s / (p[1] + s)


def _mm_jac(p: Sequence[Arr], x: X) -> list[np.ndarray]:
    s = x["substrate"]
    d = p[1] + s
    return [s / d, -p[0] * s / d**2]


def _ratio_power(c: np.ndarray, k: Arr, n: Arr) -> tuple[np.ndarray, np.ndarray]:
    """``u = (c/k)**n`` and ``ln(c/k)`` (``-inf`` at c <= 0, so that u is 0 there): the Hill and
    log-logistic terms."""
    with np.errstate(divide="ignore", invalid="ignore"):
        lc = np.where(c > 0, np.log(np.where(c > 0, c, 1.0)) - np.log(k), -np.inf)
        u = np.exp(n * lc)
    return u, lc


def _hill_u(p: Sequence[Arr], s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    return _ratio_power(s, p[1], p[2])


def _hill(p: Sequence[Arr], x: X) -> np.ndarray:
    u, _ = _hill_u(p, x["substrate"])
    return p[0] * u / (1 + u)


def _hill_jac(p: Sequence[Arr], x: X) -> list[np.ndarray]:
    u, ls = _hill_u(p, x["substrate"])
    d = (1 + u) ** 2
    dh = np.where(u > 0, p[0] * u * np.where(np.isfinite(ls), ls, 0.0) / d, 0.0)
    return [u / (1 + u), -p[0] * p[2] * u / (p[1] * d), dh]


def _hill_guess(x: X, y: np.ndarray) -> list[float]:
    return [*_mm_start(x, y), 1.0]


def _si(p: Sequence[Arr], x: X) -> np.ndarray:
    s = x["substrate"]
    return p[0] * s / (p[1] + s + s**2 / p[2])


def _si_jac(p: Sequence[Arr], x: X) -> list[np.ndarray]:
    s = x["substrate"]
    d = p[1] + s + s**2 / p[2]
    return [s / d, -p[0] * s / d**2, p[0] * s**3 / (p[2] ** 2 * d**2)]


def _si_guess(x: X, y: np.ndarray) -> list[float]:
    vmax, km = _mm_start(x, y)
    s = np.asarray(x["substrate"], float)
    return [vmax, km, 10.0 * float(np.nanmax(s)) if np.nanmax(s) > 0 else 1.0]


# -- inhibitor models (general mixed form; the others fix one term) --------------------------------------


def _mixed_terms(p: Sequence[Arr], x: X, kic: Arr, kiu: Arr) -> tuple[np.ndarray, ...]:
    s, i = x["substrate"], x["inhibitor"]
    a = 1 + i / kic
    b = 1 + i / kiu
    d = p[1] * a + s * b
    return s, i, a, b, d


def _competitive(p: Sequence[Arr], x: X) -> np.ndarray:
    s, _, _, _, d = _mixed_terms(p, x, p[2], INF)
    return p[0] * s / d


def _competitive_jac(p: Sequence[Arr], x: X) -> list[np.ndarray]:
    s, i, a, _, d = _mixed_terms(p, x, p[2], INF)
    return [s / d, -p[0] * s * a / d**2, p[0] * s * p[1] * i / (p[2] ** 2 * d**2)]


def _uncompetitive(p: Sequence[Arr], x: X) -> np.ndarray:
    s, _, _, _, d = _mixed_terms(p, x, INF, p[2])
    return p[0] * s / d


def _uncompetitive_jac(p: Sequence[Arr], x: X) -> list[np.ndarray]:
    s, i, _, _, d = _mixed_terms(p, x, INF, p[2])
    return [s / d, -p[0] * s / d**2, p[0] * s * s * i / (p[2] ** 2 * d**2)]


def _mixed(p: Sequence[Arr], x: X) -> np.ndarray:
    s, _, _, _, d = _mixed_terms(p, x, p[2], p[3])
    return p[0] * s / d


def _mixed_jac(p: Sequence[Arr], x: X) -> list[np.ndarray]:
    s, i, a, _, d = _mixed_terms(p, x, p[2], p[3])
    vs = p[0] * s / d**2
    return [s / d, -vs * a, vs * p[1] * i / p[2] ** 2, vs * s * i / p[3] ** 2]


def _noncompetitive(p: Sequence[Arr], x: X) -> np.ndarray:
    s, i = x["substrate"], x["inhibitor"]
    return p[0] * s / ((p[1] + s) * (1 + i / p[2]))


def _noncompetitive_jac(p: Sequence[Arr], x: X) -> list[np.ndarray]:
    s, i = x["substrate"], x["inhibitor"]
    a = 1 + i / p[2]
    d = (p[1] + s) * a
    return [s / d, -p[0] * s * a / d**2, p[0] * s * (p[1] + s) * i / (p[2] ** 2 * d**2)]


def _inhib_guess(n_ki: int) -> Callable[[X, np.ndarray], list[float]]:
    def guess(x: X, y: np.ndarray) -> list[float]:
        xs, ys = _uninhibited(x, y)
        vmax, km = _mm_start(xs, ys)
        return [vmax, km] + [_typical_inhibitor(x)] * n_ki

    return guess


# -- inhibitor titrations --------------------------------------------------------------------------------


def _morrison_terms(p: Sequence[Arr], x: X) -> tuple[np.ndarray, ...]:
    e, i = x["enzyme"], x["inhibitor"]
    b = e + i + p[1]
    q = np.sqrt(np.maximum(b * b - 4 * e * i, 0.0))
    return i, b, q


def _morrison(p: Sequence[Arr], x: X) -> np.ndarray:
    i, b, q = _morrison_terms(p, x)
    return p[0] * (1 - 2 * i / (b + q))


def _morrison_jac(p: Sequence[Arr], x: X) -> list[np.ndarray]:
    i, b, q = _morrison_terms(p, x)
    with np.errstate(divide="ignore", invalid="ignore"):
        dq = np.where(q > 0, b / q, 0.0)
    return [1 - 2 * i / (b + q), p[0] * 2 * i * (1 + dq) / (b + q) ** 2]


def _morrison_guess(x: X, y: np.ndarray) -> list[float]:
    top = float(np.nanmax(y)) if np.nanmax(y) > 0 else 1.0
    return [top, _typical_inhibitor(x)]


def _logistic_u(p: Sequence[Arr], i: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    return _ratio_power(i, p[2], p[3])


def _logistic(p: Sequence[Arr], x: X) -> np.ndarray:
    u, _ = _logistic_u(p, x["inhibitor"])
    return p[1] + (p[0] - p[1]) / (1 + u)


def _logistic_jac(p: Sequence[Arr], x: X) -> list[np.ndarray]:
    u, li = _logistic_u(p, x["inhibitor"])
    w = 1 / (1 + u)  # 0 where u is infinite (I = 0 with n < 0)
    with np.errstate(invalid="ignore"):
        uw = np.where(np.isinf(u), 1.0, u * w)  # u/(1 + u), its limit 1 there (inf·0 would be NaN)
    span = p[0] - p[1]
    dn = np.where(u > 0, -span * uw * w * np.where(np.isfinite(li), li, 0.0), 0.0)
    return [w, uw, span * uw * w * p[3] / p[2], dn]


def _logistic_guess(x: X, y: np.ndarray) -> list[float]:
    i = np.asarray(x["inhibitor"], float)
    pos = i[i > 0]
    mid = float(np.exp(np.median(np.log(pos)))) if pos.size else 1.0
    high, low = float(np.nanmax(y)), float(np.nanmin(y))
    order = np.argsort(i)
    # v_uninhibited is the rate at I = 0 (u = 0 when n > 0): the low rate for a rising curve (activation), the
    # high one for a falling curve (inhibition); with n = +1 in both the start curve runs the data's way
    rising = np.nanmean(y[order][-3:]) > np.nanmean(y[order][:3])
    return [low, high, mid, 1.0] if rising else [high, low, mid, 1.0]


def _mm_guess(x: X, y: np.ndarray) -> list[float]:
    return list(_mm_start(x, y))


_inhib1_guess = _inhib_guess(1)
_inhib2_guess = _inhib_guess(2)
