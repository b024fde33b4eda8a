"""The work of the ``curves`` fit stage: progress curves in concentration, grouped, fitted, tabulated.

Reads come from the per-plate traces after the plate steps (blank-subtracted signal); the rates table
(after the convert step) supplies each well's substrate, inhibitor and enzyme concentrations, group, flags,
initial rate (start values only) and the conversion from signal to concentration: the convert step turns a
signal rate into a concentration rate by a factor per well, rate / signal_rate, and the same factor turns
signal into concentration (times the time unit of the rate). Wells whose own rate is zero or missing take
their plate's median factor.

The outputs have the shapes of the ``nls`` route's tables, each row marked ``route: curves``; a run with both
routes keeps both (see :mod:`vzero.plugins.fit.routes`). The integrated curves and residuals of every read
are the step's record (``curve_fits`` in run.h5), and the ``progress_curves`` table feeds the report.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd
from vzero import units as pu
from vzero.data import Table
from vzero.errors import FitError
from vzero.plugins.fit import diagnostics, routes
from vzero.plugins.fit import run as rates_run
from vzero.plugins.fit.catalog import Model
from vzero.plugins.fit.curves import product, selwyn, terms
from vzero.plugins.fit.curves.curve import Wells
from vzero.plugins.fit.curves.fit import (
    KINACT,
    LAG,
    CurveFit,
    CurveGroup,
    activity_name,
    parameter_names,
)
from vzero.stage import StageInput, StageOutput

FIT_COLUMNS = ["group", "model", "parameter", "estimate", "stderr", "ci_low", "ci_high", "ci_method", "unit",
               "fixed", "n_points", "rss", "dof", "r_squared", "aicc", "success", "message", "errorbars", "note"]
CURVE_COLUMNS = ["group", "model", "plate", "well", "substrate", "inhibitor", "enzyme", "time", "observed",
                 "fitted", "residual", "used"]


def _conversion(frame: pd.DataFrame) -> np.ndarray:
    """Per row of the rates table: concentration-rate per signal-rate (rate / signal_rate), the plate's
    median where a well's own ratio is not usable."""
    if "signal_rate" not in frame.columns:
        raise FitError("the curve fit needs concentrations, but the rates table has no conversion "
                       "(no column 'signal_rate')",
                       hint="Put a convert step (beer-lambert or standard-curve) before the fit step.")
    with np.errstate(all="ignore"):
        ratio = frame["rate"].to_numpy(float) / frame["signal_rate"].to_numpy(float)
    ratio = np.where(np.isfinite(ratio) & (ratio != 0), ratio, np.nan)
    plate = frame["plate"].astype(str).to_numpy() if "plate" in frame.columns else np.full(len(frame), "")
    out = ratio.copy()
    for p in np.unique(plate):
        rows = plate == p
        good = ratio[rows][np.isfinite(ratio[rows])]
        med = float(np.median(good)) if good.size else np.nan
        out[rows] = np.where(np.isfinite(ratio[rows]), ratio[rows], med)
    return out


def _selected(frame: pd.DataFrame, cfg: Mapping[str, Any]) -> np.ndarray:
    use = np.ones(len(frame), bool)
    if "role" in frame.columns:
        use &= frame["role"].astype(str).to_numpy() == "sample"
    if "flags" in frame.columns:
        excluded = set(cfg["exclude_flags"])
        use &= ~np.array([bool(excluded & set(filter(None, str(f).split(";"))))
                          for f in frame["flags"].fillna("").astype(str)], bool)
    return use


def unmodelled_shapes(flags: pd.Series, *, lag: bool, inactivation: bool) -> list[str]:
    """Warnings for fitted wells whose rates step saw a shape the curve model is told not to describe: a lag
    (flag ``lag``) with ``lag: false``, a falling rate (flag ``decay``) with ``inactivation: false`` (on
    ``auto`` the shape is tried, :mod:`.terms`; ``lag`` / ``inactivation`` here say whether it may be).
    A curve model without them is biased on such wells (docs/fitting.md, the lag-decay rows), and the
    curve fit cannot see it from the reads alone as the rates step did."""
    sets = [set(filter(None, str(f).split(";"))) for f in flags.fillna("").astype(str)]
    out = []
    for name, option, on in (("lag", "lag", lag), ("decay", "inactivation", inactivation)):
        n = sum(name in s for s in sets)
        if n and not on:
            out.append(f"fit (curves): {n} fitted well(s) carry the rates step's '{name}' flag but the curve "
                       f"model has no {name}; consider '{option}: auto' or '{option}: true' (check the residual "
                       "panels)")
    return out


