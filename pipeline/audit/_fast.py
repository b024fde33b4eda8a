"""Low-level twins of the audit writer's plain h5py path: the same objects, written with fewer calls.

Writing run.h5 is dozens of groups, tables and traces and over a hundred attributes a plate, and h5py's
high-level objects spend more on each of them (type guessing, property lists made afresh, an existence check
per attribute) than HDF5 spends storing it; the digests over every value used to encode each text column one
value at a time. The functions here do what their plain twins do through h5py's low-level calls, with the
HDF5 types and property lists that h5py itself would use made once:

* :class:`FastRecorder` is :class:`vzero.audit.digest.Recorder` (which writes through h5py's high-level
  objects) with its writes replaced, and fixed-length text hashed at once (:func:`fixed_texts`);
* :func:`copy_part` is :func:`vzero.audit.writer.plain_copy_part`.

Anything these do not cover (variable-length text datasets, names with a ``/``, unusual attribute types) goes
to the plain path. tests/pipeline/test_audit_fast.py checks that both paths store the same objects, HDF5
types, property lists, values and attributes, and the same digests.
"""

from __future__ import annotations

import functools
from typing import Any

import numpy as np
from vzero.audit.digest import Recorder, plain_texts
from vzero.audit.digest import value_bytes as digest_value_bytes


def _h5py() -> Any:
    import h5py

    return h5py


def fixed_texts(h: Any, arr: np.ndarray) -> None:
    """Feed the text values of ``arr`` into ``h`` exactly as :func:`vzero.audit.digest.plain_texts` does: each
    value's length (8 bytes, little-endian) and bytes. A fixed-length byte-string array (how tables store
    text; a value is its bytes up to the last non-NUL one, as numpy reads it back) is encoded without the
    plain twin's search for distinct values: a column holding one text throughout (a plate, a unit, a
    method) is that text repeated; a short one is encoded value by value; any other is gathered at once
    from its stored bytes. A short array of text objects (an attribute's list) is encoded value by value too;
    other arrays go to the plain twin."""
    if arr.dtype.kind == "O" and 0 < arr.size < 64:  # a short list of text (an attribute): no search either
        h.update(b"".join([len(e).to_bytes(8, "little") + e for e in
                           (v if isinstance(v, bytes) else str(v).encode("utf-8") for v in arr.ravel().tolist())]))
        return
    if arr.dtype.kind != "S" or arr.size == 0:
        plain_texts(h, arr)
        return
    flat = arr.reshape(-1)
    first = flat[0]
    if bool((flat == first).all()):
        piece = bytes(first)
        h.update((len(piece).to_bytes(8, "little") + piece) * flat.size)
    elif flat.size < 64:
        h.update(b"".join([len(b).to_bytes(8, "little") + b for b in flat.tolist()]))
    else:
        h.update(_length_prefixed(flat))


def _length_prefixed(flat: np.ndarray) -> bytes:
    """Each value of the fixed-length byte-string array ``flat`` as its length (8 bytes, little-endian) and
    its bytes: every row laid out as length and stored bytes, then the bytes each value uses picked out."""
    flat = np.ascontiguousarray(flat)  # a table's field is a strided view of its rows
    n, width = flat.size, flat.dtype.itemsize
    lengths = np.strings.str_len(flat).astype("<u8")
    rows = np.concatenate([lengths.view(np.uint8).reshape(n, 8), flat.view(np.uint8).reshape(n, width)],
                          axis=1).reshape(-1)
    used = (lengths + 8).astype(np.intp)
    ends = np.cumsum(used)
    picks = np.arange(int(ends[-1])) + np.repeat(np.arange(n) * (8 + width) - (ends - used), used)
    return rows[picks].tobytes()


def value_bytes(h: Any, value: Any) -> None:
    """Feed one value into ``h`` exactly as :func:`vzero.audit.digest.value_bytes` does, with text through
    :func:`fixed_texts`; a stored table (a compound array of numbers and fixed-length text) has the bytes
    that come before each field's values (its name, the shape, the type) worked out once per type."""
    if isinstance(value, np.ndarray) and value.dtype.names:
        layout = _field_layout(value.dtype)
        if layout is not None:
            shape = f"|{value.shape}|".encode()
            h.update(shape + b"c")
            for field, name, kind, little in layout:
                h.update(name + shape + kind)
                if little is None:
                    fixed_texts(h, value[field])
                else:
                    h.update(np.ascontiguousarray(value[field], dtype=little).reshape(-1).view(np.uint8))
            return
    digest_value_bytes(h, value, fixed_texts)


