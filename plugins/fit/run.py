"""The work of the fit stage: select wells, fit every model to every group, build the result tables.

Called from :meth:`vzero.plugins.fit.stage.FitStage.run`. Per-group trouble (too few levels, no positive rate,
no saturation, no convergence) becomes a row with ``success`` False and a reason, plus a one-line warning;
only a set-up problem (no rates table, a missing column, an unknown model) raises :class:`FitError`.
"""

from __future__ import annotations

import fnmatch
import functools
from collections.abc import Mapping
from dataclasses import replace
from typing import Any

import numpy as np
import pandas as pd
from vzero import units as pu
from vzero.audit.reader import OLD_PARAMETERS
from vzero.data import Table
from vzero.errors import FitError
from vzero.params import closest
from vzero.plugins.fit import compare, diagnostics, engine, routes, shared
from vzero.plugins.fit.catalog import BY_NAME, Model
from vzero.plugins.fit.determined import NOT_DETERMINED, settle
from vzero.plugins.kinetics.rates_table import blank_set_ids
from vzero.stage import StageInput, StageOutput


def _models(names: list[str], registry: Any) -> list[Model]:
    """The recipe's models, from the registry (built-in and plugin models alike; the built-in catalog when
    the stage runs without a registry, as in unit tests)."""
    out = []
    for name in names:
        if registry is not None and ("model", name) in registry:
            out.append(registry.get("model", name).component)
        elif registry is None and name in BY_NAME:
            out.append(BY_NAME[name])
        else:
            known = registry.names("model") if registry is not None else sorted(BY_NAME)
            hit = closest(name, known)
            raise FitError(f"fit.models: no model named {name!r}" + (f" (did you mean {hit!r}?)" if hit else ""),
                           hint=f"Available models: {', '.join(known)}.")
    return out


def _failed(model: Model, n: int, reason: str) -> engine.FitResult:
    nan = float("nan")
    p = len(model.params)
    params = {k: engine.ParamEstimate(k, nan, note=f"{NOT_DETERMINED}: {reason}") for k in model.params}
    return engine.FitResult(model.params, params, False, reason, 0, nan, n - p, n, nan, nan, np.full((p, p), nan),
                            np.full((p, p), nan), False, reason, np.full(p, nan), np.ones(p, bool))


#: Default proportional term of ``rate-error`` weighting (recipe: ``rate_error_share``): each rate's sigma is
#: ``sqrt(SE² + (share · |rate|)²)``, so that a rate measured to 0.1 % by a whole-curve fit still carries errors
#: that read noise does not show (pipetting, enzyme dilution). 1 % was the best of 0-10 % on the benchmark
#: (docs/fitting.md, "Weighting"); a lab that knows its pipetting CV should give that.
RATE_ERROR_SHARE = 0.01


def rate_error_sigma(y: np.ndarray, stderr: np.ndarray, share: float = RATE_ERROR_SHARE) -> tuple[np.ndarray, str]:
    """Sigma of ``rate-error`` weighting, per rate (rate units): its own standard error combined with
    ``share`` of the rate, ``sqrt(SE² + (share · |y|)²)``. A rate without a usable SE (NaN, zero) gets the
    median of the others' SEs (and a note saying how many); with none usable, the sigmas are all NaN."""
    se = np.asarray(stderr, dtype=float)
    good = np.isfinite(se) & (se > 0)
    note = ""
    if not good.all():
        fill = float(np.median(se[good])) if good.any() else np.nan
        note = (f"{int((~good).sum())} rate(s) without a standard error weighted with the group's median SE"
                if good.any() else "no rate has a standard error: fitted unweighted")
        se = np.where(good, se, fill)
    return np.sqrt(se**2 + (share * np.abs(y)) ** 2), note


def _sigma(weighting: str, y: np.ndarray, levels: np.ndarray, stderr: np.ndarray | None = None,
           share: float = RATE_ERROR_SHARE) -> tuple[np.ndarray | None, str]:
    """Per-point standard deviations for one group (None: equal weights) and a note when falling back."""
    if weighting == "rate-error":
        sig, note = rate_error_sigma(y, np.full(y.shape, np.nan) if stderr is None else stderr, share)
        return (None if not np.all(np.isfinite(sig)) else sig), note
    if weighting == "relative":
        # sigma proportional to the rate; floored at 5 % of the largest |rate| so near-zero rates do not
        # receive enormous weights (our choice, documented in docs/fitting.md)
        return np.maximum(np.abs(y), 0.05 * np.max(np.abs(y))), ""
    if weighting == "replicate":
        _, inv, counts = np.unique(levels, return_inverse=True, return_counts=True)
        sd = np.full(counts.size, np.nan)
        for k in np.flatnonzero(counts >= 2):
            sd[k] = np.std(y[inv == k], ddof=1)
        good = sd[np.isfinite(sd) & (sd > 0)]
        if good.size < 2:
            return None, "replicate weighting needs replicates at two or more levels; fitted unweighted"
        typical = float(np.median(good))
        sd = np.where(np.isfinite(sd), np.maximum(sd, 0.1 * typical), typical)
        return sd[inv], ""
    return None, ""


