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
from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
import pandas as pd

DIGEST_ATTR = "vzero_digest"


def _name(h: Any, name: str) -> None:
    b = name.encode("utf-8")
    h.update(len(b).to_bytes(8, "little") + b)


def _texts(h: Any, values: Any) -> None:
    """Each text as its 8-byte length and UTF-8 bytes. Text columns repeat a few values over many rows, so
    each distinct value is encoded once and rows only pick among them."""
    arr = np.asarray(values, dtype=object).ravel() if not isinstance(values, np.ndarray) else values.ravel()
    if arr.size == 0:
        return
    codes, distinct = pd.factorize(arr, use_na_sentinel=False)
    encoded = [v if isinstance(v, bytes) else str(v).encode("utf-8") for v in distinct.tolist()]
    prefixed = np.array([len(b).to_bytes(8, "little") + b for b in encoded], dtype=object)
    h.update(b"".join(prefixed[codes].tolist()))


def plain_texts(h: Any, arr: np.ndarray) -> None:
    """Feed the text values of ``arr`` (any shape; str, bytes or objects) into ``h`` as :func:`_texts` does."""
    _texts(h, arr.ravel().tolist())


def value_bytes(h: Any, value: Any, texts: Callable[[Any, np.ndarray], None] = plain_texts) -> None:
    """Feed one stored value (a dataset's or attribute's, as h5py reads it) into the hash ``h``. ``texts``
    feeds an array of text values (the writer's fast twin passes one that encodes fixed-length text at once;
    every reader uses the default)."""
    if isinstance(value, str | bytes):
        b = value if isinstance(value, bytes) else value.encode("utf-8")
        h.update(b"s" + len(b).to_bytes(8, "little") + b)
        return
    arr = np.asarray(value)
    h.update(f"|{arr.shape}|".encode())
    if arr.dtype.names:
        h.update(b"c")
        for field in arr.dtype.names:
            _name(h, field)
            value_bytes(h, arr[field], texts)
    elif arr.dtype.kind in "OSU":
        h.update(b"t")
        texts(h, arr)
    else:
        little = arr.dtype.newbyteorder("<")
        h.update(little.str.encode())
        h.update(np.ascontiguousarray(arr, dtype=little).reshape(-1).view(np.uint8))


def object_digest(obj: Any, known: Mapping[str, bytes] | None = None, memo: dict[Any, bytes] | None = None) -> bytes:
    """The digest of an HDF5 group or dataset (see the module docstring). ``known`` gives, by member name,
    digests of members already computed (by the process that wrote them), so that a parent's digest does not
    read its members again; ``memo`` remembers digests by HDF5 object, so that an object reached under two
    names (a hard link: steps share the time axis and the well table) is read once."""
    import h5py

    if memo is not None and obj.id in memo:
        return memo[obj.id]
    h = hashlib.sha256()
    if isinstance(obj, h5py.Dataset):
        h.update(b"D")
        value_bytes(h, obj[()])
    else:
        h.update(b"G")
        for name in sorted(obj):
            _name(h, name)
            h.update(known[name] if known is not None and name in known else object_digest(obj[name], memo=memo))
    attrs_bytes(h, obj)
    d = h.digest()
    if memo is not None:
        memo[obj.id] = d
    return d


def attrs_bytes(h: Any, obj: Any) -> None:
    """Feed every attribute of ``obj`` but the stored digest into ``h``, in name order."""
    attrs = obj.attrs
    for name in sorted(attrs):
        if name == DIGEST_ATTR:
            continue
        _name(h, name)
        value_bytes(h, attrs[name])


def check(obj: Any, path: str, problems: list[str], checked: list[str], memo: dict[Any, bytes] | None = None) -> bytes:
    """Recompute the digest of ``obj`` and of every member, comparing each with the digest stored there.

    A mismatch is reported for the deepest stored digest that disagrees (a parent whose members all agree but
    which itself disagrees has a changed attribute or a member added or removed). Returns the recomputed
    digest."""
    import h5py

    memo = {} if memo is None else memo
    if isinstance(obj, h5py.Dataset):
        d = object_digest(obj, memo=memo)
    else:
        known = {}
        n_before = len(problems)
        for name in sorted(obj):
            known[name] = check(obj[name], f"{path.rstrip('/')}/{name}", problems, checked, memo)
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


class _Attrs:
    """The ``attrs`` of a :class:`Recorder` object: sets the attribute in the file and remembers the value as
    it reads back (a Python int as int64, a float as float64, a bool as numpy bool, text as text)."""

    def __init__(self, node: Recorder) -> None:
        self._node = node

    def __setitem__(self, name: str, value: Any) -> None:
        self._node.set_attr(name, value)
        self._node.recorded[name] = value if isinstance(value, str | bytes | np.ndarray) else np.asarray(value)
        if name != DIGEST_ATTR:  # (the stored digest is not itself hashed)
            self._node.dataset_digest = None

    def __getitem__(self, name: str) -> Any:
        return self._node.h5.attrs[name]

    def __contains__(self, name: object) -> bool:
        return name in self._node.recorded


