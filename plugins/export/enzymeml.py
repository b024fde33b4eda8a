"""EnzymeML v2 (JSON) export: time courses, initial conditions, the fitted models and their parameters.

What goes where (the EnzymeML v2 JSON schema; docs/exports.md has the full mapping):

* ``vessels``: one microplate well with the volume from ``assay.volume`` (the schema requires a volume; when
  the recipe gives none it is written as 0 and the vessel's name says "volume not given").
* ``proteins``: the enzyme (``assay.enzyme``: name, id, ec_number, organism, sequence).
* ``small_molecules``: the substrate, the product (when named or measured) and the inhibitor (when the
  layout has one).
* ``measurements``: one per sample well: temperature and pH from ``assay``; the substrate, enzyme and
  inhibitor concentrations of the well as ``prepared``/``initial`` amounts; the reads as imported (usable
  reads only) on the species named by ``assay.measured`` (default ``product``), ``data_type`` absorbance or
  fluorescence from the signal unit.
* ``equations`` and ``parameters``: each fitted model of each group as a rate law, with parameter values,
  standard errors and units (a curve fit with product inhibition writes its law with the half-saturation
  constant times (1 + P/Kp), P the product). Confidence intervals have no place in the schema; they stay in
  the CSV/xlsx.
* the integrated curves of a ``curves`` fit (the ``progress_curves`` table): one more measurement per well
  and fitted model, its product data the fitted curve at every read time, in concentration, on the scale of
  the reads converted to concentration (the well's fitted baseline included), marked ``is_simulated`` and
  ``data_type: concentration``, with the well's initial amounts. The schema has no field for residuals:
  they stay in run.h5 (the step's ``curve_fits``) and progress_curves.csv.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
from vzero.data import steps_apart
from vzero.plugins.export.tables import RESEARCH_NOTE

SIGNAL_TYPES = {"AU": "absorbance", "mAU": "absorbance", "absorbance_unit": "absorbance", "RFU": "fluorescence"}
SYMBOLS = {"S": "substrate", "I": "inhibitor", "E": "enzyme", "P": "product"}
BASE_KINDS = (("[substance]", "mole", None), ("[mass]", "gram", "g"), ("[time]", "second", "s"),
              ("[temperature]", "kelvin", "K"))


def _ident(text: str) -> str:
    """An identifier from free text: letters, digits and underscores, not starting with a digit."""
    out = re.sub(r"\W+", "_", str(text)).strip("_") or "x"
    return out if not out[0].isdigit() else f"_{out}"


def unit_definition(text: str) -> dict[str, Any]:
    """A UnitDefinition (SI base units with exponent, multiplier and scale) for a unit like ``uM/min``.

    Concentrations are written per litre (mole·litre⁻¹), as EnzymeML documents usually are; plate-reader
    signal units (AU, RFU) and empty units are dimensionless. The overall factor goes into the first base
    unit's ``scale`` when it is a power of ten, otherwise into its ``multiplier``.
    """
    from vzero import units

    raw = str(text or "").strip()
    name = raw or "dimensionless"
    if raw in ("", "1", "-") or raw in SIGNAL_TYPES or raw in ("RLU",):
        return {"id": _ident(f"u_{name}"), "name": name, "base_units": [{"kind": "dimensionless", "exponent": 1}]}
    if raw in ("degC", "°C", "celsius"):
        return {"id": "u_degC", "name": "°C", "base_units": [{"kind": "celsius", "exponent": 1}]}
    ureg = units.registry()
    q = ureg.Quantity(1.0, raw.replace("·", "*").replace("µ", "u"))
    dims = dict(q.dimensionality)
    parts: list[tuple[str, int]] = []
    target = ureg.Quantity(1.0, "")
    length = int(dims.pop("[length]", 0))
    for dim, kind, symbol in BASE_KINDS:
        e = int(dims.pop(dim, 0))
        if e:
            parts.append((kind, e))
            target = target * ureg.Quantity(1.0, symbol or "mol") ** e
    if length:
        if length % 3 == 0:
            parts.append(("litre", length // 3))
            target = target * ureg.Quantity(1.0, "L") ** (length // 3)
        else:
            parts.append(("metre", length))
            target = target * ureg.Quantity(1.0, "m") ** length
    if dims or not parts:
        return {"id": _ident(f"u_{name}"), "name": name, "base_units": [{"kind": "dimensionless", "exponent": 1}]}
    factor = float(q.to(target.units).magnitude)
    base = [{"kind": k, "exponent": e, "multiplier": 1.0, "scale": 0.0} for k, e in parts]
    if factor != 1.0:
        first = base[0]
        per = factor ** (1.0 / int(first["exponent"]))  # (multiplier·10^scale·kind)^exponent carries the factor
        scale = round(math.log10(per))
        if math.isclose(per, 10.0**scale, rel_tol=1e-12):
            first["scale"] = float(scale)
        else:
            first["multiplier"] = per
    return {"id": _ident(f"u_{name}"), "name": name, "base_units": base}


def _equation(text: str, ids: Mapping[str, str]) -> str:
    """Right-hand side of a model equation in plain syntax, with parameter and species symbols replaced."""
    rhs = text.split("=", 1)[1].strip() if "=" in text else text
    for a, b in (("·", "*"), ("²", "^2"), ("√", "sqrt"), ("−", "-"), ("→", "->")):
        rhs = rhs.replace(a, b)
    rhs = re.sub(r"(\d)([A-Z])", r"\1*\2", rhs)  # 4EI -> 4*EI
    rhs = re.sub(r"\b([EIS])([EIS])\b", r"\1*\2", rhs)  # EI -> E*I
    for name in sorted(ids, key=len, reverse=True):
        rhs = re.sub(rf"(?<![\w.]){re.escape(name)}(?![\w.])", ids[name], rhs)
    rhs = re.sub(r"(?<=[\w)])(?<!sqrt)\(", "*(", rhs)  # Km(1 + ...) -> Km*(1 + ...)
    return re.sub(r"\)(\w)", r")*\1", rhs)


def _model_equations() -> dict[str, tuple[str, str]]:
    """Equation text and half-saturation constant of every registered fit model, by name (empty when the fit
    plugin is unavailable)."""
    try:
        from vzero.manager import make_manager

        registry = make_manager(autoload=False).registry
        return {e.name: (str(getattr(e.component, "equation", "")), str(getattr(e.component, "half_saturation", "")))
                for e in registry if e.kind == "model"}
    except Exception:  # an export must not fail because a plugin does
        return {}


def _with_product(text: str, half_saturation: str) -> str:
    """A rate law's text with competitive product inhibition: the half-saturation constant times (1 + P/Kp)."""
    if not half_saturation:
        return text
    return re.sub(rf"(?<![\w.]){re.escape(half_saturation)}(?![\w.])", f"{half_saturation}(1 + P/Kp)", text)


