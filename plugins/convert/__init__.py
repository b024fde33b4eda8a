"""Built-in convert stage: rates in signal per time to concentration per time, and to turnover (1/s)."""

from __future__ import annotations

from typing import Any

from pipeline import hookimpl
from pipeline.errors import StageError
from pipeline.params import Param
from pipeline.stage import Stage, StageInput, StageOutput


class BeerLambert(Stage):
    """Absorbance rate to concentration rate by the Beer–Lambert law: rate = (dA/dt) / (ε · l).

    ``direction: increase`` when the product absorbs (A rises as the reaction runs); ``decrease`` when a
    consumed species absorbs (for example NADH at 340 nm), which flips the sign so that rates are positive.
    Given a per-well enzyme concentration, the turnover rate (rate / [E], in 1/s) is added.
    """

    kind = "convert"
    method = "beer-lambert"
    version = "1.0"
    summary = "absorbance/s to concentration/time via ε and pathlength; turnover from [E]"
    params = {
        "epsilon": Param.quantity("M^-1 cm^-1", doc="molar absorption coefficient, e.g. \"6220 M^-1 cm^-1\""),
        "pathlength": Param.quantity("cm", doc="optical pathlength of the well, e.g. \"0.55 cm\""),
        "direction": Param.choice(("increase", "decrease"), "increase",
                                  "whether the absorbance rises (product absorbs) or falls (substrate absorbs)"),
        "output_unit": Param("unit", "uM/min", "unit of the converted rates", like="M/s"),
    }

    def run(self, data: StageInput) -> StageOutput:
        from pipeline import units

        table = data.artifacts["rates"]
        frame = table.frame.copy()
        signal_unit = str(table.meta.get("signal_unit", "AU"))
        if units.registry().Quantity(1, signal_unit).dimensionality != units.registry().Quantity(1, "").dimensionality:
            raise StageError(f"Beer–Lambert needs absorbance reads, but the signal unit is {signal_unit!r}")
        ureg = units.registry()
        per = ureg.Quantity(1.0, f"{signal_unit}/s") / (self.settings["epsilon"] * self.settings["pathlength"])
        out_unit = self.settings["output_unit"]
        k = float(per.m_as(out_unit)) * (-1.0 if self.settings["direction"] == "decrease" else 1.0)
        frame["signal_rate"] = frame["rate"]
        frame["rate"] = frame["rate"] * k
        frame["rate_stderr"] = frame["rate_stderr"] * abs(k)
        frame["rate_unit"] = out_unit
        new_units = {"rate": out_unit, "rate_stderr": out_unit, "signal_rate": f"{signal_unit}/s"}
        _warn_sign(frame, data.warn)
        if "enzyme" in frame and frame["enzyme"].notna().any():
            e_unit = table.units.get("enzyme", "")
            kt = units.factor(f"({out_unit})/({e_unit})", "1/s")
            frame["turnover"] = frame["rate"] / frame["enzyme"] * kt
            frame["turnover_stderr"] = frame["rate_stderr"] / frame["enzyme"] * kt
            frame["turnover_unit"] = "1/s"
            new_units.update(turnover="1/s", turnover_stderr="1/s")
        return StageOutput(artifacts={"rates": table.with_frame(frame, **new_units)})


def _warn_sign(frame: Any, warn: Any) -> None:
    samples = frame[frame.get("role", "sample") == "sample"] if "role" in frame else frame
    rates = samples["rate"].dropna()
    if len(rates) and (rates < 0).mean() > 0.5:
        warn(f"{int((rates < 0).sum())} of {len(rates)} sample rates are negative after conversion: "
             "check 'direction' (increase when the product absorbs, decrease when the substrate does)")


@hookimpl
def vzero_register(registry: Any) -> None:
    registry.add(BeerLambert)
