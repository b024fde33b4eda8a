"""The report's colours, markers and line styles, chosen to stay readable in greyscale and for colour-blind
readers.

Series differ in three ways at once: lightness (dark, middle, light, in that order), marker shape and line
style, so a figure printed in black and white or seen with any common colour-vision deficiency still tells
them apart. The sequential map for rates runs monotonically from pale to dark, so the order of values survives
greyscale. The colours are our own choice.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

INK = "#1b2233"
"""Near-black for data points, text and frames."""

MUTED = "#8a8f98"
"""Mid grey for raw reads and secondary marks."""

PAPER = "#fbfaf6"
"""Background of figure panels."""

NO_VALUE = "#d6d6d6"
"""Wells without a rate (drawn hatched as well, so they do not depend on the grey)."""

WINDOW = "#c25a1c"
"""The rate line in progress-curve panels: a burnt orange, clearly darker than the grey reads around it."""

FLAGGED_CELL = "#f0dcc0"
"""Background of a flagged sample well's cell (with a heavy near-black frame, so it does not depend on hue)."""

QUIET_CELL = "#eeeeec"
"""Background of a cell or well that is not a sample (blank, standard, empty): quiet, no flag marks."""

QUIET_READS = "#b8bcc2"
"""Reads of wells that are not samples: lighter than sample reads."""

RAMP = ("#fbf5e4", "#f1d48e", "#dc9b4f", "#ad5839", "#603049", "#1e1a34")
"""Sequential map for rates, pale cream to deep ink, lightness falling monotonically."""


@dataclass(frozen=True)
class Series:
    """How one model or category is drawn."""

    color: str
    linestyle: str
    marker: str


SERIES: tuple[Series, ...] = (
    Series("#1f3b5c", "-", "o"),    # dark slate blue, solid
    Series("#d2792b", "--", "s"),   # orange, dashed
    Series("#7fb8ad", ":", "^"),    # pale teal, dotted
    Series("#6b3f7a", "-.", "D"),   # plum, dash-dot
    Series("#b9b06a", (0, (5, 1, 1, 1, 1, 1)), "v"),  # olive, dash-dot-dot
)


def series(i: int) -> Series:
    """The ``i``-th series style (cycling)."""
    return SERIES[i % len(SERIES)]


LEVEL_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "h", "<", ">")
"""A marker per level of a series of concentrations, so that levels stay apart without colour."""


def levels(n: int) -> list[str]:
    """``n`` colours for ordered levels (inhibitor or substrate concentrations), lightest for the lowest:
    evenly spaced along :data:`RAMP` from its second stop (the first is too pale to see on paper), so that
    their order survives greyscale."""
    from matplotlib.colors import to_hex

    cmap = rate_cmap()
    if n <= 1:
        return [to_hex(cmap(0.65))]
    return [to_hex(cmap(0.22 + 0.78 * k / (n - 1))) for k in range(n)]


def rate_cmap() -> Any:
    """The sequential colour map for rates (a matplotlib colormap built from :data:`RAMP`)."""
    from matplotlib.colors import LinearSegmentedColormap

    cmap = LinearSegmentedColormap.from_list("vzero-sand-to-ink", list(RAMP))
    return cmap.with_extremes(bad=NO_VALUE)


STYLE: dict[str, Any] = {
    "font.size": 9,
    "axes.titlesize": 10,
    "axes.labelsize": 9,
    "axes.edgecolor": INK,
    "axes.labelcolor": INK,
    "axes.facecolor": PAPER,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "xtick.color": INK,
    "ytick.color": INK,
    "text.color": INK,
    "legend.frameon": False,
    "figure.facecolor": "white",
    "savefig.facecolor": "white",
    "svg.fonttype": "none",
    "svg.hashsalt": "vzero",
    "path.simplify": True,
}
"""matplotlib rc settings applied while the report's figures are drawn."""