def _setting(value: Any) -> Any:
    """A recipe's ``lag`` / ``inactivation``: True, False or :data:`.terms.AUTO`."""
    return terms.AUTO if value == terms.AUTO else bool(value)


def _warn_unused_terms(data: StageInput, group: str, model: str, choice: terms.Choice, mk: terms.Marks,
                       lag: Any, inactivation: Any) -> None:
    """Warn when ``auto`` left a term out of a group although the rates step flagged its shape on at least
    half the group's fitted wells: the curves gave no evidence for it, and the residual panels should say
    why (a different shape, a model that misfits elsewhere)."""
    for name, option, setting, on, n in (("lag", "lag", lag, choice.lag, mk.lag),
                                         ("decay", "inactivation", inactivation, choice.inactivation, mk.decay)):
        if setting == terms.AUTO and not on and n and 2 * n >= mk.wells:
            data.warn(f"fit (curves): group {group}, {model}: the rates step flagged {name} on {n} of {mk.wells} "
                      f"fitted wells, but the curves gave no evidence for {option} (the fits note gives the "
                      "AICc); check the residual panels")


def _lots(labels: np.ndarray, reference: str | None) -> tuple[tuple[str, ...], np.ndarray]:
    """The lots of one group's wells, reference first (``reference`` when the group has it, else the first
    lot in layout order), and each well's index into them."""
    order = list(dict.fromkeys(str(v) for v in labels))
    ref = reference if reference in order else order[0]
    lots = (ref, *(v for v in order if v != ref))
    return lots, np.array([lots.index(str(v)) for v in labels], int)


def _lot_labels(frame: pd.DataFrame, use: np.ndarray, data: StageInput) -> np.ndarray:
    """Each row's enzyme lot (text; '' when not given). Refused when the rates table has no ``lot`` column;
    sample wells without a lot are left out of the fit with a warning naming them."""
    if "lot" not in frame.columns:
        raise FitError("fit (curves): lots is on, but the plate layout has no 'lot' column naming each well's "
                       "enzyme lot", hint="Add a column 'lot' to the layout (any text, e.g. A, B), or set lots: false.")
    labels = frame["lot"].fillna("").astype(str).str.strip().to_numpy()
    labels = np.where(np.isin(labels, ("nan", "None")), "", labels)
    missing = np.flatnonzero(use & (labels == ""))
    if missing.size:
        plates = frame["plate"].astype(str).to_numpy() if "plate" in frame.columns else np.full(len(frame), "")
        named = ", ".join(f"{plates[r]} {frame['well'].iloc[r]}".strip() for r in missing[:8])
        more = f" and {missing.size - 8} more" if missing.size > 8 else ""
        data.warn(f"fit (curves): {missing.size} sample well(s) have no enzyme lot in the layout's 'lot' column "
                  f"({named}{more}); they are left out of the curve fit")
    return labels


