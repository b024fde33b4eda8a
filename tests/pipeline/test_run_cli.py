"""The whole backbone from the command line and from Python: outputs, refusals, bad input."""

from __future__ import annotations

import json
from pathlib import Path

import h5py
import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from vzero.audit.reader import open_audit, read_table
from vzero.cli.main import main
from vzero.run.runner import run

from tests.conftest import DATA, linear_plate


def test_run_writes_tables_and_audit(plate_folder: Path, tmp_path: Path):
    out = tmp_path / "out"
    result = run(plate_folder, out)
    rates = pd.read_csv(out / "rates.csv")
    for col in ("plate", "well", "group", "role", "substrate", "substrate_unit", "rate", "rate_stderr", "rate_unit",
                "method", "window_start_s", "window_end_s", "r_squared", "flags"):
        assert col in rates.columns, col
    # known slopes (conftest.linear_plate): linspace(1e-4, 1e-3) AU/s, blank drift removed exactly
    expected = np.linspace(1e-4, 1e-3, 96)[:84]
    assert_allclose(result.rates["rate"].to_numpy()[:84], expected, rtol=1e-9)
    assert set(rates["rate_unit"]) == {"AU/s"}
    with open_audit(result.audit_path) as f:
        assert f.attrs["format"] == "vzero-audit"
        raw = f["inputs/00"]
        assert raw[()].tobytes() == (plate_folder.parent / "plate.csv").read_bytes()
        assert raw.attrs["sha256"] and raw.attrs["name"] == "plate.csv"
        steps = list(f["steps"])
        assert steps == ["01-import-table", "02-blank-mean", "03-rates-window"]
        assert json.loads(f["steps/03-rates-window"].attrs["parameters"]) == {"start": "0 s", "end": "300 s"}
        back = read_table(f["results/rates"])
    pd.testing.assert_frame_equal(back.frame.drop(columns="flags"), result.rates.drop(columns="flags"),
                                  check_dtype=False)
    assert back.units["rate"] == "AU/s"


def test_refuses_to_overwrite_without_force(plate_folder: Path, tmp_path: Path, capsys):
    out = tmp_path / "out"
    assert main(["run", str(plate_folder), "--out", str(out), "-q"]) == 0
    before = (out / "run.h5").stat().st_mtime_ns
    assert main(["run", str(plate_folder), "--out", str(out)]) == 2
    assert "already holds files" in capsys.readouterr().err
    assert (out / "run.h5").stat().st_mtime_ns == before
    assert main(["run", str(plate_folder), "--out", str(out), "--force", "-q"]) == 0


def _no_output(out: Path) -> bool:
    return not out.exists() and not any(p.name.startswith(f".{out.name}") for p in out.parent.iterdir())