@functools.lru_cache(maxsize=256)
def _field_layout(dtype: np.dtype) -> tuple[tuple[str, bytes, bytes, np.dtype | None], ...] | None:
    """For each field of a compound type: its name, its name as hashed (length and UTF-8), its type tag as
    hashed (``t`` for text, else the little-endian type code) and the little-endian type to hash its numbers
    in (None for text); None when a field is anything else (nested, an array, variable-length)."""
    out: list[tuple[str, bytes, bytes, np.dtype | None]] = []
    for field in dtype.names or ():
        sub = dtype[field]
        encoded = field.encode("utf-8")
        name = len(encoded).to_bytes(8, "little") + encoded
        if sub.kind == "S" and sub.subdtype is None:
            out.append((field, name, b"t", None))
        elif sub.kind in "biuf" and sub.subdtype is None and not sub.names:
            little = sub.newbyteorder("<")
            out.append((field, name, little.str.encode(), little))
        else:
            return None
    return tuple(out)


class FastRecorder(Recorder):
    """A :class:`~vzero.audit.digest.Recorder` that writes through h5py's low-level calls.

    It wraps only objects it created itself (or a new, empty file's root), so an attribute exists exactly when
    it has been recorded here; that replaces HDF5's own existence check before each attribute."""

    hash_value = staticmethod(value_bytes)

    def set_attr(self, name: str, value: Any) -> None:
        if not write_attr(self.h5.id, name, value, exists=name in self.recorded):
            super().set_attr(name, value)

    def new_group(self, name: str, **kwargs: Any) -> Any:
        track_order = kwargs.pop("track_order", None)
        if kwargs:
            return super().new_group(name, track_order=track_order, **kwargs)
        h5py = _h5py()
        if track_order is None:
            track_order = h5py.get_config().track_order
        encoded, lcpl = _link_name(name)
        return h5py.Group(h5py.h5g.create(self.h5.id, encoded, lcpl=lcpl, gcpl=_gcpl(bool(track_order))))

    def new_dataset(self, name: str, data: Any, **kwargs: Any) -> Any:
        arr = data if isinstance(data, np.ndarray) else None
        if kwargs or arr is None or "/" in name or not _plain_type(arr.dtype):
            return super().new_dataset(name, data, **kwargs)
        h5py = _h5py()
        arr = np.asarray(arr, order="C")
        tid = _file_type(arr.dtype)
        # h5py names a dataset without link properties (so its name is marked ASCII whatever it holds)
        dsid = h5py.h5d.create(self.h5.id, _encode(name), tid, h5py.h5s.create_simple(arr.shape),
                               dcpl=_dcpl(bool(h5py.get_config().track_order)))
        dsid.write(h5py.h5s.ALL, h5py.h5s.ALL, arr, mtype=tid)
        return h5py.Dataset(dsid)

    def link(self, name: str, node: Recorder) -> None:
        encoded, lcpl = _link_name(name)
        _h5py().h5o.link(node.h5.id, self.h5.id, encoded, lcpl=lcpl)


def write_attr(oid: Any, name: str, value: Any, exists: bool) -> bool:
    """Store ``value`` as attribute ``name`` of the object ``oid`` with the HDF5 type, dataspace and memory
    type ``obj.attrs[name] = value`` uses (an existing attribute of that name is deleted first, as h5py does).
    Text, numbers, bools and arrays of them or of text are handled; returns False (nothing written) for
    anything else, which the caller hands to h5py."""
    h5py = _h5py()
    if isinstance(value, str):
        data = np.array(value, dtype=h5py.string_dtype())
        ftype, mtype = _text_types()
    else:
        data = np.asarray(value)
        if data.dtype.kind == "O" and data.size and all(type(v) is str for v in data.flat):
            data = data.astype(h5py.string_dtype())
            ftype, mtype = _text_types()
        elif _plain_type(data.dtype) and not data.dtype.names:
            ftype = mtype = _file_type(data.dtype)
            data = np.asarray(data, order="C")  # (ascontiguousarray would make a scalar one-dimensional)
        else:
            return False
    encoded = _encode(name)
    if exists:
        h5py.h5a.delete(oid, encoded)
    space = _scalar_space() if data.shape == () else h5py.h5s.create_simple(data.shape)
    attr = h5py.h5a.create(oid, encoded, ftype, space)
    try:
        attr.write(data, mtype=mtype)
    except BaseException:
        attr.close()
        h5py.h5a.delete(oid, encoded)
        raise
    attr.close()
    return True


