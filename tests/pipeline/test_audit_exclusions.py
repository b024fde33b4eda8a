"""Exclusions and overrides from the recipe: schema messages, masking, recomputed windows, stored and listed."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from vzero.audit import reader
from vzero.data import Traces
from vzero.errors import RecipeError
from vzero.plugins.kinetics.exclusions import apply_exclusions, apply_overrides, check_items
from vzero.plugins.kinetics.rates_table import rates_table
from vzero.plugins.rates.window import window_slopes
from vzero.recipe import parse
from vzero.run.runner import run

from tests.conftest import linear_plate


def test_schema_problems_name_the_recipe_line():
    text = """vzero: 1
exclusions:
  - {plate: p1, well: B7}
  - {plate: p1, well: Z99, reason: x}
  - {plate: p1, well: C3, time: "40", reason: x}
  - {plate: p1, well: C4, time: ["60 s", "30 s"], reason: x, colour: red}
overrides:
  - {plate: p1, well: D2, start: "90 s", end: "30 s", reason: lag}
  - {plate: p1, well: D2, start: "10 s", end: "30 s", reason: again}
"""
    rec = parse(text, "r.yaml")
    problems = check_items(rec.data, rec.where)
    joined = "\n".join(problems)
    assert "r.yaml:3 exclusions[0]: missing 'reason'" in joined
    assert "r.yaml:4 exclusions[1].well: expected a well name like 'B7', got 'Z99'" in joined
    assert "r.yaml:5 exclusions[2].time" in joined and "expected a quantity" in joined
    assert "r.yaml:6 exclusions[3].time: the range ends before it starts" in joined
    assert "r.yaml:6 exclusions[3].colour: unknown key" in joined
    assert "r.yaml:8 overrides[0].end: the window ends before it starts" in joined
    assert "r.yaml:9 overrides[1]: well D2 of plate p1 is overridden twice" in joined
    assert len(problems) == 7


def _traces() -> Traces:
    """Three wells read every 10 s for 200 s: A1 slope 1e-3 AU/s; A2 flat until 30 s, then 2e-3 AU/s; A3 noise."""
    t = np.arange(0.0, 201.0, 10.0)
    a2 = np.where(t < 30, 0.1, 0.1 + 2e-3 * (t - 30))
    signal = np.vstack([0.05 + 1e-3 * t, a2, 0.2 + 0.001 * np.sin(t)])
    wells = pd.DataFrame({"well": ["A1", "A2", "A3"], "role": "sample", "group": "g"})
    ones = np.ones_like(signal, dtype=bool)
    return Traces("p1", t, signal, ones, ~ones, wells, "AU")


def test_exclusions_mask_reads_and_wells():
    recipe = {"exclusions": [{"plate": "p1", "well": "A1", "time": "40 s", "reason": "door"},
                             {"plate": "p1", "well": "A1", "time": ["100 s", "120 s"], "reason": "flicker"},
                             {"plate": "p1", "well": "A3", "reason": "bubble"},
                             {"plate": "other", "well": "A2", "reason": "not this plate"}]}
    tr = _traces()
    out = apply_exclusions(tr, recipe)
    assert_allclose(tr.time[~out.mask[0]], [40.0, 100.0, 110.0, 120.0])
    assert out.mask[1].all() and not out.mask[2].any()
    assert list(out.wells["excluded"]) == [False, False, True]
    assert out.wells["note"].iloc[2] == "excluded: bubble"
    assert "reads at 100-120 s excluded (3): flicker" in out.wells["note"].iloc[0]
    assert tr.mask.all()  # the given traces are not changed
    assert apply_exclusions(tr, {}) is tr


def test_overrides_recompute_the_window_and_mark_the_well():
    tr = apply_exclusions(_traces(), {"exclusions": [{"plate": "p1", "well": "A3", "reason": "bubble"}],
                                      "overrides": [{"plate": "p1", "well": "A2", "start": "30 s", "end": "150 s",
                                                     "reason": "lag"}]})
    table = rates_table(tr, window_slopes(tr.time, tr.masked_signal(), 0.0, 200.0), "window")
    out = apply_overrides(tr, table, [{"plate": "p1", "well": "A2", "start": "30 s", "end": "150 s",
                                       "reason": "lag"}]).frame
    # construction: A2 rises 2e-3 AU/s from 30 s on, so the slope over 30-150 s is exactly that
    assert_allclose(out["rate"].iloc[1], 2e-3, rtol=1e-9)
    assert out["window_start_s"].iloc[1] == 30.0 and out["window_end_s"].iloc[1] == 150.0
    assert out["flags"].iloc[1] == "overridden" and out["method"].iloc[1] == "window (override)"
    assert out["note"].iloc[1] == "window fixed to 30-150 s: lag"
    assert np.isnan(out["rate"].iloc[2]) and out["flags"].iloc[2] == "excluded"
    assert out["note"].iloc[2] == "excluded: bubble"
    assert_allclose(out["rate"].iloc[0], 1e-3, rtol=1e-9)  # untouched well keeps its rate
    assert table.frame["flags"].iloc[1] == ""  # input table unchanged


def test_run_stores_exclusions_and_excluded_well_has_no_rate(tmp_path: Path):
    recipe = linear_plate(tmp_path / "in")
    text = recipe.read_text("utf-8").replace("steps:", "exclusions:\n  - {plate: p1, well: B7, reason: bubble}\n"
                                             "steps:")
    recipe.write_text(text, "utf-8")
    result = run(recipe, tmp_path / "out")
    b7 = result.rates.set_index("well").loc["B7"]
    assert np.isnan(b7["rate"])
    with reader.open_audit(result.audit_path) as f:
        assert reader.header(f)["exclusions"] == [{"plate": "p1", "well": "B7", "reason": "bubble"}]
        wells = reader.read_step_traces(f)["p1"].wells.set_index("well")
    assert wells.loc["B7", "note"] == "excluded: bubble"


def test_bad_items_stop_the_run(tmp_path: Path):
    recipe = linear_plate(tmp_path / "in")
    recipe.write_text(recipe.read_text("utf-8").replace(
        "steps:", "exclusions:\n  - {plate: p1, well: B7}\nsteps:"), "utf-8")
    with pytest.raises(RecipeError, match="missing 'reason'"):
        run(recipe, tmp_path / "out")
    assert not (tmp_path / "out").exists()