def _saturation_problem(model: Model, res: engine.FitResult, s: np.ndarray) -> str:
    """Reason why the limiting rate and the half-saturation constant are not determined, or ''."""
    k, vmax = model.half_saturation, model.limiting_rate
    if not (res.success and k and vmax and model.variables == ("substrate",)):
        return ""
    smax = float(np.max(s))
    kv = res.value(k)
    if np.isfinite(kv) and kv > smax:
        return (f"the highest substrate level ({smax:.4g}) is below the fitted {k} ({kv:.4g}): the rates never "
                f"approach saturation, so {vmax} and {k} are not determined separately (only {vmax}/{k} = "
                f"{res.value(vmax) / kv:.4g} is); extend the substrate range")
    return ""


def _with_profiles(model: Model, results: list[engine.FitResult], xs: dict[str, np.ndarray], ys: np.ndarray,
                   mask: np.ndarray, sigma: np.ndarray | None, bounds: dict[str, tuple[float, float]],
                   confidence: float) -> list[engine.FitResult]:
    """Replace the Wald intervals of the model's skewed parameters by profile-likelihood intervals, for all
    groups of the batch at once (``xs``/``ys``/``mask``/``sigma`` as handed to the batch fit)."""
    rows = [k for k, r in enumerate(results) if r.success and r.errorbars]
    out = list(results)
    if not rows:
        return out
    sub = np.array(rows)
    for name in model.profile:
        if any(name not in results[k].params or results[k].params[name].fixed for k in rows):
            continue
        limits = engine.profile_batch(model.evaluate, model.jacobian, {k: v[sub] for k, v in xs.items()}, ys[sub],
                                      mask[sub], [out[k] for k in rows], name,
                                      sigma=None if sigma is None else sigma[sub], bounds=bounds,
                                      confidence=confidence)
        for k, (lo, hi, note) in zip(rows, limits, strict=True):
            params = dict(out[k].params)
            params[name] = replace(params[name], ci_low=lo, ci_high=hi, ci_method="profile",
                                   note="; ".join(filter(None, [params[name].note, note])))
            out[k] = replace(out[k], params=params)
    return out


def _derived_row(name: str, est: float, se: float, unit: str, tq: float, note: str) -> dict[str, Any]:
    """A fits-table row for a quantity derived from fitted parameters (Wald interval from its delta-method SE)."""
    ok = bool(np.isfinite(se))
    return {"parameter": name, "estimate": est, "stderr": se, "ci_low": est - tq * se if ok else np.nan,
            "ci_high": est + tq * se if ok else np.nan, "ci_method": "wald-t (derived)" if ok else "",
            "unit": unit, "fixed": False, "note": note}


def _ki_rows(model: Model, res: engine.FitResult, s: np.ndarray, cfg: Mapping[str, Any], iu: str, su: str,
             confidence: float) -> list[dict[str, Any]]:
    """Ki from IC50 (Cheng & Prusoff 1973) or from Morrison's Ki_app, for the mechanism the recipe assumes.

    competitive Ki = K/(1 + S/Km); uncompetitive Ki = K/(1 + Km/S); noncompetitive Ki = K, with K the
    IC50 or Ki_app. The SE propagates the SE of K and, when given, of Km (delta method, the two taken as
    independent); the substrate concentration is taken as exact. Refused, with the reason, when the recipe
    names no mechanism or S or Km is missing.
    """
    src = model.ki_from
    if not src or src not in res.params:
        return []
    k = res.params[src]
    mech = str(cfg["mechanism"])
    tq = engine.t_quantile(confidence, res.dof)
    how = model.ki_conversion

    def refuse(why: str) -> list[dict[str, Any]]:
        return [_derived_row("Ki", np.nan, np.nan, iu, tq, f"{NOT_DETERMINED}: {why}")]

    if mech == "none":
        return refuse(f"no mechanism given (set fit.mechanism to competitive, uncompetitive or noncompetitive); "
                      f"the conversion of {src} to Ki depends on it")
    assumed = "; ".join(filter(None, [f"mechanism assumed: {mech} (fit.mechanism), {how}", model.ki_assumes]))
    if mech == "noncompetitive":
        return [_derived_row("Ki", k.value, k.stderr, iu, tq, f"Ki = {src}; {assumed}")]
    s = s[np.isfinite(s)]
    if s.size == 0 or not np.allclose(s, s[0], rtol=1e-9, atol=0) or s[0] <= 0:
        return refuse(f"{mech} conversion needs one positive substrate concentration shared by the group's wells "
                      f"(column {cfg['x']!r}); {assumed}")
    if cfg["km"] is None:
        return refuse(f"{mech} conversion needs Km (set fit.km, e.g. \"2 uM\"); {assumed}")
    try:
        f_km = pu.factor(str(cfg["km"].units), su)
    except Exception:
        return refuse(f"fit.km ({cfg['km']}) cannot be expressed in the substrate unit {su!r}; {assumed}")
    km = float(cfg["km"].magnitude) * f_km
    km_se = float(cfg["km_stderr"].m_as(cfg["km"].units)) * f_km if cfg["km_stderr"] is not None else 0.0
    sv = float(s[0])
    if mech == "competitive":
        f, dfdkm, form = 1 + sv / km, -sv / km**2, f"Ki = {src}/(1 + S/Km)"
    else:
        f, dfdkm, form = 1 + km / sv, 1 / sv, f"Ki = {src}/(1 + Km/S)"
    ki = k.value / f
    se = float(np.hypot(k.stderr / f, ki / f * dfdkm * km_se))
    km_note = f"Km = {km:.6g} {su} ± {km_se:.3g}" if cfg["km_stderr"] is not None else \
        f"Km = {km:.6g} {su} taken as exact (fit.km_stderr not given)"
    return [_derived_row("Ki", ki, se, iu, tq, f"{form} with S = {sv:.6g} {su}, {km_note}; "
                         f"{assumed}")]


