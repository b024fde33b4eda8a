"""Assemble the report: gather the tables, draw the figures, render the HTML template.

:func:`build` is the one entry point, used both by the report stage (from a run's artifacts) and by
``vzero report RUN.h5`` (from an audit file). It returns the files to write, relative to the run folder:
``report.html`` (self-contained: figures inline as base64 PNG, no network) and ``figures/<name>.png`` and
``.svg``.
"""

from __future__ import annotations

import base64
import datetime as _dt
import functools
import json
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from vzero.data import Table, Traces, steps_apart
from vzero.plugins.report import calibration, content, figures, panels, parallel

RESEARCH_NOTE = ("These results come from an automated analysis; check them against your "
                 "lab's validated procedures before relying on them, and do not use them for diagnosis or "
                 "release decisions.")


@dataclass
class Figure:
    """One figure of the report: a file stem a person can find, a title, a caption and its bytes."""

    name: str
    title: str
    caption: str
    png: bytes
    svg: bytes
    section: str
    areas: list[tuple[str, float, float, float, float]] = field(default_factory=list)
    """Where flagged wells' cells lie in the image: (well, left, top, right, bottom), fractions of its size."""
    links: list[dict[str, Any]] = field(default_factory=list)
    """The links drawn over the image (to each flagged well's panel): id, title, x, y, w, h in percent."""
    plate: str = ""

    @property
    def png_b64(self) -> str:
        return base64.b64encode(self.png).decode("ascii")


@dataclass
class ReportInput:
    """What a report is built from: final tables by name, traces by plate, the recipe mapping, provenance."""

    tables: Mapping[str, Table]
    traces: Mapping[str, Traces]
    recipe: Mapping[str, Any]
    provenance: Mapping[str, Any]
    max_panels: int = figures.MAX_PANELS
    title: str = ""
    notes: list[str] = field(default_factory=list)
    models: Mapping[str, Any] = field(default_factory=dict)
    """The fit models this installation knows, by name (the registry's components of kind ``model``, built-in
    and plugin models alike): their titles, variables and rate laws. A model missing here is reported by its
    name, with residuals interpolated on its curve."""


def _frame(tables: Mapping[str, Table], name: str) -> pd.DataFrame:
    t = tables.get(name)
    if t is None:
        return pd.DataFrame()
    return t.frame if isinstance(t, Table) else pd.DataFrame(t)


def _unique(name: str, taken: set[str]) -> str:
    out, k = name, 2
    while out in taken:
        out, k = f"{name}-{k}", k + 1
    taken.add(out)
    return out


def _evaluators(fits: pd.DataFrame, group: str, x_col: str,
                models: Mapping[str, Any]) -> dict[str, Callable[[np.ndarray], np.ndarray]]:
    """Exact fitted-rate functions of ``x_col`` per model of one group, where the model is known (in
    ``models``, by name) and every parameter was determined (residuals then need no interpolation)."""
    out: dict[str, Callable[[np.ndarray], np.ndarray]] = {}
    if fits.empty:
        return out
    sub = fits[fits["group"].astype(str) == group]
    for name in dict.fromkeys(sub["model"].astype(str)):
        model = models.get(name)
        if model is None or tuple(model.variables) != (x_col,):
            continue
        rows = sub[sub["model"].astype(str) == name].set_index("parameter")["estimate"]
        try:
            p = [float(rows[k]) for k in model.params]
        except (KeyError, TypeError, ValueError):
            continue
        if np.all(np.isfinite(p)):
            out[name] = lambda x, m=model, p=p: np.asarray(m.evaluate(p, {x_col: np.asarray(x, float)}), float)
    return out


def _evaluator_si(fits: pd.DataFrame, group: str, name: str,
                  models: Mapping[str, Any]) -> Callable[[np.ndarray, np.ndarray], np.ndarray] | None:
    """The fitted rate of ``group``'s model ``name`` as a function of substrate and inhibitor, when the model
    is known, takes exactly those two variables and every parameter was determined; else None."""
    model = models.get(name)
    if fits.empty or model is None or set(model.variables) != {"substrate", "inhibitor"}:
        return None
    sub = fits[(fits["group"].astype(str) == group) & (fits["model"].astype(str) == name)]
    rows = sub.set_index("parameter")["estimate"]
    try:
        p = [float(rows[k]) for k in model.params]
    except (KeyError, TypeError, ValueError):
        return None
    if not np.all(np.isfinite(p)):
        return None
    return lambda s, i: np.asarray(model.evaluate(p, {"substrate": np.asarray(s, float),
                                                      "inhibitor": np.asarray(i, float)}), float)


