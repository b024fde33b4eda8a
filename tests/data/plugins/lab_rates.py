"""An out-of-tree rates method, as a lab would write one: the least-squares slope of the first N reads.

It writes only its kernel; the framework's RateMethod builds the rates table and applies the recipe's
exclusions and overrides. Used by the tests (``plugins: [lab_rates.py]`` in a recipe).
"""

import numpy as np
from vzero import hookimpl
from vzero.params import Param
from vzero.plugins.kinetics import RateMethod, RateResult

__version__ = "0.3"


class FirstReads(RateMethod):
    method, version = "first-reads", __version__
    summary = "least-squares slope of the first N reads"
    params = {"reads": Param("int", 5, "how many reads from the start", low=2)}

    def kernel(self, time, signal, plate):
        t, y = time[: self.settings["reads"]], signal[:, : self.settings["reads"]]
        used = np.isfinite(y)
        n = used.sum(axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            dt = np.where(used, t - (used * t).sum(axis=1, keepdims=True) / n[:, None], 0.0)
            v0 = (dt * np.where(used, y, 0.0)).sum(axis=1) / (dt * dt).sum(axis=1)
        return RateResult(v0=np.where(n >= 2, v0, np.nan), n_points=n.astype(np.int64),
                          window_start_s=np.full(len(y), t[0]), window_end_s=np.full(len(y), t[-1]))


@hookimpl
def vzero_register(registry):
    registry.add(FirstReads)
