"""The report's figures, drawn with matplotlib (Agg) and returned as PNG and SVG bytes.

* :func:`plate_map`: v0 of every well in plate geometry, flagged and excluded wells marked.
* :func:`progress_grid`: every well's progress curve as a small multiple in plate geometry (one axes for
  the whole plate, drawn as line collections, so 1536 wells cost about as much as 96) with the line whose
  slope is the well's rate, over the window it came from.
* :func:`rates_vs_x`: per group, rates against substrate (or inhibitor) with each model's fitted curve, its
  confidence band and the residuals.
* :func:`transforms`: per group, the Hill plot and the three classical linear transforms, for inspection.

matplotlib is imported inside the functions, so importing this module stays cheap. Figures are made without
pyplot (no global figure list) and placed by hand from font metrics (see "layout" below), so each format costs
one draw.
"""

from __future__ import annotations

import io
import re
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from vzero.data import Traces
from vzero.plugins.report import marks, palette
from vzero.plugins.report.content import flag_list, model_title, num, pretty_unit

MAX_PANELS = 384
"""Most wells drawn in one progress-curve figure; larger plates get a subsample (flagged wells first)."""

DENSE_POINTS = 20_000
"""Reads per progress-curve figure above which the grey read lines go into the SVG as a bitmap (a vector path
per read makes a big, slow SVG and shows nothing more)."""



def _remember_cells(fig: Any, ax: Any, wells: Sequence[str], x: np.ndarray, y: np.ndarray, half: float) -> None:
    """Note where the cells of ``wells`` are (centres ``x``, ``y`` in data units of ``ax``, ``half`` the cell
    side), so that :func:`cell_areas` can say where they land in the saved image (for links to the wells)."""
    fig.vzero_cells = (ax, list(wells), np.asarray(x, float), np.asarray(y, float), float(half))


def cell_areas(fig: Any) -> list[tuple[str, float, float, float, float]]:
    """Where each remembered cell lies in the saved image, as (well, left, top, right, bottom) in fractions
    of the image's width and height (0 to 1 from the top left, whatever the dpi). Call after the layout is
    fixed (the figures here fix it when they are made). Empty for a figure without remembered cells."""
    cells = getattr(fig, "vzero_cells", None)
    if not cells:
        return []
    ax, wells, x, y, half = cells
    w, h = fig.bbox.width, fig.bbox.height
    a = ax.transData.transform(np.column_stack([x - half, y - half]))
    b = ax.transData.transform(np.column_stack([x + half, y + half]))
    out = []
    for k, well in enumerate(wells):
        x0, x1 = sorted((a[k, 0] / w, b[k, 0] / w))
        y0, y1 = sorted((1 - a[k, 1] / h, 1 - b[k, 1] / h))
        out.append((well, round(x0, 5), round(y0, 5), round(x1, 5), round(y1, 5)))
    return out


def slug(text: str) -> str:
    """A file-name-safe form of ``text`` (``'VZ-7 wild type'`` -> ``'vz-7-wild-type'``)."""
    s = re.sub(r"[^a-z0-9]+", "-", str(text).lower()).strip("-")
    return s or "unnamed"


def load_matplotlib() -> None:
    """Import what making and saving the figures needs (before work is shared out to forked processes, so
    that each inherits it instead of importing it again)."""
    import matplotlib.backends.backend_agg
    import matplotlib.backends.backend_svg
    import matplotlib.figure
    import matplotlib.font_manager  # noqa: F401


def render(fig: Any, dpi: int = 130) -> tuple[bytes, bytes]:
    """PNG (at ``dpi``) and SVG bytes of ``fig``, drawn with the report style in force (so the SVG keeps its
    text as text). Artists marked rasterized go into the SVG as a bitmap at ``dpi``; everything else stays
    vector. The layout is fixed when the figure is made, so each format costs one draw and nothing more."""
    import matplotlib

    png, svg = io.BytesIO(), io.BytesIO()
    with matplotlib.rc_context(palette.STYLE):
        fig.savefig(png, format="png", dpi=dpi, metadata={"Software": None})
        fig.savefig(svg, format="svg", dpi=dpi, metadata={"Date": None, "Creator": None})
    return png.getvalue(), svg.getvalue()


