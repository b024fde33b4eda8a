"""Through the whole recipe: the blank stage's ``blank_share``, the rates method's shape loadings and the fit's
widened intervals reach each other (plugins/blank, plugins/rates/choice.py, plugins/fit/shared.py). The
invented demo plate (one substrate blank per level, three replicate wells) is run with ``shared_blanks`` on
and off: the estimates stay (the weights are the same), the intervals widen, and the note says why.
The size of the widening is checked against simulations in test_shared_blanks.py; here only the wiring.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import yaml
from vzero.plugins.demo import RECIPE
from vzero.plugins.demo.simulate import layout, simulate
from vzero.run.runner import run


def _run(folder: Path, shared: bool) -> tuple[pd.DataFrame, pd.DataFrame]:
    folder.mkdir()
    simulate(7).to_csv(folder / "demo_plate.csv", index=False)
    layout().to_csv(folder / "demo_layout.csv", index=False)
    data = yaml.safe_load(RECIPE.read_text("utf-8"))
    data["steps"] = [s for s in data["steps"] if "report" not in s]
    for s in data["steps"]:
        if "fit" in s:
            s["fit"]["shared_blanks"] = shared
    (folder / "demo.yaml").write_text(yaml.safe_dump(data, sort_keys=False), "utf-8")
    out = run(folder / "demo.yaml", folder / "run", force=True)
    return out.fits, out.rates


def test_shared_errors_reach_the_fit(tmp_path: Path) -> None:
    on, rates = _run(tmp_path / "on", True)
    off, _ = _run(tmp_path / "off", False)
    # the blank stage's share (about 1/2: one blank as noisy as the well) and model-choice's pool columns
    sample = rates[rates["role"] == "sample"]
    share = sample["blank_share"].to_numpy(float)
    assert 0.35 < np.nanmedian(share) < 0.65
    pooled = sample["shape_pool"].notna().to_numpy()
    assert pooled.any()
    assert sample.loc[pooled, "shape_load_1"].notna().all()
    for group, model, parameter in [("VZ-7 wild type", "hill", "h"), ("VZ-7 K52A", "michaelis-menten", "Km")]:
        a = on[(on["group"] == group) & (on["model"] == model) & (on["parameter"] == parameter)].iloc[0]
        b = off[(off["group"] == group) & (off["model"] == model) & (off["parameter"] == parameter)].iloc[0]
        assert a["estimate"] == b["estimate"]
        assert a["stderr"] > 1.2 * b["stderr"]
        assert a["ci_high"] - a["ci_low"] > 1.2 * (b["ci_high"] - b["ci_low"])
        assert "common blank sets" in a["note"]
        assert "common blank sets" not in str(b["note"])
    wild = on[(on["group"] == "VZ-7 wild type") & (on["model"] == "hill")].iloc[0]
    assert "plate shape of 1 pool(s)" in wild["note"]
