"""Wells whose lag the rate method did not model (flag UNMODELLED) are left out of the fit by default, and the
fits table says which and why. Invented rates (Michaelis–Menten, Vmax 10, Km 5)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from vzero.data import Table
from vzero.manager import make_manager
from vzero.params import validate
from vzero.plugins.fit.stage import FitStage
from vzero.stage import StageInput


def _fits(flags: list[str]) -> pd.DataFrame:
    s = np.repeat([1.0, 2.0, 5.0, 10.0, 20.0, 50.0], 2)
    rate = 10.0 * s / (5.0 + s)
    frame = pd.DataFrame({"well": [f"A{i + 1}" for i in range(s.size)], "group": "g", "role": "sample",
                          "substrate": s, "rate": rate, "rate_stderr": 0.1, "flags": flags})
    settings, problems = validate(FitStage.params, {"models": ["michaelis-menten"]})
    assert not problems
    data = StageInput({"rates": Table(frame, {"rate": "uM/min", "substrate": "uM"})}, None, {}, {},
                      make_manager(autoload=False).registry, lambda _: None)
    return FitStage(**settings).run(data).artifacts["fits"].frame


def test_unmodelled_lag_is_left_out_with_the_reason() -> None:
    fits = _fits(["lag;unmodelled", "lag", "lag;unmodelled"] + [""] * 9)
    row = fits[fits["parameter"] == "Km"].iloc[0]
    assert row["n_points"] == 10  # the two unmodelled wells out, the modelled lag (A2) kept
    assert "2 with a lag or decay the rate method does not model (A1, A3" in row["note"]


def test_no_note_without_unmodelled_wells() -> None:
    fits = _fits([""] * 12)
    assert not fits["note"].fillna("").str.contains("does not model").any()
