"""The stage contract: framework-owned bases apply the recipe's rules to every method, and the runner checks
each step's output against its kind's schema, naming the plugin that broke it (docs/schemas.md)."""

from __future__ import annotations

import ast
import textwrap
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from vzero.errors import PluginError, StageError
from vzero.manager import make_manager
from vzero.plugins.kinetics import RateMethod, flags
from vzero.plugins.kinetics.schemas import SCHEMAS
from vzero.run.runner import run
from vzero.schema import describe

from tests.conftest import DATA, linear_plate

ROOT = Path(__file__).resolve().parents[3]


def _lab_recipe(tmp_path: Path, extra: str = "") -> Path:
    recipe = linear_plate(tmp_path / "in")
    (tmp_path / "in" / "lab_rates.py").write_bytes((DATA / "plugins" / "lab_rates.py").read_bytes())
    text = recipe.read_text("utf-8").replace("name: linear\n", "name: linear\nplugins: [lab_rates.py]\n" + extra)
    text = text.replace('{method: window, start: "0 s", end: "300 s"}', "{method: first-reads, reads: 6}")
    recipe.write_text(text, "utf-8")
    return recipe


def test_out_of_tree_rate_method_is_short_and_imports_only_the_public_surface():
    tree = ast.parse((DATA / "plugins" / "lab_rates.py").read_text("utf-8"))
    first = tree.body[1].lineno  # the module docstring left out
    last = tree.body[-1].end_lineno
    assert last - first + 1 <= 30
    imported = {n.module if isinstance(n, ast.ImportFrom) else a.name for n in ast.walk(tree)
                if isinstance(n, ast.Import | ast.ImportFrom) for a in n.names}
    assert imported == {"numpy", "vzero", "vzero.params", "vzero.plugins.kinetics"}


def test_out_of_tree_rate_method_gets_exclusions_and_overrides(tmp_path: Path):
    extra = ('exclusions:\n  - {plate: p1, well: A2, reason: "bubble"}\n'
             '  - {plate: p1, well: A3, time: "30 s", reason: "door opened"}\n'
             'overrides:\n  - {plate: p1, well: B5, start: "60 s", end: "240 s", reason: "after the lag"}\n')
    result = run(_lab_recipe(tmp_path, extra), tmp_path / "out")
    rates = result.rates.set_index("well")
    slopes = np.linspace(1e-4, 1e-3, 96)
    # A2: excluded by the recipe: flag, no rate, the reason in the note
    assert rates.loc["A2", "flags"] == "excluded" and np.isnan(rates.loc["A2", "rate"])
    assert "bubble" in rates.loc["A2", "note"]
    # A3: the read at 30 s is masked, so the kernel's six reads hold five usable ones
    assert rates.loc["A3", "n_points"] == 5 and "door opened" in rates.loc["A3", "note"]
    # B5: the override's window replaces the method's slope (exact line + the blank-corrected drift: slope)
    assert rates.loc["B5", "method"] == "window (override)" and "overridden" in rates.loc["B5", "flags"]
    assert rates.loc["B5", "window_start_s"] == 60.0 and rates.loc["B5", "window_end_s"] == 240.0
    assert_allclose(rates.loc["B5", "rate"], slopes[16], rtol=1e-9)
    assert_allclose(rates.loc["A1", "rate"], slopes[0], rtol=1e-9)  # the lab's own kernel elsewhere
    assert rates.loc["A1", "method"] == "first-reads"


def _plugin(tmp_path: Path, name: str, body: str) -> Path:
    (tmp_path / name).write_text(textwrap.dedent(body), "utf-8")
    return tmp_path


def test_a_rate_method_that_overrides_run_is_refused():
    with pytest.raises(PluginError, match=r"overrides run\(\), which RateMethod owns"):
        class Sneaky(RateMethod):
            method = "sneaky"

            def run(self, data):
                return None


def test_a_plugin_file_whose_rate_method_overrides_run_is_refused_by_name(tmp_path: Path):
    _plugin(tmp_path, "sneaky.py", """
        from vzero import hookimpl
        from vzero.plugins.kinetics import RateMethod

        class Sneaky(RateMethod):
            method = "sneaky"

            def run(self, data):
                return None

        @hookimpl
        def vzero_register(registry):
            registry.add(Sneaky)
        """)
    with pytest.raises(PluginError, match=r"plugin file 'sneaky.py' failed to import.*overrides run\(\)"):
        make_manager(["sneaky.py"], base_dir=tmp_path, autoload=False)