@functools.lru_cache(maxsize=64)
def _factor(expression: str, target: str) -> float:
    """:func:`vzero.units.factor`, remembered: parsing units with pint is slow next to the arithmetic, and the
    same few unit pairs recur for every group and model."""
    return float(pu.factor(expression, target))


def _derived(model: Model, res: engine.FitResult, e: float, eu: str, ru: str, su: str,
             confidence: float) -> list[dict[str, Any]]:
    """kcat = Vmax/[E] (1/s) and kcat/Km (1/(M·s)) with delta-method standard errors, for a model with a
    limiting rate (and a Michaelis constant)."""
    if not model.limiting_rate:
        return []
    rows = []
    tq = engine.t_quantile(confidence, res.dof)
    v = res.params[model.limiting_rate]
    iv = res.names.index(model.limiting_rate)

    def row(name: str, est: float, se: float, unit: str, note: str = "") -> dict[str, Any]:
        return _derived_row(name, est, se, unit, tq,
                            note or ("" if np.isfinite(se) else f"no standard error for {model.limiting_rate}"))

    if not (np.isfinite(e) and e > 0):
        why = "enzyme concentration unknown or not the same in every well of the group" if not np.isfinite(e) \
            else "enzyme concentration is not positive"
        return [row("kcat", np.nan, np.nan, "1/s", f"{NOT_DETERMINED}: {why}")]
    try:
        f1 = _factor(f"({ru})/({eu})", "1/s")
    except Exception as exc:
        return [row("kcat", np.nan, np.nan, "1/s", f"{NOT_DETERMINED}: rate unit {ru!r} and enzyme unit {eu!r} do "
                    f"not give a turnover ({exc}); convert rates to concentration per time first")]
    rows.append(row("kcat", v.value / e * f1, v.stderr / e * f1, "1/s"))
    k = model.michaelis_constant
    if k:
        try:
            f2 = _factor(f"({ru})/(({eu})*({su}))", "1/M/s")
        except Exception:
            return rows
        km = res.params[k]
        ik = res.names.index(k)
        val = v.value / (e * km.value) * f2
        cov = res.covariance
        rel = (v.stderr / v.value) ** 2 + (km.stderr / km.value) ** 2 - 2 * cov[iv, ik] / (v.value * km.value)
        rows.append(row("kcat/Km", val, abs(val) * np.sqrt(max(rel, 0.0)), "1/(M·s)"))
    return rows


def _group_enzyme(e: np.ndarray) -> float:
    e = e[np.isfinite(e)]
    if e.size == 0 or not np.allclose(e, e[0], rtol=1e-9, atol=0):
        return float("nan")
    return float(e[0])


