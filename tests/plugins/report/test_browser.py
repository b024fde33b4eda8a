"""The report in a real browser: headless Chromium loads it from a file, decodes every figure, logs no error.

Needs the Debian packages chromium (and chromium-driver in CI); skipped with a message where the browser is
missing. The gallery's screenshots come from docs/make_gallery.py.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from .chromium import check_page, find_browser

BROWSER = find_browser()

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(BROWSER is None, reason="no Chromium on PATH: install the Debian packages chromium and "
                                                "chromium-driver to run the browser test"),
]


def test_report_opens_in_chromium_with_every_figure_and_no_errors(finished_run: Path, tmp_path: Path):
    assert BROWSER is not None
    # copy the report alone (no figures/ beside it): it must stand on its own, as an e-mail attachment does
    alone = tmp_path / "attachment" / "report.html"
    alone.parent.mkdir()
    shutil.copy(finished_run / "report.html", alone)
    seen = check_page(alone, BROWSER, width=1280, height=1600)
    assert seen.total_images == 3  # plate map, progress curves, rates against substrate
    assert seen.loaded_images == seen.total_images, seen.broken
    assert seen.errors == []
    assert seen.external == []
    assert seen.title.startswith("vzero report")
    assert seen.height > 1600  # the page laid out beyond one screen: sections and tables rendered
    assert seen.screenshot.startswith(b"\x89PNG\r\n\x1a\n")
    (tmp_path / "report-screenshot.png").write_bytes(seen.screenshot)


def test_a_broken_image_is_caught(tmp_path: Path):
    """The check must be able to fail: a page with an undecodable image and a console error."""
    assert BROWSER is not None
    page = tmp_path / "bad.html"
    page.write_text('<!DOCTYPE html><html><head><title>bad</title></head><body>'
                    '<img alt="broken" src="data:image/png;base64,AAAA">'
                    '<script>console.error("deliberate")</script></body></html>', "utf-8")
    seen = check_page(page, BROWSER, width=400, height=300)
    assert seen.total_images == 1 and seen.loaded_images == 0 and seen.broken == ["broken"]
    assert any("deliberate" in e for e in seen.errors)


def test_the_report_of_a_384_well_plate_stays_readable_and_short(fluor_run: Path, tmp_path: Path):
    """A 384-well plate with standards, blanks and a substrate-inhibition group: every figure decodes, no
    error, and the page stays within a sensible height (the flagged wells are grouped by flag and their
    panels scroll in a box; before, a 384-well report ran past 30,000 px)."""
    assert BROWSER is not None
    page = fluor_run / "report" / "report.html"
    seen = check_page(page, BROWSER, width=1280, height=1400)
    assert seen.loaded_images == seen.total_images and seen.total_images >= 5, seen.broken
    assert seen.errors == []
    assert seen.height < 12_000, seen.height  # CSS px; about eight screens at 1280 × 1400 (our own bound)
    (tmp_path / "report-384.png").write_bytes(seen.screenshot)
