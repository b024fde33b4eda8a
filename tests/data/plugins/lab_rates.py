"""An out-of-tree rates method, as a lab would write one: the slope of the first N reads per well.

Used by the tests to show that a recipe can name a local plugin file (``plugins: [lab_rates.py]``) and use
its method exactly like a built-in one.
"""

from __future__ import annotations

from vzero import hookimpl
from vzero.params import Param
from vzero.stage import Stage, StageInput, StageOutput

__version__ = "0.3"


class FirstReads(Stage):
    kind = "rates"
    method = "first-reads"
    version = __version__
    summary = "slope of the first N usable reads"
    params = {"reads": Param("int", 5, "how many reads from the start", low=2)}

    def run(self, data: StageInput) -> StageOutput:
        from vzero.plugins.rates import finish_table
        from vzero.plugins.rates.window import window_slopes

        traces = data.artifacts["traces"]
        end = traces.time[min(self.settings["reads"], len(traces.time)) - 1]
        result = window_slopes(traces.time, traces.masked_signal(), float(traces.time[0]), float(end))
        return finish_table(traces, result, self.method, data)  # flags, overrides, standard columns


@hookimpl
def vzero_register(registry):
    registry.add(FirstReads)


