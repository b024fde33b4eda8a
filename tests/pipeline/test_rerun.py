"""``vzero rerun``: the stored raw bytes reprocessed without the original files; provenance; plugin checks."""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from vzero.audit import reader
from vzero.cli.main import main
from vzero.errors import PluginError, RecipeError
from vzero.run.rerun import StoredInputs, rerun
from vzero.run.runner import run

from tests.conftest import DATA, linear_plate

SLOPES = np.linspace(1e-4, 1e-3, 96)[:84]  # rows A-G of conftest.linear_plate; row H are blanks


def _old_run(tmp_path: Path, recipe: Path | None = None) -> Path:
    recipe = recipe or linear_plate(tmp_path / "in")
    result = run(recipe, tmp_path / "old")
    shutil.rmtree(recipe.parent)  # the original files are gone: only the audit file is left
    return result.audit_path


def test_stored_recipe_rerun_matches_and_records_origin(tmp_path: Path):
    old = _old_run(tmp_path)
    result = rerun(old, tmp_path / "new")
    assert_allclose(result.rates["rate"].to_numpy()[:84], SLOPES, rtol=1e-9)  # known slopes of the plate
    with reader.open_audit(old) as f:
        old_head = reader.header(f)
    with reader.open_audit(result.audit_path) as f:
        head = reader.header(f)
    d = head["derived_from"]
    assert d["path"] == str(old.resolve())
    assert d["run_id"] == old_head["run_id"] and d["recipe_sha256"] == old_head["recipe_sha256"]
    assert head["recipe_sha256"] == old_head["recipe_sha256"]


def test_new_recipe_names_stored_inputs(tmp_path: Path):
    old = _old_run(tmp_path)
    new = tmp_path / "new.yaml"
    with reader.open_audit(old) as f:
        text = reader.header(f)["recipe_text"]
    new.write_text(text.replace('end: "300 s"', 'end: "150 s"'), "utf-8")
    result = rerun(old, tmp_path / "out", recipe=new)
    rates = result.rates
    assert set(rates["window_end_s"].iloc[:84]) == {150.0}
    assert set(rates["n_points"].iloc[:84]) == {11}  # reads every 15 s from 0 to 150 s inclusive
    assert_allclose(rates["rate"].to_numpy()[:84], SLOPES, rtol=1e-9)  # straight lines: same slope
    with reader.open_audit(result.audit_path) as f:
        head = reader.header(f)
    assert head["derived_from"]["same_recipe"] is False
    assert hashlib.sha256(new.read_bytes()).hexdigest() == head["recipe_sha256"]


def test_new_recipe_naming_an_unknown_input_is_refused_with_the_stored_names(tmp_path: Path):
    old = _old_run(tmp_path)
    new = tmp_path / "new.yaml"
    with reader.open_audit(old) as f:
        new.write_text(reader.header(f)["recipe_text"].replace("data: plate.csv", "data: other.csv"), "utf-8")
    with pytest.raises(RecipeError, match=r"other\.csv.*not found[\s\S]*stored in .*plate\.csv, layout\.csv"):
        rerun(old, tmp_path / "out", recipe=new)
    assert not (tmp_path / "out").exists()


def test_stored_inputs_source():
    src = StoredInputs({"a/plate1.csv": b"1", "a/plate2.csv": b"2", "layout.csv": b"3"}, "x.h5")
    assert src.expand("a/plate*.csv") == ["a/plate1.csv", "a/plate2.csv"]
    assert src.exists("layout.csv") and not src.exists("nope.csv")
    assert src.read("a/plate2.csv") == b"2"


def _plugin_run(tmp_path: Path) -> tuple[Path, Path]:
    recipe = linear_plate(tmp_path / "in")
    shutil.copy(DATA / "plugins" / "lab_rates.py", recipe.parent / "lab_rates.py")
    text = recipe.read_text("utf-8").replace("steps:", "plugins: [lab_rates.py]\nsteps:")
    recipe.write_text(text.replace('{method: window, start: "0 s", end: "300 s"}', "{method: first-reads}"), "utf-8")
    return recipe, run(recipe, tmp_path / "old").audit_path


