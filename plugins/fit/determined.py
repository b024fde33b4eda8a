"""Parameters the data cannot determine, and intervals of positive quantities, in the fits table.

A fit can return a number for a parameter the data do not constrain (a substrate-inhibition constant far
beyond the highest substrate level comes back as 1e107 with no standard error). Printing that number invites
someone to use it, so such a row is exported as "not determined" with the reason, and no estimate.

A Wald interval (estimate ± t·SE) of a quantity that cannot be negative (Km, Ki, kcat, kcat/Km, ...) can
reach below zero when the SE is large; such an interval is replaced by the same-level interval on the log
scale, exp(log(estimate) ± t·SE/estimate) (the delta method applied to log(estimate)), which stays positive.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

NOT_DETERMINED = "not determined"
RELATIVE_SE_LIMIT = 1e3
"""A standard error above this many times the estimate leaves the parameter undetermined (our choice)."""
POSITIVE_DERIVED = ("kcat", "kcat/Km")


def settle(frame: pd.DataFrame, models: Mapping[str, Any]) -> pd.DataFrame:
    """The fits table with undetermined parameters marked and positive quantities' intervals kept above
    zero. ``models`` maps model names to models (their ``bounds`` say which parameters cannot be negative)."""
    if frame.empty or not {"estimate", "stderr", "parameter", "model"} <= set(frame.columns):
        return frame
    out = frame.copy()
    est = out["estimate"].to_numpy(dtype=float)
    se = out["stderr"].to_numpy(dtype=float)
    fixed = out["fixed"].to_numpy(dtype=bool) if "fixed" in out.columns else np.zeros(len(out), bool)
    dof = out["dof"].to_numpy(dtype=float) if "dof" in out.columns else np.ones(len(out))
    notes = out["note"].fillna("").astype(str).to_numpy(dtype=object) if "note" in out.columns else \
        np.full(len(out), "", dtype=object)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.abs(se / est)
    for i in range(len(out)):
        if fixed[i] or str(notes[i]).startswith(NOT_DETERMINED):
            continue
        why = ""
        if not np.isfinite(est[i]):
            why = "the fit gave no value"
        elif not np.isfinite(se[i]) and dof[i] > 0:
            why = f"no standard error (the data do not constrain it; the fit ran to {est[i]:.3g})"
        elif np.isfinite(rel[i]) and rel[i] > RELATIVE_SE_LIMIT:
            why = f"its standard error is {rel[i]:.2g} times the estimate ({est[i]:.3g})"
        if why:
            notes[i] = f"{NOT_DETERMINED}: {why}" + (f"; {notes[i]}" if notes[i] else "")
            out.iloc[i, out.columns.get_loc("estimate")] = np.nan
            for c in ("stderr", "ci_low", "ci_high"):
                if c in out.columns:
                    out.iloc[i, out.columns.get_loc(c)] = np.nan
    if "note" in out.columns or any(notes):
        out["note"] = notes
    if {"ci_low", "ci_high"} <= set(out.columns):
        _log_scale(out, models)
    return out


def _positive(model: Any, name: str) -> bool:
    low = (getattr(model, "bounds", {}) or {}).get(name, (-np.inf, np.inf))[0]
    return name in POSITIVE_DERIVED or (np.isfinite(low) and low >= 0)


def _log_scale(out: pd.DataFrame, models: Mapping[str, Any]) -> None:
    """Replace Wald intervals of positive quantities that reach below zero by log-scale intervals."""
    for i in range(len(out)):
        est, se = float(out["estimate"].iat[i]), float(out["stderr"].iat[i])
        lo, hi = float(out["ci_low"].iat[i]), float(out["ci_high"].iat[i])
        if not (np.isfinite(est) and est > 0 and np.isfinite(se) and se > 0 and np.isfinite(lo) and lo < 0):
            continue
        if not _positive(models.get(str(out["model"].iat[i])), str(out["parameter"].iat[i])):
            continue
        t = (hi - est) / se  # the interval's own quantile (t or z)
        spread = np.exp(t * se / est)
        out.iloc[i, out.columns.get_loc("ci_low")] = est / spread
        out.iloc[i, out.columns.get_loc("ci_high")] = est * spread
        if "ci_method" in out.columns:
            out.iloc[i, out.columns.get_loc("ci_method")] = f"{out['ci_method'].iat[i]} (log scale)".strip()
