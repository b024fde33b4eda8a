"""Recipe fragments (``include:`` and a second ``--recipe``): merged as data, placed in messages by file and
line, bounded, cycles refused, and the composed text self-contained (what workers and reruns parse)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from vzero import includes
from vzero.errors import RecipeError
from vzero.plugins.kinetics.exclusions import check_items
from vzero.recipe import load, parse

BASE = """vzero: 1
name: t
include: [review.yaml]
exclusions:
  - {plate: p1, well: A1, reason: bubble}
assay: {temperature: "25 degC"}
plates:
  - {name: p1, data: d.csv}
steps:
  - import: {method: table}
"""


def _write(folder: Path, files: dict[str, str]) -> Path:
    for name, text in files.items():
        (folder / name).parent.mkdir(parents=True, exist_ok=True)
        (folder / name).write_text(text, "utf-8")
    return folder / "recipe.yaml"


def test_fragments_are_merged_after_the_recipes_own_items(tmp_path: Path):
    path = _write(tmp_path, {"recipe.yaml": BASE, "review.yaml": (
        "review:\n  - {plate: p1, well: B2, decision: keep, reason: fine}\n"
        "exclusions:\n  - {plate: p1, well: C3, reason: cracked}\ninclude: [more/assay.yaml]\n"),
        "more/assay.yaml": "assay: {pH: 7.5}\n"})
    rec = load(path)
    assert [e["well"] for e in rec.data["exclusions"]] == ["A1", "C3"]
    assert rec.data["review"] == [{"plate": "p1", "well": "B2", "decision": "keep", "reason": "fine"}]
    assert rec.data["assay"] == {"temperature": "25 degC", "pH": 7.5}
    # the composed text stands alone: parsed again (a worker, a rerun of the stored recipe) it gives the same
    again = parse(rec.text, str(path))
    assert again.data == rec.data and again.sha256 == rec.sha256
    assert [a.path for a in includes.attached(rec.text)] == ["review.yaml", "more/assay.yaml"]
    # messages name the fragment file and the line within it
    assert rec.where(("exclusions", 1)) == "review.yaml:4 exclusions[1]"
    assert rec.where(("exclusions", 0)) == "recipe.yaml:5 exclusions[0]"


def test_problems_in_a_fragment_name_its_file_and_line(tmp_path: Path):
    path = _write(tmp_path, {"recipe.yaml": BASE, "review.yaml": (
        "# decisions\nreview:\n  - {plate: p1, well: B2, decision: maybe, reason: x}\n"
        "  - {plate: p1, well: A1, decision: keep, reason: y}\n")})
    rec = load(path)
    problems = check_items(rec.data, rec.where)
    assert "review.yaml:3 review[0].decision: expected keep or exclude, got 'maybe'" in problems
    assert any(p.startswith("review.yaml:4 review[1]: well A1 of plate p1 is kept on review but excluded by "
                            "recipe.yaml:5") for p in problems)


@pytest.mark.parametrize("fragment, message", [
    ("plugins: [evil.py]\n", "review.yaml:1 plugins: not allowed in a fragment"),
    ("steps: []\n", "review.yaml:1 steps: not allowed in a fragment"),
    ("assay: {temperature: \"30 degC\"}\n", "review.yaml:1 assay.temperature: already given (recipe.yaml:6)"),
    ("exclusions: {plate: p1}\n", "review.yaml:1 exclusions: expected a list of items"),
])
def test_a_fragment_holds_data_only(tmp_path: Path, fragment: str, message: str):
    with pytest.raises(RecipeError) as err:
        load(_write(tmp_path, {"recipe.yaml": BASE, "review.yaml": fragment}))
    assert message in str(err.value)


def test_cycles_repeats_and_bad_paths_are_refused(tmp_path: Path):
    files = {"recipe.yaml": BASE, "review.yaml": "include: [a.yaml]\n", "a.yaml": "include: [review.yaml]\n"}
    with pytest.raises(RecipeError, match=r"include cycle: recipe.yaml -> review.yaml -> a.yaml -> review.yaml"):
        load(_write(tmp_path, files))
    files["a.yaml"] = "include: [recipe.yaml]\n"
    with pytest.raises(RecipeError, match=r"include cycle: recipe.yaml -> review.yaml -> a.yaml -> recipe.yaml"):
        load(_write(tmp_path, files))
    files = {"recipe.yaml": BASE.replace("[review.yaml]", "[review.yaml, b.yaml]"), "review.yaml": "review: []\n",
             "b.yaml": "include: [review.yaml]\n"}
    with pytest.raises(RecipeError, match=r"b.yaml: review.yaml is included twice \(also by recipe.yaml\)"):
        load(_write(tmp_path, files))  # twice, not a cycle
    for bad, why in (("/etc/x.yaml", "absolute path"), ("code.py", "not a YAML file"), ("gone.yaml", "not found")):
        with pytest.raises(RecipeError, match=why):
            load(_write(tmp_path, {"recipe.yaml": BASE.replace("[review.yaml]", f"[{bad!r}]")}))



def test_a_recipe_cannot_include_files_outside_its_folder(tmp_path: Path):
    """A received recipe must not pull a YAML file from elsewhere on the disk into the audit file."""
    (tmp_path / "elsewhere.yaml").write_text("review: []\n", "utf-8")
    inner = tmp_path / "recipes"
    inner.mkdir()
    with pytest.raises(RecipeError, match="leaves the recipe's folder"):
        load(_write(inner, {"recipe.yaml": BASE.replace("[review.yaml]", "['../elsewhere.yaml']")}))
    (inner / "sub").mkdir()
    (inner / "sub" / "r.yaml").write_text("review: []\n", "utf-8")  # below the recipe: accepted
    assert load(_write(inner, {"recipe.yaml": BASE.replace("[review.yaml]", "[sub/r.yaml]")})).data["review"] == []

def test_nesting_is_bounded(tmp_path: Path):
    files = {"recipe.yaml": BASE.replace("review.yaml", "f1.yaml")}
    for k in range(1, includes.MAX_DEPTH + 2):
        files[f"f{k}.yaml"] = f"include: [f{k + 1}.yaml]\n" if k <= includes.MAX_DEPTH else "review: []\n"
    with pytest.raises(RecipeError, match=f"nested more than {includes.MAX_DEPTH} deep"):
        load(_write(tmp_path, files))
    files[f"f{includes.MAX_DEPTH}.yaml"] = "review: []\n"  # one level less: accepted
    assert load(_write(tmp_path, files)).data["review"] == []


def test_a_fragment_given_after_the_recipe_and_a_text_missing_its_fragment(tmp_path: Path):
    path = _write(tmp_path, {"recipe.yaml": BASE.replace("include: [review.yaml]\n", ""),
                             "extra.yaml": "review:\n  - {plate: p1, well: D4, decision: exclude, reason: dust}\n"})
    rec = load(path, [tmp_path / "extra.yaml"])
    assert rec.data["review"][0]["well"] == "D4"
    assert "--- # vzero include (command line): extra.yaml" in rec.text
    assert parse(rec.text, str(path)).data == rec.data
    with pytest.raises(RecipeError, match=r"names the fragments \['review.yaml'\] but carries \[\]"):
        parse(BASE, "recipe.yaml")  # an include: key with nothing attached: read it with load()
    with pytest.raises(RecipeError, match="a recipe is one YAML document"):
        parse(BASE.replace("include: [review.yaml]\n", "") + "---\nname: other\n", "recipe.yaml")


def test_a_run_with_a_fragment_and_a_rerun_of_its_stored_recipe(tmp_path: Path):
    """The stored recipe carries its fragment: rerunning it (workers, no fragment file anywhere) gives the
    same exclusions and notes, and the audit file records the decisions."""
    import json

    import h5py
    import pandas as pd
    from vzero.run.rerun import rerun
    from vzero.run.runner import run

    from tests.conftest import linear_plate

    recipe = linear_plate(tmp_path / "in")
    plate = re.search(r"name: (\S+)", recipe.read_text("utf-8").split("plates:")[1]).group(1)
    (tmp_path / "in" / "review-decisions.yaml").write_text(
        f"review:\n  - {{plate: {plate}, well: B3, decision: exclude, reason: cracked well}}\n"
        f"  - {{plate: {plate}, well: C4, decision: keep, reason: flagged noisy}}\n", "utf-8")
    recipe.write_text(recipe.read_text("utf-8") + "include: [review-decisions.yaml]\n", "utf-8")
    first = run(recipe, tmp_path / "one", jobs=2).out_dir  # worker processes parse the stored text
    (tmp_path / "in" / "review-decisions.yaml").unlink()  # the stored recipe must not need it
    second = rerun(first / "run.h5", tmp_path / "two").out_dir
    for out in (first, second):
        rates = pd.read_csv(out / "rates.csv").set_index("well")
        assert "excluded" in rates.loc["B3", "flags"] and rates.loc["B3", "note"] == "excluded on review: cracked well"
        assert rates.loc["C4", "note"] == "kept on review: flagged noisy" and pd.notna(rates.loc["C4", "rate"])
        with h5py.File(out / "run.h5") as f:
            assert [d["decision"] for d in json.loads(f.attrs["review"])] == ["exclude", "keep"]
