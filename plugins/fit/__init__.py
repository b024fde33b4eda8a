"""Built-in fit stage and kinetic models (pluggy plugin ``builtin_fit``).

Kept light at import time: registering imports only the stage declaration and the model catalog; numpy,
scipy and pandas are imported when a fit actually runs.
"""

from __future__ import annotations

from typing import Any

from vzero import hookimpl
from vzero.plugins.fit.catalog import MODELS
from vzero.plugins.fit.curves.stage import CurveFitStage
from vzero.plugins.fit.stage import FitStage


@hookimpl
def vzero_register(registry: Any) -> None:
    registry.add(FitStage)
    registry.add(CurveFitStage)
    for model in MODELS:
        registry.add(model)