def _unit_of(rates: pd.DataFrame, units: Mapping[str, str], col: str) -> str:
    """The unit of a concentration column of the rates table ('' when unknown)."""
    return units.get(col, "") or (str(rates[f"{col}_unit"].dropna().iloc[0]) if f"{col}_unit" in rates
                                  and rates[f"{col}_unit"].notna().any() else "")


WEIGHTS = {"plate_map": 1.0, "progress_grid": 1.4, "rates_vs_x": 0.9, "transforms": 1.6}
"""Relative cost of making each kind of figure and saving it as PNG and SVG (measured on the demo), to share
them out."""

DRAW_BATCH = 16
"""Figures made before they are drawn together (bounds the memory of undrawn figures in long batches)."""


class _Drawing:
    """Figures not yet made. Each is a job that makes the figure and saves it as PNG and SVG (returning a
    note for the caption as its third part, possibly empty); the jobs run together, in parallel where that is
    safe (see :mod:`vzero.plugins.report.parallel`), and each result is set on its :class:`Figure`."""

    def __init__(self) -> None:
        self.pending: list[tuple[parallel.Job, float, Figure]] = []

    def add(self, job: parallel.Job, weight: float, entry: Figure) -> Figure:
        self.pending.append((job, weight, entry))
        if len(self.pending) >= DRAW_BATCH:
            self.flush()
        return entry

    def flush(self) -> None:
        if not self.pending:
            return
        figures.load_matplotlib()  # once, here, so that forked children inherit it
        done = parallel.run_all([job for job, _, _ in self.pending], [w for _, w, _ in self.pending])
        for (_, _, entry), (png, svg, note, areas) in zip(self.pending, done, strict=True):
            entry.png, entry.svg = png, svg
            entry.areas = [tuple(a) for a in json.loads(areas.decode("utf-8"))]
            if note:
                entry.caption += " " + note.decode("utf-8")
        self.pending.clear()


def _job(make: Callable[[], Any], dpi: int) -> parallel.Job:
    """The job for one figure: ``make()`` returns the figure, or (figure, caption note)."""

    def job() -> tuple[bytes, bytes, bytes, bytes]:
        made = make()
        fig, note = made if isinstance(made, tuple) else (made, "")
        png, svg = figures.render(fig, dpi=dpi)
        return png, svg, note.encode("utf-8"), json.dumps(figures.cell_areas(fig)).encode("utf-8")

    return job


def _transform_wells(kind: str, selected: str, titles: Mapping[str, str]) -> str:
    """Which model and wells the transforms figure stands on, in words (for its caption)."""
    name = content.model_title(selected, titles) if selected else "the selected model"
    if kind == "cooperativity":
        return (f"The Hill plot uses the Vmax of the Hill fit; its points outside 10–90 % of that Vmax are hollow and "
                f"not used for its line. The group's selected fit is {name}.")
    if kind == "inhibition":
        return (f"Drawn from the wells without inhibitor only: the group's selected fit ({name}) uses every "
                "inhibitor level, so these lines check the uninhibited enzyme alone. No Hill plot: this group's "
                "question is the inhibition mechanism, not cooperativity.")
    return (f"The straight lines assume a Michaelis–Menten law, which the selected fit ({name}) does not: at high "
            "substrate the points bend away from them. No Hill plot: this group's question is substrate "
            "inhibition, not cooperativity.")


