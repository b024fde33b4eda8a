"""The report read as a scientist reads it: numbers written to the precision their errors support, units
simplified, attention on sample wells, each group led by its own question, the standard curve shown.

Data: the invented cookbook plates (tests/cookbook_data.py) and hand-made tables.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from vzero.audit import reader
from vzero.plugins.report import content

from .conftest import cookbook_run


@pytest.fixture(scope="module")
def matrix(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return cookbook_run("inhibitor-matrix", tmp_path_factory.mktemp("matrix"))


@pytest.fixture(scope="module")
def fluor(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return cookbook_run("fluorescence-standard-curve", tmp_path_factory.mktemp("fluor"))


def test_estimates_and_intervals_are_rounded_together():
    # the uncertainty to two significant figures and the value to the same decimal place (ISO/IEC Guide 98-3,
    # GUM, 7.2.6: uncertainties need at most two significant digits; the estimate is rounded to match)
    t = content.estimate_text(2.348150447759688, 0.10141490689911403, 2.15618165092751, 2.558701039955177)
    assert t == {"value": "2.35 ± 0.10", "interval": "[2.16, 2.56]", "estimate": "2.35"}
    assert content.estimate_text(152.3, 13.2, 120.04, 180.4)["interval"] == "[120, 180]"
    assert content.estimate_text(1.23e-4, 4.5e-6, 1.1e-4, 1.3e-4)["value"] == "(1.230 ± 0.045) × 10⁻⁴"
    assert content.estimate_text(np.nan, 1.0)["value"] == "not determined"


def test_the_verdict_states_its_interval_once():
    row = {"group": "g", "verdict": "positive", "h": 2.348, "stderr": 0.1014, "ci_low": 2.156, "ci_high": 2.559,
           "ci_method": "profile", "model": "hill",
           "reason": "profile interval of h [2.16, 2.56] excludes 1; F-test against michaelis-menten p = 1e-19"}
    text = content.verdict_sentence(row, 0.95)
    assert text.count("[") == 1 and "h = 2.35 ± 0.10, 95 % profile interval [2.16, 2.56]" in text


def test_units_are_simplified():
    assert content.pretty_unit("(uM/min)/uM") == "1/min"
    assert content.pretty_unit("v/S ((uM/min)/uM)") == "v/S (1/min)"
    assert content.pretty_unit("uM/min") == "µM/min"


def test_counts_and_flags_cover_sample_wells_only():
    rates = pd.DataFrame({"well": ["A1", "A2", "A3", "A4"], "role": ["sample", "sample", "blank", "standard"],
                          "flags": ["noisy", "", "noisy", "saturated"], "rate": [1.0, 2.0, 0.0, np.nan]})
    counts = content.summary_counts(rates, None)
    assert counts["flagged"] == 1 and counts["samples"] == 2 and counts["with_rate"] == 2


def test_an_inhibition_group_leads_with_its_mechanism(matrix: Path):
    html = (matrix / "report" / "report.html").read_text("utf-8")
    glance = html.split('<section id="glance">')[1].split('id="plates"')[0]
    assert "the data support competitive inhibition best" in glance
    assert "Kic" in glance and "verdict-" not in glance  # no cooperativity verdict leads this group
    figs = sorted(p.name for p in (matrix / "report" / "figures").glob("*.png"))
    assert "inhibition_vz-11-vzi-2.png" in figs and not any(f.startswith("rates-vs-") for f in figs)
    assert "Hill plot" not in html.split('id="groups"')[1].split('id="flagged"')[0].replace(
        "No Hill plot", "")


def test_the_standard_curve_is_shown_as_the_convert_step_made_it(fluor: Path):
    html = (fluor / "report" / "report.html").read_text("utf-8")
    assert (fluor / "report" / "figures" / "standard-curve_vz9-plate.png").exists()
    with reader.open_audit(fluor / "run.h5") as f:  # what the convert step stored, read independently
        cal = reader.read_table(f["steps/04-convert-standard-curve/vz9-plate/calibration"]).frame
    slope = cal.set_index("quantity").loc["slope"]
    assert content.estimate_text(slope["value"], slope["stderr"])["value"] in html
    assert "Standard curve of plate vz9-plate" in html


def test_flagged_wells_are_grouped_by_flag_and_each_has_a_panel(report_input):
    from vzero.plugins.report import panels

    rates = report_input.tables["rates"].frame
    records = panels.well_records(rates, report_input.traces, None, None, report_input.recipe, "AU/s",
                                  dict(report_input.tables["rates"].units))
    flagged_samples = rates[(rates["role"] == "sample") & rates["flags"].astype(str).ne("")]
    assert [r["well"] for r in records] == flagged_samples["well"].tolist()  # blanks are never listed
    groups = panels.flag_groups(records)
    assert sum(g["count"] for g in groups) >= len(records) and len(groups) <= len(panels.FLAG_SHORT)
    a2 = next(r for r in records if r["well"] == "A2")
    assert "no usable read at all" in a2["words"] and "no rate" in a2["measured"]
    svg = panels.sparkline_svg(next(r for r in records if r["y"] and any(v is not None for v in r["y"])))
    assert svg.startswith("<svg") and " s</text>" in svg  # drawn, with its time scale printed
