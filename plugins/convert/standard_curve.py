"""Standard curve: signal against known concentration, for turning rates (signal/s) into conc/s.

An ordinary least-squares line with intercept through the standard wells, with standard errors from the
usual covariance ``s² (XᵀX)⁻¹``. Detectors leave their linear range at high signal, so the top standards
are tested for curvature first: while adding a quadratic term improves the fit significantly (extra sum of
squares F-test at level ``alpha``), the highest concentration level is dropped. The concentration range kept
is reported; the convert stage warns about sample wells whose reads go beyond the highest standard kept.

Results are for research use; defer to the lab's validated calibration procedure.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special  # t and F quantiles: what scipy.stats uses, without its import cost
from vzero.errors import FitError


@dataclass(frozen=True)
class StandardCurve:
    """A fitted line ``signal = slope · conc + intercept`` over the linear range.

    Attributes
    ----------
    slope, intercept : signal per concentration unit; signal at zero concentration.
    slope_se, intercept_se, cov : standard errors and their covariance.
    r2 : coefficient of determination of the kept points.
    residual_sd : s, the residual standard deviation (signal units); dof = n_points - 2.
    conc_range : (lowest, highest) standard concentration kept.
    used : bool per input point, True where the point was in the fit.
    dropped_levels : concentrations removed from the top for curvature, highest first.
    curvature_p : p-value of the quadratic-term test on the kept range (NaN if not testable).
    """

    slope: float
    intercept: float
    slope_se: float
    intercept_se: float
    cov: float
    r2: float
    residual_sd: float
    dof: int
    n_points: int
    conc_range: tuple[float, float]
    used: np.ndarray
    dropped_levels: tuple[float, ...]
    curvature_p: float

    def to_conc(
        self, rate: float | np.ndarray, rate_se: float | np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """Rate in signal/time -> concentration/time, with first-order error propagation.

        ``rate / slope``; SE² = (rate_se / slope)² + (rate · slope_se / slope²)². The slope error is shared
        by every well converted with this curve (a systematic error), so it does not average out.
        """
        r = np.asarray(rate, dtype=float)
        r_se = np.zeros_like(r) if rate_se is None else np.asarray(rate_se, dtype=float)
        conc = r / self.slope
        se = np.sqrt((r_se / self.slope) ** 2 + (r * self.slope_se / self.slope**2) ** 2)
        return conc, se

    def signal_to_conc(self, signal: float | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """A single new read -> concentration (inverse prediction) and its approximate SE.

        x = (y - b) / m; var = (s² + var_b + x² var_m + 2 x cov) / m² (delta method, s² for the read's noise).
        """
        y = np.asarray(signal, dtype=float)
        x = (y - self.intercept) / self.slope
        var = (self.residual_sd**2 + self.intercept_se**2 + x**2 * self.slope_se**2 + 2 * x * self.cov) / (
            self.slope**2
        )
        return x, np.sqrt(np.maximum(var, 0.0))


def standard_levels(traces: Any, column: str) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[str]]:
    """The standard wells of a plate as the curve sees them: (well names, concentration from the layout
    ``column``, level = mean of the well's usable reads in signal units, NaN without any) and the names of
    the standards without a usable read. Used by the convert stage and by the report, so both see the same
    points."""
    wells = traces.wells
    is_std = (wells["role"].astype(str) == "standard").to_numpy()
    y = traces.masked_signal()[is_std]
    finite = np.isfinite(y)
    count = finite.sum(axis=1)
    level = np.where(count > 0, np.where(finite, y, 0.0).sum(axis=1) / np.maximum(count, 1), np.nan)
    names = wells["well"].astype(str).to_numpy()[is_std]
    conc = wells[column].to_numpy(dtype=float)[is_std] if column in wells.columns else np.full(names.size, np.nan)
    return names, conc, level, [str(w) for w, c in zip(names, count, strict=True) if c == 0]


def _ols(x: np.ndarray, y: np.ndarray, degree: int) -> tuple[np.ndarray, np.ndarray, float]:
    """Polynomial least squares: coefficients (constant first), covariance, residual sum of squares."""
    X = np.vander(x, degree + 1, increasing=True)
    coef, *_ = np.linalg.lstsq(X, y, rcond=None)
    resid = y - X @ coef
    rss = float(resid @ resid)
    dof = x.size - degree - 1
    cov = np.linalg.pinv(X.T @ X) * (rss / dof if dof > 0 else np.nan)
    return coef, cov, rss


def _curvature_p(x: np.ndarray, y: np.ndarray, rss_lin: float) -> float:
    """p-value of the extra sum of squares F-test for adding x² to the line (NaN if too few points)."""
    if x.size < 4 or np.unique(x).size < 3:
        return float("nan")
    _, _, rss_quad = _ols(x, y, 2)
    scale = max(float(np.sum((y - y.mean()) ** 2)), np.finfo(float).tiny)
    if rss_quad <= 1e-14 * scale:
        return 0.0 if rss_lin > 1e-12 * scale else 1.0
    f = (rss_lin - rss_quad) / (rss_quad / (x.size - 3))
    return float(special.fdtrc(1, x.size - 3, f))


def fit_standard_curve(
    conc: np.ndarray,
    signal: np.ndarray,
    *,
    check_linearity: bool = True,
    alpha: float = 0.05,
    min_levels: int = 3,
) -> StandardCurve:
    """Fit the standard line, dropping top levels while the quadratic-term test shows curvature.

    ``conc`` and ``signal`` are per standard well (replicates allowed); NaN pairs are skipped. At least
    ``min_levels`` concentration levels are always kept. Raises :class:`FitError` when fewer than two
    levels or three points are usable, or when the slope is not different from zero.
    """
    c = np.asarray(conc, dtype=float).ravel()
    s = np.asarray(signal, dtype=float).ravel()
    if c.shape != s.shape:
        raise FitError(f"standard curve: {c.size} concentrations but {s.size} signals")
    ok = np.isfinite(c) & np.isfinite(s)
    levels = np.unique(c[ok])
    if levels.size < 2 or ok.sum() < 3:
        raise FitError(
            f"standard curve: {int(ok.sum())} usable points at {levels.size} concentrations",
            hint="A line with errors needs at least 3 standard wells at 2 or more concentrations.",
        )
    dropped: list[float] = []
    top = levels.size
    while True:
        used = ok & (c <= levels[top - 1])
        x, y = c[used], s[used]
        coef, cov, rss = _ols(x, y, 1)
        p = _curvature_p(x, y, rss)
        if not check_linearity or top <= max(min_levels, 2) or not p < alpha:
            break
        dropped.append(float(levels[top - 1]))
        top -= 1
    intercept, slope = float(coef[0]), float(coef[1])
    dof = x.size - 2
    slope_se, intercept_se = float(np.sqrt(cov[1, 1])), float(np.sqrt(cov[0, 0]))
    if not slope != 0 or (np.isfinite(slope_se) and abs(slope) <= slope_se):
        raise FitError(
            f"standard curve: slope {slope:.4g} is not distinguishable from zero (SE {slope_se:.3g})",
            hint="Check the standard concentrations and that the standard wells were read.",
        )
    tss = float(np.sum((y - y.mean()) ** 2))
    return StandardCurve(
        slope=slope,
        intercept=intercept,
        slope_se=slope_se,
        intercept_se=intercept_se,
        cov=float(cov[0, 1]),
        r2=1.0 - rss / tss if tss > 0 else float("nan"),
        residual_sd=float(np.sqrt(rss / dof)) if dof > 0 else float("nan"),
        dof=dof,
        n_points=int(x.size),
        conc_range=(float(x.min()), float(x.max())),
        used=used,
        dropped_levels=tuple(dropped),
        curvature_p=p,
    )


@dataclass(frozen=True)
class PlateCalibration:
    """A plate's own standard curve with what went into it: ``points`` (well, concentration, signal, used)
    and ``summary`` (slope, intercept, R², range kept, each dropped level with the reason) as data frames,
    and the concentration unit of the standards."""

    curve: StandardCurve
    conc_unit: str
    points: object
    summary: object


def plate_standard_curve(traces: object, column: str, unit: str | None, check_linearity: bool) -> PlateCalibration:
    """Fit the standard curve of the plate's ``standard`` wells (each well's mean usable read against its
    concentration in the layout column ``column``). Raises :class:`~vzero.errors.StageError` naming what is
    missing (no standards, no column, no unit)."""
    import pandas as pd
    from vzero.errors import StageError

    wells = traces.wells  # type: ignore[attr-defined]
    is_std = (wells["role"].astype(str) == "standard").to_numpy()
    if not is_std.any() or column not in wells.columns:
        raise StageError(f"a standard curve needs wells with role 'standard' and a layout column {column!r}",
                         hint="Add standards to the layout, or give signal_per_conc instead.")
    conc_unit = traces.well_units.get(column) or unit  # type: ignore[attr-defined]
    if not conc_unit:
        raise StageError(f"the layout column {column!r} has no unit; write it like \"{column} (uM)\" or set unit")
    y = traces.masked_signal()[is_std]  # type: ignore[attr-defined]
    with np.errstate(invalid="ignore"):
        level = np.array([np.nanmean(r) if np.isfinite(r).any() else np.nan for r in y])
    conc = wells[column].to_numpy(dtype=float)[is_std]
    keep = np.isfinite(level) & np.isfinite(conc)
    curve = fit_standard_curve(conc[keep], level[keep], check_linearity=check_linearity)
    lo, hi = curve.conc_range
    points = pd.DataFrame({"well": wells["well"].to_numpy()[is_std][keep], "concentration": conc[keep],
                           "signal": level[keep], "used": np.asarray(curve.used, dtype=bool)})
    names = ["slope", "intercept", "r_squared", "range_low", "range_high"]
    values = [curve.slope, curve.intercept, curve.r2, lo, hi]
    errors = [curve.slope_se, curve.intercept_se, np.nan, np.nan, np.nan]
    notes = ["", "", "", "lowest standard kept", "highest standard kept"]
    for d in curve.dropped_levels:
        names.append("dropped_level")
        values.append(d)
        errors.append(np.nan)
        notes.append("dropped: the line bends above it (quadratic term significant)")
    no_read = ~np.isfinite(level)
    for w, c in zip(wells["well"].to_numpy()[is_std][no_read], conc[no_read], strict=True):
        names.append("dropped_well")
        values.append(c)
        errors.append(np.nan)
        notes.append(f"{w}: no usable read")
    summary = pd.DataFrame({"quantity": names, "value": values, "stderr": errors, "note": notes})
    return PlateCalibration(curve, str(conc_unit), points, summary)
