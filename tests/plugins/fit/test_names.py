"""Names of our own: the plate key ``water_peak_reads``, the model-comparison columns ``selected``,
``selected_model`` and ``selection_reason``, and the four-parameter logistic's ``v_uninhibited``,
``v_residual``, ``IC50`` and ``n``.

Old audit files keep their old names (tests/data/audit/fit-names-v1.2.h5 was written before the renames)
and are read under the new ones; an old recipe's plate key ``pathcheck`` is read as ``water_peak_reads``
with a notice naming the new key; and a fresh run writes none of the old names anywhere (CSV headers,
parameter names, report HTML, xlsx).
"""

from __future__ import annotations

import re
import shutil
import zipfile
from pathlib import Path

import pandas as pd
import pytest
from vzero.audit import reader
from vzero.errors import RecipeError
from vzero.run.rerun import rerun
from vzero.run.runner import check_inputs, run

from tests.conftest import DATA
from tests.cookbook_data import two_question_plate

KEPT = DATA / "audit" / "fit-names-v1.2.h5"
COOKBOOK = Path(__file__).resolve().parents[3] / "configs" / "cookbook" / "models-per-group.yaml"
OLD_COLUMNS = ("preferred", "preferred_model", "reason")
OLD_PARAMETERS = ("top", "bottom", "slope")


def test_old_audit_file_reads_under_the_new_names():
    with reader.open_audit(KEPT) as f:
        tables = reader.read_results(f)
        stored = f["results"]["model_comparison"]  # the bytes as written: old names, untouched
        stored_cols = set(reader.read_table(stored).frame.columns)
    assert {"preferred", "reason"} <= stored_cols  # the kept file does hold the old names
    comp = tables["model_comparison"].frame
    assert not set(OLD_COLUMNS) & set(comp.columns)
    # the old file's comparison: VZ-S by Michaelis-Menten (Hill's extra parameter not supported), VZ-I by logistic
    picked = comp[comp["selected_model"] != ""].groupby("group")["selected_model"].agg(set).to_dict()
    assert picked == {"VZ-S": {"michaelis-menten"}, "VZ-I": {"logistic-4p"}}
    assert comp.loc[comp["model"] == comp["selected_model"], "selected"].all()
    assert not comp.loc[comp["model"] != comp["selected_model"], "selected"].any()
    assert comp["selection_reason"].str.len().gt(0).all()
    fits = tables["fits"].frame
    assert not set(OLD_COLUMNS) & set(fits.columns) and {"selected", "selected_model"} <= set(fits.columns)
    logistic = fits[(fits["model"] == "logistic-4p") & (fits["group"] == "VZ-I")].set_index("parameter")
    assert list(logistic.index[:4]) == ["v_uninhibited", "v_residual", "IC50", "n"]
    # the values moved with their names: rate without inhibitor > rate at saturating inhibitor
    assert logistic.loc["v_uninhibited", "estimate"] > logistic.loc["v_residual", "estimate"]
    corr = tables["correlations"].frame
    assert not set(OLD_PARAMETERS) & set(corr.loc[corr["model"] == "logistic-4p", "parameter_a"])


def test_old_audit_file_still_verifies_and_reruns(tmp_path: Path):
    from vzero.audit.verify import verify

    assert verify(KEPT).ok
    old = tmp_path / "old.h5"
    shutil.copy(KEPT, old)
    result = rerun(old, tmp_path / "again")  # its stored recipe names the plate key pathcheck
    assert any("'pathcheck' is now 'water_peak_reads'" in w for w in result.warnings)
    fits = result.fits
    assert "n" in set(fits.loc[fits["model"] == "logistic-4p", "parameter"])
    with reader.open_audit(KEPT) as f:
        before = reader.read_results(f)["fits"].frame
    ic50 = [float(t.loc[(t["model"] == "logistic-4p") & (t["parameter"] == "IC50"), "estimate"].dropna().iloc[0])
            for t in (before, fits)]
    assert ic50[1] == pytest.approx(ic50[0], rel=1e-9)  # same inputs, same fit, new names


def _recipe_with_old_key(folder: Path) -> Path:
    two_question_plate(folder)
    text = COOKBOOK.read_text("utf-8").replace("    water_peak_reads: two-question-water.csv",
                                               "    pathcheck: two-question-water.csv")
    path = folder / "old.yaml"
    path.write_text(text, "utf-8")
    return path


