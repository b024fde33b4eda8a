"""Figures of the progress-curve route: fitted curves over each well's reads, and Selwyn's test.

* :func:`curve_fits`: one group, small multiples by substrate level (and inhibitor level), the reads of
  every well at that level as points, the fitted curve of the chosen model as a line, and the residuals
  (observed − fitted) in a strip under each panel;
* :func:`selwyn_plot`: product against enzyme × time, one colour per enzyme level: curves that superimpose
  say the enzyme is stable during the assay.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from vzero.plugins.report import palette
from vzero.plugins.report.content import model_title
from vzero.plugins.report.figures import _new_figure

MAX_PANELS = 16
"""At most this many substrate/inhibitor levels are drawn (evenly chosen from the sorted levels)."""


def curve_fits(group: str, curves: pd.DataFrame, model: str, conc_unit: str) -> Any:
    """Reads and fitted curves of ``model`` for one group (rows of the ``progress_curves`` table)."""
    import matplotlib

    part = curves[curves["model"].astype(str) == model]
    keys = part[["substrate", "inhibitor"]].drop_duplicates().sort_values(["inhibitor", "substrate"])
    if len(keys) > MAX_PANELS:
        keys = keys.iloc[np.unique(np.linspace(0, len(keys) - 1, MAX_PANELS).round().astype(int))]
    n = len(keys)
    cols = min(4, max(n, 1))
    rows = int(np.ceil(n / cols)) if n else 1
    with matplotlib.rc_context(palette.STYLE):
        fig = _new_figure(2.1 * cols + 0.6, 2.2 * rows + 0.6)
        grid = fig.add_gridspec(2 * rows, cols, height_ratios=[3, 1] * rows, hspace=0.3, wspace=0.35)
        st = palette.series(0)
        for k, (_, key) in enumerate(keys.iterrows()):
            r, c = divmod(k, cols)
            ax = fig.add_subplot(grid[2 * r, c])
            axr = fig.add_subplot(grid[2 * r + 1, c], sharex=ax)
            sel = part[(part["substrate"] == key["substrate"]) & (part["inhibitor"] == key["inhibitor"])]
            for _, w in sel.groupby(["plate", "well"], sort=False):
                t = w["time"].to_numpy(float) / 60
                used = w["used"].astype(bool).to_numpy()
                ax.plot(t[used], w["observed"].to_numpy(float)[used], ".", ms=2.5, color=palette.MUTED, zorder=1)
                ax.plot(t, w["fitted"].to_numpy(float), color=st.color, lw=1.4, zorder=2)
                axr.plot(t[used], w["residual"].to_numpy(float)[used], ".", ms=2, color=st.color)
            axr.axhline(0, color=palette.INK, lw=0.6)
            title = f"S0 {key['substrate']:g}" + (f", I {key['inhibitor']:g}" if key["inhibitor"] else "")
            ax.set_title(title, fontsize=8)
            ax.tick_params(labelbottom=False, labelsize=7)
            axr.tick_params(labelsize=7, labelbottom=r == rows - 1)
            if c == 0:
                ax.set_ylabel(f"product ({conc_unit})", fontsize=8)
                axr.set_ylabel("resid.", fontsize=7)
            if r == rows - 1:
                axr.set_xlabel("time (min)", fontsize=8)
        fig.suptitle(f"{group}: {model_title(model)} fitted to the progress curves", fontsize=10)
        fig.subplots_adjust(left=0.1, right=0.98, top=1 - 0.45 / (2.2 * rows + 0.6), bottom=0.35 / (2.2 * rows))
    return fig


def selwyn_plot(group: str, points: pd.DataFrame, conc_unit: str, enzyme_unit: str) -> Any:
    """Product against enzyme × time for each (substrate, inhibitor) set of one group."""
    import matplotlib

    sets = points[["substrate", "inhibitor"]].drop_duplicates()
    n = len(sets)
    cols = min(3, max(n, 1))
    rows = int(np.ceil(n / cols)) if n else 1
    with matplotlib.rc_context(palette.STYLE):
        fig = _new_figure(2.8 * cols + 0.4, 2.5 * rows + 0.5)
        axes = np.atleast_1d(fig.subplots(rows, cols, squeeze=False)).ravel()
        for ax, (_, key) in zip(axes, sets.iterrows(), strict=False):
            sel = points[(points["substrate"] == key["substrate"]) & (points["inhibitor"] == key["inhibitor"])]
            for i, (e, part) in enumerate(sel.groupby("enzyme")):
                st = palette.series(i)
                ax.plot(part["enzyme_time"].to_numpy(float) / 60, part["product"].to_numpy(float), ls="",
                        marker=st.marker, ms=2.5, color=st.color, label=f"E {e:g} {enzyme_unit}")
            ax.set_title(f"S0 {key['substrate']:g}" + (f", I {key['inhibitor']:g}" if key["inhibitor"] else ""),
                         fontsize=8)
            ax.set_xlabel(f"enzyme × time ({enzyme_unit}·min)", fontsize=8)
            ax.set_ylabel(f"product ({conc_unit})", fontsize=8)
            ax.legend(fontsize=7)
        for ax in axes[n:]:
            ax.set_visible(False)
        fig.suptitle(f"{group}: Selwyn's test (curves must superimpose)", fontsize=10)
        fig.subplots_adjust(left=0.12, right=0.98, top=0.85, bottom=0.18, wspace=0.35, hspace=0.6)
    return fig