def _selected_transforms(g: str, rates: pd.DataFrame, fits: pd.DataFrame, in_group: np.ndarray,
                         used: np.ndarray | None, options: Mapping[str, Any], pick: str, kind: str,
                         models: Mapping[str, Any], titles: Mapping[str, str], x_unit: str,
                         rate_unit: str) -> tuple[pd.DataFrame, dict[str, Any], str] | None:
    """The transforms of group ``g`` drawn from its selected fit (:mod:`vzero.plugins.report.transform_figures`):
    the table of the wells that fit used, the selected model's curve per transform, and the caption's words.
    None when the selected model cannot be evaluated here (not installed, or a parameter not determined)."""
    from vzero.plugins.report import transform_figures as tf

    x_col = str(options["x"])
    rate_of = _evaluators(fits, g, "substrate", models).get(pick) if pick else None
    if rate_of is None or x_col not in rates or "rate" not in rates:
        return None
    mask = tf.selected_points(rates, in_group, used, x_col, str(options.get("inhibitor", "inhibitor")))
    if not mask.any():
        return None
    hill = kind == "cooperativity"
    vmax = tf.limiting_rate(fits, g, pick, models) if hill else float("nan")
    table = tf.table(g, rates, mask, x_col, vmax, hill, x_unit, rate_unit)
    plots = list(dict.fromkeys(table["plot"].astype(str)))
    s = pd.to_numeric(rates.loc[mask, x_col], errors="coerce").to_numpy(float)
    curves = tf.model_curves(rate_of, s, vmax, plots)
    name = content.model_title(pick, titles)
    rows = fits[(fits["group"].astype(str) == g) & (fits["model"].astype(str) == pick)] if len(fits) else fits
    n_fit = pd.to_numeric(rows["n_points"], errors="coerce").dropna() if "n_points" in rows else pd.Series([])
    count = int(mask.sum())
    agree = "" if n_fit.empty or int(n_fit.iloc[0]) == count else (
        f" (the fit reports {int(n_fit.iloc[0])} points; the report re-applies its rule and finds {count})")
    words = (f"Drawn from the {count} wells the group's selected fit ({name}) used{agree}; the solid curve in each "
             f"panel is that fit carried into the transform's coordinates, the dashed line the transform's own "
             f"straight line through the points, which assumes Michaelis–Menten kinetics.")
    if hill:
        words += (f" The Hill plot uses the Vmax of the selected fit ({name}); its points outside 10–90 % of that "
                  "Vmax are hollow and not used for its line.")
    else:
        words += " No Hill plot: this group's question is not cooperativity."
    return table, curves, words


