"""Every cookbook recipe (configs/cookbook/) runs on invented data the test writes, with no Python warning,
and recovers the invented enzyme's parameters where the scenario has them.

The data come from tests/cookbook_data.py (invented scenarios). The true values checked below are the
ones the simulation used (kcat 20 1/s, Km 50 uM, ...): a check of the whole pipeline against the model that
generated the data, with tolerances set by the read noise.
"""

from __future__ import annotations

import shutil
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from vzero.cli.main import main
from vzero.run.runner import check_inputs, run

from tests.cookbook_data import KM, WRITERS

COOKBOOK = Path(__file__).resolve().parents[1] / "configs" / "cookbook"
RECIPES = sorted(p.name for p in COOKBOOK.glob("*.yaml"))


def _setup(name: str, folder: Path) -> Path:
    WRITERS[name](folder)
    shutil.copy(COOKBOOK / name, folder / name)
    return folder / name


def _param(fits: pd.DataFrame, model: str, name: str) -> float:
    row = fits[(fits["model"] == model) & (fits["parameter"] == name)]
    return float(row["estimate"].iloc[0])


def test_every_cookbook_recipe_has_invented_data():
    assert RECIPES and set(RECIPES) == set(WRITERS)


@pytest.mark.parametrize("name", RECIPES)
def test_cookbook_recipe_checks_and_runs_quietly(name: str, tmp_path: Path):
    recipe = _setup(name, tmp_path)
    check_inputs(recipe)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no Python warning may reach the user
        result = run(recipe, tmp_path / "out")
    assert result.exit_code == 0, result.failed_items
    fits = result.fits
    if name in ("absorbance-product.yaml", "substrate-consumed.yaml", "declared-layout.yaml", "batch.yaml"):
        km = _param(fits, "michaelis-menten", "Km")
        assert km == pytest.approx(30.0 if name == "substrate-consumed.yaml" else KM, rel=0.25)
    if name == "absorbance-product.yaml":
        assert _param(fits, "michaelis-menten", "kcat") == pytest.approx(20.0, rel=0.15)
    if name == "fluorescence-standard-curve.yaml":
        assert set(result.rates["rate_unit"]) == {"uM/min"}
        assert any("P24" in w for w in result.warnings)  # the saturated top standard, said in words
        assert _param(fits, "substrate-inhibition", "Km") == pytest.approx(KM, rel=0.3)
    if name == "inhibitor-matrix.yaml":
        assert _param(fits, "competitive", "Kic") == pytest.approx(15.0, rel=0.3)
    if name == "batch.yaml":
        assert set(result.rates["plate"]) == {"plate-1", "plate-2", "plate-3"}
    if name == "models-per-group.yaml":  # two fit steps, each on the groups its select picks
        by_step = fits.groupby("step")[["group", "model"]].apply(lambda f: sorted(set(map(tuple, f.values))))
        assert by_step.to_dict() == {"05-fit-nls": [("VZ-7", "hill"), ("VZ-7", "michaelis-menten")],
                                     "06-fit-nls": [("VZ-7 + VZI-4", "logistic-4p")]}
        assert not any("cannot apply" in w for w in result.warnings)  # select left no model where it cannot apply
        assert _param(fits, "michaelis-menten", "Km") == pytest.approx(KM, rel=0.25)
        # competitive: IC50 = Kic(1 + S/Km) = 20 uM x 2 at S = Km (Cheng & Prusoff 1973), Ki back to Kic 20 uM
        assert _param(fits, "logistic-4p", "IC50") == pytest.approx(40.0, rel=0.35)
        assert _param(fits, "logistic-4p", "Ki") == pytest.approx(20.0, rel=0.35)
        assert set(result.tables["model_comparison"].frame["step"]) == {"05-fit-nls", "06-fit-nls"}


def test_rerun_an_old_audit_file_with_a_new_recipe(tmp_path: Path, capsys):
    recipe = _setup("absorbance-product.yaml", tmp_path)
    shutil.copy(COOKBOOK / "absorbance-product-rerun.yaml", tmp_path)
    assert main(["run", str(recipe), "-q"]) == 0
    old = tmp_path / "absorbance-product" / "run.h5"
    new = tmp_path / "window"
    assert main(["rerun", str(old), "--recipe", str(tmp_path / "absorbance-product-rerun.yaml"), "--out",
                 str(new), "-q"]) == 0
    assert main(["diff", str(old), str(new / "run.h5")]) == 0
    said = capsys.readouterr().out
    assert "method: window" in said and "summary:" in said
    rates = pd.read_csv(new / "rates.csv")
    samples = rates[rates["role"] == "sample"]
    assert set(rates["method"]) == {"window"} and np.isfinite(samples["rate"]).all() and len(samples) == 36


@pytest.mark.parametrize("name", RECIPES)
def test_cookbook_recipes_use_only_documented_keys(name: str):
    import yaml

    page = (COOKBOOK.parents[1] / "docs" / "recipe-reference.md").read_text("utf-8")
    sections = {s.split("\n", 1)[0].strip(): s for s in page.split("\n### ")[1:]}
    recipe = yaml.safe_load((COOKBOOK / name).read_text("utf-8"))
    missing = [k for k in recipe if f"| `{k}` |" not in page]
    for step in recipe["steps"]:
        for kind, body in step.items():
            section = sections[f"{kind}: {body['method']}"]
            missing += [f"{kind}.{k}" for k in body if k != "method" and f"| `{k}` |" not in section]
    missing += [f"assay.{k}" for k in recipe.get("assay", {}) if f"| `{k}` |" not in page]
    assert missing == [], f"{name} uses keys the reference does not document: {missing}"
