"""The plate's own standard curve, fitted before the rates (``standards:``), is a table of the run's outputs
(standard_curve.csv beside rates.csv) as well as part of the audit file.

Invented plate: the demo plate (plugins/demo/simulate.py) with its last six blank wells turned into product
standards at 0-80 µM read at a constant 0.04 AU + 0.00342 AU/µM (NADH at 340 nm, 6220 M^-1 cm^-1 in
0.55 cm, handbook value) with 0.0005 AU read noise.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from vzero.run.runner import run

PER_UM = 6220.0 * 0.55 * 1e-6


def _recipe(folder: Path) -> Path:
    from vzero.plugins.demo.simulate import layout, simulate

    lay, reads = layout(), simulate(seed=3)
    std_wells = [f"H{i}" for i in range(7, 13)]
    levels = np.array([0.0, 5.0, 10.0, 20.0, 40.0, 80.0])
    lay["product (uM)"] = np.nan
    is_std = lay["well"].isin(std_wells)
    lay.loc[is_std, "role"] = "standard"
    lay.loc[is_std, "product (uM)"] = levels
    lay.loc[is_std, ["substrate (uM)", "enzyme (nM)"]] = np.nan
    rng = np.random.default_rng(2)
    for w, c in zip(std_wells, levels, strict=True):
        reads[w] = 0.04 + PER_UM * c + 0.0005 * rng.standard_normal(len(reads))
    folder.mkdir(parents=True)
    lay.to_csv(folder / "layout.csv", index=False)
    reads.to_csv(folder / "plate.csv", index=False)
    recipe = folder / "recipe.yaml"
    recipe.write_text("vzero: 1\nname: own-standards\nplates:\n  - {name: p1, data: plate.csv, layout: layout.csv}\n"
                      "steps:\n  - import: {method: table, signal_unit: AU}\n"
                      "  - rates: {method: model-choice, standards: product}\n", "utf-8")
    return recipe


def test_standard_curve_csv_beside_the_rates(tmp_path: Path) -> None:
    result = run(_recipe(tmp_path / "in"), tmp_path / "out")
    table = pd.read_csv(result.out_dir / "standard_curve.csv")
    assert (result.out_dir / "rates.csv").is_file()
    rows = table.set_index("quantity")
    assert set(table["plate"]) == {"p1"}
    assert rows.loc["slope", "value"] == pytest.approx(PER_UM, rel=0.02)
    assert rows.loc["slope", "unit"] == "AU/uM"
    assert rows.loc["range_low", "value"] == 0.0 and rows.loc["range_high", "value"] == 80.0
    assert "standard_curve" in result.tables
