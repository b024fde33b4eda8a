"""Where a report's input comes from: a finished stage's artifacts, or an audit file (``vzero report``).

Both roads end in a :class:`vzero.plugins.report.build.ReportInput` with the same provenance keys: ``source``,
``recipe_name``, ``recipe_sha256``, ``recipe_text``, ``created``, ``run_id``, ``vzero_version``, ``versions``,
``steps`` (label, kind, method, plugin, version, seconds, parameters), ``inputs`` (name, plates, size,
sha256), ``warnings`` and ``failed_plates``.
"""

from __future__ import annotations

import json
import re
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from vzero.audit.codec import to_json
from vzero.data import Table, Traces
from vzero.plugins.report.build import ReportInput
from vzero.registry import Registry
from vzero.stage import StageInput

REPORT_DISTS = ("matplotlib", "jinja2")
"""The libraries that draw and write the report (the run's own libraries are those its audit file names)."""


def software_versions(run_versions: Mapping[str, str] | None = None) -> dict[str, str]:
    """The run's software (the versions its audit file records: :func:`vzero.audit.writer._package_versions`
    for a running pipeline) and the report's drawing libraries as installed now, sorted by name, so that the
    report of a run and the one ``vzero report`` rebuilds from its audit file list the same."""
    from importlib import metadata

    out = dict(run_versions or {})
    if run_versions is None:
        from vzero.audit.writer import _package_versions

        out = dict(_package_versions())
    for dist in REPORT_DISTS:
        try:
            out[dist] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            out[dist] = "not installed"
    return dict(sorted(out.items(), key=lambda kv: kv[0].lower()))


def _seconds_of(kind: str, seconds: Any) -> str:
    """A step's time as printed; the report step's own time is not known while it runs, so it is left out
    in every report (the audit file keeps it)."""
    return "" if kind == "report" else f"{float(seconds or 0.0):.3f}"


def _second_precision(stamp: str) -> str:
    """An ISO time stamp to the second (the audit file stores the run's start so)."""
    return re.sub(r"\.\d+(?=[+-]\d\d:\d\d$|Z$|$)", "", stamp)


def _steps_from_recipe(recipe: Mapping[str, Any], registry: Any) -> list[dict[str, Any]]:
    steps = []
    for i, step in enumerate(recipe.get("steps", []) or [], start=1):
        if not isinstance(step, Mapping) or len(step) != 1:
            continue
        kind, body = next(iter(step.items()))
        body = dict(body) if isinstance(body, Mapping) else {}
        method = str(body.get("method", ""))
        plugin = version = ""
        if registry is not None:
            try:
                entry = registry.get(kind, method)
                plugin = f"{entry.source.plugin} ({entry.source.distribution})"
                version = str(getattr(entry.component, "version", entry.source.version))
            except Exception:  # a registry without this entry: provenance stays partial, the report goes on
                plugin = ""
        params = {k: v for k, v in body.items() if k != "method"}
        steps.append({"label": f"{i:02d}-{kind}-{method}", "kind": kind, "method": method, "plugin": plugin,
                      "version": version, "seconds": "", "parameters": to_json(params)})
    return steps


