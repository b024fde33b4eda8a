"""``vzero review``: the page a scientist uses to decide about flagged wells, driven in headless Chromium.

The browser test clicks and types through three wells as a person would (exclude with a reason of their
own, keep, exclude with the suggested reason), saves the decisions as a fragment file, includes it in the
recipe (the recipe's include: key, and again as a second --recipe), reruns, and checks that exactly the two
excluded wells are out, with their reasons, that the new audit file records all three decisions and reasons
(its review attribute, the rates table's note column, the stored recipe text), and that the page logged no
console error. Data: the invented inhibitor-matrix cookbook plate.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import h5py
import pandas as pd
import pytest
import yaml
from vzero.cli.main import main

from .chromium import check_page, find_browser
from .conftest import COOKBOOK, cookbook_run

BROWSER = find_browser()


@pytest.fixture(scope="module")
def matrix_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return cookbook_run("inhibitor-matrix", tmp_path_factory.mktemp("review"), report=False)


def _page(matrix_run: Path) -> Path:
    page = matrix_run / "review.html"
    if not page.exists():
        assert main(["review", str(matrix_run / "run.h5"), "--out", str(page)]) == 0
    return page


def test_review_page_lists_flagged_sample_wells_only_and_stands_alone(matrix_run: Path):
    page = _page(matrix_run).read_text("utf-8")
    rates = pd.read_csv(matrix_run / "rates.csv")
    flagged = rates[(rates["role"] == "sample") & rates["flags"].fillna("").astype(str).ne("")]
    assert len(flagged) > 0
    assert (rates["role"] != "sample").any()  # the plate has blanks; they have a status of their own, not flags
    data = json.loads(page.split('<script type="application/json" id="data">')[1].split("</script>")[0])
    assert [w["well"] for w in data["wells"]] == flagged["well"].tolist()
    assert not re.search(r'(src|href)="(https?:)?//', page) and "<link" not in page  # works offline
    assert main(["review", str(matrix_run / "run.h5"), "--out", str(matrix_run / "review.html")]) != 0  # no clobber



def test_review_refuses_a_changed_audit_file(matrix_run: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]):
    """A received audit file is checked against its digests before its wells are put on a page."""
    import shutil

    changed = tmp_path / "run.h5"
    shutil.copy(matrix_run / "run.h5", changed)
    with h5py.File(changed, "r+") as f:
        f.attrs["recipe_text"] = str(f.attrs["recipe_text"]) + "\n# edited"
    assert main(["review", str(changed), "--out", str(tmp_path / "page.html")]) != 0
    assert "does not match its digests" in capsys.readouterr().err and not (tmp_path / "page.html").exists()
    assert main(["review", str(changed), "--out", str(tmp_path / "page.html"), "--no-verify"]) == 0
    assert "without checking its digests" in capsys.readouterr().err

def test_data_cannot_end_the_script_element():
    from vzero.plugins.report.review import render

    out = render({"run": "r", "recipe": "x", "source": "", "wells": [{
        "id": "well-p-a1", "plate": "p", "well": "A1", "group": "</script><script>alert(1)</script>",
        "conc": {}, "flags": ["noisy"], "short": ["noisy"], "words": ["w"], "measured": [], "blank": "",
        "fit": "", "rate": 1.0, "rate_text": "1", "note": "", "signal_unit": "AU", "line": None,
        "svg": "<svg></svg>"}]})
    assert "<script>alert(1)" not in out


@pytest.mark.browser
@pytest.mark.skipif(BROWSER is None, reason="no Chromium on PATH: install the Debian package chromium")
def test_three_decisions_in_the_browser_become_exclusions_after_rerun(matrix_run: Path, tmp_path: Path):
    from vzero.run.rerun import rerun

    assert BROWSER is not None
    page = _page(matrix_run)
    # a reader's session: click the first well in the list, exclude it with a typed reason; step on with the
    # keyboard and keep the second; step on with the button and exclude the third with the suggested reason
    script = """(async () => {
      const key = k => document.dispatchEvent(new KeyboardEvent('keydown', {key: k, bubbles: true}));
      const pause = () => new Promise(r => setTimeout(r, 20));
      document.querySelectorAll('button.pick')[0].click(); await pause();
      const reason = document.getElementById('reason');
      reason.value = 'bubble seen in the well'; reason.dispatchEvent(new Event('input'));
      document.getElementById('exclude').click(); await pause();
      key('ArrowRight'); await pause(); key('k'); await pause();
      document.getElementById('next').click(); await pause(); key('x'); await pause();
      document.getElementById('save').click(); await pause();
      const link = document.getElementById('download');
      return {fragment: document.getElementById('fragment').value, blob: link.href.startsWith('blob:'),
              hidden: link.hidden, marks: Array.from(document.querySelectorAll('button.pick'))
                .slice(0, 3).map(b => b.className)};
    })()"""
    seen = check_page(page, BROWSER, width=1280, height=900, script=script)
    assert seen.errors == []
    out = seen.result
    assert out["blob"] and not out["hidden"]  # offered as a download
    assert "exclude" in out["marks"][0] and "keep" in out["marks"][1] and "exclude" in out["marks"][2]
    (tmp_path / "review-shot.png").write_bytes(seen.screenshot)
    fragment = yaml.safe_load(out["fragment"])
    wells = [w["well"] for w in json.loads(page.read_text("utf-8").split('id="data">')[1].split("</script>")[0])
             ["wells"][:3]]
    decided = [
        {"plate": "vz11-plate", "well": wells[0], "decision": "exclude", "reason": "bubble seen in the well"},
        {"plate": "vz11-plate", "well": wells[1], "decision": "keep", "reason": "flagged noisy"},
        {"plate": "vz11-plate", "well": wells[2], "decision": "exclude", "reason": "flagged noisy"},
    ]
    assert fragment == {"review": decided}

    # the fragment saved beside the recipe and included by it; the recipe itself is left as it was
    (tmp_path / "review-decisions.yaml").write_text(out["fragment"], "utf-8")
    base = (COOKBOOK / "inhibitor-matrix.yaml").read_text("utf-8")
    (tmp_path / "recipe.yaml").write_text(base + "\ninclude: [review-decisions.yaml]\n", "utf-8")
    (tmp_path / "plain.yaml").write_text(base, "utf-8")
    for name, recipe, fragments in (("included", "recipe.yaml", ()),
                                    ("given", "plain.yaml", (tmp_path / "review-decisions.yaml",))):
        result = rerun(matrix_run / "run.h5", tmp_path / name, recipe=tmp_path / recipe, fragments=fragments)
        assert result.exit_code == 0
        rates = pd.read_csv(tmp_path / name / "rates.csv").set_index("well")
        for well, why in ((wells[0], "bubble seen in the well"), (wells[2], "flagged noisy")):
            assert "excluded" in str(rates.loc[well, "flags"]) and f"excluded on review: {why}" in str(
                rates.loc[well, "note"])
            assert pd.isna(rates.loc[well, "rate"])
        assert "excluded" not in str(rates.loc[wells[1], "flags"]) and pd.notna(rates.loc[wells[1], "rate"])
        assert "kept on review: flagged noisy" in str(rates.loc[wells[1], "note"])
        with h5py.File(tmp_path / name / "run.h5") as f:  # the audit file records every decision and reason
            assert json.loads(f.attrs["review"]) == decided
            assert "decision: keep" in str(f.attrs["recipe_text"])
            stored = pd.DataFrame({k: f["results/rates"][k][()] for k in ("well", "note")})
        stored = stored.map(lambda v: v.decode() if isinstance(v, bytes) else v).set_index("well")
        for d in decided:
            assert d["reason"] in stored.loc[d["well"], "note"]
    # reviewing the new run starts from these decisions (the saved fragment then holds them all again)
    assert main(["review", str(tmp_path / "included" / "run.h5"), "--out", str(tmp_path / "again.html")]) == 0
    again = json.loads((tmp_path / "again.html").read_text("utf-8").split('id="data">')[1].split("</script>")[0])
    assert sorted(v["choice"] for v in again["previous"].values()) == ["exclude", "exclude", "keep"]


def test_a_second_review_starts_from_the_decisions_the_recipe_holds():
    from vzero.plugins.report.review import previous_decisions

    records = [{"plate": "p", "well": "A1", "id": "well-p-a1"}, {"plate": "p", "well": "B02", "id": "well-p-b02"}]
    recipe = {"review": [{"plate": "p", "well": "a1", "decision": "exclude", "reason": "bubble"},
                         {"plate": "p", "well": "B2", "decision": "keep", "reason": "fine"},
                         {"plate": "q", "well": "A1", "decision": "keep", "reason": "other plate"}]}
    assert previous_decisions(recipe, records) == {"well-p-a1": {"choice": "exclude", "reason": "bubble"},
                                                   "well-p-b02": {"choice": "keep", "reason": "fine"}}