def build(inp: ReportInput) -> dict[str, bytes]:
    """Draw every figure and render the HTML. Returns ``{relative path: bytes}``."""
    tables = inp.tables
    rates_t = tables.get("rates")
    rates = _frame(tables, "rates")
    rate_units = dict(rates_t.units) if isinstance(rates_t, Table) else {}
    fits = steps_apart(_frame(tables, "fits"))  # a group fitted by several fit steps: its models per step
    comparison = steps_apart(_frame(tables, "model_comparison"))
    comparison = steps_apart(comparison, "selected_model") if "selected_model" in comparison else comparison
    coop = steps_apart(_frame(tables, "cooperativity"))
    diag = _frame(tables, "diagnostics")
    curves = steps_apart(_frame(tables, "curves"))
    options = content.fit_options(inp.recipe)
    rate_unit = rate_units.get("rate", "") or (str(rates["rate_unit"].iloc[0]) if "rate_unit" in rates and len(rates)
                                               else "")
    used: np.ndarray | None = None
    if not rates.empty and options["present"]:
        used, _ = content.fit_use(rates, options, inp.models)
    titles = content.model_titles(inp.models)
    taken: set[str] = set()
    figs: list[Figure] = []
    drawing = _Drawing()
    notes = list(inp.notes)
    calibrations: list[dict[str, Any]] = []

    # plate maps and progress curves, per plate
    plates = list(dict.fromkeys(list(inp.traces) + (rates["plate"].astype(str).tolist() if "plate" in rates else [])))
    for plate in plates:
        pr = rates[rates["plate"].astype(str) == plate] if "plate" in rates else rates
        pused = used[(rates["plate"].astype(str) == plate).to_numpy()] if used is not None and "plate" in rates \
            else used
        if len(pr) and "rate" in pr and "well" in pr:
            make = functools.partial(figures.plate_map, plate, pr, pused, content.pretty_unit(rate_unit) or "?")
            figs.append(drawing.add(_job(make, 130), WEIGHTS["plate_map"], Figure(
                _unique(f"plate-map_{figures.slug(plate)}", taken), f"Plate map of v0: {plate}",
                "Each circle is a sample well, darker for a faster initial rate. Hatched grey: no rate. A heavy "
                "ring marks a flagged sample well, a cross a sample well left out of the fit (reasons under Flagged "
                "wells and Exclusions). Small pale squares: blanks, standards and other wells that are not "
                "fitted. Click a ringed well to open its panel under Flagged wells.", b"", b"", "plates",
                plate=plate)))
        traces = inp.traces.get(plate)
        std = calibration.curve_of(traces, inp.recipe) if traces is not None else None
        if std is not None and "error" in std:
            notes.append(f"plate {plate}: no standard curve ({std['error']})")
        elif std is not None:
            calibrations.append({"plate": plate, "rows": calibration.table_rows(std)})
            figs.append(drawing.add(_job(functools.partial(calibration.figure, std), 130), WEIGHTS["rates_vs_x"],
                                    Figure(_unique(f"standard-curve_{figures.slug(plate)}", taken),
                                           f"Standard curve: {plate}",
                                           "The curve the rates were converted with (the convert step's own "
                                           "computation): each standard's mean usable read against its "
                                           "concentration; the line over the range kept; standards above it "
                                           "are dropped where adding curvature improves the fit significantly. "
                                           "Below: residuals.", b"", b"", "plates")))
        if traces is not None:
            slope = None
            if len(pr) and {"window_start_s", "window_end_s", "well"} <= set(pr.columns):
                slope = figures.signal_slope(pr, rate_units, traces.signal_unit)
                if slope is None:
                    notes.append(f"plate {plate}: rate lines not drawn (the rates are not in {traces.signal_unit}/s "
                                 "and there is no signal_rate column)")
            make = functools.partial(figures.progress_grid, traces, pr if len(pr) else None, slope, inp.max_panels)
            cap = ("Every well's reads (grey) in plate geometry, all cells on the same time scale and each on its "
                   "own signal scale, so that slow wells can be judged (the span Δ of each scale is printed in the "
                   "cell where there is room). The orange line has the slope reported as the well's rate and spans "
                   "the reads it came from. Flagged sample wells have a heavy frame, a tinted cell and their flags "
                   "as two-letter codes (legend above the plate; click the cell to open the well's panel); blanks, "
                   "standards and other wells are pale.")
            figs.append(drawing.add(_job(make, 150), WEIGHTS["progress_grid"], Figure(
                _unique(f"progress-curves_{figures.slug(plate)}", taken), f"Progress curves: {plate}",
                cap, b"", b"", "plates", plate=plate)))

    # per group: rates against concentration, transforms, tables
    groups: list[dict[str, Any]] = []
    x_col = options["x"]
    group_col = options["group_by"]
    names = list(dict.fromkeys(fits["group"].astype(str))) if "group" in fits else []
    if not names and group_col in rates and "role" in rates:
        names = list(dict.fromkeys(rates.loc[rates["role"].astype(str) == "sample", group_col].astype(str)))
    for g in names:
        block: dict[str, Any] = {"name": g, "figures": []}
        rows, sentence = content.comparison_rows(comparison, g, titles)
        block["comparison"], block["comparison_sentence"] = rows, sentence
        pick_raw = content.selected_model(comparison, g)
        block["selected"] = content.model_title(pick_raw, titles) if pick_raw else ""
        block["parameters"] = content.parameter_tables(fits, g, titles) if not fits.empty else []
        lead = content.group_lead(fits, g, pick_raw, inp.models, titles, options["confidence"])
        block["lead"] = lead
        crow = coop[coop["group"].astype(str) == g] if "group" in coop else pd.DataFrame()
        block["verdict"] = content.verdict_sentence(crow.iloc[0], options["confidence"], titles) if len(crow) else ""
        block["verdict_key"] = str(crow.iloc[0]["verdict"]) if len(crow) else ""
        in_group = (rates[group_col].astype(str) == g).to_numpy() if group_col in rates else np.zeros(len(rates), bool)
        gc = curves[curves["group"].astype(str) == g] if "group" in curves else pd.DataFrame()
        variables = list(dict.fromkeys(gc["variable"].astype(str))) if len(gc) else ([x_col] if x_col in rates else [])
        both = _evaluator_si(fits, g, pick_raw, inp.models) if lead["kind"] == "inhibition" else None
        i_col = options.get("inhibitor", "inhibitor")
        if both is not None and x_col in rates:
            pts_mask = in_group & np.isfinite(pd.to_numeric(rates[x_col], errors="coerce").to_numpy(float))
            pts = rates[pts_mask]
            pused = used[pts_mask] if used is not None else np.ones(len(pts), bool)
            make = functools.partial(figures.inhibition, g, pts, pused, x_col, i_col,
                                     content.pretty_unit(_unit_of(rates, rate_units, x_col)),
                                     content.pretty_unit(_unit_of(rates, rate_units, i_col)),
                                     content.pretty_unit(rate_unit) or "?", content.model_title(pick_raw, titles),
                                     both)
            block["figures"].append(drawing.add(_job(make, 130), WEIGHTS["transforms"], Figure(
                _unique(f"inhibition_{figures.slug(g)}", taken), f"{g}: rates by inhibitor level",
                f"Every panel uses the group's selected fit ({content.model_title(pick_raw, titles)}), fitted to all "
                "inhibitor levels at once. Colour (pale to dark) and marker tell the levels apart; hollow points "
                "were not fitted. The double-reciprocal panel shows the fitted curves transformed, for inspection "
                "only: its lines are not fitted to the transformed points (it replaces the straight-line "
                "transforms, which would use the uninhibited wells only). Residuals are of that model, for the "
                "wells it was fitted to.", b"", b"", "groups")))
            variables = []
        for var in variables:
            col = x_col if var == "substrate" else options.get("inhibitor", var)
            col = col if col in rates else var
            if col not in rates:
                continue
            pts_mask = in_group & np.isfinite(pd.to_numeric(rates[col], errors="coerce").to_numpy(float))
            pts = rates[pts_mask]
            pused = used[pts_mask] if used is not None else np.ones(len(pts), bool)
            cv = gc[gc["variable"].astype(str) == var] if len(gc) else pd.DataFrame(
                columns=["model", "variable", "inhibitor", "x", "y", "lower", "upper"])
            unit = rate_units.get(col, "") or (str(pts[f"{col}_unit"].iloc[0]) if f"{col}_unit" in pts and len(pts)
                                               else "")
            make = functools.partial(figures.rates_vs_x, g, pts, pused, cv, pick_raw, col, content.pretty_unit(unit),
                                     content.pretty_unit(rate_unit) or "?", _evaluators(fits, g, var, inp.models),
                                     titles)
            conf = f"{options['confidence'] * 100:g} %"
            block["figures"].append(drawing.add(_job(make, 130), WEIGHTS["rates_vs_x"], Figure(
                _unique(f"rates-vs-{figures.slug(var)}_{figures.slug(g)}", taken), f"{g}: v0 against {col}",
                f"Filled points: wells in the fit, with the standard error of each rate. Lines: fitted models; "
                f"shaded: the {conf} pointwise confidence band of each curve. Hollow points were not fitted. Below: "
                "residuals (observed − fitted) of the fitted wells.", b"", b"", "groups")))
        gd = diag[diag["group"].astype(str) == g] if "group" in diag else pd.DataFrame()
        if len(gd) and lead["kind"] != "cooperativity":  # the Hill plot answers the cooperativity question only
            gd = gd[gd["plot"].astype(str) != figures.HILL_PLOT]
        if both is not None:  # the inhibition figure's double-reciprocal panel shows the selected fit on every
            gd = gd.iloc[0:0]  # well; the stage's transforms of the uninhibited wells alone would say less
        x_unit = rate_units.get(x_col, "") or (str(rates[f"{x_col}_unit"].iloc[0]) if f"{x_col}_unit" in rates
                                                and len(rates) else "")
        selected = _selected_transforms(g, rates, fits, in_group, used, options, pick_raw, lead["kind"], inp.models,
                                        titles, x_unit, rate_unit) if both is None and len(gd) else None
        if selected is not None:
            gd, curves_t, why = selected
        else:
            curves_t, why = {}, _transform_wells(lead["kind"], pick_raw, titles)
        if len(gd):
            make = functools.partial(figures.transforms, g, gd, content.pretty_unit(rate_unit),
                                     content.pretty_unit(x_unit), curves=curves_t,
                                     curve_label=content.model_title(pick_raw, titles) if curves_t else "")
            block["figures"].append(drawing.add(_job(make, 130), WEIGHTS["transforms"], Figure(
                _unique(f"transforms_{figures.slug(g)}", taken),
                f"{g}: " + ("Hill plot and linear transforms" if lead["kind"] == "cooperativity" else
                            "linear transforms"),
                "Each transform's straight line and the estimates it implies are shown for inspection only: "
                "transforms distort the errors, so the reported parameters come from the nonlinear fit. "
                + why, b"", b"", "groups")))
        _curve_figures(block, g, tables, comparison, drawing, taken)
        groups.append(block)
    drawing.flush()
    figs += [f for b in groups for f in b["figures"]]

    files: dict[str, bytes] = {}
    for f in figs:
        files[f"figures/{f.name}.png"] = f.png
        files[f"figures/{f.name}.svg"] = f.svg
    reasons = content.fit_use(rates, options, inp.models)[1] if used is not None else None
    records = panels.well_records(rates, inp.traces, used, reasons, inp.recipe, content.pretty_unit(rate_unit),
                                  rate_units)
    for rec in records:
        rec["svg"] = panels.sparkline_svg(rec)
    for f in figs:
        f.links = panels.figure_links(f.areas, f.plate, records)
    flagged = panels.flag_groups(records)
    exclusions = content.exclusion_rows(rates, options, inp.recipe, inp.models)
    html = render_html({
        "title": inp.title or f"vzero report: {inp.recipe.get('name', 'run')}",
        "recipe": inp.recipe,
        "provenance": inp.provenance,
        "research_note": RESEARCH_NOTE,
        "counts": content.summary_counts(rates, used) if not rates.empty else None,
        "plates": plates,
        "plate_figures": [f for f in figs if f.section == "plates"],
        "groups": groups,
        "flagged": flagged,
        "well_panels": records,
        "calibrations": calibrations,
        "flag_text": content.FLAG_TEXT,
        "exclusions": exclusions,
        "options": options,
        "rate_unit": content.pretty_unit(rate_unit),
        "missing": [n for n in ("rates", "fits", "model_comparison", "cooperativity", "diagnostics", "curves")
                    if n not in tables],
        "notes": notes,
        "built": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
    })
    files["report.html"] = html.encode("utf-8")
    return files


