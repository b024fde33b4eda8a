"""Linear-transform diagnostics, fitted curves with confidence bands, and parameter correlations.

The transforms (Hill plot, Lineweaver-Burk, Eadie-Hofstee, Hanes-Woolf) distort the error structure of the
rates and are shown for inspection only; parameters always come from nonlinear least squares on the
untransformed rates. Each transform's own straight-line estimates are reported so the reader can see how far
they stray from the nonlinear fit.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from scipy import special  # t and F quantiles: what scipy.stats uses, without its import cost
from vzero.plugins.fit.catalog import Model
from vzero.plugins.fit.engine import FitResult

HILL_STABLE = (0.1, 0.9)
"""Fractional saturation range where a Hill-plot point is usable: outside it log(v/(Vmax − v)) is dominated
by noise in v (common practice; the exact limits are our choice)."""


def _ols(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """Slope and intercept of the unweighted least-squares line (NaN with fewer than 2 distinct x)."""
    ok = np.isfinite(x) & np.isfinite(y)
    if np.unique(x[ok]).size < 2:
        return float("nan"), float("nan")
    slope, intercept = np.polyfit(x[ok], y[ok], 1)
    return float(slope), float(intercept)


TRANSFORM_COLUMNS = ["group", "plot", "quantity", "x", "y", "plate", "well", "unstable", "x_label", "y_label"]
"""Columns of the diagnostics table (see :func:`transforms`)."""


def transforms(group: Any, s: np.ndarray, v: np.ndarray, vmax: float, ids: list[tuple[str, str]],
               s_unit: str, v_unit: str) -> dict[str, np.ndarray]:
    """The diagnostics table's rows for one group, as columns (:data:`TRANSFORM_COLUMNS`): for each plot its
    points, then its line's slope, intercept and the estimates the line implies.

    ``vmax`` (from the nonlinear Hill or Michaelis-Menten fit) is needed for the Hill plot only. ``ids`` are
    (plate, well) per point.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        pos = (s > 0) & (v > 0)
        plots = {
            "lineweaver-burk": (1 / s, 1 / v, f"1/S (1/{s_unit})", f"1/v (1/({v_unit}))", pos),
            "eadie-hofstee": (v / s, v, f"v/S (({v_unit})/{s_unit})", f"v ({v_unit})", s > 0),
            "hanes-woolf": (s, s / v, f"S ({s_unit})", f"S/v ({s_unit}/({v_unit}))", pos),
        }
        if np.isfinite(vmax) and vmax > 0:
            frac = v / vmax
            hy = np.log10(v / (vmax - v))
            stable = (frac > HILL_STABLE[0]) & (frac < HILL_STABLE[1]) & (s > 0)
            plots["hill"] = (np.log10(s), hy, f"log10(S/{s_unit})", "log10(v/(Vmax − v))", stable)

    n = len(s)
    plates = [i[0] for i in ids]
    wells = [i[1] for i in ids]
    parts: list[dict[str, np.ndarray]] = []
    for plot, (x, y, xl, yl, usable) in plots.items():
        slope, icpt = (np.float64(q) for q in _ols(x[usable], y[usable]))  # numpy floats: 1/0 is inf, not an error
        with np.errstate(divide="ignore", invalid="ignore"):
            if plot == "lineweaver-burk":
                est = {"Vmax": 1 / icpt, "Km": slope / icpt}
            elif plot == "eadie-hofstee":
                est = {"Vmax": icpt, "Km": -slope}
            elif plot == "hanes-woolf":
                est = {"Vmax": 1 / slope, "Km": icpt / slope}
            else:
                est = {"h": slope, "K0.5": 10 ** (-icpt / slope) if slope else np.nan}
        lines = {"slope": slope, "intercept": icpt, **est}
        m = len(lines)
        y = np.asarray(y, float)
        parts.append({
            "group": np.full(n + m, group, dtype=object),
            "plot": np.full(n + m, plot, dtype=object),
            "quantity": np.array(["point"] * n + list(lines), dtype=object),
            "x": np.concatenate([np.asarray(x, float), np.full(m, np.nan)]),
            "y": np.concatenate([y, np.array([float(q) for q in lines.values()])]),
            "plate": np.array(plates + [""] * m, dtype=object),
            "well": np.array(wells + [""] * m, dtype=object),
            "unstable": np.concatenate([~np.asarray(usable, bool) | ~np.isfinite(y), np.zeros(m, bool)]),
            "x_label": np.full(n + m, xl, dtype=object),
            "y_label": np.full(n + m, yl, dtype=object),
        })
    return {c: np.concatenate([p[c] for p in parts]) for c in TRANSFORM_COLUMNS}


def stack(blocks: list[dict[str, np.ndarray]], columns: list[str]) -> pd.DataFrame:
    """One table from blocks of columns (each a mapping column -> equal-length array), in block order."""
    if not blocks:
        return pd.DataFrame(columns=columns)
    return pd.DataFrame({c: np.concatenate([b[c] for b in blocks]) for c in columns}, columns=columns)


def band(model: Model, res: FitResult, x: dict[str, np.ndarray], confidence: float) -> tuple[np.ndarray, ...]:
    """Fitted values and a pointwise confidence band by the delta method: f ± t·sqrt(g C gᵀ), g = ∂f/∂θ."""
    p = list(res.values)
    with np.errstate(all="ignore"):
        y = np.asarray(model.evaluate(p, x), float)
        if not res.errorbars:
            nan = np.full_like(y, np.nan)
            return y, nan, nan
        g = np.stack([np.broadcast_to(c, y.shape) for c in model.jacobian(p, x)], axis=-1)
        var = np.einsum("ni,ij,nj->n", g, np.nan_to_num(res.covariance), g)
    half = special.stdtrit(res.dof, 0.5 + confidence / 2) * np.sqrt(np.clip(var, 0, None))
    return y, y - half, y + half


def grid(values: np.ndarray, n: int = 101) -> np.ndarray:
    """A plotting grid over the observed range: log-spaced when the positive values span > 30-fold, else
    linear from 0."""
    pos = values[np.isfinite(values) & (values > 0)]
    if pos.size == 0:
        return np.linspace(0.0, 1.0, n)
    lo, hi = pos.min(), pos.max()
    if hi / lo > 30:
        return np.geomspace(lo / 2, hi * 1.5, n)
    return np.linspace(0.0, hi * 1.1, n)


def correlations(group: Any, model: str, res: FitResult) -> list[dict[str, Any]]:
    """Long-form correlation matrix of the free parameters."""
    names = [n for n, f in zip(res.names, res.free, strict=True) if f]
    idx = [res.names.index(n) for n in names]
    return [{"group": group, "model": model, "parameter_a": a, "parameter_b": b,
             "r": float(res.correlation[i, j])} for a, i in zip(names, idx, strict=True)
            for b, j in zip(names, idx, strict=True)]