def _encode(name: str) -> bytes:
    """A name as h5py encodes it: ASCII when it is, else UTF-8."""
    try:
        return name.encode("ascii")
    except UnicodeEncodeError:
        return name.encode("utf-8")


def _plain_type(dtype: np.dtype) -> bool:
    """Whether arrays of ``dtype`` take the fast path: bool and numbers, and compound types whose fields are
    those or fixed-length text (a stored table)."""
    if dtype.names:
        return all(_plain_type(dtype[f]) or dtype[f].kind == "S" for f in dtype.names)
    return dtype.kind in "biuf" and dtype.metadata is None and dtype.subdtype is None


def _file_type(dtype: np.dtype) -> Any:
    """The HDF5 type h5py stores ``dtype`` as (bool as h5py's enum, text fields marked with their h5py
    encoding), made once per type. numpy compares types without their metadata (where h5py keeps a text
    field's encoding), so the metadata is part of the key."""
    key = (dtype, tuple(str(dtype[f].metadata) for f in dtype.names)) if dtype.names else (dtype, ())
    tid = _TYPES.get(key)
    if tid is None:
        if len(_TYPES) >= 512:  # text widths vary from plate to plate: keep the cache small over a long batch
            _TYPES.clear()
        tid = _TYPES[key] = _h5py().h5t.py_create(dtype, logical=True)
    return tid


_TYPES: dict[tuple[np.dtype, tuple[str, ...]], Any] = {}


@functools.cache
def _text_types() -> tuple[Any, Any]:
    """Variable-length UTF-8 text: the type stored, and the memory type h5py converts Python strings from."""
    h5py = _h5py()
    dtype = h5py.string_dtype()
    return h5py.h5t.py_create(dtype, logical=True), h5py.h5t.py_create(dtype)


@functools.cache
def _scalar_space() -> Any:
    return _h5py().h5s.create_simple(())


@functools.cache
def _gcpl(track_order: bool) -> Any:
    """Group creation properties as h5py's ``create_group`` sets them (no times; creation order kept and
    indexed when ``track_order``)."""
    h5py = _h5py()
    gcpl = h5py.h5p.create(h5py.h5p.GROUP_CREATE)
    if track_order:
        flags = h5py.h5p.CRT_ORDER_TRACKED | h5py.h5p.CRT_ORDER_INDEXED
        gcpl.set_link_creation_order(flags)
        gcpl.set_attr_creation_order(flags)
    gcpl.set_obj_track_times(False)
    return gcpl


@functools.cache
def _dcpl(track_order: bool) -> Any:
    """Dataset creation properties as h5py's ``create_dataset`` sets them for a contiguous dataset."""
    h5py = _h5py()
    dcpl = h5py.h5p.create(h5py.h5p.DATASET_CREATE)
    dcpl.set_obj_track_times(False)
    dcpl.set_attr_creation_order(h5py.h5p.CRT_ORDER_TRACKED | h5py.h5p.CRT_ORDER_INDEXED if track_order else 0)
    return dcpl


def copy_part(f: Any, part: bytes, places: list[tuple[str, Any, str]]) -> None:
    """Copy the in-memory HDF5 file ``part`` (one group per step label) into ``f`` and link each step's group
    as ``step_group/name`` for every (label, step_group, name) of ``places``.

    The whole part is copied at once into a staging group (so data shared between its steps stays shared),
    its groups are linked into place and the staging name removed."""
    h5py = _h5py()
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
    """A link name and the link-creation properties h5py's own calls use: intermediate groups made, ASCII names
    marked ASCII, any other name encoded and marked UTF-8 (so a plate named ``Platte-ä`` is stored alike
    whichever path wrote it)."""
    try:
        return name.encode("ascii"), _lcpl(False)
    except UnicodeEncodeError:
        return name.encode("utf-8"), _lcpl(True)


@functools.cache
def _lcpl(utf8: bool) -> Any:
    h5py = _h5py()
    lcpl = h5py.h5p.create(h5py.h5p.LINK_CREATE)
    lcpl.set_create_intermediate_group(True)
    lcpl.set_char_encoding(h5py.h5t.CSET_UTF8 if utf8 else h5py.h5t.CSET_ASCII)
    return lcpl
