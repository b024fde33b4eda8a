"""The standard curve of a plate, for the report: its points, the line, the range kept, the levels dropped.

The points and the line are computed by the convert stage's own functions
(:func:`vzero.plugins.convert.standard_curve.standard_levels` and ``fit_standard_curve``) from the plate's
traces and the recipe's settings, so the report shows exactly the curve the rates were converted with, in a
report made during the run and in one rebuilt from the audit file alike.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
from vzero.data import Traces
from vzero.plugins.report import content


def curve_of(traces: Traces, recipe: Mapping[str, Any]) -> dict[str, Any] | None:
    """The standard curve of one plate as plain data, or None when the recipe converts rates otherwise or
    the plate has no standards (or the convert plugin is not installed)."""
    s = content.step_settings(recipe, "convert")
    if s.get("method") != "standard-curve":
        return None
    try:
        from vzero.plugins.convert.standard_curve import fit_standard_curve, standard_levels
    except ImportError:
        return None
    column = str(s.get("column", "product"))
    names, conc, level, lost = standard_levels(traces, column)
    keep = np.isfinite(level) & np.isfinite(conc)
    if keep.sum() < 2:
        return None
    try:
        curve = fit_standard_curve(conc[keep], level[keep], check_linearity=bool(s.get("check_linearity", True)))
    except Exception as exc:  # the convert step failed the same way; the report says so and goes on
        return {"error": str(exc)}
    unit = traces.well_units.get(column) or str(s.get("unit", "") or "")
    return {"plate": traces.plate, "column": column, "conc_unit": content.pretty_unit(unit),
            "signal_unit": traces.signal_unit, "wells": names[keep], "conc": conc[keep], "signal": level[keep],
            "used": np.asarray(curve.used, bool), "slope": curve.slope, "slope_se": curve.slope_se,
            "intercept": curve.intercept, "intercept_se": curve.intercept_se, "r2": curve.r2,
            "range": curve.conc_range, "dropped": list(curve.dropped_levels), "curvature_p": curve.curvature_p,
            "n": curve.n_points, "lost": lost}


def table_rows(c: Mapping[str, Any]) -> list[dict[str, str]]:
    """The standard curve's numbers as table rows (quantity, value, unit), rounded to what the errors
    support."""
    su, cu = c["signal_unit"], c["conc_unit"]
    lo, hi = c["range"]
    rows = [
        {"quantity": "slope", "value": content.estimate_text(c["slope"], c["slope_se"])["value"],
         "unit": f"{su}/{cu}"},
        {"quantity": "intercept", "value": content.estimate_text(c["intercept"], c["intercept_se"])["value"],
         "unit": su},
        {"quantity": "R²", "value": f"{c['r2']:.5f}", "unit": ""},
        {"quantity": "range kept", "value": f"{lo:g} to {hi:g}", "unit": cu},
        {"quantity": "standards in the line", "value": str(c["n"]), "unit": "wells"},
        {"quantity": "levels dropped (the line bends above them)",
         "value": ", ".join(f"{d:g}" for d in c["dropped"]) or "none", "unit": cu if c["dropped"] else ""},
    ]
    if c["lost"]:
        rows.append({"quantity": "standards without a usable read (left out)", "value": ", ".join(c["lost"]),
                     "unit": ""})
    return rows


def figure(c: Mapping[str, Any]) -> Any:
    """Signal against concentration: standards in the line (filled), dropped (hollow, marked), the line over
    the range kept and its extension dashed, residuals below."""
    import matplotlib
    from vzero.plugins.report import figures, palette

    x, y, used = np.asarray(c["conc"], float), np.asarray(c["signal"], float), np.asarray(c["used"], bool)
    with matplotlib.rc_context(palette.STYLE):
        fig = figures._new_figure(6.4, 5.2)
        ax, axr = fig.subplots(2, 1, sharex=True)
        lo, hi = c["range"]
        gx = np.linspace(lo, hi, 50)
        ax.plot(gx, c["intercept"] + c["slope"] * gx, color=palette.SERIES[0].color, lw=1.6,
                label="line over the range kept")
        if (~used).any():
            ex = np.linspace(hi, float(x.max()), 20)
            ax.plot(ex, c["intercept"] + c["slope"] * ex, color=palette.SERIES[0].color, lw=1.0, ls="--",
                    label="line extended (not fitted)")
        ax.plot(x[used], y[used], "o", ms=4.5, color=palette.INK, label="standards in the line")
        if (~used).any():
            ax.plot(x[~used], y[~used], "s", ms=6, mfc="white", mec=palette.WINDOW, mew=1.4,
                    label="dropped: the line bends there")
        res = y - (c["intercept"] + c["slope"] * x)
        axr.plot(x[used], res[used], "o", ms=4, color=palette.INK)
        if (~used).any():
            axr.plot(x[~used], res[~used], "s", ms=5, mfc="white", mec=palette.WINDOW, mew=1.2)
        axr.axhline(0, color=palette.INK, lw=0.7)
        ax.set_ylabel(f"signal ({c['signal_unit']})")
        axr.set_ylabel(f"residual\n({c['signal_unit']})")
        axr.set_xlabel(f"{c['column']} ({c['conc_unit']})")
        ax.legend(fontsize=8, loc="upper left")
        figures._place_grid(fig, [[ax], [axr]], left=0.75, right=0.2, top=0.6, bottom=0.55, hgap=0.15,
                            heights=(3.0, 1.2))
        room, _ = figures._ytick_room(ax)
        room_r, _ = figures._ytick_room(axr)
        figures._title(ax, f"Standard curve, plate {c['plate']}", 10, figures.TITLE_PAD / figures.PT)
        figures._place_grid(fig, [[ax], [axr]],
                            left=figures.EDGE + figures.LABEL_PAD + max(room + figures._lines(1, 9),
                                                                        room_r + figures._lines(2, 9)),
                            right=figures.EDGE + max(0.1, figures._xtick_overhang(axr)),
                            top=figures.EDGE + figures._lines(1, 10) + figures.TITLE_PAD,
                            bottom=figures.EDGE + figures._lines(2, 9) + figures.LABEL_PAD + figures.TICK,
                            hgap=0.3, heights=(3.0, 1.2))
    return fig
