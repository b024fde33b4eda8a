"""The one module that reads audit files: version check, provenance, raw inputs, steps and tables.

Everything else (inspect, rerun, diff, verify, exports) reads audit files through this module, so a change of
layout is handled in one place. Reading never executes anything from the file: attributes are plain strings
and numbers, structured ones are JSON (parsed with :func:`json.loads`), tables and inputs are plain HDF5
datasets. The layout is documented in docs/audit-format.md.
"""

from __future__ import annotations

import contextlib
import json
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from vzero.audit.codec import FORMAT_NAME, FORMAT_VERSION, read_table, read_traces
from vzero.audit.legacy import table_sha256
from vzero.data import Table
from vzero.errors import AuditFileError

__all__ = [
    "StoredInput",
    "header",
    "json_attr",
    "open_audit",
    "read_inputs",
    "read_results",
    "read_step_traces",
    "read_table",
    "read_traces",
    "table_sha256",
]

#: Errors that h5py and JSON raise on damaged, truncated or foreign content.
DAMAGE = (KeyError, OSError, ValueError, RuntimeError, TypeError, IndexError)


@dataclass(frozen=True)
class StoredInput:
    """A raw input file kept in an audit file: the name the recipe used, its recipe key, bytes and hashes."""

    dataset: str
    name: str
    key: str
    data: bytes
    sha256: str
    size: int
    plates: tuple[str, ...]
    names: tuple[str, ...] = ()  # every name these bytes entered the run under (format 1.2 and later)


def _major(version: str) -> int:
    try:
        return int(str(version).split(".")[0])
    except ValueError:
        raise AuditFileError(f"format version {version!r} is not a number like '1.0'") from None


@contextlib.contextmanager
def open_audit(path: str | Path) -> Iterator[Any]:
    """Open an audit file read-only after checking it is one and that its major version is readable.

    Raises :class:`AuditFileError` for a missing, damaged or truncated file, a file that is not a vzero
    audit file, or one written by a newer major format version. Damage found while the caller reads
    (a missing group, an unreadable dataset) is reported the same way.
    """
    import h5py

    p = Path(path)
    if not p.is_file():
        raise AuditFileError(f"audit file {str(path)!r} not found", hint="Check the path.")
    try:
        f = h5py.File(p, "r")
    except Exception as exc:  # h5py raises OSError for most damage, other types for some truncations
        raise AuditFileError(
            f"{path}: not a readable HDF5 file (damaged or truncated?): {exc}",
            hint="Use a backup copy; `vzero verify` checks a file that opens.",
        ) from None
    try:
        fmt = f.attrs.get("format")
        if isinstance(fmt, bytes):
            fmt = fmt.decode("utf-8", "replace")
        if fmt != FORMAT_NAME:
            raise AuditFileError(f"{path}: an HDF5 file, but not a vzero audit file (no format={FORMAT_NAME!r})")
        version = str(f.attrs.get("format_version", "0"))
        if _major(version) > _major(FORMAT_VERSION):
            raise AuditFileError(
                f"{path}: audit format {version} is newer than this vzero reads (format {FORMAT_VERSION} and "
                "older)",
                hint="Install a newer vzero to read it.",
            )
        yield f
    except DAMAGE as exc:
        raise AuditFileError(
            f"{path}: the audit file is damaged or incomplete: {type(exc).__name__}: {exc}",
            hint="Run `vzero verify` on it, and use a backup copy.",
        ) from None
    finally:
        with contextlib.suppress(Exception):
            f.close()


def json_attr(obj: Any, name: str, default: Any = None) -> Any:
    """A JSON attribute of a group or file, parsed (``default`` when absent); bad JSON is damage."""
    if name not in obj.attrs:
        return default
    value = obj.attrs[name]
    try:
        return json.loads(value)
    except (TypeError, ValueError) as exc:
        raise AuditFileError(f"attribute {name!r} of {obj.name} is not valid JSON: {exc}") from None


def header(f: Any) -> dict[str, Any]:
    """Provenance from the root attributes: format, versions, times, recipe, plugins, assay, exclusions."""
    a = f.attrs
    out: dict[str, Any] = {k: str(a[k]) for k in (
        "format", "format_version", "vzero_version", "created", "run_id", "recipe_name", "recipe_path",
        "recipe_text", "recipe_sha256") if k in a}
    for key, default in (("versions", {}), ("plugins", {}), ("warnings", []), ("failed_plates", {}),
                         ("assay", {}), ("exclusions", []), ("overrides", []), ("review", []),
                         ("derived_from", None)):
        out[key] = json_attr(f, key, default)
    return out


