"""Which blank wells correct which well, with a fallback when the matched blanks have no usable read.

A blank with fewer than ``min_reads`` usable reads (default 1: none at all; a strongly absorbing substrate
level can saturate every read of its blanks) is skipped. Each well then takes the first of these that has a
usable blank:

1. ``match: substrate+inhibitor``: the blanks with the same substrate and the same inhibitor level;
2. the blanks with the same substrate (``substrate`` and ``substrate+inhibitor``), or the same group
   (``group``);
3. the blanks of the nearest substrate level (by the ratio of concentrations; among equally near ones, the
   lower), same inhibitor level first;
4. every usable blank on the plate (``none`` starts here).

A blank's background is then the same chemistry at a neighbouring level, which is close for most assays and
always better than losing every read; the stage warns, naming each blank skipped and each well that fell back.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd


@dataclass(frozen=True)
class BlankPlan:
    """``used[i]``: indices of the blank wells that correct well ``i`` (empty: none usable on the plate);
    ``level[i]``: which step of the cascade found them (``"matched"``, ``"same substrate"``, ``"nearest
    level"``, ``"plate"``, ``"none"``); ``skipped``: indices of blanks without usable reads."""

    used: list[np.ndarray]
    level: list[str]
    skipped: np.ndarray


def _column(wells: pd.DataFrame, name: str) -> np.ndarray | None:
    if name not in wells.columns:
        return None
    return pd.to_numeric(wells[name], errors="coerce").to_numpy(dtype=float)


def _same(a: np.ndarray, b: float) -> np.ndarray:
    return (a == b) | (np.isnan(a) & np.isnan(b))


def plan_blanks(wells: pd.DataFrame, is_blank: np.ndarray, n_usable: np.ndarray, match: str,
                min_reads: int = 1) -> BlankPlan:
    """The blanks each well uses (see the module text). ``n_usable``: usable reads per well."""
    good = is_blank & (n_usable >= min_reads)
    skipped = np.flatnonzero(is_blank & ~good)
    pool = np.flatnonzero(good)
    sub = _column(wells, "substrate")
    inh = _column(wells, "inhibitor")
    group = wells["group"].astype(str).to_numpy() if "group" in wells.columns else None
    n = len(wells)
    # wells with the same substrate, inhibitor and group share a plan: work once per distinct key
    key = pd.DataFrame({"s": sub if sub is not None else np.zeros(n), "i": inh if inh is not None else np.zeros(n),
                        "g": group if group is not None else np.zeros(n)}).astype(str)
    codes = pd.factorize(pd.MultiIndex.from_frame(key))[0]
    reps = pd.Series(np.arange(n)).groupby(codes).first()
    plans = {int(c): _plan_one(int(r), pool, sub, inh, group, match) for c, r in reps.items()}
    return BlankPlan([plans[c][0] for c in codes], [plans[c][1] for c in codes], skipped)


def _plan_one(i: int, pool: np.ndarray, sub: np.ndarray | None, inh: np.ndarray | None,
              group: np.ndarray | None, match: str) -> tuple[np.ndarray, str]:
    """The usable blanks (indices into the plate, a subset of ``pool``) for well ``i`` and the cascade step
    that found them."""
    steps: list[tuple[str, np.ndarray]] = []
    if match == "substrate+inhibitor" and sub is not None and inh is not None:
        steps.append(("matched", pool[_same(sub[pool], sub[i]) & _same(inh[pool], inh[i])]))
    if match in ("substrate", "substrate+inhibitor") and sub is not None:
        steps.append(("matched" if match == "substrate" else "same substrate", pool[_same(sub[pool], sub[i])]))
        if np.isfinite(sub[i]) and sub[i] > 0:
            levels = sub[pool]
            ok = np.isfinite(levels) & (levels > 0)
            if ok.any():
                dist = np.where(ok, np.abs(np.log(np.where(ok, levels, 1.0) / sub[i])), np.inf)
                if inh is not None and (same_i := _same(inh[pool], inh[i]) & ok).any():
                    dist = np.where(same_i, dist, np.inf)
                near = dist <= dist.min() * (1 + 1e-12)
                steps.append(("nearest level", pool[near & (levels == levels[near].min())]))
    if match == "group" and group is not None:
        steps.append(("matched", pool[group[pool] == group[i]]))
    steps.append(("plate" if match != "none" else "matched", pool))
    for name, cand in steps:
        if cand.size:
            return cand, name
    return pool[:0], "none"
