"""Encoding of the HDF5 audit file's tables and traces: plain h5py, plain HDF5 types, no pickle.

Layout (format ``vzero-audit``, version :data:`FORMAT_VERSION`; documented in docs/audit-format.md)::

    /                       attrs: format, format_version, vzero_version, created (UTC ISO 8601),
                            recipe_text, recipe_sha256, recipe_name, versions (JSON), plugins (JSON),
                            warnings (JSON), derived_from (JSON, reruns only), vzero_digest
    /inputs/<NN>            one raw input file as uint8; attrs: name, key, plates (JSON), sha256, size
    /steps/<NN-kind-method>/ attrs: parameters (JSON, as written), settings (JSON), plugin, distribution,
                            version, started (UTC), seconds, warnings (JSON)
        <plate>/...         per-plate outputs (traces: time, signal, mask, saturated; tables)
        pooled/...          outputs of pooled steps
    /results/<table>        final tables (rates, fits, ...)

A table is ONE dataset of a compound type: one row per table row, one named field per column (the field name
is the column name; numbers as float64, int64 or bool, text as UTF-8 strings), so any HDF5 reader shows it as
a table with its column names. Its attributes: ``kind = "table"``, ``units`` (one UTF-8 string per field, in
field order, ``""`` for none) and, when present, ``meta`` (JSON). A column name HDF5 cannot use as a field
name (empty, or repeated in the same table) gets a stand-in field name and the attribute ``columns`` keeps the
exact names. Digests (:mod:`vzero.audit.digest`) cover every value; ``vzero verify`` recomputes them.

Format history: 1.0 first version; 1.1 adds ``sha256`` on tables and the root attributes ``assay``,
``exclusions`` and ``overrides``; 1.2 moves column units to one table attribute and stores text as
fixed-length UTF-8; 2.0 stores each table as one compound dataset with named fields (1.x: a group of
datasets ``000``, ``001``, ... read by :mod:`vzero.audit.legacy`) and adds the ``vzero_digest`` attributes
that cover every dataset and attribute. A reader of 2.x reads every 2.y and 1.y file.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd
from vzero.data import Table, Traces, values_as
from vzero.data import columns as data_columns

FORMAT_NAME = "vzero-audit"
FORMAT_VERSION = "2.0"


def _h5py() -> Any:
    import h5py

    return h5py


def to_json(value: Any) -> str:
    """JSON text for attributes; quantities and other objects become their text form."""
    return json.dumps(value, sort_keys=True, default=str, ensure_ascii=False)


def texts_attr(values: list[str]) -> np.ndarray:
    """A list of text as an attribute value any HDF5 reader shows as strings (variable-length UTF-8)."""
    return np.array(values, dtype=_h5py().string_dtype("utf-8"))


class Links:
    """What is already stored in one file, so that the same object is written once and hard-linked.

    Steps pass much through unchanged (the time axis, the well table, a table a later step keeps), and each
    stored copy costs a dataset and file space. An HDF5 hard link makes the second name point at the first
    object: readers see two ordinary datasets with the same values. Objects are matched by identity (the same
    Python object written twice).
    """

    def __init__(self) -> None:
        self.by_id: dict[int, Any] = {}
        self.keep: list[Any] = []  # keeps matched Python objects alive so their ids stay unique

    def known(self, obj: Any) -> Any:
        return self.by_id.get(id(obj))

    def remember(self, obj: Any, h5obj: Any) -> None:
        self.by_id[id(obj)] = h5obj
        self.keep.append(obj)

    def clear(self) -> None:
        """Forget everything (the objects kept alive, and the open datasets' handles)."""
        self.by_id, self.keep = {}, []


def field_names(columns: list[str]) -> list[str]:
    """The compound field name of each column: the column name itself, except that HDF5 (and numpy) need
    names that are non-empty and unique within a table; an empty name becomes ``column <n>`` and a repeated
    one ``<name> (<k>)`` (the file's ``columns`` attribute then keeps the exact names)."""
    out: list[str] = []
    seen: set[str] = set()
    for i, name in enumerate(columns):
        field = name or f"column {i + 1}"
        k = 2
        while field in seen:
            field, k = f"{name or f'column {i + 1}'} ({k})", k + 1
        seen.add(field)
        out.append(field)
    return out


def table_array(table: Table) -> tuple[np.ndarray, list[str], list[str]]:
    """``table`` as the structured array stored in the file, its column names and units (in column order).

    Numbers become float64, int64 or bool fields; text becomes fixed-length UTF-8 (the longest value's
    length; missing text is ``""``)."""
    frame = table.frame
    columns = [str(c) for c in frame.columns]
    units = [str(table.units.get(c, "")) for c in columns]
    arrays = [_column_values(dtype, values) for dtype, values in data_columns(frame)]
    h5py = _h5py()
    types = [h5py.string_dtype("utf-8", a.dtype.itemsize) if a.dtype.kind == "S" else a.dtype for a in arrays]
    out = np.empty(len(frame), dtype=np.dtype(list(zip(field_names(columns), types, strict=True))))
    for field, arr in zip(out.dtype.names or (), arrays, strict=True):
        out[field] = arr
    return out, columns, units


def write_table(parent: Any, name: str, table: Table | pd.DataFrame, links: Links | None = None) -> Any:
    """Write ``table`` as the compound dataset ``parent/name`` (see the module docstring) and return it. With
    ``links``, a table object already stored in the file is hard-linked instead of written again."""
    if isinstance(table, pd.DataFrame):
        table = Table(table)
    if links is not None and links.known(table) is not None:
        parent[name] = links.known(table)
        return parent[name]
    arr, columns, units = table_array(table)
    if columns:
        ds = parent.create_dataset(name, data=arr)
        if list(arr.dtype.names or ()) != columns:
            ds.attrs["columns"] = texts_attr(columns)
        ds.attrs["units"] = texts_attr(units)
    else:  # HDF5 has no compound type without fields: a table of rows but no columns keeps only its length
        ds = parent.create_dataset(name, data=np.zeros(len(arr), dtype=np.uint8))
        ds.attrs["columns"] = np.zeros(0, dtype=np.uint8)
    ds.attrs["kind"] = "table"
    if table.meta:
        ds.attrs["meta"] = to_json(dict(table.meta))
    if links is not None:
        links.remember(table, ds)
    return ds


def read_table(obj: Any) -> Table:
    """Read a stored table (a compound dataset; a 1.x file's group of column datasets) as a :class:`Table`."""
    from vzero.audit import legacy

    h5py = _h5py()
    if isinstance(obj, h5py.Group):
        return legacy.read_table(obj)
    arr = obj[()]
    fields = list(arr.dtype.names or ())
    if "columns" in obj.attrs:
        columns = [_as_text(c) for c in obj.attrs["columns"]]
    else:
        columns = fields
    if not fields:
        frame = pd.DataFrame(index=pd.RangeIndex(len(arr)))
        units: dict[str, str] = {}
    else:
        unit_list = [_as_text(u) for u in obj.attrs.get("units", [""] * len(fields))]
        frame = pd.DataFrame({i: _from_field(arr[f]) for i, f in enumerate(fields)})
        frame.columns = columns
        units = {c: u for c, u in zip(columns, unit_list, strict=True) if u}
    meta = json.loads(obj.attrs["meta"]) if "meta" in obj.attrs else {}
    return Table(frame, units, meta)


def _as_text(value: Any) -> str:
    return value.decode("utf-8") if isinstance(value, bytes) else str(value)


def _from_field(values: np.ndarray) -> np.ndarray:
    """One stored field as the column it was: text decoded from UTF-8 (each distinct value once), numbers as
    a contiguous copy."""
    if values.dtype.kind != "S":
        return np.ascontiguousarray(values)
    distinct, codes = np.unique(values, return_inverse=True)
    texts = np.array([v.decode("utf-8") for v in distinct.tolist()], dtype=object)
    return texts[codes.reshape(values.shape)] if values.size else np.array([], dtype=object)


def _column_values(dtype: Any, values: Any) -> np.ndarray:
    """The array to store for one column (its dtype and values from :func:`vzero.data.columns`): bool,
    int64 or float64 numbers, or fixed-length UTF-8 bytes for anything else."""
    kind = _storage_kind(dtype)
    if kind == "O":
        return _text_array(*text_codes(values_as(values, object)))
    return values_as(values, _NUMERIC[kind])


_NUMERIC = {"b": np.dtype(bool), "i": np.dtype(np.int64), "f": np.dtype(np.float64)}
_KINDS: dict[Any, str] = {}  # a column dtype's storage kind, worked out once per dtype


def _storage_kind(dtype: Any) -> str:
    """How a column of this dtype is stored: ``b`` bool, ``i`` int64, ``f`` float64, ``O`` text."""
    try:
        return _KINDS[dtype]
    except (KeyError, TypeError):
        pass
    types = pd.api.types
    kind = ("b" if types.is_bool_dtype(dtype) else "i" if types.is_integer_dtype(dtype)
            else "f" if types.is_float_dtype(dtype) else "O")
    try:
        _KINDS[dtype] = kind
    except TypeError:  # an unhashable extension dtype: worked out each time
        pass
    return kind


def text_codes(values: np.ndarray) -> tuple[list[str], np.ndarray]:
    """The text of each value (``""`` when missing, else ``str(value)``) as (distinct texts, each value's
    index into them). Text columns repeat a few values (group, plate, flags, labels) over many rows, so each
    distinct value is converted once (pandas' hashing); a column holding one text throughout (a plate name, a
    unit, a method) is recognised with one comparison."""
    if (values.size and isinstance(first := values.flat[0], str) and isinstance(last := values.flat[-1], str)
            and last == first and pd.api.types.infer_dtype(values, skipna=False) == "string"
            and bool((values == first).all())):
        return [str(first)], np.zeros(values.shape, dtype=np.intp)
    if pd.api.types.infer_dtype(values, skipna=True) in ("string", "empty"):
        codes, uniques = pd.factorize(values, use_na_sentinel=True)
        return [*map(str, uniques), ""], codes  # code -1 (missing) picks the last text, ""
    texts = [v if isinstance(v, str) else "" if _missing_scalar(v) else str(v) for v in values]
    return texts, np.arange(len(texts))


def _text_array(texts: list[str], codes: np.ndarray) -> np.ndarray:
    """Text (``texts[codes]``) as a fixed-length UTF-8 byte-string array (NUL-padded; the longest value's
    length). HDF5 strings cannot hold a NUL character, so such a value is refused rather than stored cut
    short. Each distinct text is encoded once; rows only pick among them."""
    encoded = [t.encode("utf-8") for t in texts]
    if b"\0" in b"".join(encoded):
        raise ValueError("a text value holds a NUL character, which HDF5 strings cannot store")
    width = max(max(map(len, encoded), default=0), 1)
    return np.array(encoded, dtype=f"S{width}")[codes]


def _missing_scalar(v: Any) -> bool:
    """Whether one value of a text column is missing (None, NaN, pd.NA, NaT): stored as ``""``. A cell holding
    an array or a list is not missing: it is stored as its ``str()``."""
    return bool(pd.api.types.is_scalar(v) and pd.isna(v))


def write_traces(parent: Any, name: str, traces: Traces, links: Links | None = None) -> Any:
    """Write one plate's traces: time (s), signal, mask, saturated and the well table. With ``links``,
    arrays and the well table already stored (the same objects, passed on by a step) are hard-linked."""
    g = parent.create_group(name)
    g.attrs["kind"] = "traces"
    g.attrs["plate"] = traces.plate
    g.attrs["signal_unit"] = traces.signal_unit
    arrays = [("time", traces.time, "s"), ("signal", traces.signal, traces.signal_unit), ("mask", traces.mask, None),
              ("saturated", traces.saturated, None)]
    if traces.temperature is not None:
        arrays.append(("temperature", traces.temperature, "degC"))
    for key, arr, unit in arrays:
        if links is not None and links.known(arr) is not None:
            g[key] = links.known(arr)
            continue
        ds = g.create_dataset(key, data=np.asarray(arr))
        if unit is not None:
            ds.attrs["unit"] = unit
        if links is not None:
            links.remember(arr, ds)
    if links is not None and links.known(traces.wells) is not None:
        g["wells"] = links.known(traces.wells)
    else:
        wells = write_table(g, "wells", Table(traces.wells, dict(traces.well_units)), links)
        if links is not None:
            links.remember(traces.wells, wells)
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


def write_artifact(group: Any, name: str, value: Any, links: Links | None = None) -> None:
    """Write a stage output of any supported type (Traces, Table, DataFrame, array, mapping of those, or a
    plain value, stored as an attribute of ``group``)."""
    if isinstance(value, Traces):
        write_traces(group, name, value, links)
    elif isinstance(value, pd.DataFrame) and links is not None and links.known(value) is not None:
        group[name] = links.known(value)
    elif isinstance(value, Table | pd.DataFrame):
        ds = write_table(group, name, value, links)
        if links is not None and isinstance(value, pd.DataFrame):
            links.remember(value, ds)
    elif isinstance(value, np.ndarray):
        if value.dtype.kind in "OUS":
            group.create_dataset(name, data=value.astype(object), dtype=_h5py().string_dtype("utf-8"))
        else:
            group.create_dataset(name, data=value)
    elif isinstance(value, Mapping):
        sub = group.create_group(name)
        for k, v in value.items():
            write_artifact(sub, str(k), v, links)
    elif isinstance(value, str | int | float | bool):
        group.attrs[name] = value
    else:
        group.attrs[name] = to_json(value)


def new_group(parent: Any, name: str) -> Any:
    """A group whose members and attributes keep the order they were made in (steps in recipe order, plates
    in the batch's order)."""
    return parent.create_group(name, track_order=True)
