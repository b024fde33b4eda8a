"""Built-in rates stage methods: initial rates (v0, signal per second) from each well's progress curve.

Each method is a small :class:`~pipeline.stage.Stage` that calls a vectorised kernel (imported in ``run``,
to keep this module light) and builds the standard rates table (:func:`plugins.tables.rates_table`).
"""

from __future__ import annotations

from typing import Any

from pipeline import hookimpl
from pipeline.errors import StageError
from pipeline.params import Param
from pipeline.stage import Stage, StageInput, StageOutput


class WindowRates(Stage):
    """Least-squares slope over a fixed time window given in the recipe, with its standard error and R².

    Simple and transparent, but a straight line through a curving progress curve underestimates v0: use it
    when the window is known to be within the linear, low-conversion part of every curve.
    """

    kind = "rates"
    method = "window"
    version = "1.0"
    summary = "least-squares slope over a fixed window"
    params = {
        "start": Param.quantity("s", "0 s", "window start"),
        "end": Param.quantity("s", "120 s", "window end"),
    }

    def run(self, data: StageInput) -> StageOutput:
        from plugins.rates.window import window_slopes
        from plugins.tables import rates_table

        traces = data.artifacts["traces"]
        start, end = self.settings["start"].m_as("s"), self.settings["end"].m_as("s")
        if end <= start:
            raise StageError(f"rates window ends ({end} s) before it starts ({start} s); fix start and end")
        result = window_slopes(traces.time, traces.masked_signal(), start, end)
        return StageOutput(artifacts={"rates": rates_table(traces, result, self.method)})


@hookimpl
def vzero_register(registry: Any) -> None:
    registry.add(WindowRates)