def run_fit(settings: Mapping[str, Any], data: StageInput) -> StageOutput:
    """The fit step's work; ``settings`` are the stage's parameters with every default filled in."""
    cfg = dict(settings)
    rates = data.artifacts.get("rates")
    if rates is None or not hasattr(rates, "frame"):
        raise FitError("the fit stage found no 'rates' table",
                       hint="Put a rates step (and a convert step) before the fit step in the recipe.")
    frame: pd.DataFrame = rates.frame
    units = dict(rates.units)
    models = _models(list(cfg["models"]), data.registry)
    xcol, icol, gcol = cfg["x"], cfg["inhibitor"], cfg["group_by"]
    columns = {"substrate": xcol, "inhibitor": icol, "enzyme": "enzyme"}
    needed = {"rate"} | {columns[v] for m in models for v in m.variables}
    missing = sorted(c for c in needed if c not in frame.columns)
    if missing:
        raise FitError(f"the rates table has no column {', '.join(map(repr, missing))} needed by the models "
                       f"{', '.join(m.name for m in models)}",
                       hint="Name the column with fit.x / fit.inhibitor, or add it to the plate layout.")
    ru, su, iu, eu = (units.get(c, "") for c in ("rate", xcol, icol, "enzyme"))
    role_unit = {"rate": ru, "substrate": su, "inhibitor": iu, "enzyme": eu, "": ""}

    rate = frame["rate"].to_numpy(float)
    rate_se = frame["rate_stderr"].to_numpy(float) if "rate_stderr" in frame.columns else np.full(len(frame), np.nan)
    use = np.isfinite(rate)
    if "role" in frame.columns:
        use &= frame["role"].astype(str).to_numpy() == "sample"
    if "flags" in frame.columns:
        # by name, so that flags a lab's own rate plugin sets (names we do not know) never break the fit
        excluded = set(cfg["exclude_flags"])
        codes, texts = pd.factorize(frame["flags"].fillna("").astype(str))  # each distinct text looked at once
        hit = np.array([bool(excluded & set(filter(None, str(t).split(";")))) for t in texts] + [False], bool)
        use &= ~hit[codes]
    if gcol in frame.columns:
        groups = frame[gcol].fillna("").astype(str).to_numpy()  # a missing group is the group ""
    else:
        data.warn(f"fit: the rates table has no column {gcol!r}; all wells are fitted as one group 'all'")
        groups = np.full(len(frame), "all", dtype=object)
    var = {v: frame[c].to_numpy(float) if c in frame.columns else np.full(len(frame), np.nan)
           for v, c in columns.items()}
    plate = frame["plate"].astype(str).to_numpy() if "plate" in frame.columns else np.full(len(frame), "")
    well = frame["well"].astype(str).to_numpy() if "well" in frame.columns else np.full(len(frame), "")
    no_inhibitor = ~np.isfinite(var["inhibitor"]) | (var["inhibitor"] == 0)
    blank_sets = blank_share = shape_pools = shape_load = None
    if cfg["shared_blanks"] and {"blanks", "blank_share"} <= set(frame.columns):
        blank_sets = blank_set_ids(plate, frame["blanks"].fillna("").astype(str).to_numpy())
        blank_share = frame["blank_share"].to_numpy(float)
    if cfg["shared_blanks"] and {"shape_pool", "shape_load_1", "shape_load_2"} <= set(frame.columns):
        shape_pools = shared.shape_pools(plate, frame["shape_pool"].to_numpy(float))
        shape_load = frame[["shape_load_1", "shape_load_2"]].to_numpy(float)
        if blank_sets is None:
            blank_sets, blank_share = np.full(len(frame), -1), np.zeros(len(frame))
    group_names = _selected_groups(sorted(set(groups[use])), groups, use, var["inhibitor"], cfg["select"], data.warn)
    skipped: dict[str, list[str]] = {}  # reason -> "model on group" that cannot apply
    conf = float(cfg["confidence"])

    fits: dict[tuple[str, str], engine.FitResult] = {}
    point_sets: dict[tuple[str, str], tuple[int, ...]] = {}
    sigmas: dict[tuple[str, str], np.ndarray | None] = {}
    extra_notes: dict[tuple[str, str], str] = {}
    xvars: dict[str, dict[str, np.ndarray]] = {}
    for model in models:
        xv = {v: var[v] for v in model.variables}
        xvars[model.name] = xv
        if "enzyme" in model.variables and "inhibitor" in model.variables and (eu or iu):
            try:
                xv["enzyme"] = var["enzyme"] * pu.factor(eu, iu)
            except Exception as exc:
                raise FitError(f"model {model.name}: the enzyme unit {eu!r} cannot be converted to the inhibitor "
                               f"unit {iu!r} ({exc})", hint="Give enzyme and inhibitor as concentrations.") from None
        ok = use & np.all([np.isfinite(a) for a in xv.values()], axis=0)
        if "inhibitor" not in model.variables:
            ok &= no_inhibitor
        fixed = {k: float(v) for k, v in cfg["fixed"].get(model.name, {}).items()}
        user_bounds = cfg["bounds"].get(model.name, {})
        bounds = {**model.bounds, **{k: (float(v[0]), float(v[1])) for k, v in user_bounds.items()}}
        starts = cfg["start"].get(model.name, {})
        for k in [*fixed, *bounds, *starts]:
            if k not in model.params:
                new = OLD_PARAMETERS.get(model.name, {}).get(k)
                raise FitError(f"fit: model {model.name} has no parameter {k!r}"
                               + (f" (it is now called {new!r})" if new else ""),
                               hint=f"Its parameters are {', '.join(model.params)}.")
        n_free = len(model.params) - len(fixed)
        todo: list[tuple[str, np.ndarray]] = []
        for g in group_names:
            idx = np.flatnonzero(ok & (groups == g))
            key = (g, model.name)
            why = _cannot_apply(model, xv, idx, var["inhibitor"][use & (groups == g)])
            if why:
                skipped.setdefault(why, []).append(f"{model.name} on {g}")
                continue
            point_sets[key] = tuple(idx)
            y = rate[idx]
            levels = np.unique(np.stack([xv[v][idx] for v in model.variables], axis=1), axis=0) if idx.size else []
            reason = ""
            if idx.size == 0:
                reason = f"no usable wells with the columns {', '.join(columns[v] for v in model.variables)}"
            elif len(levels) < n_free + 1:
                reason = (f"too few {'/'.join(model.variables)} levels: {model.name} has {n_free} free parameters "
                          f"and needs at least {n_free + 1} distinct levels, the group has {len(levels)}")
            elif "inhibitor" in model.variables and np.unique(xv["inhibitor"][idx]).size < 2:
                reason = "needs at least two inhibitor concentrations"
            elif np.all(y <= 0):
                reason = "all rates are zero or negative: no activity to fit"
            if reason:
                fits[key] = _failed(model, idx.size, reason)
                data.warn(f"fit: group {g}, {model.name}: {reason}")
                continue
            sig, note = _sigma(cfg["weighting"], y, np.unique(
                np.stack([xv[v][idx] for v in model.variables], axis=1), axis=0, return_inverse=True)[1],
                rate_se[idx], float(cfg["rate_error_share"]))
            if note:
                extra_notes[key] = note
                data.warn(f"fit: group {g}, {model.name}: {note}")
            sigmas[key] = sig
            todo.append((g, idx))
        if not todo:
            continue
        n = max(len(idx) for _, idx in todo)
        shape = (len(todo), n)
        ys, mask, sg = np.zeros(shape), np.zeros(shape, bool), np.ones(shape)
        xs = {v: np.zeros(shape) for v in model.variables}
        p0 = np.zeros((len(todo), len(model.params)))
        for r, (g, idx) in enumerate(todo):
            m = idx.size
            ys[r, :m], mask[r, :m] = rate[idx], True
            for v in model.variables:
                xs[v][r, :m] = xv[v][idx]
            guess = model.start({v: xv[v][idx] for v in model.variables}, rate[idx])
            p0[r] = [starts.get(k, guess[j]) for j, k in enumerate(model.params)]
            if sigmas[(g, model.name)] is not None:
                sg[r, :m] = sigmas[(g, model.name)]
        pu_units = {k: role_unit.get(rl, "") for k, rl in model.units.items()}
        use_sigma = None if cfg["weighting"] == "none" else sg
        results = engine.fit_batch(model.evaluate, model.jacobian, xs, ys, mask, p0, model.params,
                                   sigma=use_sigma, fixed=fixed, bounds=bounds, confidence=conf, units=pu_units)
        if cfg["profile"]:
            results = _with_profiles(model, results, xs, ys, mask, use_sigma, bounds, conf)
        for (g, idx), res in zip(todo, results, strict=True):
            key = (g, model.name)
            xg = {v: xv[v][idx] for v in model.variables}
            if blank_sets is not None and cfg["weighting"] == "rate-error" and sigmas[key] is not None:
                res, shared_note = _shared_blanks(model, res, xg, rate[idx], sigmas[key], rate_se[idx],
                                                  blank_sets[idx], blank_share[idx], conf,
                                                  None if shape_pools is None else shape_pools[idx],
                                                  None if shape_load is None else shape_load[idx])
                extra_notes[key] = "; ".join(filter(None, [extra_notes.get(key, ""), shared_note]))
            if not res.success:
                data.warn(f"fit: group {g}, {model.name}: did not converge ({res.message})")
            problem = _saturation_problem(model, res, xg["substrate"]) if "substrate" in xg else ""
            if problem:
                data.warn(f"fit: group {g}, {model.name}: Vmax and Km not determined (no saturation)")
                extra_notes[key] = problem
            fits[key] = res

    if skipped:  # one line for the step, not a table of NaN per model and group
        data.warn("fit: not fitted where the model cannot apply: " + "; ".join(
            f"{', '.join(pairs)} ({why})" for why, pairs in skipped.items()))
    output = _tables(models, fits, point_sets, extra_notes, cfg, xvars, var, rate, groups, plate, well, use,
                   no_inhibitor, role_unit)
    _note_left_out(output, frame, groups, use, plate, well)
    output.artifacts = routes.with_route(output.artifacts, "rates")
    return output


