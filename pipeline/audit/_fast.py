"""Low-level twins of two writer steps that run once per plate in the process writing the audit file.

In a batch that process feeds the workers and writes every plate, so its work per plate bounds how many
workers it can keep busy. These functions do what their plain twins in :mod:`vzero.audit.writer` do
(:func:`~vzero.audit.writer.plain_input_dataset`, :func:`~vzero.audit.writer.plain_copy_part`) through
h5py's low-level calls, skipping the high-level objects' bookkeeping; tests/pipeline/test_audit_fast.py checks
that both write the same objects, types and values.
"""

from __future__ import annotations

import functools
from typing import Any

import numpy as np


def input_dataset(group: Any, name: str, data: bytes, attrs: dict[str, str | int]) -> Any:
    """A one-dimensional uint8 dataset ``group/name`` holding ``data``, with text or integer attributes."""
    import h5py

    arr = np.frombuffer(data, dtype=np.uint8)
    space = h5py.h5s.create_simple(arr.shape)
    dsid = h5py.h5d.create(group.id, name.encode(), h5py.h5t.STD_U8LE, space)
    if arr.size:
        dsid.write(h5py.h5s.ALL, h5py.h5s.ALL, arr)
    for key, value in attrs.items():
        _attr(dsid, key, value)
    return h5py.Dataset(dsid)


def _attr(oid: Any, name: str, value: str | int) -> None:
    """An attribute of the type ``obj.attrs[name] = value`` stores: a scalar variable-length UTF-8 string or an
    int64."""
    import h5py

    arr = np.array(value, dtype=h5py.string_dtype()) if isinstance(value, str) else np.array(value, dtype=np.int64)
    tid = _string_type() if isinstance(value, str) else h5py.h5t.STD_I64LE
    h5py.h5a.create(oid, name.encode(), tid, _scalar_space()).write(arr)


@functools.cache
def _string_type() -> Any:
    import h5py

    return h5py.h5t.py_create(h5py.string_dtype(), logical=True)


@functools.cache
def _scalar_space() -> Any:
    import h5py

    return h5py.h5s.create(h5py.h5s.SCALAR)


def copy_part(f: Any, part: bytes, places: list[tuple[str, Any, str]]) -> None:
    """Copy the in-memory HDF5 file ``part`` (one group per step label) into ``f`` and link each step's group
    as ``step_group/name`` for every (label, step_group, name) of ``places``.

    The whole part is copied at once into a staging group (so data shared between its steps stays shared),
    its groups are linked into place and the staging name removed."""
    import h5py

    staging = b"_part"
    src = h5py.h5f.open_file_image(part)
    try:
        h5py.h5o.copy(src, b"/", f.id, staging)
    finally:
        src.close()
    for label, step, name in places:
        obj = h5py.h5o.open(f.id, staging + b"/" + label.encode("utf-8"))
        try:
            h5py.h5o.link(obj, step.id, *_link_name(name))
        finally:
            obj.close()
    root = h5py.h5g.open(f.id, b"/")
    try:
        root.unlink(staging)  # the step groups stay reachable through their new links
    finally:
        root.close()


def _link_name(name: str) -> tuple[bytes, Any]:
    """A link name and the link-creation properties h5py's own calls use: ASCII names marked ASCII, any other
    name encoded and marked UTF-8 (so a plate named ``Platte-ä`` is stored alike whichever path wrote it)."""
    try:
        return name.encode("ascii"), None
    except UnicodeEncodeError:
        return name.encode("utf-8"), _utf8_links()


@functools.cache
def _utf8_links() -> Any:
    import h5py

    lcpl = h5py.h5p.create(h5py.h5p.LINK_CREATE)
    lcpl.set_char_encoding(h5py.h5t.CSET_UTF8)
    return lcpl
