"""The linear transforms of a group, drawn from the group's selected fit: its wells and its model.

The fit stage's diagnostics table holds the transforms of a group's uninhibited wells with a Vmax taken from
the Michaelis–Menten or Hill fit, whatever model the group selected. For the report each group's transforms
stand on the selected fit instead: the points are the wells that fit used (the fit stage's rule, as
:func:`vzero.plugins.report.content.fit_use` re-applies it), the Hill plot (cooperativity groups only) uses
the selected model's Vmax, and each panel shows the selected model's fitted curve carried into the
transform's coordinates beside the transform's own straight line. A substrate-inhibition fit then shows as
the curve its rate law draws (bending up at high substrate on a Lineweaver–Burk plot), not as a straight
line that assumes Michaelis–Menten kinetics. The transforms stay for inspection only.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
import pandas as pd


def selected_points(rates: pd.DataFrame, in_group: np.ndarray, used: np.ndarray | None, x_col: str,
                    i_col: str) -> np.ndarray:
    """Mask of the rates table's rows that a substrate-only model of the group was fitted to: sample wells
    of the group the fit used, with a positive substrate concentration and a finite rate, and no inhibitor."""
    n = len(rates)
    s = pd.to_numeric(rates[x_col], errors="coerce").to_numpy(float) if x_col in rates else np.full(n, np.nan)
    v = pd.to_numeric(rates["rate"], errors="coerce").to_numpy(float) if "rate" in rates else np.full(n, np.nan)
    inh = pd.to_numeric(rates[i_col], errors="coerce").to_numpy(float) if i_col in rates else np.full(n, np.nan)
    keep = in_group & np.isfinite(s) & np.isfinite(v) & ~(np.isfinite(inh) & (inh != 0))
    return keep & (used if used is not None else np.ones(n, bool))


def limiting_rate(fits: pd.DataFrame, group: str, model_name: str, models: Mapping[str, Any]) -> float:
    """The selected model's limiting rate (its Vmax parameter) for the Hill plot; NaN when the model has none
    or it was not determined."""
    model = models.get(model_name)
    param = getattr(model, "limiting_rate", "") if model is not None else ""
    if not param or fits.empty:
        return float("nan")
    rows = fits[(fits["group"].astype(str) == group) & (fits["model"].astype(str) == model_name)
                & (fits["parameter"].astype(str) == param)]
    value = pd.to_numeric(rows["estimate"], errors="coerce")
    return float(value.iloc[0]) if len(value) and np.isfinite(value.iloc[0]) else float("nan")


def table(group: str, rates: pd.DataFrame, mask: np.ndarray, x_col: str, vmax: float, hill: bool,
          s_unit: str, v_unit: str) -> pd.DataFrame:
    """The transforms of the wells in ``mask`` in the diagnostics table's form (points, each line's slope,
    intercept and implied estimates), with the Hill plot only when ``hill`` and ``vmax`` is finite. Uses the
    fit stage's own transform function, so the numbers agree with its diagnostics table for the same wells."""
    from vzero.plugins.fit.diagnostics import transforms

    pts = rates[mask]
    s = pd.to_numeric(pts[x_col], errors="coerce").to_numpy(float)
    v = pd.to_numeric(pts["rate"], errors="coerce").to_numpy(float)
    plates = pts["plate"].astype(str).tolist() if "plate" in pts else [""] * len(pts)
    ids = list(zip(plates, pts["well"].astype(str).tolist(), strict=True))
    out = pd.DataFrame(transforms(group, s, v, vmax if hill else float("nan"), ids, s_unit or "1", v_unit or "1"))
    return out


def curve_in(plot: str, s: np.ndarray, v: np.ndarray, vmax: float) -> tuple[np.ndarray, np.ndarray]:
    """A rate curve v(s) carried into the coordinates of one transform (``plot`` as in the diagnostics table:
    lineweaver-burk, eadie-hofstee, hanes-woolf, hill); points that have no value there are dropped."""
    with np.errstate(divide="ignore", invalid="ignore"):
        if plot == "lineweaver-burk":
            x, y = 1 / s, 1 / v
        elif plot == "eadie-hofstee":
            x, y = v / s, v
        elif plot == "hanes-woolf":
            x, y = s, s / v
        elif plot == "hill":
            x, y = np.log10(s), np.log10(v / (vmax - v))
        else:
            return np.array([]), np.array([])
    ok = np.isfinite(x) & np.isfinite(y) & (s > 0) & (v > 0)
    return x[ok], y[ok]


def model_curves(rate_of: Callable[[np.ndarray], np.ndarray], s: np.ndarray, vmax: float,
                 plots: list[str]) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """The selected model's curve in each transform's coordinates, over the measured substrate range (a
    geometric grid, so that a double-reciprocal panel is evenly covered)."""
    s = s[np.isfinite(s) & (s > 0)]
    if s.size == 0:
        return {}
    grid = np.geomspace(float(s.min()), float(s.max()), 120) if s.max() > s.min() else np.array([float(s.min())])
    v = np.asarray(rate_of(grid), float)
    return {p: curve_in(p, grid, v, vmax) for p in plots}
