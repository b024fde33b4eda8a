"""Writing the audit file: the header, each plate's inputs and step outputs, pooled steps and results.

The layout and the encoding of tables and traces live in :mod:`vzero.audit.codec`.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from typing import Any

from vzero.audit import _fast
from vzero.audit.codec import FORMAT_NAME, FORMAT_VERSION, Links, new_group, to_json, write_artifact, write_table
from vzero.audit.digest import DIGEST_ATTR, Recorder
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
        root = _recorder()(f)
        groups = []
        for record in records:
            g = new_group(root, record.spec.label)
            g.attrs["started"] = record.started
            g.attrs["seconds"] = record.seconds
            for name, value in record.outputs.items():
                write_artifact(g, name, value, links)
            groups.append((record.spec.label, g))
        memo: dict[int, bytes] = {}  # objects the steps share are hashed once
        for label, g in groups:
            d = g.digest(memo)
            g.attrs[DIGEST_ATTR] = digests[label] = d.hex()
        f.flush()
        return bytes(f.id.get_file_image()), digests
    finally:
        links.clear()
        f.close()


def _h5py() -> Any:
    import h5py

    return h5py


def _created() -> str:
    """The file's creation time: now, UTC, ISO 8601 to the second."""
    import datetime as dt

    return dt.datetime.now(dt.UTC).isoformat(timespec="seconds")


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


#: Whether the writer uses the low-level twins in :mod:`vzero.audit._fast` (they write the same objects and
#: digests; tests/pipeline/test_audit_fast.py compares both).
FAST = True


def _recorder() -> type[Recorder]:
    """The kind of :class:`~vzero.audit.digest.Recorder` that writes: the low-level twin unless :data:`FAST` is
    off."""
    return _fast.FastRecorder if FAST else Recorder


class AuditWriter:
    """Writes one run's audit file as the run goes: header first, each plate's inputs and step outputs as the
    plate finishes, the pooled steps and final tables at the end.

    Plates are written as they arrive, so a long batch never holds every plate's intermediate results in
    memory, and the file is the same whether plates ran here, in a process pool or on a cluster. The caller
    writes into a temporary folder and renames it into place only after :meth:`finish` (a killed run leaves
    no file at the target). ``seconds`` accumulates the time spent writing, ``cpu_seconds`` this process's
    processor time for it (for the benchmarks).
    """

    def __init__(self, path: Any, rec: Any, plugins: Any, run_id: str) -> None:
        import hashlib
        import time

        from vzero.meta import __version__

        t0, c0 = time.perf_counter(), time.process_time()
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
        self.root = _recorder()(self.f)  # every group above the plates' records their attributes and members
        a = self.root.attrs
        a["format"] = FORMAT_NAME
        a["format_version"] = FORMAT_VERSION
        a["vzero_version"] = __version__
        a["created"] = _created()
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
        self.inputs = new_group(self.root, "inputs")
        self.steps = new_group(self.root, "steps")
        self._step_groups: dict[str, Recorder] = {}
        self.seconds = time.perf_counter() - t0
        self.cpu_seconds = time.process_time() - c0

    def add_input(self, raw: Any, plate: str) -> None:
        """Store a raw input file byte for byte (once per distinct content) and note which plate used it."""
        import time

        t0, c0 = time.perf_counter(), time.process_time()
        self.sink.check()  # stop at the next plate once the disk is full, not at the end of the batch
        if raw.sha256 not in self._inputs:
            import numpy as np

            ds = self._inputs[raw.sha256] = self.inputs.create_dataset(
                f"{len(self._inputs):02d}", data=np.frombuffer(raw.data, dtype=np.uint8))
            for key, value in (("name", raw.name), ("key", raw.key), ("sha256", raw.sha256),
                               ("size", len(raw.data))):
                ds.attrs[key] = value
            ds.settle_value()  # its "plates" and "names" follow at the end; its bytes need not stay here
        self.input_plates.setdefault(raw.sha256, []).append(plate)
        names = self._names.setdefault(raw.sha256, [])
        if raw.name not in names:  # the same bytes under another name (a copied layout): keep every name
            names.append(raw.name)
        self.seconds += time.perf_counter() - t0
        self.cpu_seconds += time.process_time() - c0

    def _step(self, record: Any) -> Any:
        """The group of ``record``'s step, created with its parameters and provenance the first time. The
        step's total time and warnings are added up here and written once, by :meth:`finish`."""
        spec = record.spec
        if spec.label not in self._step_groups:
            g = self._step_groups[spec.label] = new_group(self.steps, spec.label)
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

        t0, c0 = time.perf_counter(), time.process_time()
        name = record.plate or "pooled"
        step = self._step(record)
        sub = new_group(step, name)  # its digest from the values written
        sub.attrs["started"] = record.started
        sub.attrs["seconds"] = record.seconds
        for key, value in record.outputs.items():
            if key == "traces" and isinstance(value, Mapping):
                continue  # per-plate traces are already stored by the plate steps
            write_artifact(sub, key, value, self.links)
        digest = sub.digest()
        sub.attrs[DIGEST_ATTR] = digest.hex()
        step.forget(name, digest)  # the step keeps the plate's digest, not its values
        self.seconds += time.perf_counter() - t0
        self.cpu_seconds += time.process_time() - c0
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

        t0, c0 = time.perf_counter(), time.process_time()
        places = []
        for record in records:
            name = record.plate or "pooled"
            step = self._step(record)
            places.append((record.spec.label, step.h5, name))
            step.forget(name, bytes.fromhex(digests[record.spec.label]))
        (_fast.copy_part if FAST else plain_copy_part)(self.f, part, places)
        self.seconds += time.perf_counter() - t0
        self.cpu_seconds += time.process_time() - c0
        return {label: f"{step.name}/{name}" for label, step, name in places}

    def finish(self, tables: Mapping[str, Table], warnings: list[str], failed: Mapping[str, str],
               derived_from: Mapping[str, Any] | None) -> None:
        """Write the final tables (hard-linked where a step already stored them), the run's closing attributes
        and the digests of each step, of /steps, /inputs, /results and of the whole file; close the file."""
        import time

        t0, c0 = time.perf_counter(), time.process_time()
        for sha, ds in self._inputs.items():
            ds.attrs["plates"] = to_json(self.input_plates.get(sha, []))
            ds.attrs["names"] = to_json(self._names.get(sha, []))
        for label, g in self._step_groups.items():
            g.attrs["seconds"] = self._seconds.get(label, 0.0)
            g.attrs["warnings"] = to_json(self._warnings.get(label, []))
        a = self.root.attrs
        a["warnings"] = to_json(list(warnings))
        a["failed_plates"] = to_json(dict(failed))
        a["failed_items"] = to_json(list(self.failed_items))
        if derived_from:
            a["derived_from"] = to_json(dict(derived_from))
        results = new_group(self.root, "results")
        for name, table in tables.items():
            write_table(results, name, table, self.links)
        # every digest from the values in memory (the one file-wide memo: the results' tables may be hard
        # links to tables a step stored); a stored digest is not itself hashed, so storing one changes none
        memo: dict[int, bytes] = {}
        for g in [*self._step_groups.values(), self.steps, self.inputs, results, self.root]:
            g.attrs[DIGEST_ATTR] = g.digest(memo).hex()
        self.f.close()
        self.sink.close()
        self.sink.check()
        self.links = Links()
        self.seconds += time.perf_counter() - t0
        self.cpu_seconds += time.process_time() - c0

    def close(self) -> None:
        """Close without finishing (after an error; the caller removes the temporary folder)."""
        if self.f.id.valid:
            self.f.close()
        self.sink.close()