def _curve_figures(block: dict[str, Any], g: str, tables: Mapping[str, Table], comparison: pd.DataFrame,
                   drawing: _Drawing, taken: set[str]) -> None:
    """The curve route's figures of group ``g`` (when a ``curves`` fit ran): the fitted curves over the reads,
    for the model the curve route prefers, and Selwyn's test where the group has two enzyme levels."""
    from vzero.plugins.report import curve_figures

    pc_t = tables.get("progress_curves")
    pc = _frame(tables, "progress_curves")
    if len(pc) and "group" in pc:
        pc = pc[pc["group"].astype(str) == g]
    if len(pc):
        model = str(pc["model"].iloc[0])
        if "route" in comparison and "group" in comparison:
            pref = comparison[(comparison["route"].astype(str) == "curves") & (comparison["group"].astype(str) == g)]
            model = str(pref["selected_model"].iloc[0]) if len(pref) and str(pref["selected_model"].iloc[0]) else model
        unit = content.pretty_unit(dict(pc_t.units).get("observed", "")) if isinstance(pc_t, Table) else ""
        make = functools.partial(curve_figures.curve_fits, g, pc, model, unit or "?")
        block["figures"].append(drawing.add(_job(make, 130), WEIGHTS["progress_grid"], Figure(
            _unique(f"curve-fit_{figures.slug(g)}", taken), f"{g}: fitted progress curves",
            f"Route 'curves': {content.model_title(model)} fitted to every read of the group's wells at once (one "
            "baseline per well). Grey points: reads in concentration; lines: the integrated rate law; below each "
            "panel: residuals. One panel per substrate (and inhibitor) level.", b"", b"", "groups")))
    sp = _frame(tables, "selwyn_points")
    if len(sp) and "group" in sp:
        sp = sp[sp["group"].astype(str) == g]
    if len(sp):
        su = content.pretty_unit(dict(tables["selwyn_points"].units).get("product", ""))
        make = functools.partial(curve_figures.selwyn_plot, g, sp, su or "?", "")
        block["figures"].append(drawing.add(_job(make, 130), WEIGHTS["rates_vs_x"], Figure(
            _unique(f"selwyn_{figures.slug(g)}", taken), f"{g}: Selwyn's test of enzyme stability",
            "Product against enzyme concentration × time, one colour per enzyme level, offsets removed. If the "
            "enzyme keeps its activity, the curves superimpose; the verdict is in the selwyn table.", b"", b"",
            "groups")))


def render_html(context: Mapping[str, Any]) -> str:
    """Render the report template (jinja2, autoescape on) with ``context``."""
    import jinja2

    env = jinja2.Environment(loader=jinja2.PackageLoader("vzero.plugins.report", "templates"), autoescape=True,
                             undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True)
    env.filters["num"] = content.num
    return env.get_template("report.html.j2").render(**context)