def _num(x: Any) -> float | None:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def build_document(head: Mapping[str, Any], results: Mapping[str, Any], traces: Mapping[str, Any]) -> dict[str, Any]:
    """The EnzymeML v2 document (a JSON-ready dict) for one audit file's contents."""
    assay = dict(head.get("assay") or {})
    enzyme = dict(assay.get("enzyme") or {})
    substrate = dict(assay.get("substrate") or {})
    product = dict(assay.get("product") or {})
    rates = results["rates"].frame if "rates" in results else None
    fits = steps_apart(results["fits"].frame) if "fits" in results else None
    measured = str(assay.get("measured", "product"))

    volume_text = assay.get("volume")
    vessel: dict[str, Any] = {"id": "well", "name": "microplate well", "volume": 0.0,
                              "unit": unit_definition("uL"), "constant": True}
    if volume_text:
        from vzero import units

        q = units.quantity(volume_text, like="L", what="assay.volume")
        vessel.update(volume=float(q.m_as("uL")))
    else:
        vessel["name"] = "microplate well (volume not given in the recipe's assay block)"

    protein = {"id": "enzyme", "name": str(enzyme.get("name", "enzyme")), "constant": True, "vessel_id": "well"}
    for src, dst in (("ec_number", "ecnumber"), ("organism", "organism"), ("sequence", "sequence")):
        if enzyme.get(src):
            protein[dst] = str(enzyme[src])
    if enzyme.get("id"):
        protein["references"] = [str(enzyme["id"])]
    molecules = [{"id": "substrate", "name": str(substrate.get("name", "substrate")), "constant": False,
                  "vessel_id": "well"}]
    if product or measured == "product":
        molecules.append({"id": "product", "name": str(product.get("name", "product")), "constant": False,
                          "vessel_id": "well"})
    has_inhibitor = rates is not None and "inhibitor" in rates and rates["inhibitor"].notna().any()
    if has_inhibitor:
        molecules.append({"id": "inhibitor", "name": str((assay.get("inhibitor") or {}).get("name", "inhibitor")),
                          "constant": True, "vessel_id": "well"})
    for m in molecules:
        extra = {"substrate": substrate, "product": product}.get(m["id"], {})
        for key in ("canonical_smiles", "inchi", "inchikey"):
            if extra.get(key):
                m[key] = str(extra[key])

    reaction: dict[str, Any] = {"id": "r1", "name": str(assay.get("reaction", "enzyme-catalysed reaction")),
                                "reversible": False, "reactants": [{"species_id": "substrate", "stoichiometry": 1.0}],
                                "modifiers": [{"species_id": "enzyme", "role": "biocatalyst"}]}
    if any(m["id"] == "product" for m in molecules):
        reaction["products"] = [{"species_id": "product", "stoichiometry": 1.0}]
    if has_inhibitor:
        reaction["modifiers"].append({"species_id": "inhibitor", "role": "inhibitor"})

    doc: dict[str, Any] = {
        "name": str(head.get("recipe_name") or "vzero run"),
        "version": "2.0",
        "description": (f"{RESEARCH_NOTE} Exported by vzero {head.get('vzero_version', '')} from run "
                        f"{head.get('run_id', '')} (recipe sha256 {head.get('recipe_sha256', '')}). "
                        + (f"Buffer: {assay['buffer']}. " if assay.get("buffer") else "")),
        "created": str(head.get("created", "")),
        "creators": [{"given_name": str(c.get("given_name", "")), "family_name": str(c.get("family_name", "")),
                      "mail": str(c.get("mail", ""))} for c in assay.get("creators", []) if isinstance(c, dict)],
        "vessels": [vessel],
        "proteins": [protein],
        "small_molecules": molecules,
        "reactions": [reaction],
        "measurements": _measurements(assay, rates, traces, measured, has_inhibitor),
    }
    curves = results.get("progress_curves")
    if curves is not None and len(curves.frame):
        if not any(m["id"] == "product" for m in molecules):
            molecules.append({"id": "product", "name": str(product.get("name", "product")), "constant": False,
                              "vessel_id": "well"})
            reaction["products"] = [{"species_id": "product", "stoichiometry": 1.0}]
        doc["measurements"] += _simulated(curves, has_inhibitor)
    equations, parameters = _fits(fits, measured)
    doc["equations"] = equations
    doc["parameters"] = parameters
    return doc