def _steps_of_run(done: list[Mapping[str, Any]], planned: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """The step rows of a running pipeline, in the form :func:`from_audit` reads them from the audit file
    (``plugin (distribution)``, parameters as written, in JSON): the steps done so far with their timings,
    then the recipe's steps still to come (this report among them) without."""
    rows = []
    for st in done:
        label = str(st["label"])
        parts = label.split("-", 2)
        rows.append({"label": label, "kind": parts[1] if len(parts) > 1 else "",
                     "method": parts[2] if len(parts) > 2 else "",
                     "plugin": f"{st.get('plugin', '')} ({st.get('distribution', '')})",
                     "version": str(st.get("version", "")),
                     "seconds": _seconds_of(parts[1] if len(parts) > 1 else "", st.get("seconds", 0.0)),
                     "parameters": str(st.get("parameters", ""))})
    labels = {r["label"] for r in rows}
    return rows + [p for p in planned if p["label"] not in labels] if rows else planned


def from_stage(data: StageInput, settings: Mapping[str, Any]) -> ReportInput:
    """The report input of a running pipeline: the pooled tables and per-plate traces in ``data.artifacts``,
    and the provenance the runner hands final stages in ``data.run`` (recipe text and hash, input hashes,
    step timings so far)."""
    from vzero.meta import __version__

    tables = {k: v for k, v in data.artifacts.items() if isinstance(v, Table)}
    traces_in = data.artifacts.get("traces")
    traces = {}
    if isinstance(traces_in, Traces):
        traces = {traces_in.plate: traces_in}
    elif isinstance(traces_in, Mapping):
        traces = {str(k): v for k, v in traces_in.items() if isinstance(v, Traces)}
    recipe = data.recipe or {}
    run = data.run or {}
    inputs = [{"name": str(i["name"]), "plates": ", ".join(i.get("plates", [])), "size": i.get("size", ""),
               "sha256": str(i["sha256"])} for i in run.get("inputs", [])]
    steps = _steps_of_run(run.get("steps", []), _steps_from_recipe(recipe, data.registry))
    provenance = {
        "source": "this run (run.h5 beside this report holds the raw inputs and every step)",
        "recipe_name": str(recipe.get("name", "")), "recipe_sha256": str(run.get("recipe_sha256", "")),
        "recipe_text": str(run.get("recipe_text", "")), "created": _second_precision(str(run.get("started", ""))),
        "run_id": str(run.get("run_id", "")), "vzero_version": __version__, "versions": software_versions(),
        "steps": steps, "inputs": inputs, "warnings": list(run.get("warnings", [])),
        "failed_plates": dict(run.get("failed", {})),
    }
    return ReportInput(tables, traces, recipe, provenance, max_panels=int(settings.get("max_panels", 384)),
                       title=str(settings.get("title", "") or ""), models=registry_models(data.registry))


def from_audit(path: str | Path, max_panels: int = 384) -> ReportInput:
    """The report input stored in an audit file: final tables from /results, the last traces stored per
    plate under /steps, the recipe text and provenance from the file's attributes."""
    from vzero.audit import reader

    with reader.open_audit(path) as f:
        a = f.attrs
        tables = reader.read_results(f)  # under today's names (an older file's old names read as new)
        traces: dict[str, Traces] = {}
        steps = []
        for label, g in f["steps"].items():
            for plate, sub in g.items():
                if hasattr(sub, "keys") and "traces" in sub:
                    traces[plate] = reader.read_traces(sub["traces"])  # later steps replace earlier ones
            steps.append({"label": label, "kind": str(g.attrs.get("kind", "")),
                          "method": str(g.attrs.get("method", "")),
                          "plugin": f"{g.attrs.get('plugin', '')} ({g.attrs.get('distribution', '')})",
                          "version": str(g.attrs.get("version", "")),
                          "seconds": _seconds_of(str(g.attrs.get("kind", "")), g.attrs.get("seconds", 0.0)),
                          "parameters": str(g.attrs.get("parameters", ""))})
        inputs = [{"name": str(ds.attrs.get("name", "")), "plates": ", ".join(json.loads(ds.attrs.get("plates", "[]"))),
                   "size": int(ds.attrs.get("size", 0)), "sha256": str(ds.attrs.get("sha256", ""))}
                  for ds in f["inputs"].values()]
        text = str(a.get("recipe_text", ""))
        provenance = {
            "source": f"the audit file {Path(path).name}", "recipe_name": str(a.get("recipe_name", "")),
            "recipe_sha256": str(a.get("recipe_sha256", "")), "recipe_text": text,
            "created": str(a.get("created", "")), "run_id": str(a.get("run_id", "")),
            "vzero_version": str(a.get("vzero_version", "")),
            "versions": software_versions(json.loads(a.get("versions", "{}"))),
            "steps": steps, "inputs": inputs, "warnings": json.loads(a.get("warnings", "[]")),
            "failed_plates": json.loads(a.get("failed_plates", "{}")),
        }
    from vzero.errors import RecipeError
    from vzero.recipe import parse

    try:  # the recipe's own parser: the same bounds on YAML aliases as for a recipe file
        recipe = parse(text, "recipe").data if text.strip() else {}
    except RecipeError:
        recipe = {}
    if not isinstance(recipe, Mapping):
        recipe = {}
    return ReportInput(tables, traces, recipe, provenance, max_panels=max_panels, models=installed_models())


def registry_models(registry: Registry | None) -> dict[str, Any]:
    """The fit models a registry holds, by name: built-in and plugin models get the same treatment."""
    if registry is None:
        return {}
    return {entry.name: entry.component for entry in registry if entry.kind == "model"}


def installed_models() -> dict[str, Any]:
    """The fit models of the installed plugins (entry points only: an audit file is data, so no plugin it
    names is loaded; a model a recipe loaded from a local file is then reported by its name)."""
    from vzero.manager import make_manager

    return registry_models(make_manager().registry)