def _shared_blanks(model: Model, res: engine.FitResult, xg: Mapping[str, np.ndarray], y: np.ndarray,
                   sigma: np.ndarray, se: np.ndarray, sets: np.ndarray, share: np.ndarray,
                   confidence: float, pools: np.ndarray | None = None,
                   load: np.ndarray | None = None) -> tuple[engine.FitResult, str]:
    """One group's fit widened for the errors its wells share through common blanks and plate shapes
    (:func:`vzero.plugins.fit.shared.adjust`): each rate's share of its weighting variance from its blank is
    ``blank_share · SE_own² / σ²``, ``SE_own²`` its SE² less the shape's part ``(rate · |load|)²``, and its
    loadings on the shape's factors in units of its σ are ``rate · load / σ``. Returns the result and its
    note ('' where unchanged)."""
    if not res.errorbars:
        return res, ""
    p = list(np.asarray(res.values, float))
    resid = y - np.broadcast_to(model.evaluate(p, xg), y.shape)
    jac = np.stack([np.broadcast_to(c, y.shape) for c in model.jacobian(p, xg)], axis=1)
    u = None
    own = se**2
    if load is not None:
        u = np.nan_to_num(y[:, None] * load / sigma[:, None], nan=0.0)
        own = np.fmax(se**2 - np.sum(np.nan_to_num(y[:, None] * load) ** 2, axis=1), 0.0)
    with np.errstate(invalid="ignore"):
        a = np.nan_to_num(share * own / sigma**2, nan=0.0)
    return shared.adjust(res, jac, resid, sigma, sets, a, confidence, pools, u)


