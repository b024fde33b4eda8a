"""The HDF5 audit file: raw inputs byte for byte, the recipe, every step and the final tables.

Layout (format ``vzero-audit``, version :data:`FORMAT_VERSION`; documented in docs/audit-format.md)::

    /                       attrs: format, format_version, vzero_version, created (UTC ISO 8601),
                            recipe_text, recipe_sha256, recipe_name, versions (JSON), plugins (JSON),
                            warnings (JSON), derived_from (JSON, reruns only)
    /inputs/<NN>            one raw input file as uint8; attrs: name, key, plates (JSON), sha256, size
    /layouts/<plate>        the expanded plate layout (a table)
    /steps/<NN-kind-method>/ attrs: parameters (JSON, as written), settings (JSON), plugin, distribution,
                            version, started (UTC), seconds, warnings (JSON)
        <plate>/...         per-plate outputs (traces: time, signal, mask, saturated; tables)
        pooled/...          outputs of pooled steps
    /results/<table>        final tables (rates, fits, ...)

A table is a group with one dataset per column (numbers as float64/int64/bool, text as UTF-8 strings), the
column order in the group attribute ``columns`` (JSON), each column's unit in the dataset attribute ``unit``
and a checksum of its stored content in the group attribute ``sha256`` (see :func:`table_sha256`; checked by
``vzero verify``). No pickle anywhere: every value is a plain HDF5 type any reader understands.

Format history: 1.0 first version; 1.1 adds ``sha256`` on tables and the root attributes ``assay``,
``exclusions`` and ``overrides`` (JSON). A minor version only adds; a reader of 1.x reads every 1.y.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from pipeline.data import Table, Traces

FORMAT_NAME = "vzero-audit"
FORMAT_VERSION = "1.1"


def _h5py() -> Any:
    import h5py

    return h5py


def to_json(value: Any) -> str:
    """JSON text for attributes; quantities and other objects become their text form."""
    return json.dumps(value, sort_keys=True, default=str, ensure_ascii=False)


def write_table(group: Any, name: str, table: Table | pd.DataFrame) -> Any:
    """Write ``table`` as ``group/name`` with one dataset per column.

    The ``sha256`` attribute is computed from the arrays as they are written, byte for byte what
    :func:`table_sha256` computes from the stored datasets (reading them back would double the cost).
    """
    import hashlib

    h5py = _h5py()
    if isinstance(table, pd.DataFrame):
        table = Table(table)
    frame = table.frame
    g = group.create_group(name)
    columns = [str(c) for c in frame.columns]
    g.attrs["kind"] = "table"
    g.attrs["columns"] = to_json(columns)
    g.attrs["n_rows"] = len(frame)
    digest = hashlib.sha256(to_json(columns).encode("utf-8"))
    for i, col in enumerate(frame.columns):
        series = frame[col]
        key = f"{i:03d}"
        unit = str(table.units.get(str(col), ""))
        if pd.api.types.is_bool_dtype(series.dtype):
            arr = series.to_numpy(dtype=bool)
        elif pd.api.types.is_integer_dtype(series.dtype):
            arr = series.to_numpy(dtype=np.int64)
        elif pd.api.types.is_float_dtype(series.dtype):
            arr = series.to_numpy(dtype=np.float64)
        else:
            values = series.to_numpy(dtype=object)
            text = np.where(pd.isna(values), "", values.astype(str)).astype(object)
            ds = g.create_dataset(key, data=text, dtype=h5py.string_dtype("utf-8"))
            digest.update(f"|{unit}|O|{ds.shape}|".encode())
            digest.update(_length_prefixed(text))
            ds.attrs["name"] = str(col)
            ds.attrs["unit"] = unit
            continue
        ds = g.create_dataset(key, data=arr)
        digest.update(f"|{unit}|{ds.dtype.kind}|{ds.shape}|".encode())
        digest.update(arr.astype(arr.dtype.newbyteorder("<"), copy=False).tobytes())
        ds.attrs["name"] = str(col)
        ds.attrs["unit"] = unit
    if table.meta:
        g.attrs["meta"] = to_json(dict(table.meta))
    g.attrs["sha256"] = digest.hexdigest()
    return g


def _length_prefixed(text: Any) -> bytes:
    """Each string as its UTF-8 length (8 bytes, little-endian) followed by its bytes, all concatenated."""
    import itertools

    encoded = [t.encode("utf-8") for t in text]
    lengths = np.fromiter(map(len, encoded), dtype="<u8", count=len(encoded)).tobytes()
    prefixes = [lengths[i : i + 8] for i in range(0, len(lengths), 8)]
    return b"".join(itertools.chain.from_iterable(zip(prefixes, encoded, strict=True)))


def table_sha256(group: Any) -> str:
    """SHA-256 (hex) of a stored table: column names, units, dtypes, shapes and values, in column order.

    Computed from what is in the file (not from the DataFrame), so a reader recomputes exactly the same
    digest from the datasets; text is hashed as its UTF-8 bytes with lengths, numbers as little-endian bytes.
    """
    import hashlib

    h = hashlib.sha256()
    columns = json.loads(group.attrs["columns"])
    h.update(to_json(columns).encode("utf-8"))
    for i in range(len(columns)):
        ds = group[f"{i:03d}"]
        h.update(f"|{ds.attrs.get('unit', '')}|{ds.dtype.kind}|{ds.shape}|".encode())
        if ds.dtype.kind in "OSU":
            h.update(_length_prefixed([v.decode("utf-8") if isinstance(v, bytes) else str(v) for v in ds[()]]))
        else:
            arr = np.ascontiguousarray(ds[()])
            h.update(arr.astype(arr.dtype.newbyteorder("<"), copy=False).tobytes())
    return h.hexdigest()


def _missing(v: Any) -> bool:
    return v is None or (isinstance(v, float) and np.isnan(v)) or v is pd.NA


def read_table(group: Any) -> Table:
    """Read a table written by :func:`write_table` back into a :class:`Table` (same values, same units)."""
    columns = json.loads(group.attrs["columns"])
    data: dict[str, Any] = {}
    units: dict[str, str] = {}
    for i, col in enumerate(columns):
        ds = group[f"{i:03d}"]
        if ds.dtype.kind == "O" or ds.dtype.kind in "SU":
            data[col] = np.array([v.decode("utf-8") if isinstance(v, bytes) else str(v) for v in ds[()]], dtype=object)
        else:
            data[col] = ds[()]
        unit = ds.attrs.get("unit", "")
        if unit:
            units[col] = str(unit)
    frame = pd.DataFrame(data, columns=columns)
    meta = json.loads(group.attrs["meta"]) if "meta" in group.attrs else {}
    return Table(frame, units, meta)


def write_traces(group: Any, name: str, traces: Traces) -> Any:
    """Write one plate's traces: time (s), signal, mask, saturated and the well table."""
    g = group.create_group(name)
    g.attrs["kind"] = "traces"
    g.attrs["plate"] = traces.plate
    g.attrs["signal_unit"] = traces.signal_unit
    t = g.create_dataset("time", data=traces.time)
    t.attrs["unit"] = "s"
    s = g.create_dataset("signal", data=traces.signal)
    s.attrs["unit"] = traces.signal_unit
    g.create_dataset("mask", data=traces.mask)
    g.create_dataset("saturated", data=traces.saturated)
    if traces.temperature is not None:
        g.create_dataset("temperature", data=traces.temperature).attrs["unit"] = "degC"
    write_table(g, "wells", Table(traces.wells, dict(traces.well_units)))
    return g