def read_step_settings(f: Any) -> dict[int, tuple[str, str, dict[str, Any]]]:
    """The steps of the run that wrote ``f`` by position (the ``NN`` of ``/steps/NN-kind-method``): ``{index:
    (kind, method, settings)}``, settings as stored (after defaults). Groups not named that way are skipped."""
    out: dict[int, tuple[str, str, dict[str, Any]]] = {}
    steps = f.get("steps")
    if steps is None:
        return out
    for label in steps:
        head = label.split("-", 1)[0]
        g = steps[label]
        settings = json_attr(g, "settings", None)
        if not head.isdigit() or not isinstance(settings, dict):
            continue
        out[int(head)] = (str(g.attrs.get("kind", "")), str(g.attrs.get("method", "")), settings)
    return out


def read_inputs(f: Any) -> list[StoredInput]:
    """Every raw input kept in the file, in stored order, with its bytes."""
    out = []
    for ds_name, ds in f["inputs"].items():
        data = ds[()].tobytes()
        out.append(StoredInput(
            dataset=ds_name, name=str(ds.attrs["name"]), key=str(ds.attrs.get("key", "")), data=data,
            sha256=str(ds.attrs["sha256"]), size=int(ds.attrs["size"]),
            plates=tuple(json_attr(ds, "plates", [])), names=tuple(json_attr(ds, "names", [])),
        ))
    return out


#: Column names earlier vzero versions wrote into final tables, read under today's names: table -> old -> new.
OLD_COLUMNS: dict[str, dict[str, str]] = {
    "fits": {"preferred_model": "selected_model", "preferred": "selected"},
    "model_comparison": {"preferred": "selected_model", "reason": "selection_reason"},
}
#: Parameter names earlier vzero versions gave a model's parameters, read under today's: model -> old -> new
#: (in the ``parameter`` column of ``fits`` and ``parameter_a``/``parameter_b`` of ``correlations``).
OLD_PARAMETERS: dict[str, dict[str, str]] = {
    "logistic-4p": {"top": "v_uninhibited", "bottom": "v_residual", "slope": "n"},
}


def with_current_names(name: str, table: Table) -> Table:
    """A final table of an older audit file with today's column and parameter names (:data:`OLD_COLUMNS`,
    :data:`OLD_PARAMETERS`); a table already in today's names is returned as it is. The stored bytes are
    untouched (``vzero verify`` checks them as written)."""
    frame = table.frame
    renames = {old: new for old, new in OLD_COLUMNS.get(name, {}).items() if old in frame.columns
               and new not in frame.columns}
    cols = [c for c in ("parameter", "parameter_a", "parameter_b") if c in frame.columns]
    old_params = "model" in frame.columns and cols and any(
        frame[c].astype(str).isin(list(old)).any() and frame["model"].astype(str).eq(m).any()
        for m, old in OLD_PARAMETERS.items() for c in cols)
    if not renames and not old_params:
        return table
    frame = frame.rename(columns=renames)
    if name == "model_comparison" and "selected" not in frame.columns and "selected_model" in frame.columns:
        frame.insert(frame.columns.get_loc("selected_model") + 1, "selected",
                     frame["selected_model"].astype(str) == frame["model"].astype(str))
    if old_params:
        frame = frame.copy()
        for model, old in OLD_PARAMETERS.items():
            rows = frame["model"].astype(str) == model
            for c in cols:
                frame.loc[rows, c] = frame.loc[rows, c].astype(str).replace(old)
    units = {renames.get(k, k): v for k, v in table.units.items()}
    return Table(frame, units, dict(table.meta))


def read_results(f: Any) -> dict[str, Table]:
    """The final tables (``rates``, ``fits``, ...) by name, in today's names (:func:`with_current_names`)."""
    return {name: with_current_names(name, read_table(g)) for name, g in f["results"].items()}


def read_result(path: str | Path, name: str) -> Table | None:
    """One final table of the audit file at ``path`` (``None`` when the run has no such table), in today's
    names."""
    with open_audit(path) as f:
        return with_current_names(name, read_table(f["results"][name])) if name in f["results"] else None


def read_step_traces(f: Any, kind: str = "import") -> dict[str, Any]:
    """Per-plate traces kept by the first step of ``kind`` (default: the raw reads as imported), by plate."""
    for g in f["steps"].values():
        if str(g.attrs.get("kind")) != kind:
            continue
        return {plate: read_traces(sub["traces"]) for plate, sub in g.items() if "traces" in sub}
    return {}