def _selected_groups(names: list[str], groups: np.ndarray, use: np.ndarray, inhibitor: np.ndarray,
                     select: Mapping[str, Any], warn: Any) -> list[str]:
    """The groups this fit step fits (``select``: ``groups`` names or glob patterns, ``inhibitor`` whether the
    group must have an inhibitor series); a selection that matches no group is said in one warning."""
    if not select:
        return names
    out = list(names)
    pats = select.get("groups")
    if pats is not None:
        pats = [pats] if isinstance(pats, str) else list(pats)
        out = [g for g in out if any(fnmatch.fnmatchcase(g, p) for p in pats)]
    if "inhibitor" in select:
        want = bool(select["inhibitor"])
        out = [g for g in out if _has_series(inhibitor[use & (groups == g)]) == want]
    if not out:
        warn(f"fit: select {dict(select)} matches none of the groups ({', '.join(names) or 'none'}); "
             f"this fit step fits nothing")
    return out


def _has_series(values: np.ndarray) -> bool:
    """Whether a group's wells hold at least two distinct finite levels (a titration series, zero included)."""
    return np.unique(values[np.isfinite(values)]).size >= 2


def _cannot_apply(model: Model, xv: Mapping[str, np.ndarray], idx: np.ndarray, inhibitor: np.ndarray) -> str:
    """Why ``model`` cannot apply to a group at all (no series of a variable it needs), or ''.

    ``idx`` are the wells the model would use (a model without inhibitor uses the wells without inhibitor),
    ``inhibitor`` the group's inhibitor levels. Too few levels of a series the group does have is not this:
    that stays a failed fit with its reason.
    """
    if "inhibitor" in model.variables and not _has_series(inhibitor):
        return "no inhibitor series"
    if "substrate" in model.variables and not _has_series(xv["substrate"][idx]):
        return "no substrate series" + ("" if "inhibitor" in model.variables else " without inhibitor")
    return ""


def _note_left_out(output: StageOutput, frame: pd.DataFrame, groups: np.ndarray, use: np.ndarray,
                   plate: np.ndarray, well: np.ndarray) -> None:
    """Say in each fitted row which of the group's sample wells were left out and why (recipe exclusions
    and excluding flags), so the fits table itself shows what an exclusion changed."""
    fits = output.artifacts.get("fits")
    if fits is None or not len(fits.frame) or "flags" not in frame.columns:
        return
    sample = frame["role"].astype(str).to_numpy() == "sample" if "role" in frame.columns else np.ones(len(frame), bool)
    flags = frame["flags"].fillna("").astype(str).to_numpy()
    notes: dict[str, str] = {}
    for g in np.unique(groups):
        out = np.flatnonzero(sample & (groups == g) & ~use)
        if out.size == 0:
            continue
        where = [f"{plate[i]} {well[i]}".strip() for i in out]
        by_recipe = [w for w, i in zip(where, out, strict=True) if "excluded" in flags[i].split(";")]
        parts = []
        if by_recipe:
            parts.append(f"{len(by_recipe)} excluded by the recipe ({', '.join(by_recipe[:12])}"
                         f"{', ...' if len(by_recipe) > 12 else ''})")
        unmodelled = [w for w, i in zip(where, out, strict=True)
                      if "unmodelled" in flags[i].split(";") and "excluded" not in flags[i].split(";")]
        if unmodelled:
            parts.append(f"{len(unmodelled)} with a lag or decay the rate method does not model "
                         f"({', '.join(unmodelled[:12])}{', ...' if len(unmodelled) > 12 else ''}; "
                         "use the model-choice or lag-decay rates method to analyse them)")
        others = len(out) - len(by_recipe) - len(unmodelled)
        if others:
            parts.append(f"{others} flagged or without a rate (see rates.csv)")
        notes[str(g)] = "wells left out: " + "; ".join(parts)
    if notes:
        table = fits.frame.copy()
        extra = table["group"].astype(str).map(notes).fillna("")
        table["note"] = ["; ".join(filter(None, [str(a), b])) for a, b in zip(table["note"].fillna(""), extra,
                                                                              strict=True)]
        output.artifacts["fits"] = fits.with_frame(table)


def comparison_rows(models: list[Model], fits: Mapping[tuple[str, str], engine.FitResult],
                    point_sets: Mapping[tuple[str, str], tuple[Any, ...]], by_name: Mapping[str, Model],
                    alpha: float) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """The model-comparison and cooperativity tables' rows of every group (shared by both fit routes).

    Models are compared only with models fitted to the same points: ``point_sets`` names each fit's points
    (well rows, or well ids for the curve route); each distinct set is a numbered comparison set."""
    comp_rows: list[dict[str, Any]] = []
    coop_rows: list[dict[str, Any]] = []
    nests = {m.name: m.nests for m in models}
    for g in sorted({k[0] for k in fits}):
        sets: dict[tuple[Any, ...], dict[str, engine.FitResult]] = {}
        for (gg, mname), res in fits.items():
            if gg == g:
                sets.setdefault(point_sets.get((gg, mname), ()), {})[mname] = res
        for k, (_, members) in enumerate(sorted(sets.items(), key=lambda kv: sorted(kv[1]))):
            rows, _, _ = compare.compare_set(members, nests, alpha)
            comp_rows += [{"group": g, "comparison_set": k + 1, **r} for r in rows]
        coop_rows += cooperativity_rows(g, models, fits, by_name, alpha)
    return comp_rows, coop_rows


