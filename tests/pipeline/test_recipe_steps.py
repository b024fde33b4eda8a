"""The recipe's step checks, every branch: step numbering, names of registered components, and the list of
steps a run may skip when their plugin is not loaded."""

from __future__ import annotations

import pytest
from vzero.errors import RecipeError
from vzero.recipe import check, parse

from tests.pipeline.test_recipe_rules import GOOD

HEAD = GOOD.split("  - rates")[0]  # the header and the import step


def _check(steps: str, plugins, skipped: list[str] | None = None):
    return check(parse(HEAD + steps, "recipe.yaml"), plugins.registry, exists=lambda rel: True,
                 expand=lambda pat: [], skipped=skipped)


def test_steps_are_numbered_from_one_in_recipe_order(plugins) -> None:
    rec = _check('  - rates: {method: window, start: "0 s", end: "60 s"}\n  - fit: {method: nls}\n', plugins)
    assert [s.index for s in rec.steps] == [1, 2, 3]
    assert [s.label for s in rec.steps] == ["01-import-table", "02-rates-window", "03-fit-nls"]
    assert [s.line for s in rec.steps] == [8, 9, 10]


def test_a_kind_without_method_takes_its_default(plugins) -> None:
    rec = _check("  - rates: {}\n", plugins)
    assert rec.steps[1].method == plugins.registry.default("rates") == "model-choice"
    with pytest.raises(RecipeError, match=r"steps\[1\]\.fit: missing 'method'; available fit methods: curves, nls"):
        _check("  - fit: {}\n", plugins)


def test_model_names_in_a_step_must_be_registered(plugins) -> None:
    assert _check("  - rates: {}\n  - fit: {method: nls, models: [michaelis-menten, hill]}\n", plugins)
    with pytest.raises(RecipeError, match=r"models\[1\]: no model named 'michaelis-mentn' "
                                          r"\(did you mean 'michaelis-menten'\?\)"):
        _check("  - rates: {}\n  - fit: {method: nls, models: [hill, michaelis-mentn]}\n", plugins)


def test_only_steps_of_unloaded_plugins_are_skipped(plugins) -> None:
    skipped: list[str] = []
    rec = _check("  - rates: {}\n  - nosuchkind: {method: x}\n  - fit: {method: nosuch}\n"
                 "  - fit: {method: nls}\n", plugins, skipped)
    assert [s.kind for s in rec.steps] == ["import", "rates", "fit"]
    assert len(skipped) == 2
    assert "(nosuchkind: x)" in skipped[0] and "(fit: nosuch)" in skipped[1]
    # without the list, the same steps are errors
    with pytest.raises(RecipeError, match="unknown step kind"):
        _check("  - nosuchkind: {method: x}\n", plugins)
