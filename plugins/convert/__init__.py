"""Built-in convert stage methods: rates in signal per time to concentration per time, and to turnover (1/s).

* ``beer-lambert``: absorbance; pathlength given, computed from fill volume and well geometry, or measured
  per well from water-peak reads.
* ``standard-curve``: fluorescence or luminescence; a calibration line fitted from the standard wells on the
  same plate, with its linear range checked.
"""

from __future__ import annotations

from typing import Any

from vzero import hookimpl
from vzero.errors import InputFileError, StageError
from vzero.params import Param
from vzero.plugins.kinetics.methods import Conversion, ConvertMethod
from vzero.stage import StageInput, StageOutput

OUTPUT_UNIT = Param("unit", "uM/min", "unit of the converted rates (e.g. uM/min, nM/s)", like="M/s")


class BeerLambert(ConvertMethod):
    """Absorbance rate to concentration rate by the Beer–Lambert law: rate = (dA/dt) / (ε · l).

    The pathlength ``l`` comes from exactly one of: ``pathlength`` (given); ``fill_volume`` and
    ``plate_type`` (liquid height in a well of that geometry, flat meniscus assumed); ``water_peak: true``
    (per well, from the plate's ``water_peak_reads`` file of A977 and A900 reads: (A977 − A900) / ``water_k``, with
    0.18 per cm as the usual factor, common practice). ``direction: decrease`` when a consumed species absorbs
    (for example NADH at 340 nm), so that rates are positive. Given a per-well enzyme concentration, the
    turnover rate (rate / [E], 1/s) is added.
    """

    method = "beer-lambert"
    #: 1.2: the pathlength from a fill volume in a form free of cancellation (changes only the last digits)
    version = "1.2"
    summary = "absorbance/s to concentration/time via ε and pathlength; turnover from [E]"
    params = {
        "epsilon": Param.quantity("M^-1 cm^-1", doc='molar absorption coefficient, e.g. "6220 M^-1 cm^-1"'),
        "pathlength": Param.quantity("cm", None, 'optical pathlength, e.g. "0.55 cm"', nullable=True),
        "fill_volume": Param.quantity("uL", None, 'liquid volume per well, e.g. "200 uL" (with plate_type)',
                                      nullable=True),
        "plate_type": Param.choice(("96-flat", "96-half-area", "384-flat", "1536-flat"), None,
                                   "well geometry for fill_volume (see plugins/convert/pathlength.py)", nullable=True),
        "water_peak": Param("bool", False, "measure the pathlength per well from the plate's water_peak_reads file"),
        "water_k": Param.quantity("1/cm", "0.18 1/cm", "A977 − A900 of 1 cm of water (common practice)"),
        "direction": Param.choice(("increase", "decrease"), "increase",
                                  "whether the absorbance rises (product absorbs) or falls (substrate absorbs)"),
        "output_unit": OUTPUT_UNIT,
    }

    @classmethod
    def check_settings(cls, settings: dict[str, Any]) -> list[tuple[str, str]]:
        """Cross-parameter rule: exactly one pathlength source."""
        sources = [settings.get("pathlength") is not None,
                   settings.get("fill_volume") is not None or settings.get("plate_type") is not None,
                   bool(settings.get("water_peak"))]
        if sum(sources) != 1:
            return [("pathlength", "give exactly one pathlength source: pathlength, fill_volume with plate_type, "
                     "or water_peak: true")]
        if (settings.get("fill_volume") is None) != (settings.get("plate_type") is None):
            return [("fill_volume", "fill_volume and plate_type go together")]
        return []

    def preflight(self, data: StageInput) -> StageOutput | None:
        """With ``water_peak`` on, the plate must name its water_peak_reads file."""
        if self.settings["water_peak"] and data.inputs.get("water_peak_reads") is None:
            raise InputFileError("water_peak is on but the plate names no water_peak_reads file",
                                 hint="Add water_peak_reads: FILE (columns well, a977, a900) to the plate.")
        return None

    def conversion(self, table: Any, data: StageInput) -> Conversion:
        import numpy as np
        from vzero import units

        s = self.settings
        frame = table.frame
        signal_unit = str(table.meta.get("signal_unit", "AU"))
        ureg = units.registry()
        if ureg.Quantity(1, signal_unit).dimensionality != ureg.Quantity(1, "").dimensionality:
            raise StageError(f"Beer–Lambert needs absorbance reads, but the signal unit is {signal_unit!r}")
        path_cm, record = self._pathlength(data, frame)
        per = ureg.Quantity(1.0, f"{signal_unit}/s") / (s["epsilon"] * ureg.Quantity(1.0, "cm"))
        k = float(per.m_as(s["output_unit"])) * (-1.0 if s["direction"] == "decrease" else 1.0) / path_cm
        return Conversion(k, s["output_unit"], columns={"pathlength_cm": np.broadcast_to(path_cm, len(frame))},
                          units={"pathlength_cm": "cm"}, record=record)

    def _pathlength(self, data: StageInput, frame: Any) -> tuple[Any, dict[str, Any]]:
        import numpy as np
        import pandas as pd
        from vzero.plugins.convert import pathlength as pl

        s = self.settings
        if s["pathlength"] is not None:
            return float(s["pathlength"].m_as("cm")), {}
        if s["fill_volume"] is not None:
            cm = float(pl.pathlength_from_volume(s["fill_volume"].m_as("uL"), s["plate_type"]))
            data.warn(f"pathlength {cm:.3f} cm computed from {s['fill_volume']:~P} in a {s['plate_type']} well "
                      "(flat meniscus assumed)")
            return cm, {}
        raw = data.inputs.get("water_peak_reads")
        if raw is None:
            raise InputFileError("water_peak is on but the plate names no water_peak_reads file",
                                 hint="Add water_peak_reads: FILE (columns well, a977, a900) to the plate.")
        import io

        from vzero.plugins.kinetics.wells import normalise_well

        try:
            reads = pd.read_csv(io.BytesIO(raw.data))
            reads["well"] = [normalise_well(str(w)) for w in reads["well"]]
            twice = reads["well"][reads["well"].duplicated()].tolist()
            if twice:
                raise InputFileError(f"well {twice[0]} has two rows of water-peak reads", path=raw.name,
                                     well=twice[0], hint="Keep one row per well.")
            reads = reads.set_index("well")
            peak, ref = reads["a977"].astype(float), reads["a900"].astype(float)
        except (KeyError, ValueError, pd.errors.ParserError) as exc:
            raise InputFileError(f"cannot read water-peak reads: {exc}", path=raw.name,
                                 hint="Give a CSV with columns well, a977, a900.") from None
        cm = pl.pathlength_from_water_peak(peak, ref, float(s["water_k"].m_as("1/cm")))
        per_well = pd.Series(cm, index=reads.index).reindex(frame["well"]).to_numpy(dtype=float)
        bad = frame["well"][~np.isfinite(per_well)].tolist()
        if bad:
            data.warn(f"no usable water-peak pathlength for {len(bad)} well(s) ({', '.join(bad[:8])}); "
                      "their rates are not converted")
        return per_well, {"pathlength_cm": per_well}