def _celsius(value: Any) -> float | None:
    """The assay temperature in °C (given with any temperature unit: "30 degC", "303.15 K")."""
    if value is None or value == "":
        return None
    from vzero import units

    try:
        return float(units.quantity(str(value), like="degC", what="assay.temperature").m_as("degC"))
    except Exception:  # the recipe check reports a bad temperature; an old file may still hold one
        return None


def _measurements(assay: Mapping[str, Any], rates: Any, traces: Mapping[str, Any], measured: str,
                  has_inhibitor: bool) -> list[dict[str, Any]]:
    if rates is None:
        return []
    temp = _celsius(assay.get("temperature"))
    ph = _num(assay.get("pH"))
    index = {(p, w): (t, i) for p, t in traces.items() for i, w in enumerate(t.well_names)}
    out = []
    for _, row in rates.iterrows():
        if str(row.get("role", "sample")) != "sample":
            continue
        plate, well = str(row.get("plate", "")), str(row["well"])
        m: dict[str, Any] = {"id": _ident(f"m_{plate}_{well}"), "name": f"{plate} {well}",
                             "group_id": str(row.get("group", "")), "species_data": []}
        if temp is not None:
            m["temperature"] = temp
            m["temperature_unit"] = unit_definition("degC")
        if ph is not None and 0 <= ph <= 14:
            m["ph"] = ph
        for species in ("substrate", "enzyme", *(("inhibitor",) if has_inhibitor else ())):
            value = _num(row.get(species))
            if value is None:
                continue
            entry: dict[str, Any] = {"species_id": species, "prepared": value, "initial": value,
                                     "data_unit": unit_definition(str(row.get(f"{species}_unit", "")))}
            if species == measured:
                entry.update(_course(index.get((plate, well))))
            m["species_data"].append(entry)
        if measured not in ("substrate", "enzyme", "inhibitor"):
            m["species_data"].append({"species_id": measured, **_course(index.get((plate, well)))})
        out.append(m)
    return out


