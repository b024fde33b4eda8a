"""Fixtures for the report: a small invented plate with exactly known straight-line rates and hand-made fit
tables of the shapes the fit stage writes, so the report is tested without running a fit."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from vzero.data import Table, Traces
from vzero.plugins.fit.catalog import BY_NAME
from vzero.plugins.kinetics.rates_table import rates_table
from vzero.plugins.rates.window import window_slopes
from vzero.plugins.report.build import ReportInput

GROUP = "E1 <b>&amp;</b>"
"""A group name with markup in it: the report must show it as text, never as HTML."""

SUBSTRATE = np.array([0.0, 5, 10, 20, 40, 80, 160, 320, 640, 1280, 2560, 5120])  # µM, one level per column
VMAX, KM = 2.0e-3, 100.0  # AU/s and µM: invented


def plate_traces() -> Traces:
    """96 wells, reads every 20 s for 10 min: rows A-F samples with Michaelis-Menten slopes, G-H blanks.

    Well A2 has every read missing (flag all_missing).
    """
    wells = [f"{r}{c}" for r in "ABCDEFGH" for c in range(1, 13)]
    t = np.arange(0.0, 601.0, 20.0)
    s = np.tile(SUBSTRATE, 8)
    sample = np.array([w[0] in "ABCDEF" for w in wells])
    slope = np.where(sample, VMAX * s / (KM + s), 0.0)
    signal = 0.05 + slope[:, None] * t[None, :]
    signal[wells.index("A2")] = np.nan
    frame = pd.DataFrame({
        "well": wells,
        "role": np.where(sample, "sample", "blank"),
        "substrate": s,
        "group": np.where(sample, GROUP, "blank"),
    })
    return Traces("p-1", t, signal, np.isfinite(signal), np.zeros_like(signal, bool), frame, "AU",
                  {"substrate": "uM"})


def fit_tables(rates: pd.DataFrame) -> dict[str, Table]:
    """Fit-stage-shaped tables for the one group, with values set by hand (a perfect Michaelis-Menten fit)."""
    common = {"group": GROUP, "model": "michaelis-menten", "n_points": 70, "rss": 0.0, "dof": 68,
              "r_squared": 1.0, "aicc": -900.0, "success": True, "message": "converged", "errorbars": True}
    fits = pd.DataFrame([
        {**common, "parameter": "Vmax", "estimate": VMAX, "stderr": 1e-5, "ci_low": VMAX - 2e-5,
         "ci_high": VMAX + 2e-5, "ci_method": "wald-t", "unit": "AU/s", "fixed": False, "note": ""},
        {**common, "parameter": "Km", "estimate": KM, "stderr": 2.0, "ci_low": 96.0, "ci_high": 104.0,
         "ci_method": "profile", "unit": "uM", "fixed": False, "note": ""},
    ])
    grid = np.geomspace(2.5, 7680, 101)
    curve = VMAX * grid / (KM + grid)
    curves = pd.DataFrame({"group": GROUP, "model": "michaelis-menten", "variable": "substrate",
                           "inhibitor": np.nan, "x": grid, "y": curve, "lower": curve * 0.98,
                           "upper": curve * 1.02, "x_unit": "uM"})
    comparison = pd.DataFrame([{"group": GROUP, "comparison_set": 1, "model": "michaelis-menten", "success": True,
                                "n_points": 70, "n_params": 2, "rss": 0.0, "dof": 68, "aicc": -900.0,
                                "delta_aicc": 0.0, "akaike_weight": 1.0, "selected_model": "michaelis-menten",
                                "selected": True, "selection_reason": "lowest AICc (only model fitted)",
                                "f_test_against": "", "F": np.nan, "p": np.nan}])
    use = (rates["role"] == "sample") & np.isfinite(rates["rate"]) & (rates["substrate"] > 0)
    s, v = rates.loc[use, "substrate"].to_numpy(), rates.loc[use, "rate"].to_numpy()
    diag = pd.DataFrame({"group": GROUP, "plot": "lineweaver-burk", "quantity": "point", "x": 1 / s, "y": 1 / v,
                         "plate": "p-1", "well": rates.loc[use, "well"].to_numpy(), "unstable": False,
                         "x_label": "1/S (1/uM)", "y_label": "1/v (1/(AU/s))"})
    line = pd.DataFrame({"group": GROUP, "plot": "lineweaver-burk", "quantity": ["slope", "intercept", "Vmax", "Km"],
                         "x": np.nan, "y": [KM / VMAX, 1 / VMAX, VMAX, KM], "plate": "", "well": "",
                         "unstable": False, "x_label": "1/S (1/uM)", "y_label": "1/v (1/(AU/s))"})
    return {"fits": Table(fits), "curves": Table(curves, {"y": "AU/s"}), "model_comparison": Table(comparison),
            "diagnostics": Table(pd.concat([diag, line], ignore_index=True))}


RECIPE = {
    "name": "report-test",
    "description": "invented plate for the report tests",
    "plates": [{"name": "p-1", "data": "plate.csv", "layout": "layout.csv"}],
    "steps": [{"import": {"method": "table"}}, {"rates": {"method": "window", "start": "0 s", "end": "200 s"}},
              {"fit": {"method": "nls", "models": ["michaelis-menten"]}}, {"report": {"method": "html"}}],
    "exclusions": [{"well": "C5", "plate": "p-1", "reason": "bubble seen by eye"}],
}


@pytest.fixture(scope="module")
def report_input() -> ReportInput:
    traces = plate_traces()
    result = window_slopes(traces.time, traces.masked_signal(), 0.0, 200.0)
    rates = rates_table(traces, result, "window")
    frame = rates.frame.copy()
    frame["plate"] = "p-1"  # rates_table names the traces' plate; the recipe's plate is p-1
    # C5 excluded by the recipe, as vzero.plugins.kinetics.exclusions leaves it: flag, no rate, the reason in "note"
    c5 = frame["well"] == "C5"
    frame.loc[c5, ["rate", "rate_stderr"]] = np.nan
    frame.loc[c5, "flags"] = "excluded"
    frame["note"] = np.where(c5, "excluded: bubble seen by eye", "")
    rates = rates.with_frame(frame)
    tables = {"rates": rates, **fit_tables(rates.frame)}
    provenance = {"source": "a test", "recipe_name": "report-test", "recipe_sha256": "", "recipe_text": "",
                  "created": "", "run_id": "", "vzero_version": "0", "versions": {"python": "3"}, "steps": [],
                  "inputs": [], "warnings": ["a warning with <markup>"], "failed_plates": {}}
    # the models as the report stage gets them from the registry (here the built-in catalog)
    return ReportInput(tables, {"p-1": traces}, RECIPE, provenance, models=BY_NAME)


@pytest.fixture(scope="module")
def built(report_input: ReportInput) -> dict[str, bytes]:
    from vzero.plugins.report.build import build

    return build(report_input)


def write_files(folder: Path, files: dict[str, bytes]) -> Path:
    for rel, data in files.items():
        (folder / rel).parent.mkdir(parents=True, exist_ok=True)
        (folder / rel).write_bytes(data)
    return folder / "report.html"


@pytest.fixture(scope="session")
def finished_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A finished run (import, blank, rates, report; no fit) of the shared linear test plate."""
    from vzero.run.runner import run

    from tests.conftest import linear_plate

    folder = tmp_path_factory.mktemp("report-run")
    recipe = linear_plate(folder / "in")
    layout = recipe.with_name("layout.csv")  # one sample group instead of seven keeps the tests quick
    layout.write_text(re.sub(r",g[A-G]$", ",g", layout.read_text("utf-8"), flags=re.M), "utf-8")
    recipe.write_text(recipe.read_text("utf-8") + "  - report: {method: html}\n", "utf-8")
    return run(recipe, folder / "run").out_dir


COOKBOOK = Path(__file__).parents[3] / "configs" / "cookbook"


@pytest.fixture(scope="session")
def fluor_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The invented 384-well fluorescence cookbook plate (standards, blanks, a substrate-inhibition group),
    run once for every test that reads its report (the report in ``<run>/report/``)."""
    return cookbook_run("fluorescence-standard-curve", tmp_path_factory.mktemp("fluor"))


def cookbook_run(name: str, folder: Path, report: bool = True) -> Path:
    """Run the cookbook recipe ``name`` on its invented data (tests/cookbook_data.py) in ``folder``; with
    ``report``, rebuild its report into ``<run>/report/`` with ``vzero report``. Returns the run folder."""
    import shutil

    from vzero.cli.main import main
    from vzero.run.runner import run

    from tests.cookbook_data import WRITERS

    (folder / "in").mkdir(parents=True)
    WRITERS[f"{name}.yaml"](folder / "in")
    shutil.copy(COOKBOOK / f"{name}.yaml", folder / "in" / "recipe.yaml")
    out = run(folder / "in" / "recipe.yaml", folder / "run").out_dir
    if report:
        assert main(["report", str(out / "run.h5"), "--out", str(out / "report")]) == 0
    return out