def _build_group(name: str, rows: np.ndarray, frame: pd.DataFrame, traces: Mapping[str, Any],
                 conc: np.ndarray, scale: float, var: dict[str, np.ndarray], model: Model,
                 lot_labels: np.ndarray | None = None, reference: str | None = None) -> CurveGroup | None:
    """One group's wells as a :class:`CurveGroup` (None when no well has reads); with ``lot_labels`` (one
    per row of the rates table) the group's enzyme lots, see :func:`_lots`."""
    plates = frame["plate"].astype(str).to_numpy() if "plate" in frame.columns else np.full(len(frame), "")
    wells = frame["well"].astype(str).to_numpy()
    ys, useds, times, keep = [], [], [], []
    for r in rows:
        tr = traces.get(plates[r]) if plates[r] in traces else (next(iter(traces.values())) if len(traces) == 1
                                                                  else None)
        if tr is None:
            continue
        hit = np.flatnonzero(tr.wells["well"].astype(str).to_numpy() == wells[r])
        if hit.size != 1 or not np.isfinite(conc[r]):
            continue
        k = int(hit[0])
        times.append(np.asarray(tr.time, float))
        ys.append(np.asarray(tr.signal[k], float) * conc[r])
        useds.append(np.asarray(tr.mask[k], bool) & np.isfinite(tr.signal[k]))
        keep.append(r)
    if not keep:
        return None
    nt = max(len(t) for t in times)
    y = np.full((len(keep), nt), np.nan)
    used = np.zeros((len(keep), nt), bool)
    time = np.zeros((len(keep), nt))
    for i, (t, yy, u) in enumerate(zip(times, ys, useds, strict=True)):
        y[i, :len(t)], used[i, :len(t)], time[i, :len(t)] = yy, u, t
        time[i, len(t):] = t[-1]
    idx = np.array(keep)
    e = var["enzyme"][idx]
    e_ok = np.all(np.isfinite(e) & (e > 0))
    scale_e = np.ones(len(idx))
    e_ref = rates_run._group_enzyme(e)
    if "enzyme" not in model.variables and e_ok and not np.allclose(e, e[0], rtol=1e-9, atol=0):
        e_ref = float(np.median(e))
        scale_e = e / e_ref  # a well with twice the enzyme runs twice as fast: Vmax refers to e_ref
    inh = var["inhibitor"][idx]
    w = Wells(var["substrate"][idx], np.where(np.isfinite(inh), inh, 0.0), np.where(np.isfinite(e), e, 0.0),
              np.maximum(time, 0.0), scale * scale_e)
    lots: tuple[str, ...] = ()
    lot = None
    if lot_labels is not None:
        lots, lot = _lots(lot_labels[idx], reference)
    return CurveGroup(name, w, y, used, var["rate"][idx], [(plates[r], wells[r]) for r in idx], e_ref, lots, lot)


