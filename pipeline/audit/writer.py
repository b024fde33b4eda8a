"""Writing the audit file: the header, each plate's inputs and step outputs, pooled steps and results.

The layout and the encoding of tables and traces live in :mod:`vzero.audit.codec`.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from typing import Any

from vzero.audit import _fast
from vzero.audit.codec import FORMAT_NAME, FORMAT_VERSION, Links, new_group, to_json, write_artifact, write_table
from vzero.audit.digest import DIGEST_ATTR, Recorder, seal
from vzero.data import Table


def _versions(plugins: Any) -> dict[str, str]:
    return dict(_package_versions())


@functools.cache
def _package_versions() -> tuple[tuple[str, str], ...]:
    """Python's and the main packages' versions (read once per process: metadata lookups are slow)."""
    import platform
    from importlib import metadata

    out = {"python": platform.python_version()}
    for dist in ("numpy", "scipy", "pandas", "h5py", "pluggy", "pint", "PyYAML"):
        try:
            out[dist] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            out[dist] = "not installed"
    return tuple(out.items())


def write_part(records: list[Any]) -> tuple[bytes, dict[str, str]]:
    """One plate's step outputs as an in-memory HDF5 file (``/<step label>/<output>``), written where the
    plate ran (a worker), for :meth:`AuditWriter.add_part` in the process that writes the audit file. Returns
    the file's image and the digest (hex) of each step's group, computed here so that the process writing the
    audit file neither encodes nor reads back the plate's arrays.

    HDF5's in-memory ("core") driver keeps the file in C memory; the image is taken once at the end (a
    Python file object as backing store would cost a Python call per block read or written)."""
    import uuid

    links = Links()
    digests: dict[str, str] = {}
    f = _h5py().File(f"part-{uuid.uuid4().hex}.h5", "w", driver="core", backing_store=False, track_order=True)
    try:
        groups = []
        for record in records:
            g = Recorder(new_group(f, record.spec.label))
            g.attrs["started"] = record.started
            g.attrs["seconds"] = record.seconds
            for name, value in record.outputs.items():
                write_artifact(g, name, value, links)
            groups.append((record.spec.label, g))
        memo: dict[int, bytes] = {}  # objects the steps share are hashed once
        for label, g in groups:
            d = g.digest(memo)
            g.h5.attrs[DIGEST_ATTR] = digests[label] = d.hex()
        f.flush()
        return bytes(f.id.get_file_image()), digests
    finally:
        links.clear()
        f.close()


def _h5py() -> Any:
    import h5py

    return h5py


def plain_input_dataset(group: Any, name: str, data: bytes, attrs: dict[str, str | int]) -> Any:
    """A one-dimensional uint8 dataset ``group/name`` holding ``data``, with text or integer attributes."""
    import numpy as np

    ds = group.create_dataset(name, data=np.frombuffer(data, dtype=np.uint8))
    for key, value in attrs.items():
        ds.attrs[key] = value
    return ds


def plain_copy_part(f: Any, part: bytes, places: list[tuple[str, Any, str]]) -> None:
    """Copy the in-memory HDF5 file ``part`` (one group per step label) into ``f`` and link each step's group
    as ``step_group/name`` for every (label, step_group, name) of ``places``. The whole part is copied at once
    (so data shared between its steps stays shared) into a staging group that is removed once its groups are
    linked into place."""
    import io

    with _h5py().File(io.BytesIO(part), "r") as src:
        f.copy(src["/"], "_part")
    for label, step, name in places:
        step[name] = f["_part"][label]
    del f["_part"]


#: Whether the writer uses the low-level twins in :mod:`vzero.audit._fast` for its per-plate work (they write
#: the same objects; tests compare both).
FAST = True


class AuditWriter:
    """Writes one run's audit file as the run goes: header first, each plate's inputs and step outputs as the
    plate finishes, the pooled steps and final tables at the end.

    Plates are written as they arrive, so a long batch never holds every plate's intermediate results in
    memory, and the file is the same whether plates ran here, in a process pool or on a cluster. The caller
    writes into a temporary folder and renames it into place only after :meth:`finish` (a killed run leaves
    no file at the target). ``seconds`` accumulates the time spent writing (for the benchmarks).
    """

    def __init__(self, path: Any, rec: Any, plugins: Any, run_id: str) -> None:
        import datetime as dt
        import hashlib
        import time

        from vzero.meta import __version__

        t0 = time.perf_counter()
        self.path = path
        self.plugins = plugins
        self.links = Links()
        self.input_plates: dict[str, list[str]] = {}
        self._inputs: dict[str, Any] = {}
        self._seconds: dict[str, float] = {}
        self._warnings: dict[str, list[str]] = {}
        self._names: dict[str, list[str]] = {}
        self.failed_items: list[str] = []
        from vzero.audit.guarded import GuardedFile

        self.sink = GuardedFile(path)  # a failed write (disk full) becomes an error here, not a crash in HDF5
        self.f = _h5py().File(self.sink, "w", track_order=True)
        a = self.f.attrs
        a["format"] = FORMAT_NAME
        a["format_version"] = FORMAT_VERSION
        a["vzero_version"] = __version__
        a["created"] = dt.datetime.now(dt.UTC).isoformat(timespec="seconds")
        a["run_id"] = run_id
        a["recipe_name"] = str(rec.data.get("name", ""))
        a["recipe_path"] = str(getattr(rec, "path", ""))
        a["recipe_text"] = rec.text
        a["recipe_sha256"] = hashlib.sha256(rec.text.encode("utf-8")).hexdigest()
        a["versions"] = to_json(_versions(plugins))
        a["plugins"] = to_json({
            name: {"distribution": s.distribution, "version": s.version, "module": s.module, "path": s.path,
                   "sha256": s.sha256}
            for name, s in plugins.sources.items()
        })
        for key in ("assay", "exclusions", "overrides", "review"):
            a[key] = to_json(rec.data.get(key) or ({} if key == "assay" else []))
        self.inputs = self.f.create_group("inputs", track_order=True)
        self.steps = self.f.create_group("steps", track_order=True)
        self._step_groups: dict[str, Any] = {}
        self._digests: dict[str, dict[str, bytes]] = {}  # step label -> plate (or pooled) -> its digest
        self.seconds = time.perf_counter() - t0

    def add_input(self, raw: Any, plate: str) -> None:
        """Store a raw input file byte for byte (once per distinct content) and note which plate used it."""
        import time

        t0 = time.perf_counter()
        self.sink.check()  # stop at the next plate once the disk is full, not at the end of the batch
        if raw.sha256 not in self._inputs:
            make = _fast.input_dataset if FAST else plain_input_dataset
            self._inputs[raw.sha256] = make(
                self.inputs, f"{len(self._inputs):02d}", raw.data,
                {"name": raw.name, "key": raw.key, "sha256": raw.sha256, "size": len(raw.data)})
        self.input_plates.setdefault(raw.sha256, []).append(plate)
        names = self._names.setdefault(raw.sha256, [])
        if raw.name not in names:  # the same bytes under another name (a copied layout): keep every name
            names.append(raw.name)
        self.seconds += time.perf_counter() - t0

    def _step(self, record: Any) -> Any:
        """The group of ``record``'s step, created with its parameters and provenance the first time. The
        step's total time and warnings are added up here and written once, by :meth:`finish`."""
        spec = record.spec
        if spec.label not in self._step_groups:
            g = self._step_groups[spec.label] = new_group(self.steps, spec.label)
            self._digests[spec.label] = {}
            entry = self.plugins.registry.get(spec.kind, spec.method)
            g.attrs["kind"] = spec.kind
            g.attrs["method"] = spec.method
            g.attrs["parameters"] = to_json(dict(spec.written))
            g.attrs["settings"] = to_json({k: str(v) if not isinstance(v, bool | int | float | list | dict | None)
                                           else v for k, v in spec.settings.items()})
            g.attrs["plugin"] = entry.source.plugin
            g.attrs["distribution"] = entry.source.distribution
            g.attrs["version"] = str(getattr(entry.component, "version", entry.source.version))
            g.attrs["recipe_line"] = spec.line
            g.attrs["started"] = record.started
            self._seconds[spec.label] = 0.0
            self._warnings[spec.label] = []
        self._seconds[spec.label] += record.seconds
        prefix = f"{record.plate}: " if record.plate else ""
        self._warnings[spec.label].extend(prefix + w for w in record.warnings)
        return self._step_groups[spec.label]

    def add_record(self, record: Any) -> Any:
        """Write one step's record (parameters and provenance once per step; outputs per plate or pooled)
        and its digest. Returns the group holding the outputs."""
        import time

        t0 = time.perf_counter()
        name = record.plate or "pooled"
        sub = Recorder(new_group(self._step(record), name))  # its digest from the values written
        sub.attrs["started"] = record.started
        sub.attrs["seconds"] = record.seconds
        for key, value in record.outputs.items():
            if key == "traces" and isinstance(value, Mapping):
                continue  # per-plate traces are already stored by the plate steps
            write_artifact(sub, key, value, self.links)
        digest = self._digests[record.spec.label][name] = sub.digest()
        sub.h5.attrs[DIGEST_ATTR] = digest.hex()
        self.seconds += time.perf_counter() - t0
        return sub.h5

    def forget_plate(self) -> None:
        """Drop what links a plate's objects to later writes: call once a plate of a long batch is written.
        Its arrays and tables stay referenced otherwise (links are found by object identity), over 1 MB a
        384-well plate, and their datasets stay open; a plate's objects are not written again by a later
        plate or by the pooled steps (they stack new tables), so nothing is lost."""
        self.links.clear()

    def add_part(self, records: list[Any], part: bytes, digests: Mapping[str, str]) -> dict[str, str]:
        """Add one plate's step records whose outputs a worker already wrote (:func:`write_part`), with the
        digests the worker computed for each step's group. HDF5's own object copy moves the part in whole (so
        data the steps share stays shared) and each step's group is linked into place; the driver neither
        encodes nor reads back any array. Returns label -> the path of the plate's group under that step."""
        import time

        t0 = time.perf_counter()
        places = []
        for record in records:
            name = record.plate or "pooled"
            places.append((record.spec.label, self._step(record), name))
            self._digests[record.spec.label][name] = bytes.fromhex(digests[record.spec.label])
        (_fast.copy_part if FAST else plain_copy_part)(self.f, part, places)
        self.seconds += time.perf_counter() - t0
        return {label: f"{step.name}/{name}" for label, step, name in places}

    def finish(self, tables: Mapping[str, Table], warnings: list[str], failed: Mapping[str, str],
               derived_from: Mapping[str, Any] | None) -> None:
        """Write the final tables (hard-linked where a step already stored them), the run's closing attributes
        and the digests of each step, of /steps, /inputs, /results and of the whole file; close the file."""
        import time

        t0 = time.perf_counter()
        for sha, ds in self._inputs.items():
            ds.attrs["plates"] = to_json(self.input_plates.get(sha, []))
            ds.attrs["names"] = to_json(self._names.get(sha, []))
        for label, g in self._step_groups.items():
            g.attrs["seconds"] = self._seconds.get(label, 0.0)
            g.attrs["warnings"] = to_json(self._warnings.get(label, []))
        self.f.attrs["warnings"] = to_json(list(warnings))
        self.f.attrs["failed_plates"] = to_json(dict(failed))
        self.f.attrs["failed_items"] = to_json(list(self.failed_items))
        if derived_from:
            self.f.attrs["derived_from"] = to_json(dict(derived_from))
        results = Recorder(self.f.create_group("results", track_order=True))
        for name, table in tables.items():
            write_table(results, name, table, self.links)
        results_digest = results.digest()
        results.h5.attrs[DIGEST_ATTR] = results_digest.hex()
        steps = {label: seal(g, self._digests[label]) for label, g in self._step_groups.items()}
        top = {"steps": seal(self.steps, steps), "inputs": seal(self.inputs), "results": results_digest}
        seal(self.f, top)
        self.f.close()
        self.sink.close()
        self.sink.check()
        self.links = Links()
        self.seconds += time.perf_counter() - t0

    def close(self) -> None:
        """Close without finishing (after an error; the caller removes the temporary folder)."""
        if self.f.id.valid:
            self.f.close()
        self.sink.close()
