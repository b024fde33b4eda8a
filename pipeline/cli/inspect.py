"""A readable summary of an audit file (``vzero inspect``): provenance (versions, hashes, times), inputs, the
steps with timings and warnings, exclusions and overrides, flagged wells, fitted parameters, and which of
the reporting items the STRENDA guidelines ask for are present.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

#: Reporting items the STRENDA guidelines ask authors of enzyme-kinetics data to give (a short selection,
#: written from memory of the Level 1A/1B lists; check the current guidelines before publishing). Each item:
#: (label, where vzero looks for it).
STRENDA_ITEMS: tuple[tuple[str, str], ...] = (
    ("enzyme identity", "assay.enzyme.name"),
    ("enzyme source organism", "assay.enzyme.organism"),
    ("EC number", "assay.enzyme.ec_number"),
    ("enzyme concentration", "assay.enzyme.concentration or an enzyme column in the layout"),
    ("assay temperature", "assay.temperature"),
    ("assay pH", "assay.pH"),
    ("buffer and its concentration", "assay.buffer"),
    ("substrate identity", "assay.substrate.name"),
    ("substrate concentrations", "a substrate column in the layout"),
    ("detection method", "assay.detection"),
    ("replicates", "a replicate column in the layout"),
    ("how initial rates were taken", "the rates step"),
    ("kinetic parameters with uncertainties", "fits table with stderr or interval"),
)


def _get(mapping: Mapping[str, Any], dotted: str) -> Any:
    value: Any = mapping
    for part in dotted.split("."):
        if not isinstance(value, Mapping) or part not in value:
            return None
        value = value[part]
    return value


def strenda_check(assay: Mapping[str, Any], rates_columns: list[str], steps: list[str],
                  fits: Any) -> list[tuple[str, bool, str]]:
    """(item, present, where) for each of :data:`STRENDA_ITEMS`."""
    present = {
        "enzyme concentration": _get(assay, "enzyme.concentration") is not None or "enzyme" in rates_columns,
        "substrate concentrations": "substrate" in rates_columns,
        "replicates": "replicate" in rates_columns,
        "how initial rates were taken": any("-rates-" in s for s in steps),
        "kinetic parameters with uncertainties": fits is not None and len(fits) > 0
        and bool(fits["stderr"].notna().any() if "stderr" in fits else False),
    }
    out = []
    for label, where in STRENDA_ITEMS:
        ok = present[label] if label in present else _get(assay, where.removeprefix("assay.")) not in (None, "")
        out.append((label, bool(ok), where))
    return out


def summary(path: str | Path, *, max_wells: int = 50) -> str:
    """Provenance, inputs, steps with timings and warnings, exclusions, flagged wells and parameters, as text."""
    from vzero.audit import reader
    from vzero.data import steps_apart

    with reader.open_audit(path) as f:
        head = reader.header(f)
        lines = [
            f"audit file {path}",
            f"  format {head['format']} {head.get('format_version', '?')}, made by vzero {head.get('vzero_version')}"
            f" on {head.get('created')} (run {head.get('run_id', '?')})",
            f"  recipe {head.get('recipe_name', '')} from {head.get('recipe_path', '?')} "
            f"(sha256 {head.get('recipe_sha256', '')})",
            "  versions: " + ", ".join(f"{k} {v}" for k, v in head["versions"].items()),
        ]
        for name, src in (head["plugins"] or {}).items():
            if isinstance(src, dict) and src.get("path"):
                lines.append(f"  local plugin {name}: {src.get('path')} version {src.get('version')} "
                             f"sha256 {src.get('sha256')}")
        if head.get("derived_from"):
            d = head["derived_from"]
            lines.append(f"  rerun of {d.get('path')} (run {d.get('run_id')}, recipe sha256 "
                         f"{str(d.get('recipe_sha256', ''))[:16]}...)")
            if d.get("changed_plugins"):
                lines.append(f"  WARNING: local plugins changed since that run: {', '.join(d['changed_plugins'])}")
        lines.append("inputs:")
        for s in _inputs_meta(f):
            where = "  OUTSIDE the recipe's folder" if _outside(s[0]) else ""
            lines.append(f"  {s[0]} ({s[1]} bytes, sha256 {s[2]}) plates {', '.join(s[3])}{where}")
        lines.append("steps:")
        step_labels = list(f["steps"])
        for label, g in f["steps"].items():
            lines.append(f"  {label}  {g.attrs['plugin']} {g.attrs['version']}  started {g.attrs.get('started', '?')}"
                         f"  {float(g.attrs['seconds']):.3f} s  params {g.attrs['parameters']}")
            for w in reader.json_attr(g, "warnings", []):
                lines.append(f"      warning: {w}")
        for plate, err in (head["failed_plates"] or {}).items():
            lines.append(f"failed plate {plate}: {err}")
        for key, title in (("exclusions", "excluded"), ("overrides", "window fixed")):
            for item in head[key] or []:
                what = f" at {item['time']}" if "time" in item else ""
                what += f" {item.get('start')} to {item.get('end')}" if key == "overrides" else ""
                lines.append(f"{title}: {item.get('plate')} {item.get('well')}{what}: {item.get('reason')}")
        results = reader.read_results(f)
    rates = results["rates"].frame if "rates" in results else None
    fits = steps_apart(results["fits"].frame) if "fits" in results else None
    if rates is not None and "flags" in rates:
        flagged = rates[rates["flags"].astype(str) != ""]
        lines.append(f"flagged wells: {len(flagged)} of {len(rates)}")
        for _, row in flagged.head(max_wells).iterrows():
            note = f"  ({row['note']})" if "note" in row and str(row["note"]) not in ("", "nan") else ""
            lines.append(f"  {row.get('plate', '')} {row['well']}: {row['flags']}{note}")
        if len(flagged) > max_wells:
            lines.append(f"  ... {len(flagged) - max_wells} more")
    if fits is not None and len(fits):
        lines.append("fitted parameters:")
        for _, row in fits.iterrows():
            lines.append(f"  {row['group']} {row['model']} {row['parameter']} = {_value(row)}")
    lines.append("reporting items (STRENDA guidelines, short list from memory; add them under 'assay:' in the recipe):")
    for label, ok, where in strenda_check(head["assay"] or {}, list(rates.columns) if rates is not None else [],
                                          step_labels, fits):
        lines.append(f"  [{'x' if ok else ' '}] {label}" + ("" if ok else f"  (missing: {where})"))
    lines.append("Results are for research use; check them against your lab's validated procedures.")
    return "\n".join(lines)


def _outside(name: str) -> bool:
    """Whether an input's stored name (its path as the recipe gave it) points outside the recipe's folder."""
    parts = name.replace("\\", "/").split("/")
    return name.startswith(("/", "\\")) or (len(name) > 1 and name[1] == ":") or ".." in parts

def _value(row: Any) -> str:
    """A fitted parameter as printed: ``7.73 ± 0.259 uM/min``, or ``not determined (why)`` when the data do
    not determine it (no estimate or no standard error), never a bare 1e107 or "± nan"."""
    import math

    est, se = float(row["estimate"]), float(row["stderr"])
    note = str(row.get("note", "") or "")
    note = "" if note == "nan" else note
    if note.startswith("not determined") or not math.isfinite(est):
        why = note.split(":", 1)[1].strip().split(";")[0] if ":" in note else "no estimate"
        return f"not determined ({why})"
    if not math.isfinite(se):
        return f"{est:.6g} {row['unit']} (no standard error{': ' + note if note else ''})"
    return f"{est:.6g} ± {se:.3g} {row['unit']}"


def _inputs_meta(f: Any) -> list[tuple[str, int, str, list[str]]]:
    from vzero.audit.reader import json_attr

    out = []
    for ds in f["inputs"].values():
        plates = json_attr(ds, "plates", [])
        out.append((str(ds.attrs["name"]), int(ds.attrs["size"]), str(ds.attrs["sha256"]), list(plates)))
    return out