def cooperativity_rows(group: str, models: list[Model], fits: Mapping[tuple[str, str], engine.FitResult],
                       by_name: Mapping[str, Model], alpha: float) -> list[dict[str, Any]]:
    """The cooperativity table's rows for one group: one per fitted model that declares a cooperativity
    coefficient, tested against the nested model where that coefficient is 1 (shared by both fit routes)."""
    rows: list[dict[str, Any]] = []
    for model in models:
        coop = fits.get((group, model.name))
        if not model.cooperativity or coop is None:
            continue
        ref_name = model.cooperativity_reference()
        ref = fits.get((group, ref_name)) if ref_name else None
        t = compare.f_test(ref, coop, (ref_name, model.name)) if ref is not None else None
        h = coop.params[model.cooperativity]
        ci = (h.ci_low, h.ci_high, h.ci_method) if coop.success else (np.nan, np.nan, "")
        ref_title = by_name[ref_name].display if ref_name in by_name else ref_name or "the simpler model"
        verdict, reason = compare.cooperativity(coop, ci, t.p if t else np.nan, alpha,
                                                names=(model.display, ref_title, model.cooperativity))
        rows.append({"group": group, "model": model.name, "h": h.value, "stderr": h.stderr, "ci_low": ci[0],
                     "ci_high": ci[1], "ci_method": ci[2], "F": t.f if t else np.nan,
                     "p_vs_michaelis_menten": t.p if t else np.nan, "verdict": verdict, "reason": reason})
    return rows


def _with_comparison(fits: pd.DataFrame, comp_rows: list[dict[str, Any]]) -> pd.DataFrame:
    """The model comparison on every row of the fits table: the model's AICc difference from the best and
    Akaike weight, the group's selected model and whether this row's model is it (the full comparison, with
    F-tests and the reason for the selection, is the model_comparison table)."""
    if not comp_rows or fits.empty:
        return fits.assign(delta_aicc=np.nan, akaike_weight=np.nan, selected_model="", selected=False)
    by_key: dict[tuple[str, str], dict[str, Any]] = {}
    for r in comp_rows:  # the first row of each (group, model), as the comparison lists them
        by_key.setdefault((str(r["group"]), str(r["model"])), r)
    found = [by_key.get(k, {}) for k in zip(fits["group"].astype(str), fits["model"].astype(str), strict=True)]
    chosen = ["" if pd.isna(r.get("selected_model")) else str(r.get("selected_model")) for r in found]
    return fits.assign(
        delta_aicc=np.array([r.get("delta_aicc", np.nan) for r in found], float),
        akaike_weight=np.array([r.get("akaike_weight", np.nan) for r in found], float),
        selected_model=chosen,
        selected=fits["model"].astype(str).to_numpy() == np.array(chosen, dtype=object),
    )


def fit_row_head(group: str, model: str, res: Any) -> dict[str, Any]:
    """The columns every fits-table row of one (group, model) fit shares, whichever route fitted it."""
    return {"group": group, "model": model, "n_points": res.n_points, "rss": res.rss, "dof": res.dof,
            "r_squared": res.r_squared, "aicc": res.aicc, "success": res.success, "message": res.message,
            "errorbars": res.errorbars}


