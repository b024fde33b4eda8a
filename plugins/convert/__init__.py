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
from vzero.stage import Stage, StageInput, StageOutput

OUTPUT_UNIT = Param("unit", "uM/min", "unit of the converted rates (e.g. uM/min, nM/s)", like="M/s")


def _finish(table: Any, frame: Any, factor: Any, out_unit: str, signal_unit: str, warn: Any,
            stderr: Any = None) -> Any:
    """Apply a per-well (or scalar) factor signal/s -> out_unit, add turnover, return the new table."""
    from vzero import units

    frame["signal_rate"] = frame["rate"]
    frame["rate"] = frame["signal_rate"] * factor
    frame["rate_stderr"] = stderr if stderr is not None else frame["rate_stderr"] * abs(factor)
    frame["rate_unit"] = out_unit
    new_units = {"rate": out_unit, "rate_stderr": out_unit, "signal_rate": f"{signal_unit}/s"}
    _warn_sign(frame, warn)
    if "enzyme" in frame and frame["enzyme"].notna().any() and table.units.get("enzyme"):
        kt = units.factor(f"({out_unit})/({table.units['enzyme']})", "1/s")
        with_enzyme = frame["enzyme"].where(frame["enzyme"] > 0)
        frame["turnover"] = frame["rate"] / with_enzyme * kt
        frame["turnover_stderr"] = frame["rate_stderr"] / with_enzyme * kt
        frame["turnover_unit"] = "1/s"
        new_units.update(turnover="1/s", turnover_stderr="1/s")
    return table.with_frame(frame, **new_units)


class BeerLambert(Stage):
    """Absorbance rate to concentration rate by the Beer–Lambert law: rate = (dA/dt) / (ε · l).

    The pathlength ``l`` comes from exactly one of: ``pathlength`` (given); ``fill_volume`` and
    ``plate_type`` (liquid height in a well of that geometry, flat meniscus assumed); ``water_peak: true``
    (per well, from the plate's ``pathcheck`` file of A977 and A900 reads: (A977 − A900) / ``water_k``, with
    0.18 per cm as the usual factor, common practice). ``direction: decrease`` when a consumed species absorbs
    (for example NADH at 340 nm), so that rates are positive. Given a per-well enzyme concentration, the
    turnover rate (rate / [E], 1/s) is added.
    """

    kind = "convert"
    method = "beer-lambert"
    version = "1.1"
    summary = "absorbance/s to concentration/time via ε and pathlength; turnover from [E]"
    params = {
        "epsilon": Param.quantity("M^-1 cm^-1", doc='molar absorption coefficient, e.g. "6220 M^-1 cm^-1"'),
        "pathlength": Param.quantity("cm", None, 'optical pathlength, e.g. "0.55 cm"', nullable=True),
        "fill_volume": Param.quantity("uL", None, 'liquid volume per well, e.g. "200 uL" (with plate_type)',
                                      nullable=True),
        "plate_type": Param.choice(("96-flat", "96-half-area", "384-flat", "1536-flat"), None,
                                   "well geometry for fill_volume (see plugins/convert/pathlength.py)", nullable=True),
        "water_peak": Param("bool", False, "measure the pathlength per well from the plate's pathcheck file"),
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

    def run(self, data: StageInput) -> StageOutput:
        import numpy as np
        from vzero import units

        s = self.settings
        table = data.artifacts["rates"]
        frame = table.frame.copy()
        signal_unit = str(table.meta.get("signal_unit", "AU"))
        ureg = units.registry()
        if ureg.Quantity(1, signal_unit).dimensionality != ureg.Quantity(1, "").dimensionality:
            raise StageError(f"Beer–Lambert needs absorbance reads, but the signal unit is {signal_unit!r}")
        path_cm, record = self._pathlength(data, frame)
        per = ureg.Quantity(1.0, f"{signal_unit}/s") / (s["epsilon"] * ureg.Quantity(1.0, "cm"))
        k = float(per.m_as(s["output_unit"])) * (-1.0 if s["direction"] == "decrease" else 1.0) / path_cm
        frame["pathlength_cm"] = np.broadcast_to(path_cm, len(frame)).astype(float)
        out = _finish(table, frame, k, s["output_unit"], signal_unit, data.warn)
        out = out.with_frame(out.frame, pathlength_cm="cm")
        return StageOutput(artifacts={"rates": out}, record=record)

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
        raw = data.inputs.get("pathcheck")
        if raw is None:
            raise InputFileError("water_peak is on but the plate names no pathcheck file",
                                 hint="Add pathcheck: FILE (columns well, a977, a900) to the plate.")
        import io

        from vzero.plugins.importers.wells import normalise_well

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


class StandardCurveConvert(Stage):
    """Fluorescence or luminescence rate to concentration rate through a standard curve on the same plate.

    Standard wells (layout role ``standard``) hold known concentrations of the product in the layout column
    named by ``column`` (unit from its header or ``unit``). Each standard's signal is the mean of its usable
    reads; the line signal = slope · conc + intercept is fitted by least squares, top standards are dropped
    while a quadratic term is significant (the linear range), and rates are divided by the slope, with the
    slope's uncertainty propagated into each rate's standard error. The calibration is stored in the audit
    file and reported in the run's warnings.
    """

    kind = "convert"
    method = "standard-curve"
    version = "1.0"
    summary = "signal/s to concentration/time through a same-plate standard curve (linear range checked)"
    params = {
        "column": Param("str", "product", "layout column with the standards' concentrations"),
        "unit": Param("unit", None, "unit of that column, if its header has none", like="M", nullable=True),
        "output_unit": OUTPUT_UNIT,
        "check_linearity": Param("bool", True, "drop top standards while the line bends significantly"),
    }

    def run(self, data: StageInput) -> StageOutput:
        import numpy as np
        from vzero import units
        from vzero.data import Table
        from vzero.plugins.convert.standard_curve import plate_standard_curve

        traces = data.artifacts["traces"]
        table = data.artifacts["rates"]
        cal = plate_standard_curve(traces, self.settings["column"], self.settings["unit"],
                                   self.settings["check_linearity"])
        curve, conc_unit, wells = cal.curve, cal.conc_unit, traces.wells
        out_unit = self.settings["output_unit"]
        signal_unit = traces.signal_unit
        to_out = units.factor(f"{conc_unit}/s", out_unit)
        frame = table.frame.copy()
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
        out = _finish(table, frame, to_out / curve.slope, out_unit, signal_unit, data.warn, se * to_out)
        return StageOutput(
            artifacts={"rates": out},
            record={"calibration_points": Table(cal.points, {"concentration": conc_unit, "signal": signal_unit}),
                    "calibration": Table(cal.summary)},
        )


def _warn_sign(frame: Any, warn: Any) -> None:
    import numpy as np

    rates = frame["rate"].to_numpy(dtype=float)
    if "role" in frame:
        rates = rates[(frame["role"] == "sample").to_numpy()]
    rates = rates[np.isfinite(rates)]
    negative = int((rates < 0).sum())
    if rates.size and negative > 0.5 * rates.size:
        warn(f"{negative} of {rates.size} sample rates are negative after conversion: "
             "check 'direction' (increase when the product absorbs, decrease when the substrate does)")


@hookimpl
def vzero_register(registry: Any) -> None:
    registry.add(BeerLambert)
    registry.add(StandardCurveConvert)
