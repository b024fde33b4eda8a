"""Selwyn's test of enzyme stability (Selwyn 1965, Biochim. Biophys. Acta 105:193).

If the enzyme keeps its activity during the assay and the rate is proportional to its concentration, the
product formed depends on enzyme and time only through their product E·t: curves run at different enzyme
concentrations, plotted against E·t, superimpose. Where a group holds the same reaction (same substrate and
inhibitor level, and with enzyme lots modelled the same lot: lots differ in specific activity, so their
curves need not superimpose however stable the enzyme) at two or more enzyme concentrations, each such set
is tested:

* shared model: one cubic through the origin in E·t, a·(Et) + b·(Et)² + c·(Et)³, plus an offset per well;
* separate model: one such cubic per enzyme level (offsets per well as before);

over the range of E·t that every level covers. The extra-sum-of-squares F-test compares them. A set fails
when the F-test rejects superposition at level ``alpha`` *and* the curves differ by more than
:data:`PRACTICAL` of the product range (with many reads the F-test alone flags differences too small to
matter; the 5 % margin is our convention). A failure is a warning and the flag ``enzyme_unstable`` on the
group. The cubic is a smooth stand-in for the unknown curve shape, not a rate law.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import special

PRACTICAL = 0.05
"""Largest difference between the per-level curves and the shared curve, as a fraction of the product range,
that still counts as superposition."""


@dataclass
class SelwynResult:
    rows: list[dict[str, Any]] = field(default_factory=list)
    points: list[dict[str, Any]] = field(default_factory=list)
    failed: bool = False
    summary: str = ""


def _design(x: np.ndarray, well: np.ndarray, level: np.ndarray | None, n_levels: int, n_wells: int) -> np.ndarray:
    powers = np.stack([x, x**2, x**3], axis=1)
    offsets = np.eye(n_wells)[well]
    if level is None:
        return np.hstack([powers, offsets])
    blocks = np.zeros((len(x), 3 * n_levels))
    for j in range(n_levels):
        blocks[level == j, 3 * j:3 * j + 3] = powers[level == j]
    return np.hstack([blocks, offsets])


def test(group: Any, alpha: float = 0.05) -> SelwynResult:
    """Selwyn's test on every (substrate, inhibitor, lot) set of ``group`` (a :class:`.fit.CurveGroup`) that
    has two or more enzyme levels (the lot only where the group models lots)."""
    out = SelwynResult()
    w = group.wells
    e = w.enzyme
    lots = group.lot is not None and len(group.lots) > 1
    lot = np.asarray(group.lot, float) if lots else np.zeros(e.size)
    keys = np.stack([w.s0, w.inhibitor, lot], axis=1)
    fails = []
    for key in np.unique(keys, axis=0):
        members = np.flatnonzero(np.all(keys == key, axis=1) & np.isfinite(e) & (e > 0))
        levels = np.unique(e[members])
        if levels.size < 2:
            continue
        xs, ys, wi, li = [], [], [], []
        reach = min(float(np.max(e[m] * w.time[m][group.used[m]], initial=0.0)) for m in members)
        for k, m in enumerate(members):
            u = group.used[m] & np.isfinite(group.y[m])
            x = e[m] * w.time[m]
            u &= x <= reach
            xs.append(x[u])
            ys.append(group.y[m][u])
            wi.append(np.full(int(u.sum()), k))
            li.append(np.full(int(u.sum()), int(np.searchsorted(levels, e[m]))))
        x, y, well, level = (np.concatenate(a) for a in (xs, ys, wi, li))
        scale = reach if reach > 0 else 1.0
        xn = x / scale
        a_shared = _design(xn, well, None, levels.size, len(members))
        a_sep = _design(xn, well, level, levels.size, len(members))
        if len(y) <= a_sep.shape[1] + 2:
            continue
        c_sh, *_ = np.linalg.lstsq(a_shared, y, rcond=None)
        c_sp, *_ = np.linalg.lstsq(a_sep, y, rcond=None)
        rss_sh = float(np.sum((y - a_shared @ c_sh) ** 2))
        rss_sp = float(np.sum((y - a_sep @ c_sp) ** 2))
        df1 = a_sep.shape[1] - a_shared.shape[1]
        df2 = len(y) - a_sep.shape[1]
        f = max(rss_sh - rss_sp, 0.0) / df1 / (rss_sp / df2) if rss_sp > 0 else np.inf
        p = float(special.fdtrc(df1, df2, f)) if np.isfinite(f) else 0.0
        grid = np.linspace(0, 1, 50)
        shared = c_sh[0] * grid + c_sh[1] * grid**2 + c_sh[2] * grid**3
        span = float(np.ptp(shared)) or 1.0
        dev = max(float(np.max(np.abs(c_sp[3 * j] * grid + c_sp[3 * j + 1] * grid**2 + c_sp[3 * j + 2] * grid**3
                                      - shared))) for j in range(levels.size)) / span
        failed = bool(p < alpha and dev > PRACTICAL)
        lot_text = f", lot {group.lots[int(key[2])]}" if lots else ""
        if failed:
            fails.append(f"S0 {key[0]:g}, I {key[1]:g}{lot_text}: p = {p:.2g}, curves differ by {100 * dev:.1f} %")
        out.rows.append({"group": group.name, "substrate": float(key[0]), "inhibitor": float(key[1]),
                         **({"lot": group.lots[int(key[2])]} if lots else {}),
                         "enzyme_levels": ", ".join(f"{v:g}" for v in levels), "n_wells": len(members),
                         "F": f, "p": p, "max_difference": dev, "superimpose": not failed,
                         "verdict": "fails: enzyme may be unstable" if failed else "passes"})
        offsets = c_sh[3:]
        for k, m in enumerate(members):
            u = group.used[m] & np.isfinite(group.y[m])
            out.points += [{"group": group.name, "substrate": float(key[0]), "inhibitor": float(key[1]),
                            "enzyme": float(e[m]), "plate": group.ids[m][0], "well": group.ids[m][1],
                            "enzyme_time": float(a), "product": float(b - offsets[k])}
                           for a, b in zip(e[m] * w.time[m][u], group.y[m][u], strict=True)]
    out.failed = bool(fails)
    out.summary = "; ".join(fails)
    return out