def test_misspelt_key_exits_2_and_writes_nothing(plate_folder: Path, tmp_path: Path, capsys):
    text = plate_folder.read_text("utf-8").replace("method: window", "method: window, ennd: \"9 s\"")
    plate_folder.write_text(text, "utf-8")
    out = tmp_path / "out"
    assert main(["run", str(plate_folder), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "recipe.yaml:10 steps[2].rates.ennd: unknown parameter (did you mean 'end'?)" in err
    assert "Traceback" not in err and _no_output(out)


def test_missing_input_file(plate_folder: Path, tmp_path: Path, capsys):
    (plate_folder.parent / "layout.csv").unlink()
    out = tmp_path / "out"
    assert main(["check", str(plate_folder)]) == 2
    assert "recipe.yaml:6 plates[0].layout: input file 'layout.csv' not found" in capsys.readouterr().err
    assert main(["run", str(plate_folder), "--out", str(out)]) == 2 and _no_output(out)


def test_wells_not_matching_layout(plate_folder: Path, tmp_path: Path, capsys):
    """A partial layout is everyday practice: the well it leaves out is named in a warning, not analysed."""
    layout = pd.read_csv(plate_folder.parent / "layout.csv")
    layout[layout["well"] != "C7"].to_csv(plate_folder.parent / "layout.csv", index=False)
    out = tmp_path / "out"
    assert main(["run", str(plate_folder), "--out", str(out)]) == 0
    said = capsys.readouterr()
    err = said.out + said.err
    assert "C7" in err and "layout.csv" in err and "not analysed" in err
    assert "C7" not in set(pd.read_csv(out / "rates.csv")["well"])


def test_non_numeric_cell_names_row_and_column(plate_folder: Path, tmp_path: Path, capsys):
    path = plate_folder.parent / "plate.csv"
    lines = path.read_text("utf-8").splitlines()
    cells = lines[4].split(",")
    cells[5] = "n/d?"  # column of well A5, fourth read (file row 5)
    lines[4] = ",".join(cells)
    path.write_text("\n".join(lines) + "\n", "utf-8")
    out = tmp_path / "out"
    assert main(["run", str(plate_folder), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "plate.csv" in err and "row 5" in err and "A5" in err and "n/d?" in err
    assert _no_output(out)


def test_local_plugin_rate_method_used_from_recipe(tmp_path: Path):
    recipe = linear_plate(tmp_path / "in")
    (tmp_path / "in" / "lab_rates.py").write_bytes((DATA / "plugins" / "lab_rates.py").read_bytes())
    text = recipe.read_text("utf-8").replace("name: linear\n", "name: linear\nplugins: [lab_rates.py]\n")
    text = text.replace('{method: window, start: "0 s", end: "300 s"}', "{method: first-reads, reads: 4}")
    recipe.write_text(text, "utf-8")
    result = run(recipe, tmp_path / "out")
    assert set(result.rates["method"]) == {"first-reads"}
    assert_allclose(result.rates["window_end_s"], 45.0)
    assert_allclose(result.rates["rate"].to_numpy()[:84], np.linspace(1e-4, 1e-3, 96)[:84], rtol=1e-9)
    with h5py.File(result.audit_path) as f:
        plugins = json.loads(f.attrs["plugins"])
        assert plugins["file:lab_rates.py"]["version"] == "0.3"
        assert f["steps/03-rates-first-reads"].attrs["distribution"] == "local file"


def test_plugins_command_lists_sources(capsys):
    assert main(["plugins"]) == 0
    out = capsys.readouterr().out
    assert "rates" in out and "window" in out and "vzero" in out


def test_every_command_has_help_with_an_example(capsys):
    from vzero.cli.main import build_parser

    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    for name, p in sub.choices.items():
        assert "example:" in (p.epilog or ""), name
    with pytest.raises(SystemExit):
        main(["run", "--help"])
    assert "vzero run" in capsys.readouterr().out


def test_exclusion_without_reason_is_a_recipe_error_with_its_line(plate_folder: Path, tmp_path: Path, capsys):
    text = plate_folder.read_text("utf-8") + "exclusions:\n  - {plate: p1, well: B3}\n"
    plate_folder.write_text(text, "utf-8")
    assert main(["check", str(plate_folder)]) == 2
    err = capsys.readouterr().err
    assert "recipe.yaml:12 exclusions[0]" in err and "reason" in err


def test_assay_block_is_checked_with_the_recipe(plate_folder: Path, capsys):
    text = plate_folder.read_text("utf-8") + "assay:\n  temperature: 30\n  ph: 7.5\n"
    text += "  enzyme: {name: VZ-7, organsm: x}\n"
    plate_folder.write_text(text, "utf-8")
    assert main(["check", str(plate_folder)]) == 2
    err = capsys.readouterr().err
    assert "recipe.yaml:12 assay.temperature: expected a quantity" in err
    assert "recipe.yaml:13 assay.ph: unknown assay item (did you mean 'pH'?)" in err
    assert "assay.enzyme.organsm: unknown item (did you mean 'organism'?)" in err


def test_recipe_exclusion_is_listed_in_the_fits_it_changes(plate_folder: Path, tmp_path: Path):
    text = plate_folder.read_text("utf-8") + "  - fit: {method: nls, models: [michaelis-menten]}\n"
    text += "exclusions:\n  - {plate: p1, well: B3, reason: pipetting error seen at the bench}\n"
    plate_folder.write_text(text, "utf-8")
    result = run(plate_folder, tmp_path / "out")
    rates = result.rates.set_index("well")
    assert "excluded" in rates.loc["B3", "flags"] and "pipetting error" in rates.loc["B3", "note"]
    fits = pd.read_csv(tmp_path / "out" / "fits.csv")
    notes_b = fits.loc[fits["group"] == "gB", "note"].astype(str)
    assert len(notes_b) and notes_b.str.contains("1 excluded by the recipe \\(p1 B3\\)").all()
    assert not fits.loc[fits["group"] == "gA", "note"].astype(str).str.contains("excluded by the recipe").any()


def test_a_well_without_a_rate_finishes_with_exit_code_1(plate_folder: Path, tmp_path: Path, capsys):
    path = plate_folder.parent / "plate.csv"
    frame = pd.read_csv(path)
    frame["A5"] = np.nan  # every read of a sample well missing: a flag and no rate, never a crash
    frame.to_csv(path, index=False)
    assert main(["run", str(plate_folder), "--out", str(tmp_path / "out")]) == 1
    err = capsys.readouterr().err
    assert "1 well(s) without a result: p1 A5: too_few_points, all_missing" in err
    rates = pd.read_csv(tmp_path / "out" / "rates.csv").set_index("well")
    assert np.isnan(rates.loc["A5", "rate"]) and "all_missing" in rates.loc["A5", "flags"]
    assert rates["rate"].notna().sum() == 95


def test_force_replaces_only_a_previous_run(plate_folder: Path, tmp_path: Path, capsys):
    """--force must never delete a folder that is not a vzero run, nor the folder holding the recipe."""
    inputs = plate_folder.parent
    (inputs / "notes.txt").write_text("keep me", "utf-8")
    assert main(["run", str(plate_folder), "--out", str(inputs), "--force"]) == 2
    assert "holds the recipe" in capsys.readouterr().err and (inputs / "notes.txt").exists()
    other = tmp_path / "other"
    other.mkdir()
    (other / "thesis.docx").write_bytes(b"draft")
    assert main(["run", str(plate_folder), "--out", str(other), "--force"]) == 2
    assert "no vzero run" in capsys.readouterr().err and (other / "thesis.docx").exists()
    afile = tmp_path / "afile"
    afile.write_text("x", "utf-8")
    assert main(["run", str(plate_folder), "--out", str(afile), "--force"]) == 2
    assert "is a file, not a folder" in capsys.readouterr().err and afile.read_text("utf-8") == "x"


def test_exclusion_naming_another_plate_is_an_error(plate_folder: Path, capsys):
    text = plate_folder.read_text("utf-8") + "exclusions:\n  - {plate: P1, well: B3, reason: bubble}\n"
    plate_folder.write_text(text, "utf-8")
    assert main(["check", str(plate_folder)]) == 2
    assert "recipe.yaml:12 exclusions[0].plate: no plate 'P1' in this run (did you mean 'p1'?)" in (
        capsys.readouterr().err)
