"""``vzero diff``: recipe text differences and what they changed, per well and per parameter, sorted."""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pandas as pd
from numpy.testing import assert_allclose
from vzero.cli.diff import compare, compare_parameters, recipe_diff, relative_change
from vzero.cli.main import main
from vzero.run.runner import run

from tests.conftest import linear_plate


def test_relative_change_by_hand():
    a = np.array([2.0, 2.0, np.nan, 1.0, 0.0, 0.0, np.nan])
    b = np.array([3.0, 1.0, 1.0, np.nan, 0.0, 5.0, np.nan])
    # |3-2|/2 = 0.5, |1-2|/2 = 0.5, appears, disappears, both zero, from zero, both missing
    assert_allclose(relative_change(a, b), [0.5, 0.5, np.inf, np.inf, 0.0, np.inf, 0.0])


def test_recipe_diff_is_a_unified_diff():
    text = recipe_diff("a: 1\nb: 2\n", "a: 1\nb: 3\n", "old", "new")
    assert text.splitlines()[:2] == ["--- old", "+++ new"]
    assert "-b: 2" in text and "+b: 3" in text
    assert recipe_diff("same\n", "same\n") == ""


def test_parameters_sorted_by_size_of_change_and_units_respected():
    a = pd.DataFrame({"group": ["g", "g", "g"], "model": ["mm", "mm", "mm"], "parameter": ["Vmax", "Km", "kcat"],
                      "estimate": [10.0, 100.0, 5.0], "stderr": [1.0, 10.0, 0.5], "ci_low": [8.0, 80.0, 4.0],
                      "ci_high": [12.0, 120.0, 6.0], "unit": ["uM/min", "uM", "1/s"]})
    b = a.copy()
    b.loc[0, "estimate"] = 11.0  # +10 %
    b.loc[1, "estimate"] = 150.0  # +50 %
    b.loc[2, "unit"] = "1/min"  # same number, other unit: no relative change can be given
    out = compare_parameters(a, b)
    assert list(out["parameter"]) == ["kcat", "Km", "Vmax"]  # unknown (unit changed) first, then 50 %, 10 %
    assert_allclose(out["relative_change"].iloc[1:], [0.5, 0.1])
    assert out["changed"].iloc[0] == "unit"


def test_parameters_of_the_two_fit_routes_side_by_side():
    a = pd.DataFrame({"group": ["g", "g"], "model": ["mm", "mm"], "parameter": ["Vmax", "Km"],
                      "estimate": [10.0, 100.0], "stderr": [1.0, 10.0], "ci_low": [8.0, 80.0],
                      "ci_high": [12.0, 120.0], "unit": ["uM/min", "uM"]})  # an older run: no route column
    b = a.assign(route="curves", estimate=[10.5, 90.0])
    out = compare_parameters(a, b).set_index("parameter")
    # one route per run: matched by group, model and parameter, the routes named on each side
    assert_allclose(out.loc[["Vmax", "Km"], "relative_change"], [0.05, 0.1])
    assert list(out["route_a"]) == ["rates", "rates"] and list(out["route_b"]) == ["curves", "curves"]
    both = pd.concat([a.assign(route="rates"), b], ignore_index=True)
    out = compare_parameters(both, both.assign(estimate=both["estimate"] * 1.01))
    # a run with both routes is matched route by route: four changes, none across routes
    assert len(out) == 4 and bool((out["route_a"] == out["route_b"]).all())


def test_wells_diff_after_a_window_change(tmp_path: Path):
    recipe = linear_plate(tmp_path / "in", noise=2e-3, seed=3)
    a = run(recipe, tmp_path / "a").audit_path
    recipe.write_text(recipe.read_text("utf-8").replace('end: "300 s"', 'end: "120 s"'), "utf-8")
    b = run(recipe, tmp_path / "b").audit_path
    result = compare(a, b)
    assert '-  - rates: {method: window, start: "0 s", end: "300 s"}' in result["recipe_diff"]
    wells = result["wells"]
    assert len(wells) == 96 and set(wells["window_end_s_b"]) == {120.0}
    rel = wells["relative_change"].to_numpy()
    assert (np.diff(rel[np.isfinite(rel)]) <= 0).all()  # largest change first
    row = wells.iloc[0]
    assert_allclose(row["relative_change"], abs(row["rate_b"] - row["rate_a"]) / abs(row["rate_a"]))
    same = compare(a, a)
    assert same["recipe_diff"] == "" and same["wells"].empty and same["parameters"].empty


def test_diff_command_line_writes_csv(tmp_path: Path, capsys):
    recipe = linear_plate(tmp_path / "in")
    a = run(recipe, tmp_path / "a").audit_path
    shutil.copy(a, tmp_path / "b.h5")
    recipe.write_text(recipe.read_text("utf-8").replace('start: "0 s"', 'start: "60 s"'), "utf-8")
    b = run(recipe, tmp_path / "c").audit_path
    assert main(["diff", str(a), str(b), "--csv", str(tmp_path / "d.csv"), "--limit", "3"]) == 0
    out = capsys.readouterr().out
    assert "recipe changes:" in out and "wells changed: 96 of 96" in out and "... 93 more" in out
    table = pd.read_csv(tmp_path / "d.csv")
    assert set(table["kind"]) == {"well"} and len(table) == 96
    assert set(table["window_b"]) == {"60-300 s"}


def test_diff_and_read_table_refuse_a_changed_file(tmp_path: Path, capsys):
    """A received audit file is checked against its digests before its numbers are compared or read."""
    import h5py
    import pytest
    import vzero
    from vzero.errors import AuditFileError

    recipe = linear_plate(tmp_path / "in")
    a = run(recipe, tmp_path / "a").audit_path
    b = tmp_path / "b.h5"
    shutil.copy(a, b)
    with h5py.File(b, "r+") as f:  # one changed attribute, no changed number: still refused
        f.attrs["recipe_text"] = str(f.attrs["recipe_text"]).replace("300 s", "301 s")
    assert main(["diff", str(a), str(b)]) != 0
    refused = capsys.readouterr()
    assert "does not match its digests" in refused.err and "recipe changes:" not in refused.out
    with pytest.raises(AuditFileError, match="does not match its digests"):
        vzero.read_table(b, "rates")
    capsys.readouterr()
    assert main(["diff", str(a), str(b), "--no-verify"]) == 0
    captured = capsys.readouterr()
    assert "without checking its digests" in captured.err and "recipe changes:" in captured.out
    with pytest.warns(UserWarning, match="without checking its digests"):
        assert len(vzero.read_table(b, "rates", verify=False)) == 96
    assert len(vzero.read_table(a, "rates")) == 96
