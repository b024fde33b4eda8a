"""Digests that cover every value in an audit file (format 2.0 on): every dataset and every attribute.

A digest is SHA-256 over an object's content in a fixed order:

* a dataset: ``D``, then its value (below), then its attributes;
* a group: ``G``, then each member in name order (its name, then its digest), then its attributes;
* attributes: in name order, each its name and its value, leaving out the attribute ``vzero_digest`` itself
  (where stored digests live).

A value is its type tag and shape, then its bytes: numbers little-endian (bool as one byte), each text
value as its UTF-8 length (8 bytes, little-endian) and bytes, a compound type field by field (the field's
name, then the field's values as above). Names are hashed as UTF-8 with their length.

The writer stores the digest of each step's plate (or pooled) group, of each step, of ``/steps``,
``/inputs`` and ``/results``, and of the whole file (the root) in the attribute ``vzero_digest`` (hex);
``vzero verify`` recomputes them all from what is stored. A matching digest shows the file is unchanged
since it was written; it is not a signature (whoever can edit the file can rewrite the digests too).
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from typing import Any

import numpy as np

DIGEST_ATTR = "vzero_digest"


def _name(h: Any, name: str) -> None:
    b = name.encode("utf-8")
    h.update(len(b).to_bytes(8, "little") + b)


def _texts(h: Any, values: Any) -> None:
    for v in values:
        b = v if isinstance(v, bytes) else str(v).encode("utf-8")
        h.update(len(b).to_bytes(8, "little") + b)


def value_bytes(h: Any, value: Any) -> None:
    """Feed one stored value (a dataset's or attribute's, as h5py reads it) into the hash ``h``."""
    if isinstance(value, str | bytes):
        h.update(b"s")
        _texts(h, [value])
        return
    arr = np.asarray(value)
    h.update(f"|{arr.shape}|".encode())
    if arr.dtype.names:
        h.update(b"c")
        for field in arr.dtype.names:
            _name(h, field)
            value_bytes(h, arr[field])
    elif arr.dtype.kind in "OSU":
        h.update(b"t")
        _texts(h, arr.ravel().tolist())
    else:
        little = arr.dtype.newbyteorder("<")
        h.update(little.str.encode())
        h.update(np.ascontiguousarray(arr, dtype=little).tobytes())


def object_digest(obj: Any, known: Mapping[str, bytes] | None = None) -> bytes:
    """The digest of an HDF5 group or dataset (see the module docstring). ``known`` gives, by member name,
    digests of members already computed (by the process that wrote them), so that a parent's digest does not
    read its members again."""
    import h5py

    h = hashlib.sha256()
    if isinstance(obj, h5py.Dataset):
        h.update(b"D")
        value_bytes(h, obj[()])
    else:
        h.update(b"G")
        for name in sorted(obj):
            _name(h, name)
            h.update(known[name] if known is not None and name in known else object_digest(obj[name]))
    attrs_bytes(h, obj)
    return h.digest()


def attrs_bytes(h: Any, obj: Any) -> None:
    """Feed every attribute of ``obj`` but the stored digest into ``h``, in name order."""
    attrs = obj.attrs
    for name in sorted(attrs):
        if name == DIGEST_ATTR:
            continue
        _name(h, name)
        value_bytes(h, attrs[name])


def seal(obj: Any, known: Mapping[str, bytes] | None = None) -> bytes:
    """Compute ``obj``'s digest, store it (hex) as its ``vzero_digest`` attribute and return it."""
    d = object_digest(obj, known)
    obj.attrs[DIGEST_ATTR] = d.hex()
    return d


def check(obj: Any, path: str, problems: list[str], checked: list[str]) -> bytes:
    """Recompute the digest of ``obj`` and of every member, comparing each with the digest stored there.

    A mismatch is reported for the deepest stored digest that disagrees (a parent whose members all agree but
    which itself disagrees has a changed attribute or a member added or removed). Returns the recomputed
    digest."""
    import h5py

    if isinstance(obj, h5py.Dataset):
        d = object_digest(obj)
    else:
        known = {}
        n_before = len(problems)
        for name in sorted(obj):
            known[name] = check(obj[name], f"{path.rstrip('/')}/{name}", problems, checked)
        d = object_digest(obj, known)
        if len(problems) > n_before:
            return d  # the damage is already reported deeper down
    stored = obj.attrs.get(DIGEST_ATTR)
    if stored is not None:
        if str(stored) != d.hex():
            problems.append(f"{path}: content does not match its recorded digest (a value was changed or damaged)")
        else:
            checked.append(path)
    return d
