"""Recipe validation: every problem found before any work starts, each naming file, line and key path."""

from __future__ import annotations

import pytest
from vzero.errors import RecipeError
from vzero.recipe import check, parse

GOOD = """\
vzero: 1
name: t
plates:
  - name: p
    data: plate.csv
    layout: layout.csv
steps:
  - import: {method: table}
  - rates:
      method: window
      start: "0 s"
      end: "60 s"
"""


def _check(text, plugins):
    rec = parse(text, "recipe.yaml")
    return check(rec, plugins.registry, exists=lambda rel: True, expand=lambda pat: [])


def test_good_recipe_validates(plugins):
    rec = _check(GOOD, plugins)
    assert [s.method for s in rec.steps] == ["table", "window"]
    assert rec.steps[1].settings["end"].m_as("s") == 60
    assert rec.plates[0].files == {"data": "plate.csv", "layout": "layout.csv"}


def test_a_step_without_method_gets_the_kinds_default(plugins):
    # the rates stage declares one default method (model-choice); import declares none, so it stays required
    text = GOOD.replace("""  - rates:
      method: window
      start: "0 s"
      end: "60 s"
""", "  - rates: {}\n")
    rec = _check(text, plugins)
    assert [s.method for s in rec.steps] == ["table", "model-choice"]
    with pytest.raises(RecipeError) as err:
        _check(text.replace("  - import: {method: table}", "  - import: {}"), plugins)
    assert "missing 'method'" in str(err.value)


def test_misspelt_parameter_names_line_path_and_closest(plugins):
    text = GOOD.replace('      end: "60 s"', '      ennd: "60 s"')
    with pytest.raises(RecipeError) as err:
        _check(text, plugins)
    assert "recipe.yaml:12 steps[1].rates.ennd: unknown parameter (did you mean 'end'?)" in str(err.value)


def test_number_without_unit_suggests_the_unit(plugins):
    text = GOOD.replace('end: "60 s"', "end: 60")
    with pytest.raises(RecipeError) as err:
        _check(text, plugins)
    assert 'recipe.yaml:12 steps[1].rates.end: expected a quantity like "1 s", got 60 (did you mean "60 s"?)' in str(
        err.value
    )


def test_wrong_dimension_and_unknown_method_reported_together(plugins):
    text = GOOD.replace('end: "60 s"', 'end: "60 cm"').replace("method: window", "method: windw")
    with pytest.raises(RecipeError) as err:
        _check(text, plugins)
    msg = str(err.value)
    assert "recipe.yaml:10 steps[1].rates.method: no rates method 'windw' (did you mean 'window'?)" in msg


def test_wrong_dimension(plugins):
    with pytest.raises(RecipeError, match=r"recipe.yaml:12 steps\[1\].rates.end: expected a quantity with a unit"):
        _check(GOOD.replace('end: "60 s"', 'end: "60 cm"'), plugins)


def test_unknown_top_level_key_and_missing_file(plugins):
    rec = parse(GOOD.replace("plates:", "platez: []\nplates:"), "recipe.yaml")
    with pytest.raises(RecipeError) as err:
        check(rec, plugins.registry, exists=lambda rel: rel != "layout.csv", expand=lambda pat: [])
    msg = str(err.value)
    assert "recipe.yaml:3 platez: unknown key (did you mean 'plates'?)" in msg
    assert "recipe.yaml:7 plates[0].layout: input file 'layout.csv' not found" in msg


def test_yaml_syntax_error_names_line():
    with pytest.raises(RecipeError, match=r"recipe.yaml:3 is not valid YAML: mapping values are not allowed"):
        parse("vzero: 1\nname: a\nsteps: b: c\n", "recipe.yaml")


def test_duplicate_key_is_an_error():
    with pytest.raises(RecipeError, match=r"recipe.yaml:3 name: key given twice \(first on line 2\)"):
        parse("vzero: 1\nname: a\nname: b\n", "recipe.yaml")


def test_step_kind_typo(plugins):
    with pytest.raises(RecipeError, match=r"steps\[1\].rate: unknown step kind \(did you mean 'rates'\?\)"):
        _check(GOOD.replace("  - rates:", "  - rate:"), plugins)