def test_stored_recipe_plugins_run_only_when_passed_and_unchanged(tmp_path: Path):
    recipe, old = _plugin_run(tmp_path)
    plugin = recipe.parent / "lab_rates.py"
    with pytest.raises(PluginError, match=r"lab_rates\.py.*--plugin lab_rates\.py"):
        rerun(old, tmp_path / "unnamed")  # the file sits where the recipe said, but the user did not name it
    assert not (tmp_path / "unnamed").exists()
    same = rerun(old, tmp_path / "same", plugins=[str(plugin)])
    assert same.exit_code == 0
    assert rerun(same.audit_path, tmp_path / "again", plugins=[str(plugin)]).exit_code == 0  # a rerun of a rerun
    plugin.write_text(plugin.read_text("utf-8").replace('__version__ = "0.3"', '__version__ = "0.4"'), "utf-8")
    with pytest.raises(PluginError, match="differs from the old run's"):
        rerun(old, tmp_path / "changed", plugins=[str(plugin)])
    assert not (tmp_path / "changed").exists()
    result = rerun(old, tmp_path / "changed", plugins=[str(plugin)], allow_changed_plugins=True)
    with reader.open_audit(result.audit_path) as f:
        assert reader.header(f)["derived_from"]["changed_plugins"] == ["lab_rates.py"]
    with pytest.raises(PluginError, match="names no such plugin"):
        rerun(old, tmp_path / "extra", plugins=[str(plugin), str(DATA / "plugins" / "other.py")])
    plugin.unlink()
    with pytest.raises(PluginError, match="no such file"):
        rerun(old, tmp_path / "missing", plugins=[str(plugin)])


def test_rerun_command_line(tmp_path: Path, capsys):
    old = _old_run(tmp_path)
    assert main(["rerun", str(old), "--out", str(tmp_path / "cli"), "-q"]) == 0
    assert (tmp_path / "cli" / "run.h5").is_file()
    assert main(["rerun", str(tmp_path / "missing.h5"), "--out", str(tmp_path / "x")]) == 2
    assert "not found" in capsys.readouterr().err


def test_stored_recipe_does_not_import_modules_without_consent(tmp_path: Path):
    """An audit file may come from anywhere: a module its stored recipe names is not imported unless the user
    names it with --plugin, and a stored recipe that no longer matches its hash is refused."""
    import h5py
    from vzero.errors import AuditFileError

    old = _old_run(tmp_path)
    with h5py.File(old, "r+") as f:
        text = f.attrs["recipe_text"].replace("steps:", "plugins: [json]\nsteps:")
        f.attrs["recipe_text"] = text
    with pytest.raises(AuditFileError, match="does not match its stored sha256"):
        rerun(old, tmp_path / "tampered")
    import hashlib

    with h5py.File(old, "r+") as f:
        f.attrs["recipe_sha256"] = hashlib.sha256(text.encode("utf-8")).hexdigest()
    with pytest.raises(PluginError, match=r"uses plugins \(json\).*--plugin json"):
        rerun(old, tmp_path / "modules")
    assert not (tmp_path / "modules").exists()
    assert rerun(old, tmp_path / "allowed", plugins=["json"]).exit_code == 0


def test_identical_inputs_under_two_names_rerun(tmp_path: Path):
    """Two plates with byte-identical layouts under different names: the bytes are stored once, every name is
    kept, and a rerun finds both."""
    import shutil

    recipe = linear_plate(tmp_path / "in")
    folder = recipe.parent
    shutil.copy(folder / "layout.csv", folder / "layout2.csv")
    shutil.copy(folder / "plate.csv", folder / "plate2.csv")
    second = "  - name: p2\n    data: plate2.csv\n    layout: layout2.csv\n"
    text = recipe.read_text("utf-8").replace("    layout: layout.csv\n", "    layout: layout.csv\n" + second)
    recipe.write_text(text, "utf-8")
    old = run(recipe, tmp_path / "old").audit_path
    result = rerun(old, tmp_path / "again")
    assert result.exit_code == 0 and set(result.rates["plate"]) == {"p1", "p2"}