def run_curves(settings: Mapping[str, Any], data: StageInput) -> StageOutput:
    """The ``curves`` step's work; ``settings`` are the stage's parameters with every default filled in."""
    cfg = dict(settings)
    rates = data.artifacts.get("rates")
    traces = data.artifacts.get("traces")
    if rates is None or not hasattr(rates, "frame") or not traces:
        raise FitError("the curve fit found no rates table or no traces",
                       hint="Put import, rates and convert steps before the fit step in the recipe.")
    frame: pd.DataFrame = rates.frame
    units = dict(rates.units)
    models = rates_run._models(list(cfg["models"]), data.registry)
    xcol, icol, gcol = cfg["x"], cfg["inhibitor"], cfg["group_by"]
    columns = {"substrate": xcol, "inhibitor": icol, "enzyme": "enzyme"}
    ru, su, iu, eu = (units.get(c, "") for c in ("rate", xcol, icol, "enzyme"))
    if xcol not in frame.columns or not su:
        raise FitError(f"the curve fit needs each well's substrate concentration (column {xcol!r} with a unit)",
                       hint="Add the substrate column to the plate layout, e.g. 'substrate (uM)'.")
    try:
        scale = float(pu.factor(ru, f"({su})/s"))  # effective time per second: rate unit -> substrate unit/s
        to_conc = float(pu.factor(f"({ru})*s", su))
    except Exception as exc:
        raise FitError(f"the rate unit {ru!r} is not a concentration per time in the substrate's unit {su!r} ({exc})",
                       hint="Convert rates to concentration per time (convert step) before the curve fit.") from None
    conc = _conversion(frame) * to_conc
    role_unit = {"rate": ru, "substrate": su, "inhibitor": iu, "enzyme": eu, "": ""}
    var = {v: frame[c].to_numpy(float) if c in frame.columns else np.full(len(frame), np.nan)
           for v, c in columns.items()}
    var["rate"] = frame["rate"].to_numpy(float)
    use = _selected(frame, cfg) & np.isfinite(var["substrate"])
    groups = frame[gcol].fillna("").astype(str).to_numpy() if gcol in frame.columns else np.full(len(frame), "all")
    no_inhibitor = ~np.isfinite(var["inhibitor"]) | (var["inhibitor"] == 0)
    conf = float(cfg["confidence"])
    kin_setting, lag_setting = _setting(cfg["inactivation"]), _setting(cfg["lag"])
    named = {k for key in ("fixed", "bounds", "start") for per_model in cfg[key].values() for k in per_model}
    for term, name in ((KINACT, "inactivation"), (LAG, "lag")):
        if term in named and _setting(cfg[name]) == terms.AUTO:  # the recipe gives the term's parameter
            data.warn(f"fit (curves): the recipe gives {term!r} (fixed, bounds or start) while {name} is auto: "
                      f"{name} is fitted in every group (write {name}: true to say so, or drop {term!r})")
            kin_setting, lag_setting = (True, lag_setting) if term == KINACT else (kin_setting, True)
    kin, lag = kin_setting is not False, lag_setting is not False  # the terms a group may get
    prod = bool(cfg["product_inhibition"])
    flag_text = frame["flags"].to_numpy(object) if "flags" in frame.columns else np.full(len(frame), "", object)
    if "flags" in frame.columns:
        for text in unmodelled_shapes(frame.loc[use, "flags"], lag=lag, inactivation=kin):
            data.warn(text)
    lot_labels = _lot_labels(frame, use, data) if cfg["lots"] else None
    if lot_labels is not None:
        use &= lot_labels != ""
    reference = str(cfg["reference_lot"]) if cfg["reference_lot"] not in (None, "") else None
    if reference is not None and lot_labels is not None and reference not in set(lot_labels[use]):
        data.warn(f"fit (curves): reference_lot {reference!r} is not the lot of any fitted well; each group's "
                  "first lot in layout order is its reference instead (the fit rows' note names it)")

    fits: dict[tuple[str, str], Any] = {}
    fitted: dict[tuple[str, str], tuple[CurveGroup, CurveFit]] = {}
    point_sets: dict[tuple[str, str], tuple[int, ...]] = {}
    built: dict[tuple[str, str], CurveGroup] = {}
    decided: dict[str, tuple[terms.Choice, str]] = {}  # per group: the terms and the model that chose them
    choices: dict[tuple[str, str], str] = {}  # per (group, model): the note on its terms
    record_terms: list[dict[str, Any]] = []
    for model in models:
        ok = use.copy()
        if "inhibitor" not in model.variables:
            ok &= no_inhibitor
        fixed = {k: float(v) for k, v in cfg["fixed"].get(model.name, {}).items()}
        bounds = {k: (float(v[0]), float(v[1])) for k, v in cfg["bounds"].get(model.name, {}).items()}
        starts = cfg["start"].get(model.name, {})
        if prod:
            product.scaled_parameter(model)  # a law without a half-saturation constant is refused here
        names = parameter_names(model, product=prod, kinact=kin, lag=lag)
        for k in [*fixed, *bounds, *starts]:
            if k not in names and not (lot_labels is not None and k.startswith(activity_name("")[:-1])):
                raise FitError(f"fit: model {model.name} has no parameter {k!r}",
                               hint=f"Its parameters are {', '.join(names)}"
                               + (", and activity[LOT] per enzyme lot." if lot_labels is not None else "."))
        todo: list[CurveGroup] = []
        for g in sorted(set(groups[ok])):
            rows = np.flatnonzero(ok & (groups == g))
            cg = _build_group(g, rows, frame, traces, conc, scale, var, model, lot_labels, reference)
            n_free = len(names) + (max(len(cg.lots), 1) - 1 if cg is not None else 0) - len(fixed)
            reason = ""
            if cg is None:
                reason = "no well of the group has reads in the traces"
            elif int(cg.used.sum()) <= n_free + len(cg.y) + 1:
                reason = f"too few reads for {n_free} shared parameters and {len(cg.y)} baselines"
            elif "inhibitor" in model.variables and np.unique(cg.wells.inhibitor).size < 2:
                reason = "needs at least two inhibitor concentrations"
            if reason:
                fits[(g, model.name)] = rates_run._failed(model, 0, reason)
                data.warn(f"fit (curves): group {g}, {model.name}: {reason}")
                continue
            assert cg is not None
            built[(g, model.name)] = cg
            point_sets[(g, model.name)] = tuple(rows)
            todo.append(cg)
        if not todo:
            continue
        punits = {k: role_unit.get(r, "") for k, r in model.units.items()} | {KINACT: "1/s", LAG: "s", product.KP: su}
        results: list[CurveFit] = []
        batches: dict[tuple[str, ...], list[int]] = {}
        for i, cg in enumerate(todo):  # groups with the same lots share one batched fit
            batches.setdefault(cg.lots, []).append(i)
        order = [i for members in batches.values() for i in members]
        group_marks = [terms.marks(flag_text[list(point_sets[(cg.name, model.name)])]) for cg in todo]
        settings = [(decided[cg.name][0].lag, decided[cg.name][0].inactivation) if cg.name in decided
                    else (lag_setting, kin_setting) for cg in todo]
        picked: list[terms.Choice] = []
        for members in batches.values():
            for cf, choice in terms.fit_with_terms(
                    model, [todo[i] for i in members], [group_marks[i] for i in members],
                    [settings[i] for i in members], product=prod, fixed=fixed, bounds=bounds, starts=starts,
                    confidence=conf, profile=bool(cfg["profile"]), units=punits, route=str(cfg["route"])):
                results.append(cf)
                picked.append(choice)
        todo = [todo[i] for i in order]
        group_marks = [group_marks[i] for i in order]
        for cg, cf, choice, mk in zip(todo, results, picked, group_marks, strict=True):
            key = (cg.name, model.name)
            fits[key] = cf.result
            fitted[key] = (cg, cf)
            if cg.name not in decided:
                decided[cg.name] = (choice, model.name)
                _warn_unused_terms(data, cg.name, model.name, choice, mk, lag_setting, kin_setting)
            first, by = decided[cg.name]
            choices[key] = first.note if by == model.name or not first.note else f"{first.note} (decided on {by})"
            record_terms.append({"group": cg.name, "model": model.name, "lag": choice.lag,
                                 "inactivation": choice.inactivation, "decided_on": by, "wells": mk.wells,
                                 "lag_flagged": mk.lag, "decay_flagged": mk.decay, "note": choices[key]})
            if not cf.result.success:
                data.warn(f"fit (curves): group {cg.name}, {model.name}: did not converge ({cf.result.message})")

    out = _tables(models, fits, fitted, cfg, role_unit, choices)
    record: dict[str, Any] = {"curve_fits": out.pop("_curve_fits")}
    if record_terms:
        record["curve_terms"] = Table(pd.DataFrame(record_terms), {}, {})
    flags: dict[str, str] = {}
    if cfg["selwyn"]:
        sel_rows, sel_points = [], []
        for g in sorted(set(groups[use])):
            rows = np.flatnonzero(use & (groups == g))
            cg = _build_group(g, rows, frame, traces, conc, scale, var, models[0])
            if cg is None:
                continue
            res = selwyn.test(cg, float(cfg["alpha"]))
            sel_rows += res.rows
            sel_points += res.points
            if res.failed:
                flags[g] = "enzyme_unstable"
                data.warn(f"fit (curves): group {g}: Selwyn's test fails ({res.summary}); the enzyme may lose "
                          "activity during the assay")
        if sel_rows:
            out["selwyn"] = Table(pd.DataFrame(sel_rows), {}, {})
            out["selwyn_points"] = Table(pd.DataFrame(sel_points), {"enzyme_time": f"({eu})*s" if eu else "s",
                                                                    "product": su})
    if flags and "fits" in out:
        table = out["fits"].frame.copy()
        extra = table["group"].astype(str).map(lambda g: "enzyme unstable (Selwyn's test)" if g in flags else "")
        table["note"] = ["; ".join(filter(None, [str(a), b])) for a, b in zip(table["note"].fillna(""), extra,
                                                                              strict=True)]
        out["fits"] = out["fits"].with_frame(table)
    merged = routes.with_route(out, "curves")
    return StageOutput(artifacts=merged, record=record)