def test_a_rates_stage_outside_the_base_is_refused_naming_its_plugin(tmp_path: Path):
    _plugin(tmp_path, "own_table.py", """
        from vzero import hookimpl
        from vzero.stage import Stage

        class OwnTable(Stage):
            kind, method = "rates", "own-table"

        @hookimpl
        def vzero_register(registry):
            registry.add(OwnTable)
        """)
    with pytest.raises(PluginError, match=r"plugin 'file:own_table.py'.*does not derive from "
                                          r"vzero.plugins.kinetics.methods.RateMethod"):
        make_manager(["own_table.py"], base_dir=tmp_path, autoload=False)


def test_a_table_missing_a_column_is_blamed_on_its_plugin_not_the_next_stage(tmp_path: Path):
    # An import method that reads rates measured elsewhere but leaves out the flags column: the fit step
    # after it would fail on the missing column; the runner stops at the import and names its plugin.
    folder = tmp_path / "in"
    folder.mkdir()
    (folder / "rates.csv").write_text("substrate,rate\n1,0.9\n2,1.6\n5,2.9\n10,3.8\n", "utf-8")
    _plugin(folder, "lossy.py", """
        import io
        import pandas as pd
        from vzero import hookimpl
        from vzero.data import Table
        from vzero.plugins.kinetics import ImportMethod
        from vzero.stage import StageOutput

        class Lossy(ImportMethod):
            method, version = "lossy", "0.1"

            def read(self, data):
                frame = pd.read_csv(io.BytesIO(data.inputs["data"].data))
                frame["well"], frame["role"], frame["method"] = [f"r{i}" for i in range(len(frame))], "sample", "x"
                frame["rate_stderr"], frame["rate_unit"] = 0.01, "uM/min"
                return StageOutput(artifacts={"rates": Table(frame, {"substrate": "uM", "rate": "uM/min",
                                                                      "rate_stderr": "uM/min"})})

        @hookimpl
        def vzero_register(registry):
            registry.add(Lossy)
        """)
    (folder / "recipe.yaml").write_text(
        "vzero: 1\nname: lossy\nplugins: [lossy.py]\nplates:\n  - name: p1\n    data: rates.csv\n"
        "steps:\n  - import: {method: lossy}\n  - fit: {method: nls, models: [michaelis-menten]}\n", "utf-8")
    with pytest.raises(StageError) as info:
        run(folder / "recipe.yaml", tmp_path / "out")
    message = str(info.value)
    assert "step 1 (import: lossy, from local file 0 (lossy.py)) on plate p1" in message
    assert "rates: column 'flags' is missing" in message and "fit" not in message


def test_a_kernel_result_of_the_wrong_shape_names_the_method(tmp_path: Path):
    recipe = linear_plate(tmp_path / "in")
    _plugin(tmp_path / "in", "short.py", """
        import numpy as np
        from vzero import hookimpl
        from vzero.plugins.kinetics import RateMethod, RateResult

        class Short(RateMethod):
            method, version = "short", "0.1"

            def kernel(self, time, signal, plate):
                return RateResult(v0=np.zeros(3))

        @hookimpl
        def vzero_register(registry):
            registry.add(Short)
        """)
    text = recipe.read_text("utf-8").replace("name: linear\n", "name: linear\nplugins: [short.py]\n")
    recipe.write_text(text.replace('{method: window, start: "0 s", end: "300 s"}', "{method: short}"), "utf-8")
    with pytest.raises(StageError, match=r"rates: short, from local file.*v0 has shape \(3,\), expected \(96,\)"):
        run(recipe, tmp_path / "out")


def test_flag_name_lists_come_from_the_flag_type():
    from vzero.plugins.fit.stage import DEFAULT_EXCLUDE, FLAG_CHOICES
    from vzero.plugins.report.content import FLAG_TEXT
    from vzero.plugins.report.panels import FLAG_SHORT

    names = [f.name.lower() for f in flags.Flag if f.name and f is not flags.Flag.NONE]
    assert list(FLAG_CHOICES) == names == list(FLAG_TEXT) == list(FLAG_SHORT)
    assert set(DEFAULT_EXCLUDE) < set(names) and "excluded" in DEFAULT_EXCLUDE and "noisy" not in DEFAULT_EXCLUDE


def test_docs_schemas_match_the_registered_schemas():
    text = (ROOT / "docs" / "schemas.md").read_text("utf-8")
    for schema in SCHEMAS:
        assert describe(schema) in text, f"docs/schemas.md is out of date for {schema.name}; see its header"