def _new_figure(width: float, height: float) -> Any:
    """An empty Agg figure of ``width`` × ``height`` inches, outside pyplot's global figure list (nothing to
    close, nothing kept alive between reports)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height))
    FigureCanvasAgg(fig)
    return fig


# -- layout ------------------------------------------------------------------------------------------------
# Margins are measured once from font metrics of the texts that sit outside the axes (tick labels, axis
# labels, titles) and the axes are placed by hand. matplotlib's constrained layout gets the same result by
# laying out every tick label two or three times per save, which made up about a third of the report's build
# time. All sizes below are in inches unless a name says points.

PT = 1 / 72
"""Inches per typographic point."""

EDGE = 0.08
"""Blank border around every figure."""

TICK = (3.5 + 3.5) * PT
"""Tick length plus the gap between tick and label (matplotlib's defaults, kept by the report style)."""

LABEL_PAD = 4 * PT
"""Gap between tick labels and the axis label (matplotlib's default)."""

TITLE_PAD = 6 * PT
"""Gap between an axes and its title (matplotlib's default)."""

PLATE_TICK_PAD = 3.5 * PT
"""Gap between a plate's edge and its row letters or column numbers (no tick marks on plate axes)."""

LEADING = 1.2
"""Line height as a multiple of the font size."""


def _lines(n: int, size: float) -> float:
    """Height of ``n`` lines of text at ``size`` points."""
    return n * size * LEADING * PT


def _text_width(text: str, size: float) -> float:
    """Width of the widest line of ``text`` at ``size`` points, from the font's metrics (nothing is drawn).

    The 8 % extra covers the rounding of glyph advances in the Agg renderer at screen resolutions.
    """
    from matplotlib.font_manager import FontProperties
    from matplotlib.textpath import text_to_path

    font = FontProperties(size=size)
    widths = [text_to_path.get_text_width_height_descent(line, font, ismath=False)[0]
              for line in str(text).split("\n") if line]
    return max(widths, default=0.0) * PT * 1.08


def _tick_labels(axis: Any) -> tuple[list[str], str]:
    """The major tick labels ``axis`` will draw inside its view limits, and its offset text ('' if none)."""
    lo, hi = sorted(axis.get_view_interval())
    slack = 1e-9 * (hi - lo)
    locs = [v for v in axis.get_major_locator()() if lo - slack <= v <= hi + slack]
    fmt = axis.get_major_formatter()
    labels = [s.replace("$", "") for s in fmt.format_ticks(locs)]
    offset = fmt.get_offset() if hasattr(fmt, "get_offset") else ""
    return labels, offset


def _ytick_room(ax: Any, size: float = 9.0, tick: float = TICK) -> tuple[float, bool]:
    """Width the y tick labels of ``ax`` take left of it (labels, gap and tick), and whether the axis shows an
    offset text (a '1e−6' above the axis, which then needs a line of room)."""
    labels, offset = _tick_labels(ax.yaxis)
    return max((_text_width(s, size) for s in labels), default=0.0) + tick, bool(offset)


def _xtick_overhang(ax: Any, size: float = 9.0) -> float:
    """How far the last x tick label can reach past the right edge of ``ax`` (half its width)."""
    labels, _ = _tick_labels(ax.xaxis)
    return _text_width(labels[-1], size) / 2 if labels else 0.0


def _place_grid(fig: Any, axes: Sequence[Sequence[Any]], *, left: float, right: float, top: float,
                bottom: float, wgap: float = 0.0, hgap: float = 0.0,
                heights: Sequence[float] | None = None) -> None:
    """Put ``axes`` (rows of columns) on a regular grid with the given margins and gaps, in inches."""
    w, h = fig.get_size_inches()
    n_rows, n_cols = len(axes), len(axes[0])
    ratios = np.asarray(heights if heights is not None else [1.0] * n_rows, float)
    aw = max(w - left - right - wgap * (n_cols - 1), 0.5) / n_cols
    ah_all = max(h - top - bottom - hgap * (n_rows - 1), 0.5) * ratios / ratios.sum()
    y = h - top
    for r, row in enumerate(axes):
        y -= ah_all[r]
        for c, ax in enumerate(row):
            x = left + c * (aw + wgap)
            ax.set_position((x / w, y / h, aw / w, ah_all[r] / h))
        y -= hgap


def _title(ax: Any, text: str, size: float, pad_pt: float = 6.0) -> None:
    """A left-aligned title ``pad_pt`` points above ``ax``, at a fixed place (matplotlib then skips measuring
    the tick labels of every axes to move it)."""
    ax.set_title(text, loc="left", fontsize=size, y=1.0, pad=pad_pt)


def _plate_geometry(wells: Sequence[str]) -> tuple[int, int, np.ndarray, np.ndarray, list[str]]:
    """(rows, columns, row index, column index, row labels) of ``wells`` on the smallest plate holding them."""
    from vzero.plugins.kinetics.wells import ROW_LABELS, infer_plate_size, plate_shape, well_index

    size = infer_plate_size(wells)
    n_rows, n_cols = plate_shape(size)
    rc = np.array([well_index(w, size) for w in wells], dtype=int).reshape(-1, 2)
    return n_rows, n_cols, rc[:, 0], rc[:, 1], list(ROW_LABELS[:n_rows])


def _plate_axes(ax: Any, n_rows: int, n_cols: int, labels: list[str]) -> None:
    """Ticks and limits for a plate drawn with row A at the top, one unit per well."""
    step = 1 if n_cols <= 24 else 4
    ax.set_xlim(-0.5, n_cols - 0.5)
    ax.set_ylim(n_rows - 0.5, -0.5)
    ax.set_xticks(range(0, n_cols, step), [str(c + 1) for c in range(0, n_cols, step)])
    rstep = 1 if n_rows <= 16 else 2
    ax.set_yticks(range(0, n_rows, rstep), labels[::rstep])
    ax.xaxis.tick_top()
    ax.tick_params(length=0)
    for side in ("top", "right", "bottom", "left"):
        ax.spines[side].set_visible(False)
    ax.set_aspect("equal")


# -- plate map ---------------------------------------------------------------------------------------------


def plate_map(plate: str, rates: pd.DataFrame, used: np.ndarray | None, rate_unit: str) -> Any:
    """v0 per sample well in plate geometry: a pale-to-dark ramp, hatched grey for no rate, a heavy ring
    around flagged sample wells and a cross on sample wells kept out of the fit. Blanks, standards and other
    non-sample wells are small pale squares with no flag marks (they are not wells to review)."""
    import matplotlib
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    wells = rates["well"].astype(str).tolist()
    n_rows, n_cols, r, c, labels = _plate_geometry(wells)
    v = pd.to_numeric(rates["rate"], errors="coerce").to_numpy(float)
    is_sample = (rates["role"].astype(str) == "sample").to_numpy() if "role" in rates else np.ones(len(v), bool)
    flagged = np.array([bool(flag_list(f)) for f in rates.get("flags", [""] * len(rates))]) & is_sample
    left_out = (~used & is_sample) if used is not None else np.zeros(len(v), bool)
    quiet = ~is_sample
    v = np.where(quiet, np.nan, v)  # the colour ramp is for sample wells only

    with matplotlib.rc_context(palette.STYLE):
        cell = 0.5 if n_cols <= 24 else 0.25  # inches per well
        fig = _new_figure(cell * n_cols + 2.0, cell * n_rows + 1.0)  # resized below, once margins are known
        ax = fig.add_axes((0.1, 0.1, 0.6, 0.8))
        cax = fig.add_axes((0.8, 0.2, 0.03, 0.6))
        size = {12: 420, 24: 110, 48: 26}.get(n_cols, 60)
        ok = np.isfinite(v)
        finite = v[ok]
        lo, hi = (np.percentile(finite, [1, 99]) if finite.size else (0.0, 1.0))
        if hi <= lo:
            hi = lo + 1.0
        sc = ax.scatter(c[ok], r[ok], c=v[ok], s=size, cmap=palette.rate_cmap(), vmin=lo, vmax=hi,
                        edgecolors=palette.MUTED, linewidths=0.4, zorder=2)
        none = ~ok & ~quiet
        ax.scatter(c[none], r[none], s=size, facecolors=palette.NO_VALUE, edgecolors=palette.MUTED, hatch="/////",
                   linewidths=0.4, zorder=2)
        ax.scatter(c[quiet], r[quiet], s=size * 0.5, marker="s", facecolors=palette.QUIET_CELL,
                   edgecolors=palette.QUIET_READS, linewidths=0.4, zorder=2)
        _remember_cells(fig, ax, [wells[i] for i in np.flatnonzero(flagged)], c[flagged], r[flagged], 0.5)
        ax.scatter(c[flagged], r[flagged], s=size * 1.6, facecolors="none", edgecolors=palette.INK,
                   linewidths=2.2 if n_cols <= 12 else (1.6 if n_cols <= 24 else 1.0), zorder=3)
        ax.scatter(c[left_out], r[left_out], s=size * 0.45, marker="x", color=palette.INK,
                   linewidths=1.3 if n_cols <= 24 else 0.6, zorder=4)
        _plate_axes(ax, n_rows, n_cols, labels)
        extend = "both" if finite.size and (finite.min() < lo or finite.max() > hi) else "neither"
        bar = fig.colorbar(sc, cax=cax, extend=extend)
        bar.set_label(f"v0 ({rate_unit})")
        handles = [
            Patch(facecolor=palette.NO_VALUE, edgecolor=palette.MUTED, hatch="/////", label="no rate"),
            Line2D([], [], marker="o", ls="", mfc="none", mec=palette.INK, mew=2.0, ms=10, label="flagged sample"),
            Line2D([], [], marker="x", ls="", color=palette.INK, mew=1.3, ms=7, label="sample not fitted"),
            Line2D([], [], marker="s", ls="", mfc=palette.QUIET_CELL, mec=palette.QUIET_READS, ms=6,
                   label="blank, standard or other"),
        ]
        ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.01), ncol=4, fontsize=8)
        col_labels = _lines(1, 9) + PLATE_TICK_PAD
        _title(ax, f"Initial rates, plate {plate}", 10, (col_labels + TITLE_PAD) / PT)

        # margins from the labels: row letters left, column numbers and title above, colour bar and its
        # labels right, legend below; the plate itself is exactly cell × cell per well
        left = EDGE + max(_text_width(s, 9) for s in labels) + PLATE_TICK_PAD
        top = EDGE + _lines(1, 10) + TITLE_PAD + col_labels
        bottom = EDGE + 0.34
        bar_room, bar_offset = _ytick_room(cax)
        gap, bar_w = 0.2, 0.16
        right = EDGE + gap + bar_w + bar_room + LABEL_PAD + _lines(1, 9)
        pw, ph = cell * n_cols, cell * n_rows
        w, h = left + pw + right, bottom + ph + top + (_lines(1, 9) if bar_offset else 0.0)
        fig.set_size_inches(w, h)
        ax.set_position((left / w, bottom / h, pw / w, ph / h))
        bh = 0.75 * ph
        cax.set_position(((left + pw + gap) / w, (bottom + (ph - bh) / 2) / h, bar_w / w, bh / h))
    return fig


