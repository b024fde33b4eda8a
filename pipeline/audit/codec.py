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
column order in the group attribute ``columns`` (JSON), the units in the group attribute ``units`` (JSON, in
column order) and a checksum of its stored content in the group attribute ``sha256`` (see
:func:`table_sha256`; checked by ``vzero verify``). No pickle anywhere: every value is a plain HDF5 type any
reader understands.

Format history: 1.0 first version; 1.1 adds ``sha256`` on tables and the root attributes ``assay``,
``exclusions`` and ``overrides`` (JSON); 1.2 moves column units to the table's ``units`` attribute (columns
carry no attributes) and stores text columns as fixed-length UTF-8 strings. A reader of 1.x reads every 1.y.
"""

from __future__ import annotations

import functools
import json
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd
from vzero.data import Table, Traces, values_as
from vzero.data import columns as data_columns

FORMAT_NAME = "vzero-audit"
FORMAT_VERSION = "1.2"


def _h5py() -> Any:
    import h5py

    return h5py


def to_json(value: Any) -> str:
    """JSON text for attributes; quantities and other objects become their text form."""
    return json.dumps(value, sort_keys=True, default=str, ensure_ascii=False)


class Links:
    """What is already stored in one file, so that the same data is written once and hard-linked.

    Steps pass much through unchanged (the time axis, the well table, most columns of a rates table), and
    each stored copy costs a dataset. An HDF5 hard link makes the second name point at the first object:
    readers see two ordinary datasets with the same values. Objects are matched by identity (the same Python
    object written twice) and columns also by content (same type, shape and bytes; columns carry no name or unit).
    """

    def __init__(self) -> None:
        self.by_id: dict[int, Any] = {}
        self.keep: list[Any] = []  # keeps matched Python objects alive so their ids stay unique
        self.by_content: dict[tuple[Any, ...], Any] = {}

    def known(self, obj: Any) -> Any:
        return self.by_id.get(id(obj))

    def remember(self, obj: Any, h5obj: Any) -> None:
        self.by_id[id(obj)] = h5obj
        self.keep.append(obj)

    def clear(self) -> None:
        """Forget everything (the objects kept alive, and the open datasets' handles)."""
        self.by_id, self.keep, self.by_content = {}, [], {}


def write_table(group: Any, name: str, table: Table | pd.DataFrame, links: Links | None = None) -> Any:
    """Write ``table`` as ``group/name`` with one dataset per column.

    The ``sha256`` attribute is computed from the arrays as they are written, byte for byte what
    :func:`table_sha256` computes from the stored datasets (reading them back would double the cost). With
    ``links``, a table or column already stored in the file is hard-linked instead of written again.
    Units sit in one group attribute (``units``) rather than on each column: every HDF5 attribute costs about
    as much as a small dataset, and a table has dozens of columns.
    """
    import hashlib

    if isinstance(table, pd.DataFrame):
        table = Table(table)
    if links is not None and links.known(table) is not None:
        group[name] = links.known(table)
        return group[name]
    h5py = _h5py()
    frame = table.frame
    gid = h5py.h5g.create(group.id, *_link_name(name))
    columns = [str(c) for c in frame.columns]
    units = [str(table.units.get(c, "")) for c in columns]
    _new_attr(gid, "kind", "table")
    _new_attr(gid, "columns", to_json(columns))
    _new_attr(gid, "units", to_json(units))
    _new_attr(gid, "n_rows", len(frame))
    digest = hashlib.sha256(to_json(columns).encode("utf-8"))
    for i, ((dtype, values), unit) in enumerate(zip(data_columns(frame), units, strict=True)):
        arr, kind, body = _column_values(dtype, values)
        head = f"|{kind}|{arr.shape}|".encode()
        digest.update(f"|{unit}".encode() + head)
        digest.update(body)
        _column(gid, f"{i:03d}", arr, head, body, links)
    if table.meta:
        _new_attr(gid, "meta", to_json(dict(table.meta)))
    _new_attr(gid, "sha256", digest.hexdigest())
    g = h5py.Group(gid)
    if links is not None:
        links.remember(table, g)
    return g


def _set_attr(obj: Any, name: str, value: Any) -> None:
    """``obj.attrs[name] = value``; a new attribute with a text or number value goes through
    :func:`_new_attr` (the same stored type at less than half the cost: a run sets hundreds)."""
    if isinstance(value, str | int | float) and not _h5py().h5a.exists(obj.id, name.encode()):
        _new_attr(obj.id, name, value)
    else:
        obj.attrs[name] = value


def _new_attr(oid: Any, name: str, value: str | int | float) -> None:
    """Set an attribute of a new object through h5py's low-level calls: the type ``obj.attrs[name] = value``
    stores (a scalar variable-length UTF-8 string, int64 or float64) at less than half the cost."""
    h5py = _h5py()
    arr = np.array(value, dtype=_VSTR) if isinstance(value, str) else np.array(value)
    tid = _scalar_types.get(arr.dtype.str)
    if tid is None:
        tid = _scalar_types[arr.dtype.str] = h5py.h5t.py_create(arr.dtype, logical=True)
    h5py.h5a.create(oid, name.encode(), tid, _scalar_space()).write(arr)


_VSTR = np.dtype("O", metadata={"vlen": str})  # what h5py.string_dtype() returns: variable-length UTF-8
_scalar_types: dict[str, Any] = {}  # HDF5 type of a scalar attribute, by numpy dtype (created once)


@functools.cache
def _scalar_space() -> Any:
    return _h5py().h5s.create(_h5py().h5s.SCALAR)


def _column_values(dtype: Any, values: Any) -> tuple[np.ndarray, str, bytes]:
    """The array to store for one column (its dtype and values from :func:`vzero.data.columns`), its kind
    for the hash (``b``, ``i``, ``f``; ``O`` for text however it is stored) and the bytes the hash covers
    (little-endian numbers; length-prefixed UTF-8 text)."""
    kind = _storage_kind(dtype)
    if kind == "O":
        stored, body = _text_array(*text_codes(values_as(values, object)))
        return stored, "O", body
    arr = values_as(values, _NUMERIC[kind])
    return arr, kind, arr.astype(arr.dtype.newbyteorder("<"), copy=False).tobytes()


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
    index into them). Text columns repeat a few values (group, plate, flags, labels) over many rows, so
    converting each distinct value once, with pandas' hashing in C, is much faster than once per row; a
    column holding one text throughout (a plate name, a unit, a method) is recognised with one comparison."""
    if (values.size and isinstance(first := values.flat[0], str) and isinstance(last := values.flat[-1], str)
            and last == first and pd.api.types.infer_dtype(values, skipna=False) == "string"
            and bool((values == first).all())):
        return [str(first)], np.zeros(values.shape, dtype=np.intp)
    if pd.api.types.infer_dtype(values, skipna=True) in ("string", "empty"):
        codes, uniques = pd.factorize(values, use_na_sentinel=True)
        return [*map(str, uniques), ""], codes  # code -1 (missing) picks the last text, ""
    texts = [v if isinstance(v, str) else "" if _missing_scalar(v) else str(v) for v in values]
    return texts, np.arange(len(texts))


def _text_array(texts: list[str], codes: np.ndarray) -> tuple[np.ndarray, bytes]:
    """Text (``texts[codes]``) as a fixed-length UTF-8 string array (NUL-padded; much faster to write than
    variable-length strings) and its length-prefixed bytes for the hash. HDF5 strings cannot hold a NUL
    character (neither kind keeps it), so such a value is refused rather than stored cut short.

    Each distinct text is encoded and prefixed once; rows only pick among them."""
    encoded = [t.encode("utf-8") for t in texts]
    if b"\0" in b"".join(encoded):
        raise ValueError("a text value holds a NUL character, which HDF5 strings cannot store")
    width = max(max(map(len, encoded), default=0), 1)
    fixed = np.array(encoded, dtype=f"S{width}")[codes]
    prefixed = [len(e).to_bytes(8, "little") + e for e in encoded]
    if len(prefixed) == 1:  # one text throughout
        return fixed, prefixed[0] * codes.size
    return fixed, b"".join(np.array(prefixed, dtype=object)[codes].tolist())


def _column(gid: Any, key: str, data: np.ndarray, head: bytes, body: bytes, links: Links | None) -> None:
    """One column dataset in group ``gid`` (a low-level group id), or a hard link to an identical one already
    in the file (same type, shape and bytes: columns carry no attributes, so name and unit do not matter)."""
    import hashlib

    content = (head, data.dtype.str, hashlib.sha256(body).digest()) if links is not None else None
    if content is not None and content in links.by_content:  # type: ignore[union-attr]
        _h5py().h5o.link(links.by_content[content], gid, key.encode())  # type: ignore[union-attr]
        return
    dsid = _dataset(gid, key, data)
    if content is not None:
        links.by_content[content] = dsid  # type: ignore[union-attr]


def _dataset(gid: Any, key: str, data: np.ndarray) -> Any:
    """``create_dataset(key, data=data)`` through h5py's low-level calls (half the cost for small columns:
    no keyword handling, no filters, contiguous layout); returns the low-level dataset id. HDF5's default
    creation properties are kept (so the object records its creation time, which h5py's call leaves out):
    any other property list costs about 3 µs a dataset."""
    h5py = _h5py()
    tid = _dataset_types.get(data.dtype.str)
    if tid is None:  # fixed-length byte strings are stored as UTF-8 text (h5py.string_dtype("utf-8", n))
        stored = h5py.string_dtype("utf-8", data.dtype.itemsize) if data.dtype.kind == "S" else data.dtype
        tid = _dataset_types[data.dtype.str] = h5py.h5t.py_create(stored, logical=True)
    sid = h5py.h5s.create_simple(data.shape)
    dsid = h5py.h5d.create(gid, key.encode(), tid, sid)
    if data.size:
        dsid.write(h5py.h5s.ALL, h5py.h5s.ALL, np.ascontiguousarray(data), mtype=tid)
    return dsid


def _link_name(name: str) -> tuple[bytes, Any]:
    """A link name for h5py's low-level calls, with the link-creation properties h5py's own calls use: ASCII
    names marked ASCII, any other name encoded and marked UTF-8 (so a plate or table named ``Platte-ä`` is
    stored alike whichever path wrote it)."""
    try:
        return name.encode("ascii"), None
    except UnicodeEncodeError:
        return name.encode("utf-8"), _utf8_links()


def _new_group(parent: Any, name: str, track_order: bool = True) -> Any:
    """``parent.create_group(name, track_order=...)``: with ``track_order`` creation order tracked and indexed as
    h5py does it, from a creation property list made once rather than per group; otherwise HDF5's defaults
    (a non-default list costs more per object than it saves)."""
    h5py = _h5py()
    gcpl = _group_properties() if track_order else None
    return h5py.Group(h5py.h5g.create(parent.id, *_link_name(name), gcpl=gcpl))


@functools.cache
def _group_properties() -> Any:
    h5py = _h5py()
    gcpl = h5py.h5p.create(h5py.h5p.GROUP_CREATE)
    order = h5py.h5p.CRT_ORDER_TRACKED | h5py.h5p.CRT_ORDER_INDEXED
    gcpl.set_link_creation_order(order)
    gcpl.set_attr_creation_order(order)
    return gcpl


@functools.cache
def _utf8_links() -> Any:
    h5py = _h5py()
    lcpl = h5py.h5p.create(h5py.h5p.LINK_CREATE)
    lcpl.set_char_encoding(h5py.h5t.CSET_UTF8)
    return lcpl


_dataset_types: dict[str, Any] = {}  # HDF5 type of a column dataset, by numpy dtype (created once)


def _length_prefixed(text: Any) -> bytes:
    """Each string as its UTF-8 length (8 bytes, little-endian) followed by its bytes, all concatenated."""
    return b"".join(len(e).to_bytes(8, "little") + e for e in (t.encode("utf-8") for t in text))


def _text(values: Any) -> list[str]:
    return [v.decode("utf-8") if isinstance(v, bytes) else str(v) for v in values]


def _units(group: Any, columns: list[str]) -> list[str]:
    """Each column's unit: the group attribute ``units`` (format 1.2 on), else each dataset's ``unit``."""
    if "units" in group.attrs:
        return [str(u) for u in json.loads(group.attrs["units"])]
    return [str(group[f"{i:03d}"].attrs.get("unit", "")) for i in range(len(columns))]


def table_sha256(group: Any) -> str:
    """SHA-256 (hex) of a stored table: column names, units, dtypes, shapes and values, in column order.

    Computed from what is in the file (not from the DataFrame), so a reader recomputes exactly the same
    digest from the datasets; text is hashed as its UTF-8 bytes with lengths, numbers as little-endian bytes.
    """
    import hashlib

    h = hashlib.sha256()
    columns = json.loads(group.attrs["columns"])
    h.update(to_json(columns).encode("utf-8"))
    for i, unit in enumerate(_units(group, columns)):
        ds = group[f"{i:03d}"]
        text = ds.dtype.kind in "OSU"
        h.update(f"|{unit}|{'O' if text else ds.dtype.kind}|{ds.shape}|".encode())
        if text:
            h.update(_length_prefixed(_text(ds[()])))
        else:
            arr = np.ascontiguousarray(ds[()])
            h.update(arr.astype(arr.dtype.newbyteorder("<"), copy=False).tobytes())
    return h.hexdigest()


def _missing_scalar(v: Any) -> bool:
    """Whether one value of a text column is missing (None, NaN, pd.NA, NaT): stored as ``""``. A cell holding
    an array or a list is not missing: it is stored as its ``str()``."""
    return bool(pd.api.types.is_scalar(v) and pd.isna(v))


def read_table(group: Any) -> Table:
    """Read a table written by :func:`write_table` back into a :class:`Table` (same values, same units)."""
    columns = json.loads(group.attrs["columns"])
    data: dict[str, Any] = {}
    units: dict[str, str] = {}
    for i, (col, unit) in enumerate(zip(columns, _units(group, columns), strict=True)):
        ds = group[f"{i:03d}"]
        if ds.dtype.kind in "OSU":
            data[col] = np.array(_text(ds[()]), dtype=object)
        else:
            data[col] = ds[()]
        if unit:
            units[col] = unit
    frame = pd.DataFrame(data, columns=columns)
    meta = json.loads(group.attrs["meta"]) if "meta" in group.attrs else {}
    return Table(frame, units, meta)


def write_traces(group: Any, name: str, traces: Traces, links: Links | None = None) -> Any:
    """Write one plate's traces: time (s), signal, mask, saturated and the well table. With ``links``,
    arrays and the well table already stored (the same objects, passed on by a step) are hard-linked."""
    g = _new_group(group, name, track_order=False)
    _new_attr(g.id, "kind", "traces")
    _new_attr(g.id, "plate", traces.plate)
    _new_attr(g.id, "signal_unit", traces.signal_unit)
    arrays = [("time", traces.time, "s"), ("signal", traces.signal, traces.signal_unit), ("mask", traces.mask, None),
              ("saturated", traces.saturated, None)]
    if traces.temperature is not None:
        arrays.append(("temperature", traces.temperature, "degC"))
    for key, arr, unit in arrays:
        if links is not None and links.known(arr) is not None:
            g[key] = links.known(arr)
            continue
        dsid = _dataset(g.id, key, np.asarray(arr))
        if unit is not None:
            _new_attr(dsid, "unit", unit)
        ds = _h5py().Dataset(dsid)
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
    """Write a stage output of any supported type (Traces, Table, DataFrame, array, mapping of those)."""
    if isinstance(value, Traces):
        write_traces(group, name, value, links)
    elif isinstance(value, pd.DataFrame) and links is not None and links.known(value) is not None:
        group[name] = links.known(value)
    elif isinstance(value, Table | pd.DataFrame):
        g = write_table(group, name, value, links)
        if links is not None and isinstance(value, pd.DataFrame):
            links.remember(value, g)
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
        _set_attr(group, name, value)
    else:
        _set_attr(group, name, to_json(value))
