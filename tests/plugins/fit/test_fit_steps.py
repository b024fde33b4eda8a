"""Several fit steps add up, each on the groups its ``select`` picks; models that cannot apply to a group are
left out with one line of notice, not a table of NaN.

The plate is the invented two-question scenario of tests/cookbook_data.py (a substrate series VZ-7 without
inhibitor, an inhibitor titration VZ-7 + VZI-4 at one substrate level).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from vzero.audit import reader
from vzero.cli.diff import compare
from vzero.data import steps_apart
from vzero.errors import RecipeError
from vzero.run.runner import check_recipe, run

from tests.cookbook_data import two_question_plate

HEAD = """vzero: 1
name: steps
plates:
  - {name: p1, data: two-question-plate.csv, layout: two-question-layout.csv}
steps:
  - import:  {method: table, signal_unit: AU}
  - blank:   {method: mean}
  - rates:   {method: window, start: "0 s", end: "120 s"}
  - convert: {method: beer-lambert, epsilon: "18000 M^-1 cm^-1", pathlength: "0.5 cm", output_unit: "uM/min"}
"""


def _recipe(folder: Path, fits: str) -> Path:
    two_question_plate(folder)
    path = folder / "r.yaml"
    path.write_text(HEAD + fits, "utf-8")
    return path


def _run(folder: Path, *steps: str) -> Any:
    """Run the plate with these later steps (each ``kind: {...}``), as one recipe."""
    return run(_recipe(folder, "".join(f"  - {s}\n" for s in steps)), folder / "out")


def test_one_models_list_on_every_group_skips_what_cannot_apply_in_one_line(tmp_path: Path):
    recipe = _recipe(tmp_path, "  - fit: {method: nls, models: [michaelis-menten, hill, logistic-4p], "
                               "profile: false}\n")
    result = run(recipe, tmp_path / "out")
    fits = result.fits
    pairs = set(zip(fits["group"], fits["model"], strict=True))
    assert pairs == {("VZ-7", "michaelis-menten"), ("VZ-7", "hill"), ("VZ-7 + VZI-4", "logistic-4p")}
    assert fits.loc[fits["parameter"].isin(["Vmax", "Km", "IC50"]), "estimate"].notna().all()  # no NaN tables
    said = [w for w in result.warnings if "cannot apply" in w]
    assert said == ["fit: not fitted where the model cannot apply: michaelis-menten on VZ-7 + VZI-4, hill on "
                    "VZ-7 + VZI-4 (no substrate series without inhibitor); logistic-4p on VZ-7 (no inhibitor "
                    "series)"]
    assert not [w for w in result.warnings if "too few" in w]


def test_two_fit_steps_add_up_and_stay_apart_by_step(tmp_path: Path):
    recipe = _recipe(tmp_path, "  - fit: {method: nls, models: [michaelis-menten], profile: false}\n"
                               "  - fit: {method: nls, models: [hill], select: {groups: [VZ-7]}, profile: false}\n")
    result = run(recipe, tmp_path / "out")
    fits = pd.read_csv(tmp_path / "out" / "fits.csv")
    assert list(fits.columns[:4]) == ["step", "route", "group", "model"]  # the route: rates or curves
    assert set(zip(fits["step"], fits["model"], strict=True)) == {("05-fit-nls", "michaelis-menten"),
                                                                   ("06-fit-nls", "hill")}
    for name in ("model_comparison", "cooperativity", "curves", "correlations"):
        assert set(result.tables[name].frame["step"]) <= {"05-fit-nls", "06-fit-nls"}, name
    # each step's own audit record holds its own tables, tagged with its label
    with reader.open_audit(result.audit_path) as f:
        own = {label: set(reader.read_table(f["steps"][label]["pooled"]["fits"]).frame["step"])
               for label in ("05-fit-nls", "06-fit-nls")}
    assert own == {"05-fit-nls": {"05-fit-nls"}, "06-fit-nls": {"06-fit-nls"}}
    # the same group fitted by two steps: readers that key on group and model keep the steps apart
    apart = steps_apart(result.tables["fits"].frame)
    assert {"michaelis-menten (05-fit-nls)", "hill (06-fit-nls)"} <= set(apart["model"])
    diff = compare(result.audit_path, result.audit_path)
    assert diff["counts"]["parameters"] == 0


def test_select_by_inhibitor_series_and_pattern(tmp_path: Path):
    result = _run(tmp_path, "fit: {method: nls, models: [michaelis-menten], select: {inhibitor: false}}",
                  "fit: {method: nls, models: [logistic-4p], select: {groups: 'VZ-7 +*', inhibitor: true}}",
                  "fit: {method: nls, models: [hill], select: {groups: 'nothing-*'}}")
    fits = result.fits
    got = fits.groupby("step")["group"].agg(lambda g: sorted(set(g))).to_dict()
    assert got == {"05-fit-nls": ["VZ-7"], "06-fit-nls": ["VZ-7 + VZI-4"]}
    assert any("matches none of the groups (VZ-7, VZ-7 + VZI-4)" in w for w in result.warnings)
    assert not any("cannot apply" in w for w in result.warnings)


@pytest.mark.parametrize(("select", "message"), [
    ("{grups: VZ-7}", "unknown key 'grups' (did you mean 'groups'?); valid: groups, inhibitor"),
    ("{inhibitor: yes please}", "inhibitor: expected true (groups with an inhibitor series) or false"),
    ("{groups: [VZ-7, 3]}", "groups: expected a group name or pattern (VZ-*) or a list of them"),
    ("[VZ-7]", "expected a mapping"),
])
def test_select_problems_name_the_file_and_line(tmp_path: Path, select: str, message: str):
    recipe = _recipe(tmp_path, f"  - fit: {{method: nls, models: [hill], select: {select}}}\n")
    line = len(recipe.read_text("utf-8").splitlines())
    with pytest.raises(RecipeError) as err:
        check_recipe(recipe)
    text = str(err.value)
    assert f"r.yaml:{line} steps[4].fit.select" in text and message in text, text


def test_steps_apart_leaves_single_step_tables_alone():
    one = pd.DataFrame({"step": ["05-fit-nls"] * 2, "group": ["a", "b"], "model": ["hill", "hill"]})
    assert steps_apart(one) is one
    two = pd.DataFrame({"step": ["05-fit-nls", "06-fit-nls", "06-fit-nls"], "group": ["a", "a", "b"],
                        "model": ["hill", "hill", "hill"]})
    assert list(steps_apart(two)["model"]) == ["hill (05-fit-nls)", "hill (06-fit-nls)", "hill"]
    assert np.array_equal(steps_apart(two)["group"], two["group"])


def test_report_keeps_two_steps_on_one_group_apart(tmp_path: Path):
    result = _run(tmp_path, "fit: {method: nls, models: [michaelis-menten], profile: false}",
                  "fit: {method: nls, models: [michaelis-menten, hill], select: {groups: VZ-7}, profile: false}",
                  "report: {method: html}")
    assert result.exit_code == 0, result.failed_items
    html = "\n".join(p.read_text("utf-8") for p in (tmp_path / "out").rglob("*.html"))
    # VZ-7 was fitted by both steps: its Michaelis-Menten fits appear once per step, named with the step
    assert "michaelis-menten (05-fit-nls)" in html and "michaelis-menten (06-fit-nls)" in html
    assert "hill (06-fit-nls)" in html
