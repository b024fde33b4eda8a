"""The writer's low-level twins (vzero.audit._fast) write what the plain h5py path writes: the same objects,
HDF5 types, values and attributes, so the same digests."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import h5py
import numpy as np
import pytest
from vzero.audit import writer
from vzero.audit.digest import object_digest
from vzero.run.runner import run

from tests.pipeline.test_batch import demo_batch


def _layout(path: Path) -> dict[str, Any]:
    """Every object under every name: its kind, HDF5 type, shape, storage size, raw bytes and attributes (with
    their HDF5 types), skipping per-run values (times, run id) that differ between any two runs."""
    skip = {"created", "run_id", "started", "seconds", "recipe_path", "vzero_digest"}
    out: dict[str, Any] = {}

    def attrs(obj: Any) -> dict[str, Any]:
        found = {}
        for k in obj.attrs:
            if k in skip:
                continue
            a = h5py.h5a.open(obj.id, k.encode())
            found[k] = (a.get_type().dtype.str, a.get_type().get_class(), repr(obj.attrs[k]))
        return found

    def walk(name: str, obj: Any) -> None:
        if isinstance(obj, h5py.Dataset):
            tid = obj.id.get_type()
            out[name] = ("D", tid.get_class(), tid.get_size(), obj.shape, obj.id.get_storage_size(),
                         np.ascontiguousarray(obj[()]).tobytes(), attrs(obj))
        else:
            out[name] = ("G", attrs(obj))
            for key in obj:
                walk(f"{name}/{key}", obj[key])

    with h5py.File(path, "r") as f:
        walk("", f)
    return out


@pytest.mark.slow
def test_fast_and_plain_writers_store_the_same_bytes(tmp_path: Path, monkeypatch: pytest.MonkeyPatch):
    recipe = demo_batch(tmp_path / "in", 3)
    fast = run(recipe, tmp_path / "fast", jobs=2)
    monkeypatch.setattr(writer, "FAST", False)
    plain = run(recipe, tmp_path / "plain", jobs=2)
    a, b = _layout(fast.audit_path), _layout(plain.audit_path)
    assert a.keys() == b.keys() and any(k.startswith("/inputs/") for k in a)
    for key in a:
        assert a[key] == b[key], key
    with h5py.File(fast.audit_path) as fa, h5py.File(plain.audit_path) as fb:
        assert object_digest(fa["inputs"]) == object_digest(fb["inputs"])
        assert object_digest(fa["results"]) == object_digest(fb["results"])
