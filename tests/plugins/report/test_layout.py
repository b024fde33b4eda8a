"""Figure layout: margins come from font metrics (no layout engine), so check that every label still lands
inside its figure and clear of every other label, also with very small and very large numbers on the axes."""

from __future__ import annotations

from itertools import combinations
from typing import Any

import numpy as np
import pandas as pd
import pytest
from vzero.plugins.report import figures, palette

from .conftest import GROUP


def _drawn(fig: Any) -> Any:
    """Draw ``fig`` at the report's PNG resolution, as :func:`figures.render` does, and return its renderer."""
    import matplotlib

    with matplotlib.rc_context(palette.STYLE):
        fig.set_dpi(130)
        fig.canvas.draw()
    return fig.canvas.get_renderer()


def _decorations(fig: Any) -> list[Any]:
    """Every visible text outside the data area: titles, axis labels, tick labels, offset texts, figure title."""
    from matplotlib.text import Text

    out = [t for t in fig.texts]
    for ax in fig.axes:
        if not ax.get_visible():
            continue
        inside = set(map(id, ax.texts))
        out += [c for c in ax.get_children() if isinstance(c, Text) and id(c) not in inside]
        for axis in (ax.xaxis, ax.yaxis):
            lo, hi = sorted(axis.get_view_interval())
            slack = 1e-9 * (hi - lo)
            out += [lab for tick in axis.get_major_ticks(len(axis.get_majorticklocs()))
                    if lo - slack <= tick.get_loc() <= hi + slack for lab in (tick.label1, tick.label2)]
            out += [axis.label, axis.get_offset_text()]
    return [t for t in out if t.get_visible() and t.get_text().strip()]


def _check(fig: Any) -> list[Any]:
    renderer = _drawn(fig)
    texts = _decorations(fig)
    page = fig.bbox
    boxes = [t.get_window_extent(renderer) for t in texts]
    for t, b in zip(texts, boxes, strict=True):
        assert page.x0 - 1 <= b.x0 and b.x1 <= page.x1 + 1 and page.y0 - 1 <= b.y0 and b.y1 <= page.y1 + 1, \
            f"{t.get_text()!r} leaves the figure: {b} not in {page}"
    for (t1, b1), (t2, b2) in combinations(zip(texts, boxes, strict=True), 2):
        b1s, b2s = b1.expanded(1, 1).shrunk(1, 1), b2.expanded(1, 1).shrunk(1, 1)
        overlap = min(b1s.x1, b2s.x1) - max(b1s.x0, b2s.x0), min(b1s.y1, b2s.y1) - max(b1s.y0, b2s.y0)
        assert min(overlap) <= 1.0, f"{t1.get_text()!r} and {t2.get_text()!r} overlap"
    return texts


def _points(scale: float) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Invented Michaelis-Menten rates (Km 50 µM) at ``scale`` and a matching curve table."""
    s = np.repeat([5.0, 10, 25, 50, 100, 250, 500, 1000], 3)
    v = scale * s / (50 + s) * (1 + 0.03 * np.sin(np.arange(s.size)))
    grid = np.linspace(0, 1000, 60)
    fit = scale * grid / (50 + grid)
    points = pd.DataFrame({"substrate": s, "rate": v, "rate_stderr": 0.02 * scale})
    curves = pd.DataFrame({"model": "michaelis-menten", "variable": "substrate", "inhibitor": np.nan, "x": grid,
                           "y": fit, "lower": fit * 0.97, "upper": fit * 1.03})
    return points, curves


@pytest.mark.parametrize("scale", [12.0, 2.0e-3, 3.0e-8, 4.0e6])
def test_rates_figure_keeps_every_label_inside_and_apart(scale):
    # 3e-8 (M/s) and 4e6 push matplotlib's tick formatter into an offset text ('1e−8') above the axis
    points, curves = _points(scale)
    fig = figures.rates_vs_x(GROUP, points, np.ones(len(points), bool), curves, "michaelis-menten", "substrate",
                             "µM", "M/s")
    texts = _check(fig)
    offsets = [t for t in texts if t in (fig.axes[0].yaxis.get_offset_text(), fig.axes[1].yaxis.get_offset_text())]
    if scale < 1e-5 or scale > 1e5:
        assert offsets  # the hard cases really have an offset text to make room for


@pytest.mark.parametrize("scale", [1.0, 1.0e8])
def test_transform_panels_keep_every_label_inside_and_apart(scale):
    rows = []
    for plot, label in (("hill", "log10"), ("lineweaver-burk", "1/v"), ("eadie-hofstee", "v"),
                        ("hanes-woolf", "S/v")):
        x = np.linspace(-0.01, 0.06, 12)
        rows += [{"plot": plot, "quantity": "point", "x": xi, "y": scale * (0.5 + 30 * xi) * (1 - 2 * (plot == "hill")),
                  "unstable": i < 2, "x_label": f"{label} x (1/uM)", "y_label": f"{label} y (uM/min)"}
                 for i, xi in enumerate(x)]
        rows += [{"plot": plot, "quantity": q, "x": np.nan, "y": val, "unstable": False, "x_label": "", "y_label": ""}
                 for q, val in (("slope", 30.0 * scale), ("intercept", 0.5 * scale), ("Vmax", 2.0), ("Km", 60.0))]
    fig = figures.transforms(GROUP, pd.DataFrame(rows), "µM/min", "µM")
    _check(fig)


def test_plate_figures_keep_every_label_inside_and_apart(report_input):
    rates = report_input.tables["rates"].frame
    _check(figures.plate_map("p-1", rates, np.ones(len(rates), bool), "AU/s"))
    traces = report_input.traces["p-1"]
    fig, _ = figures.progress_grid(traces, rates, rates["rate"].to_numpy(float))
    _check(fig)


def test_384_well_plate_map_keeps_its_labels_apart():
    from vzero.plugins.kinetics.wells import all_wells

    wells = all_wells(384)
    rates = pd.DataFrame({"well": wells, "rate": np.linspace(1e-6, 5e-4, 384), "role": "sample", "flags": ""})
    _check(figures.plate_map("big", rates, np.ones(384, bool), "AU/s"))


def test_text_widths_are_at_least_what_the_png_renderer_draws():
    """Reference: matplotlib's Agg renderer (hinted FreeType rendering, the path the PNG takes) measures the
    same strings independently of the text-to-path metrics the layout uses."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.font_manager import FontProperties

    fig = Figure(dpi=130)
    renderer = FigureCanvasAgg(fig).get_renderer()
    for text in ("0.0005", "−400", "12", "AF", "v0 (µM/min)", "1/v (1/(µM/min))"):
        for size in (8.0, 9.0, 10.0):
            agg = renderer.get_text_width_height_descent(text, FontProperties(size=size), ismath=False)[0] / 130
            ours = figures._text_width(text, size)
            assert agg <= ours <= 1.2 * agg + 0.02, (text, size, agg, ours)


def test_svg_keeps_text_as_text_and_dense_reads_as_a_bitmap(report_input):
    rates = report_input.tables["rates"].frame
    fig, _ = figures.progress_grid(report_input.traces["p-1"], rates, rates["rate"].to_numpy(float))
    png, svg = figures.render(fig, dpi=150)
    text = svg.decode("utf-8")
    assert "<text" in text and "Progress curves" in text  # svg.fonttype "none" from the report style
    assert text.count("<image") == 1  # the per-read dots, rasterized
    assert png[:4] == b"\x89PNG"