# -- progress curves ---------------------------------------------------------------------------------------


def window_lines(traces: Traces, rates: pd.DataFrame, slope: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Signal at the window start and end of the line whose slope is each well's rate, [n_wells] each.

    For the ``window`` method (and windows fixed by a recipe override) the line is the least-squares line with
    that slope (through the mean of the reads in the window). For other methods the rate is the slope at the
    window start, so the line is the tangent there, anchored on a quadratic through the window's reads. Wells
    with too few reads get NaN.
    """
    t = traces.time.astype(float)
    y = traces.masked_signal().astype(float)
    ts = pd.to_numeric(rates["window_start_s"], errors="coerce").to_numpy(float)
    te = pd.to_numeric(rates["window_end_s"], errors="coerce").to_numpy(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        w = (np.isfinite(y) & (t[None, :] >= ts[:, None]) & (t[None, :] <= te[:, None])).astype(float)
        yz = np.where(w > 0, y, 0.0)
        n = w.sum(axis=1)
        t_mean = (w * t).sum(axis=1) / n
        y_mean = yz.sum(axis=1) / n
        start = y_mean + slope * (ts - t_mean)
        methods = rates["method"].astype(str).to_numpy() if "method" in rates else np.full(len(ts), "window")
        least_squares = np.char.startswith(methods.astype(str), "window")  # also "window (override)"
        tangent = ~least_squares & (n >= 3)
        if tangent.any():
            u = np.where(w > 0, t[None, :] - ts[:, None], 0.0)
            a = np.stack([np.stack([(w * u ** (i + j)).sum(axis=1) for j in range(3)], axis=-1) for i in range(3)],
                         axis=-2)
            b = np.stack([(yz * u**i).sum(axis=1) for i in range(3)], axis=-1)
            good = tangent & (np.abs(np.linalg.det(a)) > 1e-300)
            if good.any():
                coef = np.linalg.solve(a[good], b[good][..., None])[..., 0]
                start[good] = coef[:, 0]
        end = start + slope * (te - ts)
    bad = ~np.isfinite(slope) | (n < 2)
    return np.where(bad, np.nan, start), np.where(bad, np.nan, end)


def signal_slope(rates: pd.DataFrame, units: Mapping[str, str], signal_unit: str) -> np.ndarray | None:
    """Each well's rate in signal units per second (what the progress-curve panels draw), or None."""
    if "signal_rate" in rates:
        return pd.to_numeric(rates["signal_rate"], errors="coerce").to_numpy(float)
    if "rate" in rates and units.get("rate", "") in (f"{signal_unit}/s", ""):
        return pd.to_numeric(rates["rate"], errors="coerce").to_numpy(float)
    return None


def _choose(n: int, priority: np.ndarray, limit: int) -> np.ndarray:
    """Indices of at most ``limit`` wells: every priority well first (up to the limit), then evenly spaced."""
    if n <= limit:
        return np.arange(n)
    first = np.flatnonzero(priority)[:limit]
    rest = np.setdiff1d(np.arange(n), first)
    k = limit - first.size
    picked = rest[np.linspace(0, rest.size - 1, k).round().astype(int)] if k > 0 and rest.size else rest[:0]
    return np.sort(np.concatenate([first, picked]))


def _cell_scales(y: np.ndarray, line_ends: tuple[np.ndarray, np.ndarray] | None) -> tuple[np.ndarray, np.ndarray]:
    """Each well's own signal scale, [n] low and high: its lowest and highest read (and rate-line end), padded
    by 6 % of the span; a well without a span gets ±0.5 around its value, a well without reads 0 to 1."""
    with np.errstate(invalid="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN rows: handled below
        stacks = [y]
        if line_ends is not None:
            stacks += [line_ends[0][:, None], line_ends[1][:, None]]
        both = np.concatenate(stacks, axis=1)
        lo, hi = np.nanmin(both, axis=1), np.nanmax(both, axis=1)
    lo = np.where(np.isfinite(lo), lo, 0.0)
    hi = np.where(np.isfinite(hi), hi, 1.0)
    span = hi - lo
    pad = np.where(span > 0, 0.06 * span, 0.5)
    return lo - pad, hi + pad


def progress_grid(traces: Traces, rates: pd.DataFrame | None, slope: np.ndarray | None,
                  max_panels: int = MAX_PANELS) -> tuple[Any, str]:
    """Every well's reads as a small multiple in plate geometry, with its rate line over its window.

    All cells share one time axis; each cell has its own signal scale (from the well's lowest to its
    highest read), so that a low-substrate well's curve can be judged as well as a fast one (the span of each
    scale is printed in the cell where cells are large enough). Flagged sample wells get a heavy frame and a
    tinted cell; blanks, standards and other non-sample wells are drawn quietly (pale, no flag marks).
    Returns the figure and a note ('' or what was left out).
    """
    import matplotlib
    from matplotlib.collections import LineCollection, PolyCollection

    names = traces.well_names
    y = traces.masked_signal().astype(float)
    t = traces.time.astype(float)
    flags = [""] * len(names)
    roles = np.full(len(names), "sample", dtype=object)
    lines = None
    if rates is not None and len(rates):
        by_well = rates.set_index(rates["well"].astype(str))
        rates = by_well.reindex(names).reset_index(drop=True)
        flags = [";".join(flag_list(f)) for f in rates.get("flags", pd.Series([""] * len(names)))]
        if "role" in rates:
            roles = rates["role"].astype(str).replace("nan", "").to_numpy()
        if slope is not None:
            slope = pd.Series(slope, index=by_well.index).reindex(names).to_numpy(float)
            lines = window_lines(traces, rates, slope)
    sample = np.array([str(r) == "sample" for r in roles])
    flagged = np.array([bool(f) for f in flags]) & sample
    pick = _choose(len(names), flagged, max_panels)
    note = ""
    if pick.size < len(names):
        note = (f"{pick.size} of {len(names)} wells drawn (every flagged well first, then an even spread); "
                "all wells are in the rates table.")
    if pick.size > 384 or len(names) > 384:  # subsample: a plain grid in well order
        n_cols = int(np.ceil(np.sqrt(pick.size * 1.5)))
        n_rows = int(np.ceil(pick.size / n_cols))
        rr, cc, labels = np.arange(pick.size) // n_cols, np.arange(pick.size) % n_cols, [""] * n_rows
        geometric = False
    else:
        n_rows, n_cols, r_all, c_all, labels = _plate_geometry(names)
        rr, cc = r_all[pick], c_all[pick]
        geometric = True
    lo, hi = _cell_scales(y[pick], None if lines is None else (lines[0][pick], lines[1][pick]))
    t0, t1 = float(np.nanmin(t)), float(np.nanmax(t))
    span_t = t1 - t0 if t1 > t0 else 1.0
    m = 0.1  # margin inside each cell

    def xpos(tt: np.ndarray, col: np.ndarray) -> np.ndarray:
        return col[:, None] - 0.5 + m + (tt - t0) / span_t * (1 - 2 * m)

    def ypos(yy: np.ndarray, row: np.ndarray, k: np.ndarray | slice = slice(None)) -> np.ndarray:
        frac = np.clip((yy - lo[k, None]) / (hi[k, None] - lo[k, None]), -0.02, 1.02)
        return row[:, None] + 0.5 - m - frac * (1 - 2 * m)

    xs = xpos(np.broadcast_to(t, (pick.size, t.size)), cc)
    ys = ypos(y[pick], rr)
    dense = pick.size * t.size > DENSE_POINTS
    with matplotlib.rc_context(palette.STYLE):
        cell = 0.62 if n_cols <= 12 else (0.34 if n_cols <= 24 else 0.2)
        fig = _new_figure(min(cell * n_cols + 1.2, 16), min(cell * n_rows + 1.4, 16))
        ax = fig.add_axes((0.1, 0.1, 0.8, 0.8))
        ax.set_facecolor("white")
        g = 0.47  # half the side of a cell frame
        boxes = [[(c - g, r - g), (c + g, r - g), (c + g, r + g), (c - g, r + g)] for r, c in zip(rr, cc, strict=True)]
        quiet = ~sample[pick]
        face = np.where(flagged[pick], palette.FLAGGED_CELL, np.where(quiet, palette.QUIET_CELL, palette.PAPER))
        edge = np.where(flagged[pick], palette.INK, np.where(quiet, palette.QUIET_CELL, "#d9d6cc"))
        heavy = 1.8 if n_cols <= 12 else (1.3 if n_cols <= 24 else 0.8)
        ax.add_collection(PolyCollection(boxes, facecolors=face, edgecolors=edge,
                                         linewidths=np.where(flagged[pick], heavy, 0.4), zorder=1))
        ax.add_collection(LineCollection(list(np.stack([xs, ys], axis=-1)),
                                         colors=[palette.QUIET_READS if q else palette.MUTED for q in quiet],
                                         linewidths=0.6 if n_cols <= 12 else 0.4, zorder=2, rasterized=dense))
        if n_cols <= 24:  # the span of each cell's own signal scale, and the role of non-sample wells
            size = 5.5 if n_cols <= 12 else 3.6
            for k in range(pick.size):
                if np.isfinite(hi[k] - lo[k]):
                    ax.text(cc[k] + 0.45, rr[k] + 0.45, f"Δ{num(hi[k] - lo[k], 2)}", ha="right", va="bottom",
                            fontsize=size, color=palette.MUTED, zorder=5)
                if quiet[k]:
                    ax.text(cc[k] - 0.45, rr[k] + 0.45, str(roles[pick[k]]) or "empty", ha="left", va="bottom",
                            fontsize=size, color=palette.MUTED, style="italic", zorder=5)
        if n_cols <= 12:  # a dot per read: thousands of marks, a bitmap in the SVG
            ax.scatter(xs.ravel(), ys.ravel(), s=1.0, color=palette.MUTED, linewidths=0, zorder=3,
                       rasterized=True)
        drawn_lines = 0
        if lines is not None and rates is not None:
            ts = pd.to_numeric(rates["window_start_s"], errors="coerce").to_numpy(float)[pick]
            te = pd.to_numeric(rates["window_end_s"], errors="coerce").to_numpy(float)[pick]
            ya, yb = lines[0][pick], lines[1][pick]
            ok = np.isfinite(ya) & np.isfinite(yb) & np.isfinite(ts) & np.isfinite(te)
            if ok.any():
                px = np.stack([xpos(ts[ok][:, None], cc[ok])[:, 0], xpos(te[ok][:, None], cc[ok])[:, 0]], axis=1)
                k_ok = np.flatnonzero(ok)
                py = np.stack([ypos(ya[ok][:, None], rr[ok], k_ok)[:, 0], ypos(yb[ok][:, None], rr[ok], k_ok)[:, 0]],
                              axis=1)
                ax.add_collection(LineCollection(list(np.stack([px, py], axis=-1)),
                                                 colors=[palette.QUIET_READS if q else palette.WINDOW
                                                         for q in quiet[ok]],
                                                 linewidths=2.4 if n_cols <= 12 else 1.1, zorder=4))
                drawn_lines = int(ok.sum())
        used_flags: set[str] = set()
        if geometric:  # each flagged cell's flags as two-letter codes (a legend below says what they mean)
            code_size = 6.0 if n_cols <= 12 else 4.6
            for k in np.flatnonzero(flagged[pick]):
                names_k = [f for f in flags[pick[k]].split(";") if f]
                used_flags.update(names_k)
                ax.text(cc[k] - g + 0.04, rr[k] - g + 0.03, marks.cell_label(names_k), ha="left", va="top",
                        fontsize=code_size, fontweight="bold", color=palette.INK, zorder=5)
        _remember_cells(fig, ax, [names[i] for i in pick[flagged[pick]]], cc[flagged[pick]], rr[flagged[pick]], g)
        if geometric:
            _plate_axes(ax, n_rows, n_cols, labels)
            ax.set_aspect("auto")
        else:
            ax.set_xlim(-0.5, n_cols - 0.5)
            ax.set_ylim(n_rows - 0.5, -0.5)
            ax.set_xticks([])
            ax.set_yticks([])
            for k, i in enumerate(pick):
                ax.text(cc[k] - 0.45, rr[k] - 0.45, names[i], fontsize=3, va="top", color=palette.MUTED)
        unit = traces.signal_unit
        ax.set_xlabel(f"within each cell: time {t0:g}–{t1:g} s left to right", fontsize=8)
        ax.set_ylabel(f"within each cell: signal ({unit}) on the well's own scale" + (
            ", span Δ at bottom right" if n_cols <= 24 else ""), fontsize=8)
        legend = "grey: reads" + ("; orange line: the rate (its slope) over the window it came from"
                                  if drawn_lines else "") + "\nheavy frame, tinted: flagged sample well; pale: " \
            "not a sample well (blank, standard, ...)"
        title_lines = 3
        if used_flags:
            legend += "\nflag codes: " + marks.legend(used_flags)
            title_lines = 4
        col_labels = _lines(1, 9) + PLATE_TICK_PAD if geometric else 0.0
        _title(ax, f"Progress curves, plate {traces.plate}\n{legend}", 9, (col_labels + TITLE_PAD) / PT)
        row_labels = max((_text_width(s, 9) for s in labels), default=0.0) + PLATE_TICK_PAD if geometric else 0.0
        left = EDGE + _lines(1, 8) + LABEL_PAD + row_labels
        top = EDGE + _lines(title_lines, 9) + TITLE_PAD + col_labels
        bottom = EDGE + _lines(1, 8) + LABEL_PAD
        _place_grid(fig, [[ax]], left=left, right=EDGE + 0.12, top=top, bottom=bottom)
    return fig, note


# -- rates against concentration ---------------------------------------------------------------------------


def rates_vs_x(group: str, points: pd.DataFrame, used: np.ndarray, curves: pd.DataFrame,
               selected: str, x_col: str, x_unit: str, rate_unit: str,
               evaluate: Mapping[str, Any] | None = None, titles: Mapping[str, str] | None = None) -> Any:
    """Rates of one group against ``x_col`` with each model's curve and confidence band (top) and residuals
    of the fitted points (bottom). ``evaluate`` maps model -> callable(x array) -> fitted rate, for exact
    residuals; without it residuals are interpolated on the curve grid. ``titles``: models' printed names."""
    import matplotlib

    x = pd.to_numeric(points[x_col], errors="coerce").to_numpy(float)
    v = pd.to_numeric(points["rate"], errors="coerce").to_numpy(float)
    se = pd.to_numeric(points.get("rate_stderr", pd.Series(np.nan, index=points.index)),
                       errors="coerce").to_numpy(float)
    with matplotlib.rc_context(palette.STYLE):
        fig = _new_figure(6.4, 5.6)
        ax, axr = fig.subplots(2, 1, sharex=True)
        heights = (3.0, 1.3)
        ax.errorbar(x[used], v[used], yerr=np.where(np.isfinite(se[used]), se[used], 0), fmt="o", ms=4.5,
                    color=palette.INK, ecolor=palette.MUTED, elinewidth=0.7, capsize=0, zorder=4,
                    label="wells fitted (± standard error of v0)")
        out = ~used & np.isfinite(v) & np.isfinite(x)
        if out.any():
            ax.plot(x[out], v[out], "o", ms=5, mfc="white", mec=palette.MUTED, mew=1.0, zorder=3,
                    label="not fitted (see Exclusions)")
        models = list(dict.fromkeys(curves["model"].astype(str))) if len(curves) else []
        for i, model in enumerate(models):
            st = palette.series(i)
            cm = curves[curves["model"].astype(str) == model]
            levels = cm["inhibitor"].to_numpy(float) if "inhibitor" in cm else np.full(len(cm), np.nan)
            distinct = [*np.unique(levels[np.isfinite(levels)]).tolist(), *([np.nan] if np.isnan(levels).any() else [])]
            for j, level in enumerate(distinct):
                part = cm[np.isnan(levels)] if np.isnan(level) else cm[levels == level]
                if np.isfinite(x).any():  # drawn over the measured range only (the fit stage's grid runs further)
                    part = part[part["x"].to_numpy(float) <= 1.04 * float(np.nanmax(x))]
                if part.empty:  # a curve that lies wholly beyond the measured range
                    continue
                cx = part["x"].to_numpy(float)
                label = model_title(model, titles) + (" (selected)" if model == selected else "")
                if not np.isnan(level) and part["variable"].iloc[0] != "inhibitor":
                    label += f", inhibitor {level:g}"
                ax.plot(cx, part["y"].to_numpy(float), color=st.color, ls=st.linestyle, lw=1.8 if j == 0 else 1.2,
                        label=label, zorder=2)
                lo_, hi_ = part["lower"].to_numpy(float), part["upper"].to_numpy(float)
                if np.isfinite(lo_).any():
                    ax.fill_between(cx, lo_, hi_, color=st.color, alpha=0.16, lw=0, zorder=1)
            fitted = _fitted(model, x[used], cm, evaluate)
            axr.plot(x[used], v[used] - fitted, ls="", marker=st.marker, ms=4.5, mfc=st.color if i == 0 else "white",
                     mec=st.color, mew=1.1, label=model_title(model, titles))
        axr.axhline(0, color=palette.INK, lw=0.7)
        ax.set_ylabel(f"v0 ({rate_unit})")
        axr.set_ylabel(f"residual\n({rate_unit})")
        axr.set_xlabel(f"{x_col} ({x_unit})" if x_unit else x_col)
        ax.set_xlim(left=min(0.0, float(np.nanmin(x))) if np.isfinite(x).any() else 0.0)
        ax.set_ylim(bottom=min(0.0, float(np.nanmin(v))) if np.isfinite(v).any() else 0.0)
        band = "shaded: confidence band of the fitted curve" if models else ""
        ax.legend(fontsize=8, loc="best")
        if models:
            axr.legend(fontsize=7, ncol=len(models), loc="best")
        # first a typical placement (tick choice depends on the axes' size), then margins from the labels
        _place_grid(fig, [[ax], [axr]], left=0.75, right=0.2, top=0.6, bottom=0.55, hgap=0.15, heights=heights)
        room, offset = _ytick_room(ax)
        room_r, offset_r = _ytick_room(axr)
        title_pad = TITLE_PAD + (_lines(1, 9) if offset else 0.0)
        _title(ax, f"{group}: v0 against {x_col}" + (f"\n{band}" if band else ""), 10, title_pad / PT)
        _place_grid(fig, [[ax], [axr]],
                    left=EDGE + LABEL_PAD + max(room + _lines(1, 9), room_r + _lines(2, 9)),
                    right=EDGE + max(0.1, _xtick_overhang(axr)),
                    top=EDGE + _lines(2 if band else 1, 10) + title_pad,
                    bottom=EDGE + _lines(2, 9) + LABEL_PAD + TICK,
                    hgap=0.15 + (_lines(1, 9) if offset_r else 0.0), heights=heights)
    return fig


def _fitted(model: str, x: np.ndarray, curve: pd.DataFrame, evaluate: Mapping[str, Any] | None) -> np.ndarray:
    if evaluate and model in evaluate:
        return np.asarray(evaluate[model](x), float)
    part = curve[np.isnan(curve["inhibitor"].to_numpy(float))] if "inhibitor" in curve else curve
    if part.empty:
        part = curve
    cx, cy = part["x"].to_numpy(float), part["y"].to_numpy(float)
    order = np.argsort(cx)
    return np.interp(x, cx[order], cy[order], left=np.nan, right=np.nan)


# -- linear transforms -------------------------------------------------------------------------------------

HILL_PLOT = "hill"
"""The Hill plot's name in the diagnostics table (shown only for groups whose question is cooperativity)."""

TRANSFORM_TITLES = {
    "hill": "Hill plot",
    "lineweaver-burk": "Lineweaver–Burk",
    "eadie-hofstee": "Eadie–Hofstee",
    "hanes-woolf": "Hanes–Woolf",
}


def transforms(group: str, diag: pd.DataFrame, rate_unit: str = "", x_unit: str = "", *,
               curves: Mapping[str, tuple[np.ndarray, np.ndarray]] | None = None, curve_label: str = "") -> Any:
    """The linear transforms of one group: points (hollow where the transform is unstable) and each
    transform's own straight line, with the estimates that line implies in the panel title. ``curves`` (by
    plot: x, y) add the selected model's fitted curve carried into each transform's coordinates, labelled
    ``curve_label``."""
    import matplotlib
    from matplotlib.ticker import MaxNLocator

    plots = [p for p in TRANSFORM_TITLES if p in set(diag["plot"].astype(str))]
    plots += [p for p in dict.fromkeys(diag["plot"].astype(str)) if p not in plots]
    n = len(plots)
    cols = 2 if n > 1 else 1
    rows = int(np.ceil(n / cols))
    titles: list[str] = []
    with matplotlib.rc_context(palette.STYLE):
        fig = _new_figure(4.0 * cols, 3.3 * rows)
        axes = fig.subplots(rows, cols, squeeze=False)
        for ax in axes.ravel()[n:]:
            ax.set_visible(False)
        for ax, plot in zip(axes.ravel(), plots, strict=False):
            d = diag[diag["plot"].astype(str) == plot]
            pts = d[d["quantity"].astype(str) == "point"]
            x, y = pts["x"].to_numpy(float), pts["y"].to_numpy(float)
            unstable = pts["unstable"].astype(str).str.lower().isin(["true", "1"]).to_numpy()
            ok = np.isfinite(x) & np.isfinite(y)
            ax.plot(x[ok & ~unstable], y[ok & ~unstable], "o", ms=4, color=palette.INK, label="used for the line")
            if (ok & unstable).any():
                ax.plot(x[ok & unstable], y[ok & unstable], "o", ms=4, mfc="white", mec=palette.MUTED,
                        label="not used (unstable here)")
            est = {str(q): float(val) for q, val in zip(d["quantity"], d["y"], strict=True) if str(q) != "point"}
            slope, icpt = est.get("slope", np.nan), est.get("intercept", np.nan)
            good = ok & ~unstable
            if np.isfinite(slope) and np.isfinite(icpt) and good.any():
                gx = np.linspace(np.min(x[good]), np.max(x[good]), 20)
                st = palette.series(1)
                ax.plot(gx, icpt + slope * gx, color=st.color, ls=st.linestyle, lw=1.4, label="straight line")
            cx, cy = (curves or {}).get(plot, (np.array([]), np.array([])))
            if len(cx) > 1:
                st = palette.series(0)
                ax.plot(cx, cy, color=st.color, ls=st.linestyle, lw=1.6, zorder=1,
                        label=f"selected fit: {curve_label}" if curve_label else "selected fit")
            unit_of = {"Vmax": rate_unit, "Km": x_unit, "K0.5": x_unit}
            words = ", ".join(f"{k} = {num(v, 3)} {unit_of.get(k, '')}".rstrip() for k, v in est.items()
                              if k not in ("slope", "intercept"))
            titles.append(f"{TRANSFORM_TITLES.get(plot, plot)}" + (f"\nline gives {words}" if words else ""))
            ax.xaxis.set_major_locator(MaxNLocator(4))  # long tick labels (Eadie–Hofstee) must not overlap
            if len(pts):
                ax.set_xlabel(pretty_unit(str(pts["x_label"].iloc[0])))
                ax.set_ylabel(pretty_unit(str(pts["y_label"].iloc[0])))
        axes.ravel()[0].legend(fontsize=7, loc="best")
        w, h = fig.get_size_inches()
        fig.suptitle(f"{group}: linear transforms, for inspection only (parameters come from the nonlinear fit)",
                     x=EDGE / w, y=1 - EDGE / h, ha="left", va="top", fontsize=10)
        _arrange_panels(fig, axes, titles)
    return fig


def _arrange_panels(fig: Any, axes: np.ndarray, titles: list[str]) -> None:
    """Titles and placement of a grid of panels (the first ``len(titles)`` of ``axes``, row by row) under a
    one-line figure title: each column as far right as its widest y tick labels need, each row as low as the
    titles and x labels of the row above need."""
    rows, cols = axes.shape
    shown = list(axes.ravel()[: len(titles)])
    title_lines = [t.count("\n") + 1 for t in titles] + [0] * (rows * cols - len(titles))
    x_decor = _lines(2, 9) + LABEL_PAD + TICK  # x tick labels and x label below each panel
    _place_grid(fig, axes.tolist(), left=0.8, right=0.3, top=0.9, bottom=0.6, wgap=1.0, hgap=1.1)
    rooms = [_ytick_room(ax) for ax in shown]
    pads = [TITLE_PAD + (_lines(1, 9) if offset else 0.0) for _, offset in rooms]
    for ax, title, pad in zip(shown, titles, pads, strict=True):
        _title(ax, title, 9, pad / PT)
    col_room = [max([rooms[k][0] for k in range(c, len(shown), cols)], default=0.0) + _lines(1, 9) + LABEL_PAD
                for c in range(cols)]
    overhang = [max([_xtick_overhang(shown[k]) for k in range(c, len(shown), cols)], default=0.0)
                for c in range(cols)]
    row_head = [max(_lines(title_lines[r * cols + c], 9) + (pads[r * cols + c] if r * cols + c < len(pads)
                                                             else TITLE_PAD) for c in range(cols))
                for r in range(rows)]
    _place_grid(fig, axes.tolist(), left=EDGE + col_room[0], right=EDGE + max(0.1, overhang[-1]),
                top=EDGE + _lines(1, 10) + 4 * PT + row_head[0], bottom=EDGE + x_decor,
                wgap=max(0.15, overhang[0] + 0.1) + (col_room[1] if cols > 1 else 0.0),
                hgap=x_decor + 0.12 + max(row_head[1:], default=0.0))


# -- inhibition --------------------------------------------------------------------------------------------


def inhibition(group: str, points: pd.DataFrame, used: np.ndarray, x_col: str, i_col: str, x_unit: str,
               i_unit: str, rate_unit: str, model_title_: str, evaluate: Any) -> Any:
    """One inhibition group read four ways, all from the group's selected model (``evaluate(S, I)`` -> v):

    * rates against substrate coloured by inhibitor level (a sequential palette, pale to dark, with a marker
      per level so greyscale keeps them apart), one fitted line per level;
    * the residuals of that model against substrate, for the wells it was fitted to;
    * the double-reciprocal plot, 1/v against 1/S, one line per level (the model's curve transformed, not a
      straight-line fit), for inspection only;
    * rates against inhibitor at each substrate level, with the model's line.
    """
    import matplotlib
    import matplotlib.ticker

    s = pd.to_numeric(points[x_col], errors="coerce").to_numpy(float)
    i = pd.to_numeric(points[i_col], errors="coerce").to_numpy(float) if i_col in points else np.zeros(len(points))
    i = np.where(np.isfinite(i), i, 0.0)
    v = pd.to_numeric(points["rate"], errors="coerce").to_numpy(float)
    levels = np.unique(i[np.isfinite(v)])
    colours = palette.levels(len(levels))
    s_max = float(np.nanmax(s)) if np.isfinite(s).any() else 1.0
    grid = np.linspace(0.0, s_max * 1.04, 120)
    with matplotlib.rc_context(palette.STYLE):
        fig = _new_figure(9.6, 7.4)
        axes = fig.subplots(2, 2, squeeze=False)
        a_v, a_res, a_lb, a_i = axes[0, 0], axes[1, 0], axes[0, 1], axes[1, 1]
        for k, level in enumerate(levels):
            at = (i == level) & np.isfinite(v) & np.isfinite(s)
            mk = palette.LEVEL_MARKERS[k % len(palette.LEVEL_MARKERS)]
            col = colours[k]
            label = f"{level:g} {i_unit}".rstrip()
            a_v.plot(s[at & used], v[at & used], mk, ms=5, color=col, mec=palette.INK, mew=0.5, label=label)
            if (at & ~used).any():
                a_v.plot(s[at & ~used], v[at & ~used], mk, ms=5, mfc="white", mec=col, mew=1.0)
            a_v.plot(grid, evaluate(grid, np.full_like(grid, level)), color=col, lw=1.5)
            fu = at & used
            if fu.any():
                a_res.plot(s[fu], v[fu] - evaluate(s[fu], i[fu]), mk, ms=5, color=col, mec=palette.INK, mew=0.5)
            pos = at & (s > 0) & (v > 0)
            a_lb.plot(1 / s[pos & used], 1 / v[pos & used], mk, ms=5, color=col, mec=palette.INK, mew=0.5)
            sg = np.linspace(s[pos].min() if pos.any() else s_max / 20, s_max, 60)
            with np.errstate(divide="ignore", invalid="ignore"):
                a_lb.plot(1 / sg, 1 / evaluate(sg, np.full_like(sg, level)), color=col, lw=1.2)
        s_levels = np.unique(s[np.isfinite(s) & (s > 0)])
        s_cols = palette.levels(len(s_levels))
        ig = np.linspace(0.0, float(levels.max()) * 1.04 if levels.size else 1.0, 80)
        for k, sl in enumerate(s_levels):
            at = (s == sl) & np.isfinite(v)
            mk = palette.LEVEL_MARKERS[k % len(palette.LEVEL_MARKERS)]
            a_i.plot(i[at & used], v[at & used], mk, ms=4.5, color=s_cols[k], mec=palette.INK, mew=0.5,
                     label=f"{sl:g} {x_unit}".rstrip())
            a_i.plot(ig, evaluate(np.full_like(ig, sl), ig), color=s_cols[k], lw=1.1)
        a_res.axhline(0, color=palette.INK, lw=0.7)
        a_v.set_xlim(left=0)
        a_v.set_ylim(bottom=min(0.0, float(np.nanmin(v))) if np.isfinite(v).any() else 0.0)
        a_i.set_xlim(left=0)
        a_v.set_xlabel(f"{x_col} ({x_unit})" if x_unit else x_col)
        a_res.set_xlabel(f"{x_col} ({x_unit})" if x_unit else x_col)
        a_lb.set_xlabel(f"1/{x_col} (1/{x_unit})" if x_unit else f"1/{x_col}")
        a_i.set_xlabel(f"{i_col} ({i_unit})" if i_unit else i_col)
        a_v.set_ylabel(f"v0 ({rate_unit})")
        a_res.set_ylabel(f"residual ({rate_unit})")
        a_lb.set_ylabel(f"1/v0 (1/({rate_unit}))")
        a_i.set_ylabel(f"v0 ({rate_unit})")
        for ax in axes.ravel():
            ax.xaxis.set_major_locator(matplotlib.ticker.MaxNLocator(5))
        few = len(levels) <= 10
        a_v.legend(title=f"{i_col} level", fontsize=7, title_fontsize=7, loc="lower right",
                   ncol=1 if few else 2, handlelength=1.0)
        if len(s_levels) <= 10:
            a_i.legend(title=f"{x_col} level", fontsize=7, title_fontsize=7, loc="best", ncol=2,
                       handlelength=1.0)
        w, h = fig.get_size_inches()
        fig.suptitle(f"{group}: {model_title_}, fitted to every inhibitor level", x=EDGE / w, y=1 - EDGE / h,
                     ha="left", va="top", fontsize=10)
        titles = [f"v0 against {x_col}, one line per {i_col} level", "double reciprocal, for inspection only",
                  f"residuals of {model_title_} (fitted wells)", f"v0 against {i_col} at each {x_col} level"]
        _arrange_panels(fig, axes, titles)
    return fig
