"""Built-in blank stage: subtract the mean of the matching blank wells at each time point."""

from __future__ import annotations

from typing import Any

from vzero import hookimpl
from vzero.params import Param
from vzero.plugins.kinetics.methods import BlankMethod
from vzero.stage import StageInput, StageOutput

#: The ``match`` settings (:func:`vzero.plugins.blank.matching.plan_blanks`).
MATCH_CHOICES = ("none", "group", "substrate", "substrate+inhibitor")


class MeanBlank(BlankMethod):
    """Subtract, at each read, the mean of the blank wells (role ``blank``) that match a well.

    ``match: none`` uses all blank wells; ``group`` the blanks of the same group; ``substrate`` those with
    the same substrate concentration (a substrate-only blank per level, which also removes non-enzymatic
    substrate turnover); ``substrate+inhibitor`` those with the same substrate and inhibitor levels. A blank
    with fewer than ``min_reads`` usable reads (every read saturated, say) is skipped with a warning naming
    it, and its wells fall back to the next matching blanks: same substrate, then the nearest substrate
    level, then every usable blank on the plate (:mod:`vzero.plugins.blank.matching`), with a warning. The
    well columns ``blanks`` (the blank wells used, joined by ``;``) and ``blank_match`` (``matched``, ``same
    substrate``, ``nearest level``, ``plate``) go on to the rates table, with ``blank_share`` (the share of
    each corrected trace's read-noise variance that its blank brings, :func:`blank_share`). Blank wells are
    corrected too (they end near zero), which keeps them useful for noise checks.
    """

    method = "mean"
    version = "1.2"  # 1.2: the blank_share column
    summary = "subtract the per-read mean of matching blank wells (fallback when a blank has no usable read)"
    params = {
        "match": Param.choice(MATCH_CHOICES, "none", "which blank wells apply to a well"),
        "role": Param("str", "blank", "layout role that marks blank wells"),
        "min_reads": Param("int", 1, "usable reads a blank needs; blanks with fewer are skipped", low=1),
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
        from vzero.plugins.blank.matching import plan_blanks

        roles = traces.wells["role"].astype(str).to_numpy()
        is_blank = roles == self.settings["role"]
        if not is_blank.any():
            warn("no blank wells in the layout: signal left uncorrected")
            return None
        y = traces.masked_signal()
        names = np.asarray(traces.well_names, dtype=object)
        match = self.settings["match"]
        need = int(self.settings.get("min_reads", 1))
        plan = plan_blanks(traces.wells, is_blank, np.isfinite(y).sum(axis=1), match, need)
        if plan.skipped.size:
            warn(f"blank well(s) {_listed(names[plan.skipped])} have fewer than {need} "
                 "usable read(s) (saturated or missing): skipped; their wells use the next matching blanks")
        correction = np.full_like(y, np.nan)
        with np.errstate(invalid="ignore"):
            keys: dict[tuple[int, ...], list[int]] = {}
            for i, u in enumerate(plan.used):
                keys.setdefault(tuple(u.tolist()), []).append(i)
            for key, members in keys.items():
                correction[members] = _nanmean_rows(y[list(key)]) if key else np.nan
        level = np.asarray(plan.level, dtype=object)
        for how in ("same substrate", "nearest level", "plate", "none"):
            hit = (level == how) & ~is_blank
            if hit.any() and not (how == "plate" and match == "none"):
                what = "no usable blank on the plate: left without a rate" if how == "none" else \
                    f"used the blanks of the {how}" if how != "plate" else "used the mean of all usable blanks"
                warn(f"no usable blank with the same {match} for {hit.sum()} well(s) "
                     f"({_listed(names[hit])}); {what}")
        # A read where the blank itself is missing cannot be corrected: it becomes missing (the base class
        # masks every read that is not finite).
        columns = {"blanks": [";".join(names[u]) for u in plan.used], "blank_match": list(level),
                   "blank_share": list(blank_share(y, correction, traces.time))}
        return traces.signal - correction, columns


def blank_share(y: Any, correction: Any, time: Any) -> Any:
    """Per well, the share of the corrected trace's read-noise variance that its blank brings:
    ``s_c² / (s_w² + s_c²)``, with ``s_w`` the well's own read noise and ``s_c`` that of the correction (the
    mean of its blank wells), each from second differences of the reads
    (:func:`vzero.plugins.kinetics.readnoise.read_noise`, robust, blind to straight lines). Dimensionless, 0-1;
    NaN where either noise cannot be estimated (no blank, fewer than 5 reads).

    Wells corrected by the same blank wells share that part of their rates' error: the fit stage widens its
    uncertainties for it (:mod:`vzero.plugins.fit.shared`)."""
    import numpy as np
    from vzero.plugins.kinetics.readnoise import read_noise

    own = read_noise(y, time)
    shared = read_noise(correction, time)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = shared**2 / (own**2 + shared**2)
    return np.where(np.isfinite(out), out, np.nan)


def _listed(names: Any, most: int = 8) -> str:
    """``'A1, A2, ...'``: at most ``most`` names."""
    names = list(names)
    return ", ".join(names[:most]) + (", ..." if len(names) > most else "")


def _nanmean_rows(block: Any) -> Any:
    import numpy as np

    count = np.isfinite(block).sum(axis=0)
    total = np.nansum(block, axis=0)
    return np.where(count > 0, total / np.maximum(count, 1), np.nan)


@hookimpl
def vzero_register(registry: Any) -> None:
    registry.add(MeanBlank)
