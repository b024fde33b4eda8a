"""A rerun of a stored recipe repeats the old analysis when a default has changed since.

The fit step's default weighting became ``rate-error`` after tests/data/audit/fit-names-v1.2.h5 was written
(its fits were unweighted). Rerun with its stored recipe, which names no weighting, the old value is kept,
with a notice naming it; rerun with a recipe of the user's own (the same text from a file), the new default
applies. A step without a method keeps the method the old run used in the same way.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from vzero.audit import reader
from vzero.manager import make_manager
from vzero.recipe import check, parse
from vzero.run.rerun import rerun

from tests.conftest import DATA

KEPT = DATA / "audit" / "fit-names-v1.2.h5"


def _fit_settings(path: Path) -> dict:
    with reader.open_audit(path) as f:
        steps = reader.read_step_settings(f)
    return next(settings for kind, _, settings in steps.values() if kind == "fit")


def _ic50(fits) -> float:
    rows = fits[(fits["model"] == "logistic-4p") & (fits["parameter"] == "IC50")]
    return float(rows["estimate"].dropna().iloc[0])


def test_stored_recipe_keeps_the_old_default_and_says_so(tmp_path: Path):
    assert _fit_settings(KEPT)["weighting"] == "none"  # written when no weighting was the default
    again = rerun(KEPT, tmp_path / "again")
    said = [w for w in again.warnings if "'weighting' not named" in w]
    assert len(said) == 1 and "'none'" in said[0] and "'rate-error'" in said[0]
    assert _fit_settings(again.audit_path)["weighting"] == "none"
    with reader.open_audit(KEPT) as f:
        before = reader.read_results(f)["fits"].frame
    assert _ic50(again.fits) == pytest.approx(_ic50(before), rel=1e-9)  # the same fit as the old run

    with reader.open_audit(KEPT) as f:
        text = reader.header(f)["recipe_text"]
    own = tmp_path / "own.yaml"
    own.write_text(text, "utf-8")
    fresh = rerun(KEPT, tmp_path / "fresh", recipe=own)
    assert not any("'weighting' not named" in w for w in fresh.warnings)
    assert _fit_settings(fresh.audit_path)["weighting"] == "rate-error"  # the new default
    assert _ic50(fresh.fits) != pytest.approx(_ic50(before), rel=1e-6)  # weighting changes the estimate


def _no_method_recipe(tmp_path: Path) -> str:
    """A recipe whose rates step names no method, beside its one-well plate."""
    (tmp_path / "plate.csv").write_text("time (s),A1\n0,0.1\n10,0.2\n", "utf-8")
    return ("vzero: 1\nname: n\nplates:\n  - name: p\n    data: plate.csv\n"
            "steps:\n  - import: {method: table}\n  - rates: {}\n")


def test_a_step_without_a_method_keeps_the_old_runs_method(tmp_path: Path):
    text = _no_method_recipe(tmp_path)
    registry = make_manager([]).registry
    rec = parse(text, str(tmp_path / "r.yaml"))
    rec.previous = {2: ("rates", "window", {"start": "0 s", "unknown_old_key": 1}),
                    1: ("import", "table", {})}
    check(rec, registry)
    assert rec.steps[1].method == "window"
    assert any("the old run used 'window'" in n for n in rec.notices)
    assert "unknown_old_key" not in rec.steps[1].settings  # parameters the method no longer has are ignored
    fresh = check(parse(text, str(tmp_path / "r.yaml")), registry)
    assert fresh.steps[1].method == registry.default("rates") != "window"


def test_a_step_without_a_method_whose_default_is_unchanged_gets_no_notice(tmp_path: Path):
    # the old run used what is still the default: the rerun uses it too, and there is nothing to say
    text = _no_method_recipe(tmp_path)
    registry = make_manager([]).registry
    rec = parse(text, str(tmp_path / "r.yaml"))
    rec.previous = {2: ("rates", registry.default("rates"), {}), 1: ("import", "table", {})}
    check(rec, registry)
    assert rec.steps[1].method == registry.default("rates")
    assert not any("the old run used" in n for n in rec.notices)
