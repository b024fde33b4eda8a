"""Reading tables of audit format 1.x (1.0 to 1.2), which later formats replaced.

In 1.x a table is a group (attribute ``kind = "table"``) with one dataset per column named ``000``, ``001``,
..., the column names in the JSON attribute ``columns`` and a checksum of the stored content in ``sha256``.
Kept so that every old file still reads, verifies and reruns; nothing here writes.
"""

from __future__ import annotations

import hashlib
import json
from typing import Any

import numpy as np
import pandas as pd
from vzero.data import Table


def to_json(value: Any) -> str:
    return json.dumps(value, sort_keys=True, default=str, ensure_ascii=False)


def _text(values: Any) -> list[str]:
    return [v.decode("utf-8") if isinstance(v, bytes) else str(v) for v in values]


def _length_prefixed(text: Any) -> bytes:
    """Each string as its UTF-8 length (8 bytes, little-endian) followed by its bytes, all concatenated."""
    return b"".join(len(e).to_bytes(8, "little") + e for e in (t.encode("utf-8") for t in text))


def _units(group: Any, columns: list[str]) -> list[str]:
    """Each column's unit: the group attribute ``units`` (format 1.2), else each dataset's ``unit`` (1.0, 1.1)."""
    if "units" in group.attrs:
        return [str(u) for u in json.loads(group.attrs["units"])]
    return [str(group[f"{i:03d}"].attrs.get("unit", "")) for i in range(len(columns))]


def table_sha256(group: Any) -> str:
    """SHA-256 (hex) of a 1.x table as its ``sha256`` attribute records it (formats 1.1 and 1.2): the JSON
    list of column names, then per column ``|<unit>|<kind>|<shape>|`` and its values (numbers little-endian,
    text as UTF-8 with 8-byte lengths)."""
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


def read_table(group: Any) -> Table:
    """A 1.x table group as a :class:`Table` (same values, same units)."""
    columns = json.loads(group.attrs["columns"])
    data: dict[str, Any] = {}
    units: dict[str, str] = {}
    for i, (col, unit) in enumerate(zip(columns, _units(group, columns), strict=True)):
        ds = group[f"{i:03d}"]
        data[col] = np.array(_text(ds[()]), dtype=object) if ds.dtype.kind in "OSU" else ds[()]
        if unit:
            units[col] = unit
    frame = pd.DataFrame(data, columns=columns)
    meta = json.loads(group.attrs["meta"]) if "meta" in group.attrs else {}
    return Table(frame, units, meta)