class Recorder:
    """A group or dataset being written that remembers what is written into it, so that its digest is computed
    from the values in memory instead of reading the file back.

    It offers what :mod:`vzero.audit.codec` calls on a group (``create_group``, ``create_dataset``, ``attrs``,
    linking an object already written under a new name) and gives the digest :func:`object_digest` computes
    from the file; tests/pipeline/test_batch.py checks that the two agree for every digest a run stores. The
    writes themselves go through h5py's high-level objects here; :class:`vzero.audit._fast.FastRecorder` is the
    low-level twin (tests/pipeline/test_audit_fast.py checks that both store the same objects and digests).

    A group may also hold members written elsewhere (copied in from a worker's part) whose digests are
    ``known``; a dataset whose value has been hashed (:meth:`settle_value`) holds that hash instead of the
    value, so that a long run does not keep every raw input in memory."""

    #: Feeds one value into a hash (:func:`value_bytes`; the fast twin has its own).
    hash_value: Callable[[Any, Any], None] = staticmethod(value_bytes)

    def __init__(self, h5: Any, value: Any = None) -> None:
        self.h5 = h5
        self.value = value  # a dataset's value as it reads back; None for a group
        self.members: dict[str, Recorder] = {}
        self.known: dict[str, bytes] = {}
        self.recorded: dict[str, Any] = {}
        self.hashed: Any = None  # a dataset's hash so far ("D" and its value), once settled
        self.dataset_digest: bytes | None = None  # a dataset's digest once computed, until an attribute changes
        self.attrs = _Attrs(self)

    def __getattr__(self, name: str) -> Any:  # anything else (name, id, ...) is the HDF5 object's
        return getattr(self.h5, name)

    # the writes (the fast twin replaces these four)
    def set_attr(self, name: str, value: Any) -> None:
        self.h5.attrs[name] = value

    def new_group(self, name: str, **kwargs: Any) -> Any:
        return self.h5.create_group(name, **kwargs)

    def new_dataset(self, name: str, data: Any, **kwargs: Any) -> Any:
        return self.h5.create_dataset(name, data=data, **kwargs)

    def link(self, name: str, node: Recorder) -> None:
        self.h5[name] = node.h5

    def create_group(self, name: str, **kwargs: Any) -> Recorder:
        node = self.members[name] = type(self)(self.new_group(name, **kwargs))
        return node

    def create_dataset(self, name: str, data: Any, **kwargs: Any) -> Recorder:
        arr = np.asarray(data)
        node = type(self)(self.new_dataset(name, data, **kwargs), arr.astype(object)
                          if arr.dtype.kind in "OU" else arr)
        self.members[name] = node
        return node

    def __getitem__(self, name: str) -> Recorder:
        return self.members[name]

    def __setitem__(self, name: str, node: Recorder) -> None:
        """Link ``node`` (already written) under ``name`` too: an HDF5 hard link."""
        self.link(name, node)
        self.members[name] = node

    def forget(self, name: str, digest: bytes) -> None:
        """Keep only the digest of member ``name`` (its values need not stay in memory)."""
        self.members.pop(name, None)
        self.known[name] = digest

    def settle_value(self) -> None:
        """Hash this dataset's value now and let go of it (its attributes may still change)."""
        h = hashlib.sha256(b"D")
        self.hash_value(h, self.value)
        self.hashed, self.value = h, None

    def digest(self, memo: dict[int, bytes] | None = None) -> bytes:
        """What :func:`object_digest` gives for this object once written."""
        if self.dataset_digest is not None:  # a dataset reached again (a hard link: the final tables)
            return self.dataset_digest
        memo = {} if memo is None else memo
        if id(self) in memo:
            return memo[id(self)]
        if self.hashed is not None:
            h = self.hashed.copy()
        elif self.value is not None:
            h = hashlib.sha256(b"D")
            self.hash_value(h, self.value)
        else:
            h = hashlib.sha256(b"G")
            members = {**self.known, **{name: node.digest(memo) for name, node in self.members.items()}}
            for name in sorted(members):
                _name(h, name)
                h.update(members[name])
        for name in sorted(self.recorded):
            if name != DIGEST_ATTR:
                _name(h, name)
                self.hash_value(h, self.recorded[name])
        memo[id(self)] = d = h.digest()
        if self.value is not None or self.hashed is not None:
            self.dataset_digest = d
        return d