def _course(found: Any) -> dict[str, Any]:
    """Reads of one well as imported (usable reads only), as MeasurementData fields."""
    if found is None:
        return {}
    t, i = found
    keep = t.mask[i] & np.isfinite(t.signal[i])
    data = [float(v) for v in t.signal[i][keep]]
    series: dict[str, Any] = {"time": [float(v) for v in t.time[keep]], "time_unit": unit_definition("s"),
                              "data": data, "data_unit": unit_definition(t.signal_unit), "is_simulated": False}
    if data:
        series["initial"] = data[0]
    kind = SIGNAL_TYPES.get(t.signal_unit)
    if kind:
        series["data_type"] = kind
    return series


def _fits(fits: Any, measured: str) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    if fits is None or not len(fits):
        return [], []
    texts = _model_equations()
    equations, parameters = [], []
    fits = fits if "route" in fits.columns else fits.assign(route="rates")
    for (group, model, route), block in fits.groupby(["group", "model", "route"], sort=False):
        # the two fit routes of one run: the progress-curve route's parameters get ids of their own
        tag = "" if route == "rates" else f"_{route}"
        where = "" if route == "rates" else ", from the progress curves"
        ids = {str(p): _ident(f"{p}_{model}_{group}{tag}") for p in block["parameter"]}
        for _, r in block.iterrows():
            p: dict[str, Any] = {"id": ids[str(r["parameter"])],
                                 "name": f"{r['parameter']} ({model}, {group}{where})",
                                 "symbol": ids[str(r["parameter"])], "unit": unit_definition(str(r.get("unit", "")))}
            for key, col in (("value", "estimate"), ("stderr", "stderr")):
                v = _num(r.get(col))
                if v is not None:
                    p[key] = v
            p["constant"] = True
            parameters.append(p)
        text, half = texts.get(str(model).split(" (")[0], ("", ""))  # "hill (06-fit-nls)": one of several steps
        if text and "Kp" in set(block["parameter"].astype(str)):
            text = _with_product(text, half)
        if text:
            equations.append({"species_id": measured, "equation": _equation(text, {**ids, **SYMBOLS}),
                              "equation_type": "rateLaw",
                              "variables": [{"id": v, "name": v, "symbol": v} for v in SYMBOLS.values()
                                            if re.search(rf"\b{v}\b", _equation(text, {**ids, **SYMBOLS}))]})
    return equations, parameters


def _simulated(curves: Any, has_inhibitor: bool) -> list[dict[str, Any]]:
    """The fitted progress curves (``progress_curves`` table) as simulated measurements, one per well and
    model."""
    frame = steps_apart(curves.frame)
    units = dict(curves.units)
    conc = unit_definition(units.get("fitted", ""))
    route = frame["route"].astype(str) if "route" in frame.columns else None
    keys = ["group", "model", "plate", "well"]
    out = []
    for (group, model, plate, well), block in frame.groupby(keys, sort=False):
        block = block.sort_values("time", kind="stable")
        keep = np.isfinite(block["time"].to_numpy(float)) & np.isfinite(block["fitted"].to_numpy(float))
        data = [float(v) for v in block["fitted"].to_numpy(float)[keep]]
        tag = "" if route is None else f"_{route[block.index[0]]}"
        m: dict[str, Any] = {"id": _ident(f"m_{plate}_{well}_{model}{tag}"),
                             "name": f"{plate} {well}: {model} fitted to the progress curves of group {group} "
                                     "(simulated; concentration on the scale of the reads, baseline included)",
                             "group_id": str(group), "species_data": []}
        first = block.iloc[0]
        for species in ("substrate", "enzyme", *(("inhibitor",) if has_inhibitor else ())):
            value = _num(first.get(species))
            if value is not None:
                m["species_data"].append({"species_id": species, "prepared": value, "initial": value,
                                          "data_unit": unit_definition(units.get(species, ""))})
        time = [float(v) for v in block["time"].to_numpy(float)[keep]]
        series: dict[str, Any] = {"species_id": "product", "time": time, "time_unit": unit_definition("s"),
                                  "data": data, "data_unit": conc, "data_type": "concentration",
                                  "is_simulated": True}
        if data:
            series["initial"] = data[0]
        m["species_data"].append(series)
        out.append(m)
    return out


def write_enzymeml(audit: str | Path, target: str | Path) -> None:
    from vzero.audit import reader

    with reader.open_audit(audit) as f:
        doc = build_document(reader.header(f), reader.read_results(f), reader.read_step_traces(f))
    Path(target).write_text(json.dumps(doc, indent=1, ensure_ascii=False, allow_nan=False), "utf-8")
