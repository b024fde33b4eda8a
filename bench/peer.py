"""The peer: the script a lab would write for the same job, kept simple on purpose.

pandas reads the reader's export and the layout; blanks are subtracted with the mean of the blank wells; a
Python loop over wells takes each initial rate (scipy.stats.linregress over a growing window, keeping the
longest window whose straight line still fits with r² >= 0.995, a common lab rule of thumb; or
scipy.optimize.curve_fit of the integrated Michaelis–Menten equation per well); rates are converted with
Beer–Lambert and scipy.optimize.curve_fit fits Michaelis–Menten per group; the tables go to CSV. No audit
file, no quality flags, no uncertainty beyond curve_fit's covariance. Used only by the benchmarks.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import optimize, special, stats


def _read(data: Path, layout: Path) -> tuple[np.ndarray, pd.DataFrame, pd.DataFrame]:
    df = pd.read_csv(data)
    lay = pd.read_csv(layout)
    t = df["time (s)"].to_numpy(dtype=float)
    return t, df.drop(columns="time (s)"), lay


def _blank(reads: pd.DataFrame, lay: pd.DataFrame) -> pd.DataFrame:
    blanks = lay.loc[lay["role"] == "blank", "well"]
    return reads.sub(reads[list(blanks)].mean(axis=1), axis=0)


def _window_rate(t: np.ndarray, y: np.ndarray, min_points: int = 6, t_crit: float = 3.0) -> float:
    """Slope of the longest window from the first read before the curve bends: the window grows one read at
    a time until the quadratic term of numpy.polyfit is significant (|c| > t_crit standard errors).

    (An r² threshold such as 0.995, another common rule, stops at once on low-signal wells and so does much
    less work than the job asks; the curvature test is what the automatic method does.)"""
    end = min_points
    while end < t.size:
        c, cov = np.polyfit(t[: end + 1], y[: end + 1], 2, cov=True)
        if abs(c[0]) > t_crit * np.sqrt(cov[0, 0]):
            break
        end += 1
    return float(stats.linregress(t[:end], y[:end]).slope)


def _progress_rate(t: np.ndarray, y: np.ndarray, s0: float, per_um: float) -> float:
    """v0 from curve_fit of the integrated Michaelis–Menten equation (Lambert W form) on one well."""

    def model(tt: np.ndarray, base: float, km: float, vmax: float) -> np.ndarray:
        s = km * special.lambertw(s0 / km * np.exp((s0 - vmax * tt) / km)).real
        return base + per_um * (s0 - s)

    v_guess = max((y[4] - y[0]) / (t[4] - t[0]) / per_um, 1e-9)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            p, _ = optimize.curve_fit(model, t, y, p0=[y[0], s0, 2 * v_guess],
                                      bounds=([-np.inf, 1e-3 * s0, 1e-12], [np.inf, 1e3 * s0, 1e3]))
    except (RuntimeError, ValueError):
        return float("nan")
    return float(per_um * p[2] * s0 / (p[1] + s0))


def run_peer(data: Path, layout: Path, out: Path, *, method: str = "window", epsilon: float = 6220.0,
             pathlength: float = 0.55) -> pd.DataFrame:
    """The whole peer script on one plate; writes ``out``/rates.csv and fits.csv and returns the fits.

    ``epsilon`` in M^-1 cm^-1, ``pathlength`` in cm; rates come out in µM/min.
    """
    t, reads, lay = _read(data, layout)
    reads = _blank(reads, lay)
    per_um = epsilon * pathlength * 1e-6  # AU per µM
    rows = []
    for _, well in lay.iterrows():
        if well["role"] != "sample":
            continue
        y = reads[well["well"]].to_numpy(dtype=float)
        if method == "window":
            slope = _window_rate(t, y)
        else:
            slope = _progress_rate(t, y, float(well["substrate (uM)"]), per_um)
        rows.append({"well": well["well"], "group": well["group"], "substrate": well["substrate (uM)"],
                     "rate": slope / per_um * 60.0})
    rates = pd.DataFrame(rows)
    fits = []
    for group, sel in rates.groupby("group"):
        s, v = sel["substrate"].to_numpy(float), sel["rate"].to_numpy(float)
        ok = np.isfinite(v)
        try:
            p, cov = optimize.curve_fit(lambda x, vmax, km: vmax * x / (km + x), s[ok], v[ok],
                                        p0=[v[ok].max(), np.median(s[ok])], maxfev=5000)
            err = np.sqrt(np.diag(cov))
        except RuntimeError:
            p, err = [np.nan, np.nan], [np.nan, np.nan]
        fits.append({"group": group, "vmax": p[0], "vmax_se": err[0], "km": p[1], "km_se": err[1]})
    out.mkdir(parents=True, exist_ok=True)
    rates.to_csv(out / "rates.csv", index=False)
    result = pd.DataFrame(fits)
    result.to_csv(out / "fits.csv", index=False)
    return result
