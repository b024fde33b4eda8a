"""Flagged wells can be followed from the plate figures to their panels, and stay legible at 384 wells.

The link areas over each plate figure come from :func:`vzero.plugins.report.figures.cell_areas`; the test
here checks them against the pixels of the saved PNG (each flagged cell's heavy frame lies on its area's
edge), so a change of layout that moves the cells cannot leave the links behind. The browser test clicks
wells on the report of an invented 384-well plate and checks that each click lands on the well's panel.
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from vzero.data import Traces
from vzero.plugins.report import figures, marks

from .chromium import check_page, find_browser

BROWSER = find_browser()


def _plate(n_rows: int, n_cols: int, flagged: dict[str, str]) -> tuple[Traces, pd.DataFrame]:
    wells = [f"{chr(65 + r)}{c + 1}" for r in range(n_rows) for c in range(n_cols)]
    t = np.arange(0.0, 300.0, 15.0)
    rng = np.random.default_rng(3)
    signal = 0.1 + np.outer(np.linspace(1e-4, 1e-3, len(wells)), t) + rng.normal(0, 1e-3, (len(wells), t.size))
    traces = Traces("p", t, signal, np.ones_like(signal, bool), np.zeros_like(signal, bool),
                    pd.DataFrame({"well": wells}), "AU")
    rates = pd.DataFrame({"well": wells, "role": "sample", "rate": np.linspace(1e-4, 1e-3, len(wells)),
                          "flags": [flagged.get(w, "") for w in wells], "window_start_s": 0.0,
                          "window_end_s": 285.0, "method": "window"})
    rates.loc[rates["well"] == "A1", "role"] = "blank"  # a blank is never marked, flag or not
    rates.loc[rates["well"] == "A1", "flags"] = "noisy"
    return traces, rates


def _dark_edge(png: bytes, area: tuple[str, float, float, float, float]) -> float:
    """The largest share of near-black pixels along the left edge of ``area`` (within ±2 px)."""
    import matplotlib.image

    img = matplotlib.image.imread(io.BytesIO(png))[..., :3]
    h, w = img.shape[:2]
    _, x0, y0, _, y1 = area
    rows = slice(round(y0 * h) + 3, round(y1 * h) - 3)
    shares = [float((img[rows, c].mean(axis=1) < 0.35).mean()) for c in range(round(x0 * w) - 2, round(x0 * w) + 3)]
    return max(shares)


@pytest.mark.parametrize("n_rows, n_cols", [(8, 12), (16, 24)])
def test_link_areas_lie_on_the_flagged_cells_of_the_saved_image(n_rows: int, n_cols: int):
    flagged = {"B3": "noisy", "D7": "lag;curvature;decay", f"{chr(64 + n_rows)}{n_cols}": "saturated"}
    traces, rates = _plate(n_rows, n_cols, flagged)
    fig, _ = figures.progress_grid(traces, rates, rates["rate"].to_numpy(), 384)
    png, _ = figures.render(fig, dpi=150)
    areas = figures.cell_areas(fig)
    assert [a[0] for a in areas] == list(flagged)  # flagged sample wells only: not the blank A1
    for area in areas:  # the heavy ink frame of each flagged cell runs along its area's left edge
        assert _dark_edge(png, area) > 0.8, area
        assert 0 <= area[1] < area[3] <= 1 and 0 <= area[2] < area[4] <= 1
    # a well one column to the right is one cell width further right (the areas follow the plate geometry)
    width = areas[0][3] - areas[0][1]
    assert width * n_cols < 1 and areas[1][1] > areas[0][1] + 3 * width


def test_flag_codes_and_their_legend():
    assert marks.cell_label(["lag", "curvature", "decay"]) == "LG CV+"
    assert marks.legend(["noisy", "lag"]) == "LG lag · NZ noisy"
    assert marks.code("a_new_flag") == "AN"  # a flag added later still gets a code
    assert len(set(marks.FLAG_CODES.values())) == len(marks.FLAG_CODES)  # no two flags share a code
    from vzero.plugins.kinetics.flags import NAMES

    assert set(NAMES) <= set(marks.FLAG_CODES)  # every flag the vocabulary knows has a code of its own


pytestmark_browser = pytest.mark.skipif(BROWSER is None, reason="no Chromium on PATH: install the Debian "
                                                                "package chromium")

CLICKS = """(async () => {
  const pause = () => new Promise(r => setTimeout(r, 30));
  const out = [];
  for (const figure of document.querySelectorAll('#plates figure')) {
    const links = Array.from(figure.querySelectorAll('a.well-link'));
    if (!links.length) { continue; }
    for (const k of [0, Math.floor(links.length / 2), links.length - 1]) {
      const link = links[k];
      link.scrollIntoView({block: 'center'}); await pause();
      const box = link.querySelector('rect').getBoundingClientRect();
      const hit = document.elementFromPoint(box.x + box.width / 2, box.y + box.height / 2);
      const a = hit && hit.closest('a');
      if (a) { a.dispatchEvent(new MouseEvent('click', {bubbles: true, cancelable: true, view: window})); }
      await pause();
      const target = document.querySelector(location.hash || '#none');
      const r = target ? target.getBoundingClientRect() : null;
      out.push({figure: figure.id, href: link.getAttribute('href'), hash: location.hash,
                title: link.querySelector('title').textContent, width: box.width, height: box.height,
                shown: !!r && r.bottom > 0 && r.top < window.innerHeight});
    }
  }
  return out;
})()"""


@pytestmark_browser
@pytest.mark.browser
def test_clicking_a_flagged_well_on_a_384_well_plate_opens_its_panel(fluor_run: Path):
    assert BROWSER is not None
    run_dir = fluor_run
    page = run_dir / "report" / "report.html"
    html = page.read_text("utf-8")
    assert not re.search(r'(src|href)="(https?:)?//', html)  # still offline: links are to anchors in the page
    seen = check_page(page, BROWSER, width=1280, height=1400, script=CLICKS)
    assert seen.errors == []
    clicks = seen.result
    assert {c["figure"].split("_")[0] for c in clicks} == {"fig-plate-map", "fig-progress-curves"}
    for c in clicks:
        assert c["hash"] == c["href"], c  # the click at the cell's centre followed that well's link
        assert c["shown"], c  # and the well's panel is on screen
        assert c["width"] >= 8 and c["height"] >= 8, c  # a target a mouse can hit (CSS px; our own bound)
        assert re.search(r": [A-Z]{2} ", c["title"]), c  # the tooltip names the flags with their codes
    flagged = pd.read_csv(run_dir / "rates.csv")
    flagged = flagged[(flagged["role"] == "sample") & flagged["flags"].fillna("").ne("")]
    links = re.findall(r'<a href="#(well-[^"]+)" class="well-link">', html)
    assert len(links) == 2 * len(flagged)  # every flagged sample well, once on each plate figure
    assert all(f'id="{a}"' in html for a in links)  # and each leads to a panel
