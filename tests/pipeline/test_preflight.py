"""``vzero check`` catches what ``vzero run`` would reject at its start; partial plates are normal.

The scenario is invented (a 96-well plate of straight-line progress curves, tests/conftest.py).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from vzero.cli.main import default_out, main
from vzero.run.runner import check_inputs, run

from tests.conftest import linear_plate

FIT = "  - fit: {method: nls, models: [michaelis-menten]}\n"


def _with_fit(recipe: Path, fit: str = FIT) -> Path:
    recipe.write_text(recipe.read_text("utf-8") + fit, "utf-8")
    return recipe


def _said(capsys: pytest.CaptureFixture[str]) -> str:
    out = capsys.readouterr()
    return out.out + out.err


def test_check_rejects_a_misspelt_model_like_run(tmp_path: Path, capsys):
    recipe = _with_fit(linear_plate(tmp_path), "  - fit: {method: nls, models: [michaelis-mentn]}\n")
    assert main(["check", str(recipe)]) == 2
    said = _said(capsys)
    assert "recipe.yaml:" in said and "no model named 'michaelis-mentn'" in said
    assert "did you mean 'michaelis-menten'" in said
    assert main(["run", str(recipe), "--out", str(tmp_path / "out")]) == 2 and not (tmp_path / "out").exists()


def test_check_rejects_a_parameter_out_of_range(tmp_path: Path, capsys):
    recipe = linear_plate(tmp_path)
    recipe.write_text(recipe.read_text("utf-8").replace("{method: table}", "{method: table, skip_rows: -1}"))
    assert main(["check", str(recipe)]) == 2
    assert "skip_rows" in _said(capsys)


@pytest.mark.parametrize("header", ["Conc (uM)", "substrate_conc", None])
def test_layout_without_a_substrate_column_is_rejected_by_check_and_run(tmp_path: Path, capsys, header):
    recipe = _with_fit(linear_plate(tmp_path))
    layout = pd.read_csv(tmp_path / "layout.csv")
    layout = layout.drop(columns="substrate (uM)") if header is None else \
        layout.rename(columns={"substrate (uM)": header})
    layout.to_csv(tmp_path / "layout.csv", index=False)
    assert main(["check", str(recipe)]) == 2
    said = _said(capsys)
    assert "layout.csv" in said and "no substrate column" in said
    assert "'well', 'role'" in said  # the columns it found
    assert "substrate (uM), substrate [uM], substrate_uM" in said  # the forms it accepts
    assert main(["run", str(recipe), "--out", str(tmp_path / "out")]) == 2 and not (tmp_path / "out").exists()


@pytest.mark.parametrize("header", ["substrate [uM]", "substrate_uM", "Substrate (µM)"])
def test_layout_header_forms_are_accepted_and_unknown_columns_listed(tmp_path: Path, capsys, header):
    recipe = _with_fit(linear_plate(tmp_path))
    layout = pd.read_csv(tmp_path / "layout.csv").rename(columns={"substrate (uM)": header})
    layout["lot"] = "L-17"
    layout.to_csv(tmp_path / "layout.csv", index=False)
    found = check_inputs(recipe)
    assert any("'lot'" in w and "no step uses" in w for w in found.warnings)
    result = run(recipe, tmp_path / "out")
    np.testing.assert_allclose(sorted(set(result.rates["substrate"])), 10.0 * np.arange(1, 13))
    assert set(result.rates["substrate_unit"]) == {header.split("(")[-1].split("[")[-1].split("_")[-1].strip(")]")}


def test_standard_curve_without_standards_is_caught_by_check(tmp_path: Path, capsys):
    recipe = linear_plate(tmp_path)
    recipe.write_text(recipe.read_text("utf-8") + '  - convert: {method: standard-curve, output_unit: "uM/min"}\n')
    assert main(["check", str(recipe)]) == 2
    said = _said(capsys)
    assert "standard-curve needs wells with role 'standard'" in said and "step 4" in said


def test_partial_plate_layout_wells_without_reads_keep_a_row_with_the_reason(tmp_path: Path, capsys):
    recipe = linear_plate(tmp_path)
    plate = pd.read_csv(tmp_path / "plate.csv")
    plate = plate.drop(columns=["A5", "B5"])  # an export cut to fewer wells than the layout names
    plate.loc[3, "C2"] = np.nan  # a single missing read, on file row 5 (header is row 1)
    plate.to_csv(tmp_path / "plate.csv", index=False)
    layout = pd.read_csv(tmp_path / "layout.csv")
    layout[layout["well"] != "D9"].to_csv(tmp_path / "layout.csv", index=False)  # a partial layout
    found = check_inputs(recipe).warnings
    assert any("D9" in w and "not analysed" in w for w in found)
    assert any("A5, B5" in w and "without a rate" in w for w in found)
    assert any("C2 (row 5, 45 s)" in w for w in found)
    assert main(["run", str(recipe), "--out", str(tmp_path / "out")]) == 0
    said = _said(capsys)
    assert "C2 (row 5, 45 s)" in said and "D9" in said
    rates = pd.read_csv(tmp_path / "out" / "rates.csv").set_index("well")
    assert "D9" not in rates.index and len(rates) == 96 - 1
    for well in ("A5", "B5"):
        assert np.isnan(rates.loc[well, "rate"]) and "not read" in rates.loc[well, "note"]
    assert np.isfinite(rates.loc["C2", "rate"])


def test_a_bad_role_names_the_file_and_line(tmp_path: Path, capsys):
    recipe = linear_plate(tmp_path)
    layout = pd.read_csv(tmp_path / "layout.csv")
    layout.loc[4, "role"] = "smaple"  # data row 5 of the layout: file line 6
    layout.to_csv(tmp_path / "layout.csv", index=False)
    assert main(["check", str(recipe)]) == 2
    said = _said(capsys)
    assert "layout.csv, row 6" in said and "'smaple'" in said and "Use one of sample" in said


def test_out_defaults_to_a_folder_named_after_the_recipe(tmp_path: Path, capsys):
    recipe = linear_plate(tmp_path)
    assert default_out(str(recipe)) == tmp_path / "recipe"
    assert main(["run", str(recipe), "-q"]) == 0 and (tmp_path / "recipe" / "run.h5").is_file()
    assert main(["run", str(recipe), "-q"]) == 2  # an existing run is not replaced without --force
    assert "--force" in _said(capsys)
    assert main(["run", str(recipe), "-q", "--force"]) == 0


def test_fluorescence_reads_default_to_rfu(tmp_path: Path):
    recipe = linear_plate(tmp_path)
    assay = 'assay:\n  detection: "fluorescence, ex 360 / em 460 nm"\nplates:'
    text = recipe.read_text("utf-8").replace("plates:", assay)
    recipe.write_text(text, "utf-8")
    assert set(run(recipe, tmp_path / "out").rates["rate_unit"]) == {"RFU/s"}


def test_water_peak_without_a_water_peak_reads_file_and_missing_blanks_are_caught_by_check(tmp_path: Path, capsys):
    recipe = linear_plate(tmp_path)
    layout = pd.read_csv(tmp_path / "layout.csv")
    layout.loc[layout["role"] == "blank", "role"] = "empty"
    layout.to_csv(tmp_path / "layout.csv", index=False)
    assert any("no wells with role 'blank'" in w for w in check_inputs(recipe).warnings)
    recipe.write_text(recipe.read_text("utf-8") + "  - convert: {method: beer-lambert, epsilon: \"6220 M^-1 cm^-1\", "
                      "water_peak: true}\n", "utf-8")
    assert main(["check", str(recipe)]) == 2
    assert "water_peak is on but the plate names no water_peak_reads file" in _said(capsys)


def test_check_skips_the_input_checks_of_recipe_named_plugin_files_and_says_so(tmp_path: Path, capsys):
    from tests.conftest import DATA

    recipe = linear_plate(tmp_path)
    (tmp_path / "lab_rates.py").write_bytes((DATA / "plugins" / "lab_rates.py").read_bytes())
    text = recipe.read_text("utf-8").replace("name: linear\n", "name: linear\nplugins: [lab_rates.py]\n")
    recipe.write_text(text.replace('{method: window, start: "0 s", end: "300 s"}', "{method: first-reads, reads: 4}"))
    found = check_inputs(recipe)  # the recipe's plugin is not even imported: its step is listed, unvalidated
    assert len(found.skipped) == 1
    assert "(rates: first-reads)" in found.skipped[0] and "its plugin was not imported" in found.skipped[0]
    loaded = check_inputs(recipe, load_plugins=True)  # imported and validated, but its input checks not run
    assert loaded.skipped == ["step 3 (rates: first-reads) comes from the plugin file lab_rates.py; its input "
                              "checks were not run"]
    assert main(["check", str(recipe)]) == 0
    said = _said(capsys)
    assert "not checked: " in said and "(rates: first-reads)" in said and "--load-plugins" in said


def test_a_declared_layout_problem_names_the_recipe_file_and_line(tmp_path: Path, capsys):
    recipe = linear_plate(tmp_path)
    text = recipe.read_text("utf-8").replace(
        "  - import: {method: table}\n",
        "  - import:\n      method: table\n      layout:\n        wells:\n          - {wells: A1:A3, role: blnk}\n")
    recipe.write_text(text, "utf-8")
    assert main(["check", str(recipe)]) == 2
    said = _said(capsys)
    assert "recipe.yaml:10 steps[0].import.layout: layout.wells[0].role" in said and "'blnk'" in said