def read_traces(group: Any) -> Traces:
    wells = read_table(group["wells"])
    return Traces(
        plate=str(group.attrs["plate"]),
        time=group["time"][()],
        signal=group["signal"][()],
        mask=group["mask"][()],
        saturated=group["saturated"][()],
        wells=wells.frame,
        signal_unit=str(group.attrs["signal_unit"]),
        well_units=dict(wells.units),
        temperature=group["temperature"][()] if "temperature" in group else None,
    )


def write_artifact(group: Any, name: str, value: Any) -> None:
    """Write a stage output of any supported type (Traces, Table, DataFrame, array, mapping of those)."""
    if isinstance(value, Traces):
        write_traces(group, name, value)
    elif isinstance(value, Table | pd.DataFrame):
        write_table(group, name, value)
    elif isinstance(value, np.ndarray):
        if value.dtype.kind in "OUS":
            group.create_dataset(name, data=value.astype(object), dtype=_h5py().string_dtype("utf-8"))
        else:
            group.create_dataset(name, data=value)
    elif isinstance(value, Mapping):
        sub = group.create_group(name)
        for k, v in value.items():
            write_artifact(sub, str(k), v)
    elif isinstance(value, str | int | float | bool):
        group.attrs[name] = value
    else:
        group.attrs[name] = to_json(value)


def _versions(plugins: Any) -> dict[str, str]:
    import platform
    from importlib import metadata

    out = {"python": platform.python_version()}
    for dist in ("numpy", "scipy", "pandas", "h5py", "pluggy", "pint", "PyYAML"):
        try:
            out[dist] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            out[dist] = "not installed"
    return out