def _tables(models: list[Model], fits: dict[tuple[str, str], Any],
            fitted: dict[tuple[str, str], tuple[CurveGroup, CurveFit]], cfg: Mapping[str, Any],
            role_unit: dict[str, str], term_notes: Mapping[tuple[str, str], str]) -> dict[str, Any]:
    conf = float(cfg["confidence"])
    ru, su, iu, eu = (role_unit[k] for k in ("rate", "substrate", "inhibitor", "enzyme"))
    by_name = {m.name: m for m in models}
    fit_rows: list[dict[str, Any]] = []
    corr_rows: list[dict[str, Any]] = []
    curve_blocks: list[dict[str, np.ndarray]] = []
    for (g, mname), res in fits.items():
        model = by_name[mname]
        common = rates_run.fit_row_head(g, mname, res)
        pair = fitted.get((g, mname))
        lots = pair[0].lots if pair is not None else ()
        lot_note = (f"activity factors relative to enzyme lot {lots[0]}, which the limiting rate refers to"
                    if len(lots) > 1 else f"one enzyme lot ({lots[0]})" if lots else "")
        for name in res.names:
            p = res.params[name]
            fit_rows.append({**common, "parameter": name, "estimate": p.value, "stderr": p.stderr,
                             "ci_low": p.ci_low, "ci_high": p.ci_high, "ci_method": p.ci_method, "unit": p.unit,
                             "fixed": p.fixed,
                             "note": "; ".join(filter(None, [p.note, lot_note, term_notes.get((g, mname), "")]))})
        if pair is None or not res.success:
            continue
        cg, cf = pair
        if cfg["enzyme"]:
            for row in rates_run._derived(model, res, cg.enzyme_ref, eu, ru, su, conf):
                fit_rows.append({**common, **row, "note": "; ".join(filter(None, [str(row.get("note") or ""),
                                                                                  term_notes.get((g, mname), "")]))})
        corr_rows += diagnostics.correlations(g, mname, res)
        n, nt = cg.y.shape
        curve_blocks.append({
            "group": np.full(n * nt, g, dtype=object), "model": np.full(n * nt, mname, dtype=object),
            "plate": np.repeat([i[0] for i in cg.ids], nt).astype(object),
            "well": np.repeat([i[1] for i in cg.ids], nt).astype(object),
            "substrate": np.repeat(cg.wells.s0, nt), "inhibitor": np.repeat(cg.wells.inhibitor, nt),
            "enzyme": np.repeat(cg.wells.enzyme, nt), "time": cg.wells.time.ravel(), "observed": cg.y.ravel(),
            "fitted": cf.fitted.ravel(), "residual": (cg.y - cf.fitted).ravel(), "used": cg.used.ravel()})

    point_sets = {key: tuple(sorted(pair[0].ids)) for key, pair in fitted.items()}
    comp_rows, coop_rows = rates_run.comparison_rows(models, fits, point_sets, by_name,  # type: ignore[arg-type]
                                                     float(cfg["alpha"]))

    rss_unit = f"({su})^2" if su else ""
    meta = {"research_use": "Research use only: check results against the lab's validated procedures.",
            "route": "curves"}
    curves = diagnostics.stack(curve_blocks, CURVE_COLUMNS)
    cunits = {"substrate": su, "inhibitor": iu, "enzyme": eu, "time": "s", "observed": su, "fitted": su,
              "residual": su}
    return {
        "fits": Table(rates_run._with_comparison(pd.DataFrame(fit_rows, columns=FIT_COLUMNS), comp_rows),
                      {"rss": rss_unit} if rss_unit else {}, meta),
        "model_comparison": Table(pd.DataFrame(comp_rows), {"rss": rss_unit} if rss_unit else {}, meta),
        "cooperativity": Table(pd.DataFrame(coop_rows, columns=[
            "group", "model", "h", "stderr", "ci_low", "ci_high", "ci_method", "F", "p_vs_michaelis_menten", "verdict",
            "reason"]), {}, meta),
        "correlations": Table(pd.DataFrame(corr_rows, columns=["group", "model", "parameter_a", "parameter_b", "r"]),
                              {}, meta),
        "progress_curves": Table(curves, {k: v for k, v in cunits.items() if v}, meta),
        "_curve_fits": Table(curves, {k: v for k, v in cunits.items() if v}, meta),
    }
