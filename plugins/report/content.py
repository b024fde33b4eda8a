"""What the report says, as plain data: summary counts, flagged wells, exclusions, parameter tables, model
comparison and the cooperativity verdict in words.

Everything here works on pandas tables and returns lists of dicts or strings for the templates; nothing is
drawn. Each table may be missing (a recipe without a fit step, an older audit file): the functions then
return empty results and the template says what is absent.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd
from vzero.plugins.kinetics import flags

FLAG_TEXT: dict[str, str] = flags.text_by_name()
"""Each quality flag in words, as the report prints it."""

DEFAULT_EXCLUDE = flags.names_of(flags.NOT_FITTED)
"""Flags that keep a well out of the fit when the recipe does not say otherwise (the fit stage's default)."""

SELECTED_COLUMN = "selected_model"
"""The column of the model-comparison table naming each group's selected model (read only through
:func:`selected_model`, so that a rename of the column touches one place)."""


def selected_model(comparison: pd.DataFrame, group: str) -> str:
    """The model the fit stage selected for ``group`` ('' when the comparison table does not say)."""
    if comparison.empty or "group" not in comparison or SELECTED_COLUMN not in comparison:
        return ""
    sub = comparison[comparison["group"].astype(str) == group]
    if not len(sub):
        return ""
    value = sub[SELECTED_COLUMN].iloc[0]
    return "" if value is None or (isinstance(value, float) and math.isnan(value)) else str(value)


def model_titles(models: Mapping[str, Any]) -> dict[str, str]:
    """Each known model's name as printed, from the model objects (their ``title``; a model without one,
    or an object without the attribute, keeps its name)."""
    return {name: str(getattr(m, "title", "") or name) for name, m in models.items()}


def model_title(name: str, titles: Mapping[str, str] | None = None) -> str:
    """A model's name as printed (``hill`` -> ``Hill``, from :func:`model_titles`); unknown names are shown as
    they are."""
    return (titles or {}).get(name, name)


# -- numbers -----------------------------------------------------------------------------------------------


def _finite(x: Any) -> bool:
    try:
        return math.isfinite(float(x))
    except (TypeError, ValueError):
        return False


def num(x: Any, sig: int = 4) -> str:
    """``x`` with ``sig`` significant figures; very large or small values as a × 10^n; '—' when missing."""
    if not _finite(x):
        return "—"
    v = float(x)
    if v == 0:
        return "0"
    e = math.floor(math.log10(abs(v)))
    if -3 <= e < 5:
        decimals = max(sig - 1 - e, 0)
        return f"{v:.{decimals}f}"
    return f"{v / 10**e:.{sig - 1}f} × 10{str(e).translate(_SUPERSCRIPT)}"


def plain(x: Any, sig: int = 3) -> str:
    """A number in running text: ``sig`` significant figures without trailing zeros (``0.05``, ``12.5``,
    ``1200``), a power of ten outside 0.001 to 100 000 (``3.2 × 10⁻⁵``); "not determined" when missing. The
    one formatter for numbers in the report's sentences, beside :func:`p_text` for p-values and
    :func:`estimate_text` for estimates with their error and interval."""
    if not _finite(x):
        return NOT_DETERMINED
    v = float(x)
    if v == 0:
        return "0"
    e = math.floor(math.log10(abs(v)))
    if -3 <= e < 5:
        if e >= sig:  # 20381 to three figures: 20400
            return f"{round(v, sig - 1 - e):.0f}"
        text = f"{v:.{max(sig - 1 - e, 0)}f}"
        return text.rstrip("0").rstrip(".") if "." in text else text
    mantissa = f"{v / 10**e:.{sig - 1}f}".rstrip("0").rstrip(".")
    return f"{mantissa} × 10{str(e).translate(_SUPERSCRIPT)}"


P_FLOOR = 0.001
"""p-values below this are written "p < 0.001" (common practice in reporting)."""


def p_text(p: Any) -> str:
    """A p-value as a scientist writes it: ``p = 0.03``, ``p = 0.24``, ``p < 0.001`` (two significant
    figures above :data:`P_FLOOR`); "p not determined" when missing."""
    if not _finite(p):
        return "p not determined"
    v = float(p)
    return f"p < {P_FLOOR:g}" if v < P_FLOOR else f"p = {plain(v, 2)}"


_P_IN_TEXT = re.compile(r"\bp\s*=\s*([-+]?\d+(?:\.\d+)?(?:[eE][-+]?\d+)?)")
_NUMBER_IN_TEXT = re.compile(r"(?<![\w.\-])([-+]?\d+\.\d+(?:[eE][-+]?\d+)?|\d+[eE][-+]?\d+)(?![\w.])")


def prose(text: str) -> str:
    """A sentence from a stage (a selection reason, a verdict's basis) with its numbers rewritten by the
    report's formatters: each ``p = x`` by :func:`p_text`, every other decimal number by :func:`plain`
    (integers stay as written)."""
    out = _P_IN_TEXT.sub(lambda m: p_text(m.group(1)), str(text))
    return _NUMBER_IN_TEXT.sub(lambda m: plain(m.group(1)), out)


def with_error(value: Any, stderr: Any) -> str:
    """``value ± stderr`` with the error to two significant figures and the value to the same decimal place."""
    if not _finite(value):
        return "—"
    if not _finite(stderr) or float(stderr) <= 0:
        return num(value)
    v, s = float(value), float(stderr)
    e = math.floor(math.log10(abs(v))) if v else math.floor(math.log10(s))
    if not -3 <= e < 5:
        scale = 10.0**e
        return f"({with_error(v / scale, s / scale)}) × 10{str(e).translate(_SUPERSCRIPT)}"
    decimals = max(1 - math.floor(math.log10(s)), 0)
    return f"{v:.{decimals}f} ± {s:.{decimals}f}"


def interval(low: Any, high: Any) -> str:
    """``[low, high]`` or '—' when either end is missing (an open or undetermined interval)."""
    if not (_finite(low) and _finite(high)):
        return "—"
    return f"[{num(low)}, {num(high)}]"


NOT_DETERMINED = "not determined"


def _decimals(stderr: float) -> int:
    """Decimal places that show a standard error to two significant figures (negative: round to tens...)."""
    return 1 - math.floor(math.log10(stderr))


def _fixed(v: float, decimals: int) -> str:
    if decimals >= 0:
        return f"{v:.{decimals}f}"
    return f"{round(v, decimals):.0f}"


def estimate_text(value: Any, stderr: Any, low: Any = None, high: Any = None) -> dict[str, str]:
    """An estimate, its standard error and its interval rounded together, as a scientist writes them: the
    standard error to two significant figures and the estimate and both interval ends to the same decimal
    place (what the error supports). Values far from 1 share one power of ten. Returns ``value`` (``v ± se``),
    ``interval`` (``[lo, hi]``, '' when either end is missing) and ``estimate`` (``v`` alone); a missing
    estimate is "not determined"; an estimate without a usable error keeps three significant figures."""
    if not _finite(value):
        return {"value": NOT_DETERMINED, "interval": "", "estimate": NOT_DETERMINED}
    v = float(value)
    ends = (float(low), float(high)) if _finite(low) and _finite(high) else None
    if not _finite(stderr) or float(stderr) <= 0:
        text = num(v, 3)
        return {"value": text, "estimate": text,
                "interval": f"[{num(ends[0], 3)}, {num(ends[1], 3)}]" if ends else ""}
    s = float(stderr)
    e = math.floor(math.log10(abs(v))) if v else math.floor(math.log10(s))
    scale, power = 1.0, ""
    if not -3 <= e < 5:
        scale, power = 10.0**e, f" × 10{str(e).translate(_SUPERSCRIPT)}"
    d = max(_decimals(s / scale), -12)
    est = _fixed(v / scale, d)
    body = f"{est} ± {_fixed(s / scale, d)}"
    value_text = f"({body}){power}" if power else body
    iv = ""
    if ends:
        iv = f"[{_fixed(ends[0] / scale, d)}, {_fixed(ends[1] / scale, d)}]" + (power if power else "")
    return {"value": value_text, "interval": iv, "estimate": est + power}


# -- recipe -------------------------------------------------------------------------------------------------


def step_settings(recipe: Mapping[str, Any], kind: str) -> dict[str, Any]:
    """The parameters of the last recipe step of ``kind`` as written ({} when there is none)."""
    found: dict[str, Any] = {}
    for step in recipe.get("steps", []) or []:
        if isinstance(step, Mapping) and kind in step and isinstance(step[kind], Mapping):
            found = dict(step[kind])
    return found


def fit_options(recipe: Mapping[str, Any]) -> dict[str, Any]:
    """The fit step's options the report needs, with the fit stage's defaults where the recipe is silent
    (with several fit steps: the last one's, and the models of all of them)."""
    s = step_settings(recipe, "fit")
    every = [dict(step["fit"]) for step in recipe.get("steps", []) or []
             if isinstance(step, Mapping) and isinstance(step.get("fit"), Mapping)]
    return {
        "present": bool(s),
        "exclude_flags": [str(f) for f in s.get("exclude_flags", DEFAULT_EXCLUDE)],
        "confidence": float(s.get("confidence", 0.95)),
        "x": str(s.get("x", "substrate")),
        "inhibitor": str(s.get("inhibitor", "inhibitor")),
        "group_by": str(s.get("group_by", "group")),
        "models": list(dict.fromkeys(str(m) for f in every for m in f.get("models", []) or [])),
    }


def default_models() -> list[str]:
    """The models the built-in fit stage fits when the recipe names none (its own default, so that the two
    never disagree); none when the fit plugin is not installed."""
    try:
        from vzero.plugins.fit.stage import FitStage
    except ImportError:  # the fit plugin is optional for the report
        return []
    return [str(m) for m in FitStage.params["models"].default]


# -- wells ---------------------------------------------------------------------------------------------------


def flag_list(text: Any) -> list[str]:
    """Flag names of one well (``'lag;noisy'`` -> ``['lag', 'noisy']``)."""
    if text is None or (isinstance(text, float) and math.isnan(text)):
        return []
    return [p.strip() for p in str(text).split(";") if p.strip()]


def fit_use(rates: pd.DataFrame, options: Mapping[str, Any],
            models: Mapping[str, Any]) -> tuple[np.ndarray, list[str]]:
    """Which wells the fit stage used and, for each well not used, the reason in words ('' where used).

    The fit stage's rule: a sample well with a finite rate and none of the excluding flags, used by a model
    when it has a value for each of the model's variables, and, for a model without an inhibitor variable,
    no inhibitor. A well counts as used when at least one of the recipe's models uses it. A model the report
    does not know (one not in ``models``, the registry's models by name) is taken to use any well with a
    rate."""
    n = len(rates)
    reasons = [""] * n
    rate = pd.to_numeric(rates.get("rate", pd.Series(np.nan, index=rates.index)), errors="coerce").to_numpy(float)
    roles = rates["role"].astype(str).to_numpy() if "role" in rates else np.full(n, "sample", dtype=object)
    flags = rates["flags"].tolist() if "flags" in rates else [""] * n
    notes = _notes(rates)
    columns = {"substrate": str(options.get("x", "substrate")), "inhibitor": str(options.get("inhibitor", "inhibitor")),
               "enzyme": "enzyme"}

    def values(var: str) -> np.ndarray:
        col = columns.get(var, var)
        return pd.to_numeric(rates[col], errors="coerce").to_numpy(float) if col in rates else np.full(n, np.nan)

    inhibitor = values("inhibitor")
    with_inhibitor = np.isfinite(inhibitor) & (inhibitor != 0)
    names = list(options.get("models") or default_models())
    by_model: list[tuple[str, np.ndarray, str]] = []  # (model, wells it can use, why not, for the others)
    for name in names:
        model = models.get(name)
        if model is None:
            by_model.append((name, np.ones(n, bool), ""))
            continue
        ok = np.ones(n, bool)
        why = np.full(n, "", dtype=object)
        for var in model.variables:
            missing = ~np.isfinite(values(var))
            why[ok & missing] = f"no {columns.get(var, var)} concentration"
            ok &= ~missing
        if "inhibitor" not in model.variables:
            why[ok & with_inhibitor] = "holds inhibitor, and the models fitted use none"
            ok &= ~with_inhibitor
        by_model.append((name, ok, why))
    usable = np.any([ok for _, ok, _ in by_model], axis=0) if by_model else np.ones(n, bool)

    excluding = set(options.get("exclude_flags", DEFAULT_EXCLUDE))
    used = np.zeros(n, dtype=bool)
    for i in range(n):  # a short loop over table rows (text work), not over signal arrays
        hit = [f for f in flag_list(flags[i]) if f in excluding]
        if roles[i] != "sample":
            reasons[i] = f"role {roles[i]!r}: not a sample well, not fitted"
        elif hit:
            reasons[i] = "flag " + ", ".join(hit) + ": " + "; ".join(FLAG_TEXT.get(f, f) for f in hit)
            if notes[i]:
                reasons[i] += f" ({notes[i]})"
        elif not np.isfinite(rate[i]):
            reasons[i] = "no rate"
        elif not usable[i]:
            whys = list(dict.fromkeys(str(w[i]) for _, ok, w in by_model if not ok[i] and str(w[i])))
            reasons[i] = "; ".join(whys) + ": not fitted"
        else:
            used[i] = True
    return used, reasons


def _notes(rates: pd.DataFrame) -> list[str]:
    """The per-well ``note`` column (reasons the recipe gave for exclusions and overrides), '' where none."""
    if "note" not in rates:
        return [""] * len(rates)
    return ["" if v is None or (isinstance(v, float) and math.isnan(v)) else str(v).strip() for v in rates["note"]]


def flagged_rows(rates: pd.DataFrame) -> list[dict[str, str]]:
    """One row per well carrying a flag: plate, well, group, role, the flags and what each means."""
    rows = []
    if "flags" not in rates:
        return rows
    notes = _notes(rates)
    for i, (_, r) in enumerate(rates.iterrows()):
        names = flag_list(r["flags"])
        if names:
            meaning = "; ".join(FLAG_TEXT.get(f, f) for f in names)
            rows.append({
                "plate": str(r.get("plate", "")), "well": str(r.get("well", "")), "group": str(r.get("group", "")),
                "role": str(r.get("role", "")), "flags": ", ".join(n.replace("_", " ") for n in names),
                "meaning": meaning + (f" (recipe: {notes[i]})" if notes[i] else ""),
            })
    return rows


def exclusion_rows(rates: pd.DataFrame, options: Mapping[str, Any], recipe: Mapping[str, Any],
                   models: Mapping[str, Any]) -> dict[str, Any]:
    """Wells kept out of the fit, with reasons.

    Sample wells are listed one by one; wells of other roles (blanks, controls) are summarised per role.
    Exclusions written in the recipe (``exclusions:``) are listed as written, with their reason; so are the
    decisions made on review (``review:``, keep or exclude, from the recipe or a fragment it includes).
    """
    out: dict[str, Any] = {"wells": [], "roles": [], "recipe": [], "review": []}
    for item in recipe.get("review", []) or []:
        if isinstance(item, Mapping):
            out["review"].append({"what": " ".join(str(item.get(k, "?")) for k in ("plate", "well")),
                                  "decision": str(item.get("decision", "?")),
                                  "reason": str(item.get("reason", "(no reason given)"))})
    for item in recipe.get("exclusions", []) or []:
        if isinstance(item, Mapping):
            what = " ".join(str(item[k]) for k in ("plate", "well") if k in item)
            if "time" in item:
                t = item["time"]
                what += f", reads at {t[0]} to {t[1]}" if isinstance(t, list) and len(t) == 2 else f", read at {t}"
            else:
                what += " (whole well)"
            out["recipe"].append({"what": what, "reason": str(item.get("reason", "(no reason given)"))})
        else:
            out["recipe"].append({"what": str(item), "reason": "(no reason given)"})
    if not options.get("present") or rates.empty:
        return out
    used, reasons = fit_use(rates, options, models)
    roles: dict[str, int] = {}
    for i, (_, r) in enumerate(rates.iterrows()):
        if used[i]:
            continue
        role = str(r.get("role", "sample"))
        if role != "sample":
            roles[role] = roles.get(role, 0) + 1
            continue
        out["wells"].append({"plate": str(r.get("plate", "")), "well": str(r.get("well", "")),
                             "group": str(r.get("group", "")), "reason": reasons[i]})
    out["roles"] = [{"role": k, "count": v} for k, v in sorted(roles.items())]
    return out


# -- fits ---------------------------------------------------------------------------------------------------


ROUTE_WORDS = {"rates": "from initial rates", "curves": "from the progress curves"}
"""How the report names the two fit routes (the ``route`` column of the fit tables)."""


def parameter_tables(fits: pd.DataFrame, group: str, titles: Mapping[str, str] | None = None) -> list[dict[str, Any]]:
    """For one group, one block per model: fit statistics and its parameter rows, formatted."""
    blocks = []
    sub = fits[fits["group"].astype(str) == group]
    routes = sub["route"].astype(str) if "route" in sub else pd.Series("", index=sub.index)
    both = routes.nunique() > 1
    # with both routes, each model's two blocks follow each other: the parameters side by side
    pairs = list(dict.fromkeys(zip(sub["model"].astype(str), routes, strict=True)))
    order = {m: i for i, (m, _) in reversed(list(enumerate(pairs)))}
    for model, route in sorted(pairs, key=lambda mr: (order[mr[0]], mr[1] == "curves")):
        m = sub[(sub["model"].astype(str) == model) & (routes == route)]
        first = m.iloc[0]
        rows = []
        for _, r in m.iterrows():
            text = estimate_text(r["estimate"], r["stderr"], r["ci_low"], r["ci_high"])
            rows.append({
                "parameter": str(r["parameter"]), "estimate": text["estimate"], "stderr": num(r["stderr"], 2),
                "value": text["value"], "interval": text["interval"] or "—",
                "method": str(r.get("ci_method", "") or ""), "unit": pretty_unit(str(r.get("unit", "") or "")),
                "fixed": bool(r.get("fixed", False)), "note": plain_models(str(r.get("note", "") or ""), titles),
            })
        blocks.append({
            "model": model,
            "title": model_title(model, titles) + (f" ({ROUTE_WORDS.get(route, route)})" if both else ""),
            "success": bool(first.get("success", True)),
            "message": plain_models(str(first.get("message", "")), titles), "n_points": first.get("n_points", ""),
            "r_squared": num(first.get("r_squared"), 4), "aicc": num(first.get("aicc"), 4),
            "rss": num(first.get("rss"), 4), "dof": first.get("dof", ""), "rows": rows,
        })
    return blocks


def comparison_rows(comparison: pd.DataFrame, group: str,
                    titles: Mapping[str, str] | None = None) -> tuple[list[dict[str, Any]], str]:
    """Model-comparison rows of one group and a sentence naming the selected model and the reason."""
    if comparison.empty or "group" not in comparison:
        return [], ""
    sub = comparison[comparison["group"].astype(str) == group]
    both = "route" in sub and sub["route"].astype(str).nunique() > 1
    rows, sentences = [], []
    for _, r in sub.iterrows():
        rows.append({
            "model": model_title(str(r["model"]), titles)
            + (f" ({ROUTE_WORDS.get(str(r['route']), '')})" if both else ""),
            "n_params": r.get("n_params", ""), "rss": num(r.get("rss")),
            "aicc": num(r.get("aicc")), "delta_aicc": num(r.get("delta_aicc"), 3),
            "weight": num(r.get("akaike_weight"), 3),
            "f_test": (f"against {model_title(str(r['f_test_against']), titles)}: F = {plain(r['F'])}, "
                       f"{p_text(r['p'])}"
                       if str(r.get("f_test_against", "") or "") else ""),
            "selected": str(r.get("selected_model", "")) == str(r["model"]),
        })
    for (_, first) in sub.drop_duplicates(["route", "selected_model"] if both else "selected_model").iterrows():
        pick = str(first.get("selected_model", ""))
        if pick:
            reason = str(first.get("selection_reason", ""))
            if reason.startswith(f"{pick}: "):
                reason = reason[len(pick) + 2:]
            where = f" {ROUTE_WORDS.get(str(first['route']), '')}" if both else ""
            sentences.append(f"Selected model{where}: {model_title(pick, titles)} "
                             f"({prose(plain_models(reason, titles))}).")
    return rows, " ".join(sentences)


def group_kind(model: Any) -> str:
    """The question a group's selected model answers: ``inhibition`` (a model of the inhibitor),
    ``substrate_inhibition`` (a model with a substrate-inhibition constant Ksi) or ``cooperativity``
    (everything else, where the cooperativity verdict is the finding)."""
    if model is None:
        return "cooperativity"
    if "inhibitor" in tuple(getattr(model, "variables", ())):
        return "inhibition"
    if "Ksi" in tuple(getattr(model, "params", ())):
        return "substrate_inhibition"
    return "cooperativity"


def group_lead(fits: pd.DataFrame, group: str, selected: str, models: Mapping[str, Any],
               titles: Mapping[str, str] | None, confidence: float) -> dict[str, Any]:
    """What a group's first lines say, by the question its selected model answers: for an inhibition group
    the mechanism the data support and its constants with intervals; for a substrate inhibition group Km,
    Ksi and the substrate level of the peak rate (S* = √(Km·Ksi), where dv/dS = 0 for the Haldane law); for
    a cooperativity group nothing here (the verdict leads). Returns ``kind``, ``sentence`` and ``items``
    (name, value with error, interval, unit)."""
    model = models.get(selected)
    kind = group_kind(model)
    out: dict[str, Any] = {"kind": kind, "sentence": "", "items": []}
    if not selected or fits.empty or kind == "cooperativity":
        return out
    sub = fits[(fits["group"].astype(str) == group) & (fits["model"].astype(str) == selected)]
    pct = f"{confidence * 100:g} %"
    est: dict[str, float] = {}
    for _, r in sub.iterrows():
        text = estimate_text(r["estimate"], r["stderr"], r["ci_low"], r["ci_high"])
        est[str(r["parameter"])] = float(r["estimate"]) if _finite(r["estimate"]) else math.nan
        wanted = (str(r["parameter"]) != getattr(model, "limiting_rate", "") or kind != "inhibition")
        if wanted:
            out["items"].append({"name": str(r["parameter"]), "value": text["value"],
                                 "interval": text["interval"], "unit": pretty_unit(str(r.get("unit", "") or ""))})
    title = model_title(selected, titles)
    if kind == "inhibition":
        mechanism = re.sub(r"\s*\(.*\)$", "", str(getattr(model, "summary", "") or title))
        out["sentence"] = (f"{group}: of the models fitted, the data support {mechanism} best (model {title}; "
                           f"its constants with {pct} intervals below).")
    else:
        km, ksi = est.get("Km", math.nan), est.get("Ksi", math.nan)
        unit = next((i["unit"] for i in out["items"] if i["name"] == "Km"), "")
        peak = math.sqrt(km * ksi) if km > 0 and ksi > 0 else math.nan
        where = (f"the rate peaks near S* = √(Km·Ksi) = {plain(peak, 2)} {unit}".rstrip()
                 if math.isfinite(peak) else "the substrate level of the peak rate is not determined")
        out["sentence"] = (f"{group}: substrate inhibition (model {title}); {where}, and falls at higher substrate "
                           f"(constants with {pct} intervals below).")
    return out


VERDICT_WORDS = {
    "positive": "positive cooperativity (h > 1)",
    "negative": "negative cooperativity (h < 1)",
    "none": "no cooperativity of practical size (h close to 1: Michaelis–Menten behaviour)",
}


def verdict_sentence(row: Mapping[str, Any], confidence: float, titles: Mapping[str, str] | None = None) -> str:
    """The cooperativity verdict of one group in words, with h and its interval (stated once, rounded with
    h) and the basis of the call."""
    verdict = str(row.get("verdict", ""))
    what = VERDICT_WORDS.get(verdict, "cooperativity is not resolved by these data (neither shown nor ruled out)")
    text = estimate_text(row.get("h"), row.get("stderr"), row.get("ci_low"), row.get("ci_high"))
    method = str(row.get("ci_method", "") or "")
    pct = f"{confidence * 100:g} %"
    model = str(row.get("model", "") or "")  # absent in audit files written before the column existed
    coefficient = f"{model_title(model, titles)} coefficient" if model else "cooperativity coefficient"
    iv = f", {pct} {method} interval {text['interval']}".replace("  ", " ") if text["interval"] else ""
    basis = prose(_without_interval(plain_models(str(row.get("reason", "")), titles)))
    return f"{row.get('group', '')}: {what}. {coefficient} h = {text['value']}{iv}. Basis: {basis}."


def _without_interval(reason: str) -> str:
    """The fit stage's reason with the interval it quotes dropped (the sentence states it once, rounded)."""
    return re.sub(r"\s*\[[^\]]*\]", "", reason)


def plain_models(text: str, titles: Mapping[str, str] | None = None) -> str:
    """Model names in ``text`` as printed (``hill`` -> ``Hill``, from :func:`model_titles`)."""
    for key, title in (titles or {}).items():
        if key == title:
            continue
        text = re.sub(rf"(?<![\w-]){re.escape(key)}(?![\w-])", title, text)
    return text


_SUPERSCRIPT = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")


def pretty_unit(unit: str) -> str:
    """A unit as printed: ``uM/min`` -> ``µM/min`` (the text form keeps the ASCII ``u``), and a quotient of a
    unit by the unit it is divided by simplified: ``(uM/min)/uM`` -> ``1/min``."""
    text = str(unit)
    text = re.sub(r"\((\w+)/(\w+)\)/\1(?![\w/^])", r"1/\2", text)
    return re.sub(r"(?<![A-Za-z])u(?=(M|mol|L|l|g|m|s)\b)", "µ", text)


def summary_counts(rates: pd.DataFrame, used: np.ndarray | None) -> dict[str, Any]:
    """Wells, sample wells, flagged sample wells, sample wells with a rate, wells used in the fit. Flags count
    on sample wells only: a blank, standard or empty well is not a well to review."""
    n = len(rates)
    sample = (rates["role"].astype(str) == "sample").to_numpy() if "role" in rates else np.ones(n, bool)
    flags_col = rates["flags"].tolist() if "flags" in rates else [""] * n
    flagged = sum(1 for f, s in zip(flags_col, sample, strict=True) if s and flag_list(f))
    rate = pd.to_numeric(rates.get("rate", pd.Series(np.nan, index=rates.index)), errors="coerce").to_numpy(float)
    return {"wells": n, "samples": int(sample.sum()), "flagged": flagged,
            "with_rate": int((np.isfinite(rate) & sample).sum()),
            "other": int(n - sample.sum()), "used": int(used.sum()) if used is not None else None}
