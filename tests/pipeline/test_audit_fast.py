"""The writer's low-level twins (vzero.audit._fast) write what the plain h5py path writes: the same objects,
HDF5 types, property lists, values and attributes, so the same digests; and every digest either path stores
is the one recomputed from the file by the plain reader (vzero.audit.digest.object_digest)."""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Any

import h5py
import numpy as np
import pytest
from vzero.audit import _fast, writer
from vzero.audit.codec import texts_attr
from vzero.audit.digest import DIGEST_ATTR, object_digest, plain_texts
from vzero.run.runner import run

from tests.pipeline.test_batch import demo_batch

PER_RUN = {"created", "run_id", "started", "seconds", "recipe_path", DIGEST_ATTR}


def _attrs(obj: Any, skip: set[str]) -> dict[str, Any]:
    """Each attribute (in creation order) with its HDF5 type, dataspace and value."""
    found = {}
    for k in obj.attrs:
        if k in skip:
            continue
        a = h5py.h5a.open(obj.id, k.encode())
        space = a.get_space()
        found[k] = (a.get_type().dtype.str, a.get_type().get_class(), space.get_simple_extent_type(), space.shape,
                    repr(obj.attrs[k]))
    return found


def _layout(path: Path, skip: set[str]) -> dict[str, Any]:
    """Every object under every name: its kind, creation properties, the encoding of the link naming it, HDF5
    type, shape, storage size, raw bytes and attributes, leaving out the attributes in ``skip``."""
    out: dict[str, Any] = {}

    def walk(name: str, obj: Any, parent: Any) -> None:
        cpl = obj.id.get_create_plist()
        props: tuple[Any, ...] = (cpl.get_obj_track_times(), cpl.get_attr_creation_order(),
                                  parent.id.links.get_info(name.rsplit("/", 1)[-1].encode()).cset if name else None)
        if isinstance(obj, h5py.Dataset):
            tid = obj.id.get_type()
            out[name] = ("D", props, cpl.get_layout(), tid.get_class(), tid.get_size(), tid.dtype.str, obj.shape,
                         obj.id.get_storage_size(), np.ascontiguousarray(obj[()]).tobytes(), _attrs(obj, skip))
        else:
            out[name] = ("G", props, cpl.get_link_creation_order(), _attrs(obj, skip))
            for key in obj:
                walk(f"{name}/{key}", obj[key], obj)

    with h5py.File(path, "r") as f:
        walk("", f, f)
    return out


def _sealed(path: Path) -> dict[str, str]:
    """Every stored digest by object name, after checking each against the one recomputed from the file."""
    out = {}
    with h5py.File(path, "r") as f:
        objs: list[Any] = [f]
        f.visititems(lambda _name, obj: objs.append(obj) if DIGEST_ATTR in obj.attrs else None)
        for obj in objs:
            stored = str(obj.attrs[DIGEST_ATTR])
            assert stored == object_digest(obj).hex(), obj.name
            out[obj.name] = stored
    return out


def test_fast_and_plain_writers_store_the_same_objects_and_digests(tmp_path: Path,
                                                                   monkeypatch: pytest.MonkeyPatch):
    """One run's writer calls, replayed into the fast and the plain writer with the same clock: the two
    files hold the same objects (properties, link encodings, types, bytes, attributes) and the same digests,
    and each digest is what the plain reader recomputes from the file."""
    calls: list[tuple[str, tuple[Any, ...]]] = []

    class Capture(writer.AuditWriter):
        def __init__(self, *args: Any) -> None:
            calls.append(("init", args[1:]))
            super().__init__(*args)

        def add_input(self, *args: Any) -> None:
            calls.append(("add_input", args))
            super().add_input(*args)

        def add_record(self, *args: Any) -> Any:
            calls.append(("add_record", args))
            return super().add_record(*args)

        def finish(self, *args: Any) -> None:
            calls.append(("failed_items", (self.failed_items,)))
            calls.append(("finish", args))
            super().finish(*args)

    recipe = demo_batch(tmp_path / "in", 2)
    monkeypatch.setattr(writer, "AuditWriter", Capture)
    run(recipe, tmp_path / "run")
    monkeypatch.undo()
    assert [c for c, _ in calls].count("add_record") > 5
    monkeypatch.setattr(writer, "_created", lambda: "2026-01-01T00:00:00+00:00")

    def replay(fast: bool) -> Path:
        monkeypatch.setattr(writer, "FAST", fast)
        path = tmp_path / f"{'fast' if fast else 'plain'}.h5"
        w: Any = None
        for call, args in calls:
            if call == "init":
                w = writer.AuditWriter(path, *args)
            elif call == "failed_items":
                w.failed_items = args[0]
            else:
                getattr(w, call)(*args)
        return path

    fast, plain = replay(True), replay(False)
    a, b = _layout(fast, set()), _layout(plain, set())
    assert a.keys() == b.keys() and any(k.startswith("/inputs/") for k in a)
    for key in a:
        assert a[key] == b[key], key
    assert _sealed(fast) == _sealed(plain)


