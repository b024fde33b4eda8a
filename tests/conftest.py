"""Shared fixtures: a fresh plugin manager, a synthetic plate with known rates, temporary run folders."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import settings
from vzero.manager import make_manager

# Property tests: no per-example deadline (the first example pays one-off costs such as building the unit
# registry, and CI machines are shared), and a fixed example budget so the suite's time is predictable.
settings.register_profile("vzero", deadline=None, max_examples=60)
settings.load_profile("vzero")

TESTS = Path(__file__).parent
DATA = TESTS / "data"


@pytest.fixture
def plugins():
    """A fresh plugin manager with only vzero's own plugins (no other installed ones)."""
    return make_manager(autoload=False)


def linear_plate(folder: Path, *, slopes: np.ndarray | None = None, noise: float = 0.0, seed: int = 0) -> Path:
    """Write a 96-well wide CSV, a layout and a recipe with exactly known straight-line slopes (AU/s).

    Row H holds blanks (slope 0 plus a drift shared by all wells); the other wells have slope
    ``slopes[i]`` plus the drift. Returns the recipe path. Substrate rises along columns (µM).
    """
    rng = np.random.default_rng(seed)
    wells = [f"{r}{c}" for r in "ABCDEFGH" for c in range(1, 13)]
    t = np.arange(0.0, 301.0, 15.0)
    if slopes is None:
        slopes = np.linspace(1e-4, 1e-3, 96)
    slopes = np.where(np.array([w.startswith("H") for w in wells]), 0.0, slopes)
    drift = 1e-5 * t
    signal = 0.05 + slopes[:, None] * t[None, :] + drift[None, :] + rng.normal(0, noise, (96, t.size)) * (noise > 0)
    table = pd.DataFrame(signal.T, columns=wells)
    table.insert(0, "time (s)", t)
    folder.mkdir(parents=True, exist_ok=True)
    table.to_csv(folder / "plate.csv", index=False)
    layout = pd.DataFrame(
        {
            "well": wells,
            "role": ["blank" if w.startswith("H") else "sample" for w in wells],
            "substrate (uM)": [10.0 * int(w[1:]) for w in wells],
            "enzyme (nM)": [0.0 if w.startswith("H") else 2.0 for w in wells],
            "group": ["blank" if w.startswith("H") else f"g{w[0]}" for w in wells],
        }
    )
    layout.to_csv(folder / "layout.csv", index=False)
    recipe = folder / "recipe.yaml"
    recipe.write_text(
        "vzero: 1\nname: linear\nplates:\n  - name: p1\n    data: plate.csv\n    layout: layout.csv\n"
        "steps:\n  - import: {method: table}\n  - blank: {method: mean}\n"
        '  - rates: {method: window, start: "0 s", end: "300 s"}\n',
        "utf-8",
    )
    return recipe


@pytest.fixture
def plate_folder(tmp_path: Path) -> Path:
    return linear_plate(tmp_path / "in")