def write_run_file(
    path: Any,
    rec: Any,
    plugins: Any,
    run_id: str,
    raw_by_sha: Mapping[str, Any],
    input_plates: Mapping[str, list[str]],
    records: list[Any],
    tables: Mapping[str, Table],
    warnings: list[str],
    failed: Mapping[str, str],
    derived_from: Mapping[str, Any] | None,
) -> str:
    """Write a complete audit file at ``path`` (the caller renames it into place)."""
    import datetime as dt
    import hashlib

    from pipeline import __version__

    h5py = _h5py()
    with h5py.File(path, "w", track_order=True) as f:
        f.attrs["format"] = FORMAT_NAME
        f.attrs["format_version"] = FORMAT_VERSION
        f.attrs["vzero_version"] = __version__
        f.attrs["created"] = dt.datetime.now(dt.UTC).isoformat(timespec="seconds")
        f.attrs["run_id"] = run_id
        f.attrs["recipe_name"] = str(rec.data.get("name", ""))
        f.attrs["recipe_path"] = str(getattr(rec, "path", ""))
        f.attrs["recipe_text"] = rec.text
        f.attrs["recipe_sha256"] = hashlib.sha256(rec.text.encode("utf-8")).hexdigest()
        f.attrs["versions"] = to_json(_versions(plugins))
        f.attrs["plugins"] = to_json(
            {
                name: {"distribution": s.distribution, "version": s.version, "module": s.module, "path": s.path,
                       "sha256": s.sha256}
                for name, s in plugins.sources.items()
            }
        )
        f.attrs["warnings"] = to_json(list(warnings))
        f.attrs["failed_plates"] = to_json(dict(failed))
        for key in ("assay", "exclusions", "overrides"):
            f.attrs[key] = to_json(rec.data.get(key) or ({} if key == "assay" else []))
        if derived_from:
            f.attrs["derived_from"] = to_json(dict(derived_from))

        inputs = f.create_group("inputs", track_order=True)
        for i, (sha, raw) in enumerate(raw_by_sha.items()):
            ds = inputs.create_dataset(f"{i:02d}", data=np.frombuffer(raw.data, dtype=np.uint8))
            ds.attrs["name"] = raw.name
            ds.attrs["key"] = raw.key
            ds.attrs["sha256"] = sha
            ds.attrs["size"] = len(raw.data)
            ds.attrs["plates"] = to_json(input_plates.get(sha, []))

        steps = f.create_group("steps", track_order=True)
        stored: dict[int, Any] = {}  # id of a Table already written under /steps -> its group
        for rec_ in records:
            spec = rec_.spec
            if spec.label not in steps:
                g = steps.create_group(spec.label, track_order=True)
                entry = plugins.registry.get(spec.kind, spec.method)
                g.attrs["kind"] = spec.kind
                g.attrs["method"] = spec.method
                g.attrs["parameters"] = to_json(dict(spec.written))
                g.attrs["settings"] = to_json({k: str(v) if not isinstance(v, bool | int | float | list | dict | None)
                                               else v for k, v in spec.settings.items()})
                g.attrs["plugin"] = entry.source.plugin
                g.attrs["distribution"] = entry.source.distribution
                g.attrs["version"] = str(getattr(entry.component, "version", entry.source.version))
                g.attrs["recipe_line"] = spec.line
                g.attrs["seconds"] = 0.0
                g.attrs["warnings"] = to_json([])
                g.attrs["started"] = rec_.started
            g = steps[spec.label]
            g.attrs["seconds"] = float(g.attrs["seconds"]) + rec_.seconds
            if rec_.warnings:
                prefix = f"{rec_.plate}: " if rec_.plate else ""
                g.attrs["warnings"] = to_json(json.loads(g.attrs["warnings"]) + [prefix + w for w in rec_.warnings])
            sub = g.create_group(rec_.plate or "pooled", track_order=True)
            sub.attrs["started"] = rec_.started
            sub.attrs["seconds"] = rec_.seconds
            for name, value in rec_.outputs.items():
                if name == "traces" and isinstance(value, Mapping):
                    continue  # per-plate traces are already stored by the plate steps
                write_artifact(sub, name, value)
                if isinstance(value, Table):
                    stored[id(value)] = sub[name]

        results = f.create_group("results", track_order=True)
        for name, table in tables.items():
            if id(table) in stored:
                results[name] = stored[id(table)]  # an HDF5 hard link: one copy, reachable from both places
            else:
                write_table(results, name, table)
    return str(path)