def test_old_plate_key_is_read_with_a_notice_naming_the_new_key(tmp_path: Path):
    recipe = _recipe_with_old_key(tmp_path)
    found = check_inputs(recipe)
    line = next(n for n, t in enumerate(recipe.read_text("utf-8").splitlines(), 1) if "pathcheck" in t)
    notice = (f"old.yaml:{line} plates[0].pathcheck: the plate key 'pathcheck' is now 'water_peak_reads'; it was "
              f"read as 'water_peak_reads'")
    assert any(w.endswith(notice) or notice in w for w in found.warnings), found.warnings
    result = run(recipe, tmp_path / "out")
    assert result.exit_code == 0 and any(notice in w for w in result.warnings)
    # the reads were used: (A977 - A900)/0.18 per cm = (0.13 - 0.04)/0.18 = 0.5 cm in every well
    assert set(result.rates["pathlength_cm"].round(9)) == {0.5}


def test_old_and_new_plate_key_together_are_refused(tmp_path: Path):
    recipe = _recipe_with_old_key(tmp_path)
    text = recipe.read_text("utf-8").replace("    pathcheck: two-question-water.csv",
                                             "    pathcheck: two-question-water.csv\n"
                                             "    water_peak_reads: two-question-water.csv")
    recipe.write_text(text, "utf-8")
    with pytest.raises(RecipeError, match=r"old.yaml:\d+ plates\[0\]\.pathcheck: the plate names both 'pathcheck'"):
        check_inputs(recipe)


def test_a_fresh_run_writes_none_of_the_old_names(tmp_path: Path):
    from vzero.plugins.export.tables import write_xlsx

    two_question_plate(tmp_path)
    text = COOKBOOK.read_text("utf-8") + "  - report:  {method: html}\n"
    recipe = tmp_path / "r.yaml"
    recipe.write_text(text, "utf-8")
    result = run(recipe, tmp_path / "out")
    assert result.exit_code == 0, result.failed_items
    out = tmp_path / "out"
    old_words = re.compile(r"\b(preferred|preferred_model|pathcheck)\b", re.IGNORECASE)
    for csv in out.glob("*.csv"):
        frame = pd.read_csv(csv)
        assert not old_words.search(",".join(frame.columns)), csv.name
        assert "reason" not in frame.columns or csv.name != "model_comparison.csv"
        if "parameter" in frame.columns:
            assert not set(OLD_PARAMETERS) & set(frame.loc[frame["model"] == "logistic-4p", "parameter"])
    html = "\n".join(p.read_text("utf-8") for p in out.rglob("*.html"))
    assert html and "Selected model" in html
    assert not old_words.search(html)
    assert not re.search(r"logistic[^<]{0,200}\b(top|bottom|slope)\b", html)
    write_xlsx(result.audit_path, tmp_path / "run.xlsx")
    with zipfile.ZipFile(tmp_path / "run.xlsx") as book:
        xml = "\n".join(book.read(n).decode("utf-8") for n in book.namelist() if n.endswith(".xml"))
    assert "selected_model" in xml and "v_uninhibited" in xml
    assert not old_words.search(xml)
    sheets = pd.read_excel(tmp_path / "run.xlsx", sheet_name=None)
    fits = next(f for f in sheets.values() if {"model", "parameter"} <= set(f.columns))
    assert not set(OLD_PARAMETERS) & set(fits.loc[fits["model"] == "logistic-4p", "parameter"])


def test_old_manifest_column_is_read_with_a_notice(tmp_path: Path):
    two_question_plate(tmp_path)
    (tmp_path / "plates.csv").write_text("name,data,layout,pathcheck\n"
                                         "p1,two-question-plate.csv,two-question-layout.csv,two-question-water.csv\n",
                                         "utf-8")
    text = COOKBOOK.read_text("utf-8")
    start, end = text.index("plates:\n"), text.index("steps:\n")
    recipe = tmp_path / "m.yaml"
    recipe.write_text(text[:start] + "plates:\n  - manifest: plates.csv\n" + text[end:], "utf-8")
    found = check_inputs(recipe)
    assert found.recipe.plates[0].files["water_peak_reads"] == "two-question-water.csv"
    assert any("plates.csv row 1: the column 'pathcheck' is now 'water_peak_reads'" in w for w in found.warnings)


def test_report_input_from_an_old_audit_file_has_the_new_names():
    from vzero.plugins.report.sources import from_audit

    tables = from_audit(KEPT).tables
    assert "selected_model" in tables["model_comparison"].frame.columns
    assert "v_residual" in set(tables["fits"].frame["parameter"])


def test_exports_of_an_old_audit_file_use_the_new_names(tmp_path: Path):
    from vzero.plugins.export.tables import write_xlsx

    write_xlsx(KEPT, tmp_path / "old.xlsx")
    sheets = pd.read_excel(tmp_path / "old.xlsx", sheet_name=None)
    headers = {str(c) for f in sheets.values() for c in f.columns}
    assert "selected_model" in headers and not {"preferred", "preferred_model"} & headers
