"""Recipe rules that guard the meaning of a run: the format version, one kind per step, and step order;
and ``verify`` on an audit file without its results group."""

from __future__ import annotations

import shutil
from pathlib import Path

import h5py
import pytest
from vzero.audit.verify import verify
from vzero.errors import RecipeError
from vzero.recipe import FORMAT_VERSION, check, parse

from tests.conftest import DATA

GOOD = """\
vzero: 1
name: t
plates:
  - name: p
    data: plate.csv
    layout: layout.csv
steps:
  - import: {method: table}
  - rates: {method: window, start: "0 s", end: "60 s"}
  - fit: {method: nls}
"""


def _check(text: str, plugins):
    return check(parse(text, "recipe.yaml"), plugins.registry, exists=lambda rel: True, expand=lambda pat: [])


def test_the_good_recipe_passes(plugins) -> None:
    assert [s.kind for s in _check(GOOD, plugins).steps] == ["import", "rates", "fit"]


def test_future_format_version_is_refused(plugins) -> None:
    assert FORMAT_VERSION == 1
    with pytest.raises(RecipeError, match=r"recipe.yaml:1 vzero: recipe format 2 is not supported"):
        _check(GOOD.replace("vzero: 1", "vzero: 2"), plugins)
    with pytest.raises(RecipeError, match="recipe format 0 is not supported"):
        _check(GOOD.replace("vzero: 1", "vzero: 0"), plugins)


def test_a_step_with_two_kinds_is_refused(plugins) -> None:
    text = GOOD.replace("  - import: {method: table}\n", "  - import: {method: table}\n    blank: {method: mean}\n")
    with pytest.raises(RecipeError, match=r"steps\[0\]: expected one mapping like"):
        _check(text, plugins)


def test_a_plate_step_after_a_pooled_step_is_refused(plugins) -> None:
    text = GOOD.replace('  - rates: {method: window, start: "0 s", end: "60 s"}\n  - fit: {method: nls}\n',
                        '  - fit: {method: nls}\n  - rates: {method: window, start: "0 s", end: "60 s"}\n')
    with pytest.raises(RecipeError, match=r"steps\[2\]: a plate step \(rates\) cannot come after a pooled"):
        _check(text, plugins)


def test_a_pooled_step_after_a_final_step_is_refused(plugins) -> None:
    # the order plate < pooled < final (pipeline/recipe.py): a report (final) before a fit (pooled) is refused,
    # and the same report after the fit is accepted
    after = GOOD.replace("  - fit: {method: nls}\n", "  - fit: {method: nls}\n  - report: {method: html}\n")
    assert [s.kind for s in _check(after, plugins).steps] == ["import", "rates", "fit", "report"]
    before = GOOD.replace("  - fit: {method: nls}\n", "  - report: {method: html}\n  - fit: {method: nls}\n")
    with pytest.raises(RecipeError, match=r"steps\[3\]: a pooled step \(fit\) cannot come after a pooled or final"):
        _check(before, plugins)


def test_verify_reports_a_missing_results_group(tmp_path: Path) -> None:
    copy = tmp_path / "run.h5"
    shutil.copy(DATA / "audit" / "linear-v1.1.h5", copy)
    assert verify(copy).ok
    with h5py.File(copy, "a") as f:
        del f["results"]
    report = verify(copy)
    assert not report.ok
    assert "group /results is missing" in report.problems


def test_cross_parameter_rules_run_only_on_valid_parameters(plugins) -> None:
    # a wrong epsilon is reported alone; the "exactly one pathlength source" rule waits until the parameters
    # themselves are valid (else it would judge half-parsed settings)
    step = '  - convert: {method: beer-lambert, epsilon: "6220 cm"}\n'
    with pytest.raises(RecipeError) as err:
        _check(GOOD.replace("  - fit: {method: nls}\n", step), plugins)
    assert "steps[2].convert.epsilon" in str(err.value)
    assert "pathlength" not in str(err.value)
    with pytest.raises(RecipeError, match="pathlength"):
        _check(GOOD.replace("  - fit: {method: nls}\n", step.replace("6220 cm", "6220 M^-1 cm^-1")), plugins)


def test_plate_file_pattern_expanded_beside_the_recipe(plugins, tmp_path: Path) -> None:
    # the default expander (no stand-in): one plate per matching file, named by its stem, in sorted order
    (tmp_path / "plates").mkdir()
    for name in ("run-2.csv", "run-1.csv", "other.csv", "layout.csv"):
        (tmp_path / "plates" / name).write_text("x\n")
    text = GOOD.replace("  - name: p\n    data: plate.csv\n    layout: layout.csv\n",
                        '  - data: "plates/run-*.csv"\n    layout: plates/layout.csv\n')
    rec = check(parse(text, str(tmp_path / "recipe.yaml")), plugins.registry)
    assert [p.name for p in rec.plates] == ["run-1", "run-2"]
    assert rec.plates[0].files["data"] == str(Path("plates") / "run-1.csv")


def test_manifest_read_from_beside_the_recipe(plugins, tmp_path: Path) -> None:
    # the default reader (no stand-in) opens the manifest relative to the recipe's folder
    (tmp_path / "plates").mkdir()
    for name in ("a.csv", "b.csv", "layout.csv"):
        (tmp_path / "plates" / name).write_text("x\n")
    (tmp_path / "plates" / "list.csv").write_text("name,data,layout\nfirst,a.csv,layout.csv\nsecond,b.csv,layout.csv\n")
    text = GOOD.replace("  - name: p\n    data: plate.csv\n    layout: layout.csv\n", "  - manifest: plates/list.csv\n")
    rec = check(parse(text, str(tmp_path / "recipe.yaml")), plugins.registry)
    assert [p.name for p in rec.plates] == ["first", "second"]
    assert rec.plates[1].files["data"] == "plates/b.csv"
