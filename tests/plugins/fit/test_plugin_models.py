"""A model registered by a plugin gets the treatment of a built-in one: the fit and report code read what a
model means (title, cooperativity coefficient, where Ki comes from, limiting rate) from the model object,
never from a list of built-in names."""

from __future__ import annotations

import ast
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from vzero.data import Table
from vzero.params import validate
from vzero.plugins import fit as fit_plugin
from vzero.plugins.fit.catalog import BY_NAME, MODELS
from vzero.plugins.fit.stage import FitStage
from vzero.plugins.report import content
from vzero.registry import Registry
from vzero.stage import StageInput

ROOT = Path(__file__).resolve().parents[3]

# a lab's own copies of two built-in rate laws, under names and titles of its own
LAB_HILL = replace(BY_NAME["hill"], name="lab-sigmoid", title="Lab sigmoid", nests={"lab-hyperbola": "h = 1"})
LAB_MM = replace(BY_NAME["michaelis-menten"], name="lab-hyperbola", title="Lab hyperbola")
LAB_IC50 = replace(BY_NAME["logistic-4p"], name="lab-dose-response", title="Lab dose response")


def _registry() -> Registry:
    reg = Registry()
    fit_plugin.vzero_register(reg)
    for model in (LAB_HILL, LAB_MM, LAB_IC50):
        reg.add(model)
    return reg


def _run(frame: pd.DataFrame, **settings: object) -> dict[str, Table]:
    values, problems = validate(FitStage.params, settings)
    assert not problems, problems
    units = {"rate": "uM/min", "substrate": "uM", "inhibitor": "uM", "enzyme": "nM"}
    data = StageInput({"rates": Table(frame, units)}, None, {}, {}, _registry(), lambda _: None)
    return FitStage(**values).run(data).artifacts


def _cooperative() -> pd.DataFrame:
    # invented data: a Hill curve (Vmax 8, K0.5 10, h 2.5) with seeded Gaussian noise of SD 0.05
    rng = np.random.default_rng(11)
    s = np.repeat(np.geomspace(1, 100, 10), 3)
    v = 8 * s**2.5 / (10**2.5 + s**2.5) + 0.05 * rng.standard_normal(s.size)
    return pd.DataFrame({"plate": "P1", "well": [f"A{k}" for k in range(s.size)], "group": "coop",
                         "role": "sample", "substrate": s, "inhibitor": np.nan, "enzyme": 10.0, "rate": v,
                         "flags": ""})


def test_plugin_cooperativity_model_is_tested_like_the_built_in_one() -> None:
    out = _run(_cooperative(), models=["hill", "michaelis-menten", "lab-sigmoid", "lab-hyperbola"])
    coop = out["cooperativity"].frame.set_index("model")
    assert set(coop.index) == {"hill", "lab-sigmoid"}
    # the same rate laws on the same points: the same verdict, coefficient and F-test
    for col in ("h", "ci_low", "ci_high", "F", "p_vs_michaelis_menten"):
        assert coop.loc["lab-sigmoid", col] == pytest.approx(coop.loc["hill", col], rel=1e-9)
    assert coop.loc["lab-sigmoid", "verdict"] == coop.loc["hill", "verdict"] == "positive"
    # the reason names the plugin's models by their own titles
    assert "Lab hyperbola" in coop.loc["lab-sigmoid", "reason"]
    fits = out["fits"].frame
    kcat = fits[(fits.parameter == "kcat")].set_index("model")["estimate"]
    assert kcat["lab-sigmoid"] == pytest.approx(kcat["hill"], rel=1e-9)
    assert kcat["lab-hyperbola"] == pytest.approx(kcat["michaelis-menten"], rel=1e-9)
    assert "kcat/Km" in set(fits[fits.model == "lab-hyperbola"].parameter)


def test_plugin_titration_model_converts_to_ki_like_the_built_in_one() -> None:
    # invented titration: top 10, bottom 0.5, IC50 2 uM, slope 1, one substrate level 5 uM (no noise)
    i = np.repeat(np.geomspace(0.05, 100, 10), 2)
    v = 0.5 + 9.5 / (1 + i / 2.0) * (1 + 0.002 * np.sin(np.arange(i.size)))
    frame = pd.DataFrame({"plate": "P1", "well": [f"B{k}" for k in range(i.size)], "group": "titr",
                          "role": "sample", "substrate": 5.0, "inhibitor": i, "enzyme": 1.0, "rate": v, "flags": ""})
    out = _run(frame, models=["logistic-4p", "lab-dose-response"], mechanism="competitive", km="5 uM")
    ki = out["fits"].frame.query("parameter == 'Ki'").set_index("model")
    assert ki.loc["lab-dose-response", "estimate"] == pytest.approx(ki.loc["logistic-4p", "estimate"], rel=1e-9)
    assert "Cheng-Prusoff" in ki.loc["lab-dose-response", "note"]


def test_report_titles_come_from_the_models() -> None:
    titles = content.model_titles({m.name: m for m in (*MODELS, LAB_HILL)})
    assert content.model_title("lab-sigmoid", titles) == "Lab sigmoid"
    assert content.model_title("hill", titles) == "Hill"
    assert content.plain_models("lab-sigmoid over hill", titles) == "Lab sigmoid over Hill"


# the inhibition mechanisms are also the values of fit.mechanism (the mechanism a Ki conversion assumes), and
# "hill" is also the Hill plot among the linear transforms the report draws
NOT_MODELS = {"competitive", "uncompetitive", "noncompetitive", "mixed"}


@pytest.mark.parametrize(("path", "allowed"), [
    ("plugins/fit/run.py", NOT_MODELS), ("plugins/fit/compare.py", set()), ("plugins/report/build.py", set()),
    ("plugins/report/content.py", set()), ("plugins/report/figures.py", {"hill"})])
def test_fit_and_report_code_name_no_model(path: str, allowed: set[str]) -> None:
    """No built-in model name appears as a string in the code that fits or reports (docstrings aside)."""
    names = {m.name for m in MODELS} - allowed
    tree = ast.parse((ROOT / path).read_text(encoding="utf-8"))
    docstrings = {id(n.body[0].value) for n in ast.walk(tree)
                  if isinstance(n, (ast.Module, ast.FunctionDef, ast.ClassDef)) and n.body
                  and isinstance(n.body[0], ast.Expr) and isinstance(n.body[0].value, ast.Constant)}
    found = [n.value for n in ast.walk(tree) if isinstance(n, ast.Constant) and isinstance(n.value, str)
             and id(n) not in docstrings and n.value in names]
    assert not found, f"{path} names built-in models {found}: put what the code needs on the Model"


def test_the_report_takes_its_models_from_the_registry() -> None:
    from vzero.plugins.report.sources import registry_models

    models = registry_models(_registry())
    assert models["lab-sigmoid"] is LAB_HILL and models["hill"] is BY_NAME["hill"]
    assert content.model_titles(models)["lab-dose-response"] == "Lab dose response"
    assert registry_models(None) == {}
