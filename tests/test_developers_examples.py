"""The worked examples in DEVELOPERS.md run as written: the fit model of "Adding a fit model" passes the
conformance kit and is fitted, compared and turned into kcat like a built-in model."""

from __future__ import annotations

import re
import types
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from vzero.data import Table
from vzero.params import validate
from vzero.plugins import fit as fit_plugin
from vzero.plugins.fit.stage import FitStage
from vzero.registry import Registry
from vzero.stage import StageInput
from vzero.testing import check_model

GUIDE = Path(__file__).resolve().parents[1] / "DEVELOPERS.md"


def _example(after: str) -> types.ModuleType:
    text = GUIDE.read_text("utf-8")
    section = text[text.index(after):]
    code = re.search(r"```python\n(.*?)```", section, re.S)
    assert code is not None, f"no python block after {after!r}"
    module = types.ModuleType("guide_example")
    exec(compile(code.group(1), str(GUIDE), "exec"), module.__dict__)  # our own document, not received data
    return module


def test_the_guide_s_fit_model_passes_the_kit_and_fits_like_a_built_in() -> None:
    lab = _example("## Adding a fit model")
    model = lab.BACKGROUND_MM
    # invented data: Vmax 10 uM/min, Km 40 uM, background 0.5 uM/min, seeded noise of SD 0.05
    rng = np.random.default_rng(5)
    s = np.repeat(np.geomspace(5, 400, 9), 3)
    v = 10 * s / (40 + s) + 0.5 + 0.05 * rng.standard_normal(s.size)
    check_model(model, {"substrate": s}, v)

    reg = Registry()
    fit_plugin.vzero_register(reg)
    lab.vzero_register(reg)
    frame = pd.DataFrame({"plate": "P1", "well": [f"A{k}" for k in range(s.size)], "group": "g", "role": "sample",
                          "substrate": s, "inhibitor": np.nan, "enzyme": 10.0, "rate": v, "flags": ""})
    values, problems = validate(FitStage.params, {"models": ["michaelis-menten", "mm-background"]})
    assert not problems
    data = StageInput({"rates": Table(frame, {"rate": "uM/min", "substrate": "uM", "enzyme": "nM"})}, None, {},
                      {}, reg, lambda _: None)
    fits = FitStage(**values).run(data).artifacts["fits"].frame
    mine = fits[fits.model == "mm-background"].set_index("parameter")["estimate"]
    assert mine["Vmax"] == pytest.approx(10, rel=0.05)
    assert mine["Km"] == pytest.approx(40, rel=0.15)
    assert mine["c"] == pytest.approx(0.5, abs=0.15)
    # kcat from the model's declared limiting rate: Vmax / [E] = 10 uM/min / 10 nM = 1000/min = 16.7/s
    assert mine["kcat"] == pytest.approx(mine["Vmax"] / 10e-3 / 60, rel=1e-9)