class StandardCurveConvert(ConvertMethod):
    """Fluorescence or luminescence rate to concentration rate through a standard curve on the same plate.

    Standard wells (layout role ``standard``) hold known concentrations of the product in the layout column
    named by ``column`` (unit from its header or ``unit``). Each standard's signal is the mean of its usable
    reads; the line signal = slope · conc + intercept is fitted by least squares, top standards are dropped
    while a quadratic term is significant (the linear range), and rates are divided by the slope, with the
    slope's uncertainty propagated into each rate's standard error. The calibration is stored in the audit
    file and reported in the run's warnings.
    """

    method = "standard-curve"
    version = "1.0"
    summary = "signal/s to concentration/time through a same-plate standard curve (linear range checked)"
    params = {
        "column": Param("str", "product", "layout column with the standards' concentrations"),
        "unit": Param("unit", None, "unit of that column, if its header has none", like="M", nullable=True),
        "output_unit": OUTPUT_UNIT,
        "check_linearity": Param("bool", True, "drop top standards while the line bends significantly"),
    }

    def preflight(self, data: StageInput) -> StageOutput | None:
        """The layout must hold standard wells with concentrations in the ``column``, with a unit."""
        wells = data.artifacts.get("layout")
        if wells is None:  # the import step is a plugin's that did not say: nothing to check here
            return None
        col = self.settings["column"]
        is_std = (wells["role"].astype(str) == "standard").to_numpy()
        if not is_std.any() or col not in wells.columns:
            raise StageError(f"standard-curve needs wells with role 'standard' and a layout column {col!r}; "
                             f"the layout has {int(is_std.sum())} standard wells and the columns "
                             f"{', '.join(map(str, wells.columns))}",
                             hint="Add standards to the layout, or use another convert method.")
        if not (data.artifacts.get("well_units") or {}).get(col) and not self.settings["unit"]:
            raise StageError(f"the layout column {col!r} has no unit",
                             hint=f'Write it like "{col} (uM)" in the header, or set unit in this step.')
        return None

    def conversion(self, table: Any, data: StageInput) -> Conversion:
        import numpy as np
        from vzero import units
        from vzero.data import Table
        from vzero.plugins.convert.standard_curve import plate_standard_curve

        traces = data.artifacts["traces"]
        table = data.artifacts["rates"]
        cal = plate_standard_curve(traces, self.settings["column"], self.settings["unit"],
                                   self.settings["check_linearity"])
        curve, conc_unit, wells = cal.curve, cal.conc_unit, traces.wells
        lost = [str(n).split(":")[0] for q, n in zip(cal.summary["quantity"], cal.summary["note"], strict=True)
                if q == "dropped_well"]
        if lost:
            data.warn(f"{len(lost)} standard well(s) have no usable read (saturated or missing) and are left out "
                      f"of the standard curve: {', '.join(lost[:10])}{', ...' if len(lost) > 10 else ''}.")
        out_unit = self.settings["output_unit"]
        signal_unit = traces.signal_unit
        to_out = units.factor(f"{conc_unit}/s", out_unit)
        frame = table.frame
        _, se = curve.to_conc(frame["rate"].to_numpy(float), frame["rate_stderr"].to_numpy(float))
        lo, hi = curve.conc_range
        data.warn(f"standard curve: slope {curve.slope:.5g} {signal_unit}/{conc_unit} ± {curve.slope_se:.2g}, "
                  f"R² {curve.r2:.4f}, linear range {lo:g}–{hi:g} {conc_unit} ({curve.n_points} standards"
                  + (f"; dropped {', '.join(f'{d:g}' for d in curve.dropped_levels)}" if curve.dropped_levels else "")
                  + ")")
        top = curve.intercept + curve.slope * hi
        with np.errstate(invalid="ignore"):
            peak = np.nanmax(np.where(traces.mask, traces.signal, np.nan), axis=1, initial=-np.inf)
        beyond = [w for w, r, p in zip(wells["well"], wells["role"].astype(str), peak, strict=True)
                  if r == "sample" and np.isfinite(p) and (p - top) * np.sign(curve.slope) > 0]
        if beyond:
            data.warn(f"{len(beyond)} sample well(s) read beyond the highest standard kept ({hi:g} {conc_unit}): "
                      f"{', '.join(map(str, beyond[:10]))}{', ...' if len(beyond) > 10 else ''}; their rates "
                      "extrapolate the standard curve")
        points = Table(cal.points, {"concentration": conc_unit, "signal": signal_unit})
        return Conversion(to_out / curve.slope, out_unit, stderr=se * to_out,
                          record={"calibration_points": points, "calibration": Table(cal.summary)})


@hookimpl
def vzero_register(registry: Any) -> None:
    registry.add(BeerLambert)
    registry.add(StandardCurveConvert)
