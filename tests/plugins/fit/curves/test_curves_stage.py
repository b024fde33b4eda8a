"""The ``curves`` fit method in a whole run: the demo plate (simulated with scipy's solve_ivp from known
parameters, invented scenario) fitted by both routes in one recipe."""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np
import pandas as pd
import pytest
from vzero.cli.main import main
from vzero.plugins.demo.simulate import TRUTH


@pytest.fixture(scope="module")
def both(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("curves")
    assert main(["demo", "--out", str(folder / "demo"), "-q"]) in (0, 1)
    inputs = folder / "demo" / "inputs"
    text = (inputs / "demo.yaml").read_text("utf-8")
    step = "      models: [michaelis-menten, hill]\n"
    assert step in text
    text = text.replace(step, step + "  - fit:\n      method: curves\n      models: [michaelis-menten, hill]\n")
    (inputs / "both.yaml").write_text(text, "utf-8")
    assert main(["run", str(inputs / "both.yaml"), "--out", str(folder / "run"), "-q"]) in (0, 1)
    return folder / "run"


def _row(fits: pd.DataFrame, route: str, group: str, model: str, parameter: str) -> pd.Series:
    row = fits[(fits.route == route) & (fits.group == group) & (fits.model == model) & (fits.parameter == parameter)]
    assert len(row) == 1
    return row.iloc[0]


def test_both_routes_side_by_side_and_curves_recover_truth(both: Path) -> None:
    fits = pd.read_csv(both / "fits.csv")
    assert set(fits["route"]) == {"rates", "curves"}
    wt = TRUTH[0]
    for parameter, true in (("Vmax", wt.vmax_um_per_min), ("K0.5", wt.k_half_um), ("h", wt.hill)):
        curves = _row(fits, "curves", wt.group, "hill", parameter)
        rates = _row(fits, "rates", wt.group, "hill", parameter)
        # the demo's truth (solve_ivp simulation) inside the curve fit's 95 % interval widened by half
        half = 1.5 * (curves.ci_high - curves.ci_low) / 2
        assert abs((curves.ci_high + curves.ci_low) / 2 - true) <= half, (parameter, curves.estimate)
        # every read used: a narrower interval than the two-step route
        assert curves.ci_high - curves.ci_low < rates.ci_high - rates.ci_low
    assert _row(fits, "curves", wt.group, "hill", "Vmax").unit == "uM/min"
    assert _row(fits, "curves", wt.group, "hill", "kcat").unit == "1/s"
    coop = pd.read_csv(both / "cooperativity.csv")
    assert coop.set_index(["route", "group"]).loc[("curves", wt.group), "verdict"] == "positive"
    comp = pd.read_csv(both / "model_comparison.csv")
    assert set(comp.loc[(comp.route == "curves") & (comp.group == wt.group), "selected_model"]) == {"hill"}


def test_integrated_curves_and_residuals_are_kept(both: Path) -> None:
    curves = pd.read_csv(both / "progress_curves.csv")
    assert {"observed", "fitted", "residual", "time", "well"} <= set(curves.columns)
    np.testing.assert_allclose(curves["observed"] - curves["fitted"], curves["residual"], atol=1e-12)
    with h5py.File(both / "run.h5", "r") as f:
        steps = [k for k in f["steps"] if k.endswith("fit-curves")]
        assert len(steps) == 1 and "curve_fits" in f["steps"][steps[0]]["pooled"]
        # lag and inactivation are on auto by default: what each group got, and why, is kept
        assert "curve_terms" in f["steps"][steps[0]]["pooled"]
    fits = pd.read_csv(both / "fits.csv")
    notes = fits.loc[fits.route == "curves", "note"].fillna("")
    assert notes.str.contains("curve terms (lag, inactivation: auto)", regex=False).all()
