"""Built-in blank stage: subtract the mean of the blank wells at each time point."""

from __future__ import annotations

from typing import Any

from vzero import hookimpl
from vzero.params import Param
from vzero.plugins.kinetics.methods import BlankMethod
from vzero.stage import StageInput, StageOutput


class MeanBlank(BlankMethod):
    """Subtract, at each read, the mean of the blank wells (role ``blank``) from every well.

    ``match: none`` uses all blank wells; ``group`` uses the blanks of the same group; ``substrate`` those
    with the same substrate concentration (a substrate-only blank per level, which also removes
    non-enzymatic substrate turnover). A well with no matching blank falls back to all blanks, with a
    warning. Blank wells are corrected too (they end near zero), which keeps them useful for noise checks.
    """

    method = "mean"
    version = "1.0"
    summary = "subtract the per-read mean of matching blank wells"
    params = {
        "match": Param.choice(("none", "group", "substrate"), "none", "which blank wells apply to a well"),
        "role": Param("str", "blank", "layout role that marks blank wells"),
    }

    def preflight(self, data: StageInput) -> StageOutput | None:
        """Say before the run, as the run will, when the layout has no blank wells."""
        wells = data.artifacts.get("layout")
        if wells is not None and not (wells["role"].astype(str) == self.settings["role"]).any():
            data.warn(f"no wells with role {self.settings['role']!r} in the layout: the signal will be left "
                      "uncorrected")
        return None

    def correct(self, traces: Any, warn: Any) -> Any:
        import numpy as np

        roles = traces.wells["role"].astype(str).to_numpy()
        is_blank = roles == self.settings["role"]
        if not is_blank.any():
            warn("no blank wells in the layout: signal left uncorrected")
            return None
        y = traces.masked_signal()
        match = self.settings["match"]
        if match == "none":
            keys = np.zeros(len(roles), dtype=np.int64)
        else:
            column = traces.wells[match].to_numpy()
            _, keys = np.unique(column.astype(str), return_inverse=True)
        correction = np.full_like(y, np.nan)
        with np.errstate(invalid="ignore"):
            overall = _nanmean_rows(y[is_blank])
            for key in np.unique(keys):
                members = keys == key
                blanks = members & is_blank
                correction[members] = _nanmean_rows(y[blanks]) if blanks.any() else overall
            missing = [w for w, k in zip(traces.well_names, keys, strict=True) if not (is_blank & (keys == k)).any()]
        if missing and match != "none":
            warn(f"no blank with the same {match} for {len(missing)} well(s) ({', '.join(missing[:8])}"
                      f"{', ...' if len(missing) > 8 else ''}); used the mean of all blanks")
        # A read where the blank itself is missing cannot be corrected: it becomes missing (the base class
        # masks every read that is not finite).
        return traces.signal - correction


def _nanmean_rows(block: Any) -> Any:
    import numpy as np

    count = np.isfinite(block).sum(axis=0)
    total = np.nansum(block, axis=0)
    return np.where(count > 0, total / np.maximum(count, 1), np.nan)


@hookimpl
def vzero_register(registry: Any) -> None:
    registry.add(MeanBlank)
