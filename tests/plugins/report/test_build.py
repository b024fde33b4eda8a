"""The HTML report and its figure files, built from hand-made tables (no fit run needed)."""

from __future__ import annotations

import html
import re
import subprocess
import sys
import xml.etree.ElementTree as ET

from vzero.plugins.report.build import RESEARCH_NOTE, render_html

from .conftest import GROUP

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # the PNG signature (PNG specification, ISO/IEC 15948, section 5.2)


def test_files_are_named_for_people_and_come_in_png_and_svg(built):
    names = sorted(k for k in built if k.startswith("figures/"))
    assert names == sorted([
        "figures/plate-map_p-1.png", "figures/plate-map_p-1.svg",
        "figures/progress-curves_p-1.png", "figures/progress-curves_p-1.svg",
        "figures/rates-vs-substrate_e1-b-amp-b.png", "figures/rates-vs-substrate_e1-b-amp-b.svg",
        "figures/transforms_e1-b-amp-b.png", "figures/transforms_e1-b-amp-b.svg",
    ])
    for name in names:
        if name.endswith(".png"):
            assert built[name].startswith(PNG_MAGIC), name
        else:
            root = ET.fromstring(built[name])
            assert root.tag.endswith("svg"), name


def test_report_is_self_contained(built):
    text = built["report.html"].decode("utf-8")
    # every figure is inline, and nothing is fetched from elsewhere
    assert text.count('src="data:image/png;base64,') == 4
    assert not re.search(r'(src|href)="(https?:)?//', text)
    assert "<script" not in text
    assert "<link" not in text


def test_report_says_what_a_reader_must_know(built):
    text = html.unescape(re.sub(r"<[^>]+>", " ", built["report.html"].decode("utf-8")))
    text = re.sub(r"\s+", " ", text)
    assert RESEARCH_NOTE in text
    assert text.count("Research use only.") == 2  # top and bottom of the page
    # the flagged well with its reason in words
    assert "A2" in text and "all missing" in text and "no usable read at all" in text
    # the exclusion written in the recipe, with its reason, and the well it kept out of the fit
    assert "p-1 C5 (whole well): bubble seen by eye" in text
    assert ("C5 " + GROUP + " flag excluded: excluded in the recipe (excluded: bubble seen by eye)") in text
    # parameters with units, errors and intervals (Km = 100 ± 2 µM, profile interval [96, 104])
    assert "100.0 ± 2.0" in text and "[96.0, 104.0]" in text and "µM" in text  # rounded together
    assert "Selected model: Michaelis–Menten (lowest AICc (only model fitted))." in text
    # blanks are not fitted, and the report says so
    assert "24 wells with role “blank” are not fitted" in text


def test_markup_in_data_is_escaped(built):
    text = built["report.html"].decode("utf-8")
    assert "<b>&amp;</b>" not in text  # the group name never becomes markup
    assert html.escape(GROUP) in text
    assert "a warning with &lt;markup&gt;" in text


def test_absent_tables_are_named_not_fatal(report_input):
    from dataclasses import replace

    from vzero.plugins.report.build import build

    bare = replace(report_input, tables={"rates": report_input.tables["rates"]}, traces={}, recipe={"name": "x"})
    text = build(bare)["report.html"].decode("utf-8")
    assert "Not in this run: fits, model_comparison, cooperativity, diagnostics, curves." in text
    assert "No fit step in this run" in text


def test_template_autoescape_is_on():
    out = render_html({"title": "<i>t</i>", "recipe": {"name": "<i>r</i>"}, "provenance": {
        "vzero_version": "0", "recipe_name": "", "source": "", "versions": {}, "steps": [], "inputs": [],
        "warnings": [], "failed_plates": {}, "recipe_sha256": "", "created": "", "run_id": "", "recipe_text": ""},
        "research_note": "", "counts": None, "plates": [], "plate_figures": [], "groups": [], "flagged": [],
        "well_panels": [], "calibrations": [],
        "flag_text": {}, "exclusions": {"wells": [], "roles": [], "recipe": []},
        "options": {"present": False, "confidence": 0.95, "exclude_flags": []}, "rate_unit": "", "missing": [],
        "notes": [], "built": ""})
    assert "<i>" not in out and "&lt;i&gt;r&lt;/i&gt;" in out


def test_importing_the_plugin_does_not_load_matplotlib_or_jinja2():
    code = ("import sys, vzero.plugins.report; bad = [m for m in ('matplotlib', 'jinja2') if m in sys.modules]; "
            "sys.exit(1 if bad else 0)")
    assert subprocess.run([sys.executable, "-c", code], check=False).returncode == 0