@pytest.mark.slow
def test_fast_and_plain_writers_store_the_same_bytes_in_a_batch(tmp_path: Path, monkeypatch: pytest.MonkeyPatch):
    """With worker processes (each writes its plate's part, the driver copies it in): the same objects either
    way, and every stored digest is the one recomputed from the file."""
    recipe = demo_batch(tmp_path / "in", 3)
    fast = run(recipe, tmp_path / "fast", jobs=2)
    monkeypatch.setattr(writer, "FAST", False)
    plain = run(recipe, tmp_path / "plain", jobs=2)
    a, b = _layout(fast.audit_path, PER_RUN), _layout(plain.audit_path, PER_RUN)
    assert a.keys() == b.keys() and any(k.startswith("/inputs/") for k in a)
    for key in a:
        assert a[key] == b[key], key
    assert _sealed(fast.audit_path).keys() == _sealed(plain.audit_path).keys()
    with h5py.File(fast.audit_path) as fa, h5py.File(plain.audit_path) as fb:
        assert object_digest(fa["inputs"]) == object_digest(fb["inputs"])
        assert object_digest(fa["results"]) == object_digest(fb["results"])


TEXTS = {
    "one value throughout": np.array([b"plate-1"] * 300, dtype="S7"),
    "short": np.array([b"A1", b"B12", b""], dtype="S3"),
    "long, few values": np.array([b"ok", b"flagged", b"", "Glühen".encode()] * 40, dtype="S16"),
    "long, all distinct": np.array([f"W{i}".encode() for i in range(500)]),
    "NUL inside and at the end": np.array([b"a\0b", b"ab\0", b"\0"] * 30, dtype="S4"),
    "all empty": np.array([b""] * 100, dtype="S1"),
    "no values": np.array([], dtype="S3"),
    "two dimensions": np.array([[b"x", b"yy"], [b"zzz", b"x"]] * 40, dtype="S3"),
    "text objects (plain twin)": np.array(["a", "b", "ä"] * 30, dtype=object),
    "a short list of text objects": np.array(["uM", "", "µM/min", b"raw", 3], dtype=object),
}


@pytest.mark.parametrize("name", list(TEXTS))
def test_fixed_texts_feeds_what_the_plain_twin_feeds(name: str):
    arr = TEXTS[name]
    a, b = hashlib.sha256(), hashlib.sha256()
    _fast.fixed_texts(a, arr)
    plain_texts(b, arr)
    assert a.digest() == b.digest()


def test_fixed_texts_of_a_table_field_feeds_what_the_plain_twin_feeds():
    """A table's text field is a strided view of its rows."""
    rows = np.zeros(200, dtype=[("n", "<f8"), ("well", "S4"), ("flag", "S8")])
    rows["well"] = [f"A{i}".encode() for i in range(200)]
    rows["flag"] = [b"lag", b"", b"spike", b"lag"] * 50
    for field in ("well", "flag"):
        a, b = hashlib.sha256(), hashlib.sha256()
        _fast.fixed_texts(a, rows[field])
        plain_texts(b, rows[field])
        assert a.digest() == b.digest(), field


ATTRS: list[Any] = ["text", "", "Glühen", 7, -2**40, 2.5, True, np.bool_(False), np.float32(1.5), np.int32(3),
                    texts_attr(["uM", "", "µM/min"]), texts_attr([]), np.zeros(0, dtype=np.uint8),
                    np.arange(3.0), b"bytes", ["a", "list"]]


def test_attributes_are_stored_as_h5py_stores_them(tmp_path: Path):
    """Every kind of attribute value the writer stores (and a few it hands back to h5py): the same HDF5 type,
    dataspace and value, in the same order, including replacing an attribute already there."""
    with h5py.File(tmp_path / "a.h5", "w", track_order=True) as f:
        fast, plain = f.create_group("fast", track_order=True), f.create_group("plain", track_order=True)
        node = _fast.FastRecorder(fast)
        for i, value in enumerate(ATTRS):
            node.attrs[f"a{i}"] = value
            plain.attrs[f"a{i}"] = value
        node.attrs["a0"] = 12  # replaced: deleted and made again, as h5py does
        plain.attrs["a0"] = 12
        assert list(fast.attrs) == list(plain.attrs)
        assert _attrs(fast, set()) == _attrs(plain, set())


def _table(n: int, extra: list[tuple[Any, ...]] | None = None) -> np.ndarray:
    rows = np.zeros(n, dtype=[("well", h5py.string_dtype("utf-8", 4)), ("rate", "<f8"), ("n", "<i8"),
                              ("ok", "?"), ("big", ">f4"), *(extra or [])])
    rows["well"] = [f"A{i}".encode() for i in range(n)]
    rows["rate"] = np.linspace(-1.0, 2.0, n)
    rows["n"] = np.arange(n)
    rows["ok"] = np.arange(n) % 3 == 0
    rows["big"] = np.arange(n) / 7
    return rows


VALUES = {
    "a table": _table(300),
    "a table without rows": _table(0),
    "a table of two dimensions": _table(12).reshape(3, 4),
    "a table with an array field (plain twin)": _table(5, [("xyz", "<f8", (3,))]),
    "a table with a nested field (plain twin)": _table(5, [("inner", [("a", "<i4")])]),
    "text": "Glühen", "bytes": b"raw", "a number": np.float64(2.5), "a flag": np.bool_(True),
    "an array": np.arange(12, dtype=">i4").reshape(3, 4), "a list of text": texts_attr(["uM", "", "µM/min"]),
}


@pytest.mark.parametrize("name", list(VALUES))
def test_value_bytes_feeds_what_the_plain_twin_feeds(name: str):
    from vzero.audit.digest import value_bytes

    a, b = hashlib.sha256(), hashlib.sha256()
    _fast.value_bytes(a, VALUES[name])
    value_bytes(b, VALUES[name])
    assert a.digest() == b.digest()