def _tables(models: list[Model], fits: dict[tuple[str, str], engine.FitResult],
            point_sets: dict[tuple[str, str], tuple[int, ...]], extra_notes: dict[tuple[str, str], str],
            cfg: Mapping[str, Any], xvars: dict[str, dict[str, np.ndarray]], var: dict[str, np.ndarray],
            rate: np.ndarray,
            groups: np.ndarray, plate: np.ndarray, well: np.ndarray, use: np.ndarray, no_inhibitor: np.ndarray,
            role_unit: dict[str, str]) -> StageOutput:
    conf = float(cfg["confidence"])
    ru, su, iu, eu = (role_unit[k] for k in ("rate", "substrate", "inhibitor", "enzyme"))
    by_name = {m.name: m for m in models}
    fit_rows: list[dict[str, Any]] = []
    corr_rows: list[dict[str, Any]] = []
    curve_blocks: list[dict[str, np.ndarray]] = []
    for (g, mname), res in fits.items():
        model = by_name[mname]
        common = fit_row_head(g, mname, res)
        problem = extra_notes.get((g, mname), "")
        saturation = problem.startswith("the highest substrate level")
        for name in model.params:
            p = res.params[name]
            row = {"parameter": name, "estimate": p.value, "stderr": p.stderr, "ci_low": p.ci_low,
                   "ci_high": p.ci_high, "ci_method": p.ci_method, "unit": p.unit, "fixed": p.fixed,
                   "note": "; ".join(filter(None, [p.note, problem]))}
            if saturation and name in (model.limiting_rate, model.half_saturation):
                row.update(estimate=np.nan, stderr=np.nan, ci_low=np.nan, ci_high=np.nan, ci_method="",
                           note=f"{NOT_DETERMINED}: {problem}")
            fit_rows.append({**common, **row})
        idx = np.array(point_sets[(g, mname)], int)
        if res.success and not saturation and cfg["enzyme"]:
            for row in _derived(model, res, _group_enzyme(var["enzyme"][idx]), eu, ru, su, conf):
                fit_rows.append({**common, **row})
        if res.success:
            for row in _ki_rows(model, res, var["substrate"][idx], cfg, iu, su, conf):
                fit_rows.append({**common, **row})
        if res.success:
            corr_rows += diagnostics.correlations(g, mname, res)
            idx = np.array(point_sets[(g, mname)], int)
            curve_blocks += _curves(model, res, {**var, **xvars[mname]}, idx, g, conf, role_unit)

    comp_rows, coop_rows = comparison_rows(models, fits, point_sets, by_name, float(cfg["alpha"]))

    diag_blocks: list[dict[str, np.ndarray]] = []
    for g in sorted(set(groups[use])):
        idx = np.flatnonzero(use & (groups == g) & no_inhibitor & np.isfinite(var["substrate"]))
        if idx.size == 0:
            continue
        vmax = np.nan
        for model in _vmax_sources(models):
            res = fits.get((g, model.name))
            if res is not None and res.success and np.isfinite(res.value(model.limiting_rate)):
                vmax = res.value(model.limiting_rate)
                break
        diag_blocks.append(diagnostics.transforms(g, var["substrate"][idx], rate[idx], vmax,
                                            list(zip(plate[idx], well[idx], strict=True)), su or "1", ru or "1"))

    fit_cols = ["group", "model", "parameter", "estimate", "stderr", "ci_low", "ci_high", "ci_method", "unit",
                "fixed", "n_points", "rss", "dof", "r_squared", "aicc", "success", "message", "errorbars", "note"]
    rss_unit = f"({ru})^2" if ru and cfg["weighting"] == "none" else ""
    meta = {"research_use": "Research use only: check results against the lab's validated procedures.",
            "ki_mechanism": str(cfg["mechanism"])}
    out = {
        "fits": Table(_with_comparison(settle(pd.DataFrame(fit_rows, columns=fit_cols), by_name), comp_rows),
                      {"rss": rss_unit} if rss_unit else {}, meta),
        "model_comparison": Table(pd.DataFrame(comp_rows), {"rss": rss_unit} if rss_unit else {}, meta),
        "cooperativity": Table(pd.DataFrame(coop_rows, columns=[
            "group", "model", "h", "stderr", "ci_low", "ci_high", "ci_method", "F", "p_vs_michaelis_menten",
            "verdict", "reason"]), {}, meta),
        "diagnostics": Table(diagnostics.stack(diag_blocks, diagnostics.TRANSFORM_COLUMNS), {}, meta),
        "curves": Table(diagnostics.stack(curve_blocks, CURVE_COLUMNS),
            {k: ru for k in ("y", "lower", "upper")} | ({"inhibitor": iu} if iu else {}), meta),
        "correlations": Table(pd.DataFrame(corr_rows, columns=["group", "model", "parameter_a", "parameter_b", "r"]),
                              {}, meta),
    }
    return StageOutput(artifacts=out)


def _vmax_sources(models: list[Model]) -> list[Model]:
    """Substrate-only models with a limiting rate, in the order their Vmax is taken for the linear transforms
    of a group: models with a cooperativity coefficient first (their Vmax also fits a sigmoid curve), then
    the others in the recipe's order."""
    usable = [m for m in models if m.limiting_rate and m.variables == ("substrate",)]
    return sorted(usable, key=lambda m: not m.cooperativity)


CURVE_COLUMNS = ["group", "model", "variable", "inhibitor", "x", "y", "lower", "upper", "x_unit"]
"""Columns of the curves table (see :func:`_curves`)."""


def _curves(model: Model, res: engine.FitResult, var: dict[str, np.ndarray], idx: np.ndarray, g: str,
            conf: float, role_unit: dict[str, str]) -> list[dict[str, np.ndarray]]:
    """Fitted curve and delta-method band on a grid: against substrate (one curve per inhibitor level for
    inhibitor models), or against inhibitor for titration models. Blocks of :data:`CURVE_COLUMNS`."""

    def block(variable: str, inhibitor: np.ndarray, xgrid: np.ndarray, x: dict[str, np.ndarray]) -> dict[str, Any]:
        y, lo, hi = diagnostics.band(model, res, x, conf)
        n = len(xgrid)
        return {"group": np.full(n, g, dtype=object), "model": np.full(n, model.name, dtype=object),
                "variable": np.full(n, variable, dtype=object), "inhibitor": np.asarray(inhibitor, float),
                "x": np.asarray(xgrid, float), "y": np.asarray(y, float), "lower": np.asarray(lo, float),
                "upper": np.asarray(hi, float), "x_unit": np.full(n, role_unit[variable], dtype=object)}

    if "substrate" in model.variables:
        xgrid = diagnostics.grid(var["substrate"][idx])
        levels = np.unique(var["inhibitor"][idx]) if "inhibitor" in model.variables else [np.nan]
        return [block("substrate", np.full(len(xgrid), float(level)), xgrid,
                      {"substrate": xgrid, "inhibitor": np.full_like(xgrid, level)}) for level in levels]
    xgrid = diagnostics.grid(var["inhibitor"][idx])
    e = var["enzyme"][idx]
    x = {"inhibitor": xgrid, "enzyme": np.full_like(xgrid, np.nanmedian(e) if np.any(np.isfinite(e)) else 0)}
    return [block("inhibitor", xgrid, xgrid, x)]
