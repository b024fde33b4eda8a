"""Building the standard per-well rates table from traces and a rate result (shared by rate methods)."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from vzero.data import Table, Traces
from vzero.plugins.kinetics.flags import Flag, names_array
from vzero.plugins.kinetics.rate_result import RateResult

WELL_COLUMNS = ("well", "group", "role", "replicate", "substrate", "enzyme", "inhibitor", "blanks", "blank_match",
                "blank_share", "lot")
"""Layout columns a rates table carries when the layout has them (``lot``: the well's enzyme lot, optional;
``blanks``, ``blank_match`` and ``blank_share`` from the blank stage)."""


def blank_set_ids(plate: np.ndarray, blanks: np.ndarray) -> np.ndarray:
    """An integer per well: the same for wells of one plate corrected by the same blank wells (the blank
    stage's ``blanks`` text), -1 for wells without a blank (empty text or NaN). Wells of one set share their
    blank's read noise (used by ``model-choice`` step 9 and the fit's shared-error correction)."""
    text = np.asarray(blanks, dtype=str)
    key = np.char.add(np.char.add(np.asarray(plate, dtype=str), "\x00"), text)
    _, ids = np.unique(key, return_inverse=True)
    empty = (np.char.str_len(np.char.strip(text)) == 0) | (text == "nan")
    return np.where(empty, -1, ids)


def saturation_flags(traces: Traces) -> np.ndarray:
    """SATURATED where a well has any saturated read, ALL_MISSING where it has no usable read."""
    flags = np.where(traces.saturated.any(axis=1), int(Flag.SATURATED), 0).astype(np.int64)
    flags |= np.where(~traces.mask.any(axis=1), int(Flag.ALL_MISSING), 0)
    return flags


def rates_table(traces: Traces, result: RateResult, method: str, extra_flags: np.ndarray | None = None) -> Table:
    """One row per well: the plate, identity and layout columns with units, then the rate, its error and
    window. (The plate column is what the run's stacked rates table needs, so one plate's table is final as
    it stands.)"""
    w = traces.wells
    cols: dict[str, Any] = {"plate": np.full(len(w), traces.plate, dtype=object)}
    units: dict[str, str] = {}
    for c in WELL_COLUMNS:
        if c in w.columns:
            values = w[c].to_numpy()
            cols[c] = values.astype(float) if c in ("substrate", "enzyme", "inhibitor", "blank_share") \
                else values.astype(str)
            if c in ("substrate", "enzyme", "inhibitor"):
                u = traces.well_units.get(c, "")
                cols[f"{c}_unit"] = np.full(len(w), u, dtype=object)
                if u:
                    units[c] = u
    rate_unit = f"{traces.signal_unit}/s"
    flags = np.asarray(result.flags, dtype=np.int64) | saturation_flags(traces)
    if extra_flags is not None:
        flags |= extra_flags
    cols.update(
        rate=result.v0.astype(float),
        rate_stderr=result.stderr.astype(float),
        rate_unit=np.full(len(w), rate_unit, dtype=object),
        method=np.full(len(w), method, dtype=object),
        window_start_s=result.window_start_s.astype(float),
        window_end_s=result.window_end_s.astype(float),
        n_points=np.asarray(result.n_points, dtype=np.int64),
        lag_s=np.asarray(result.lag_s, dtype=float),
    )
    cols[result.goodness_name] = result.goodness.astype(float)
    for name, values in result.extra.items():
        cols[name] = np.asarray(values, dtype=float)
    # flags (and every count of flagged wells) are about sample wells; blanks, standards and empty wells get
    # their own status instead: the role, then what the rate method saw (e.g. "blank; saturated")
    names = names_array(flags)
    if "role" in w.columns:
        role = w["role"].astype(str).to_numpy()
        other = role != "sample"
        status = np.where(names != "", np.char.add(np.char.add(role.astype(str), "; "), names.astype(str)), role)
        cols["status"] = np.where(other, status, "").astype(object)
        names = np.where(other, "", names).astype(object)
    cols["flags"] = names
    frame = pd.DataFrame(cols)
    units.update(rate=rate_unit, rate_stderr=rate_unit, window_start_s="s", window_end_s="s", lag_s="s")
    return Table(frame, units, {"signal_unit": traces.signal_unit})
