"""Writing the audit file: the header, each plate's inputs and step outputs, pooled steps and results.

The layout and the encoding of tables and traces live in :mod:`vzero.audit.codec`.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from typing import Any

import numpy as np
from vzero.audit.codec import (
    FORMAT_NAME,
    FORMAT_VERSION,
    Links,
    _dataset,
    _h5py,
    _link_name,
    _new_attr,
    _new_group,
    _set_attr,
    to_json,
    write_artifact,
    write_table,
)
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


def write_part(records: list[Any]) -> bytes:
    """One plate's step outputs as an in-memory HDF5 file (``/<step label>/<output>``), written where the
    plate ran (a worker), for :meth:`AuditWriter.add_part` in the process that writes the audit file.

    HDF5's in-memory ("core") driver keeps the file in C memory; the image is taken once at the end (a
    Python file object as backing store would cost a Python call per block read or written)."""
    import uuid

    links = Links()
    f = _h5py().File(f"part-{uuid.uuid4().hex}.h5", "w", driver="core", backing_store=False, track_order=True)
    try:
        for record in records:
            g = _new_group(f, record.spec.label)
            _set_attr(g, "started", record.started)
            _set_attr(g, "seconds", record.seconds)
            for name, value in record.outputs.items():
                write_artifact(g, name, value, links)
        f.flush()
        return bytes(f.id.get_file_image())
    finally:
        f.close()


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
        _set_attr(self.f, "format", FORMAT_NAME)
        _set_attr(self.f, "format_version", FORMAT_VERSION)
        _set_attr(self.f, "vzero_version", __version__)
        _set_attr(self.f, "created", dt.datetime.now(dt.UTC).isoformat(timespec="seconds"))
        _set_attr(self.f, "run_id", run_id)
        _set_attr(self.f, "recipe_name", str(rec.data.get("name", "")))
        _set_attr(self.f, "recipe_path", str(getattr(rec, "path", "")))
        _set_attr(self.f, "recipe_text", rec.text)
        _set_attr(self.f, "recipe_sha256", hashlib.sha256(rec.text.encode("utf-8")).hexdigest())
        _set_attr(self.f, "versions", to_json(_versions(plugins)))
        _set_attr(self.f, "plugins", to_json(
            {
                name: {"distribution": s.distribution, "version": s.version, "module": s.module, "path": s.path,
                       "sha256": s.sha256}
                for name, s in plugins.sources.items()
            }
        ))
        for key in ("assay", "exclusions", "overrides"):
            _set_attr(self.f, key, to_json(rec.data.get(key) or ({} if key == "assay" else [])))
        self.inputs = self.f.create_group("inputs", track_order=True)
        self.steps = self.f.create_group("steps", track_order=True)
        self._step_groups: dict[str, Any] = {}
        self.seconds = time.perf_counter() - t0

    def add_input(self, raw: Any, plate: str) -> None:
        """Store a raw input file byte for byte (once per distinct content) and note which plate used it."""
        import time

        t0 = time.perf_counter()
        self.sink.check()  # stop at the next plate once the disk is full, not at the end of the batch
        if raw.sha256 not in self._inputs:
            dsid = _dataset(self.inputs.id, f"{len(self._inputs):02d}", np.frombuffer(raw.data, dtype=np.uint8))
            for key, value in (("name", raw.name), ("key", raw.key), ("sha256", raw.sha256), ("size", len(raw.data))):
                _new_attr(dsid, key, value)
            self._inputs[raw.sha256] = _h5py().Dataset(dsid)
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
            g = self._step_groups[spec.label] = _new_group(self.steps, spec.label)
            entry = self.plugins.registry.get(spec.kind, spec.method)
            _set_attr(g, "kind", spec.kind)
            _set_attr(g, "method", spec.method)
            _set_attr(g, "parameters", to_json(dict(spec.written)))
            _set_attr(g, "settings", to_json({k: str(v) if not isinstance(v, bool | int | float | list | dict | None)
                                              else v for k, v in spec.settings.items()}))
            _set_attr(g, "plugin", entry.source.plugin)
            _set_attr(g, "distribution", entry.source.distribution)
            _set_attr(g, "version", str(getattr(entry.component, "version", entry.source.version)))
            _set_attr(g, "recipe_line", spec.line)
            _set_attr(g, "started", record.started)
            self._seconds[spec.label] = 0.0
            self._warnings[spec.label] = []
        self._seconds[spec.label] += record.seconds
        prefix = f"{record.plate}: " if record.plate else ""
        self._warnings[spec.label].extend(prefix + w for w in record.warnings)
        return self._step_groups[spec.label]

    def add_record(self, record: Any) -> Any:
        """Write one step's record (parameters and provenance once per step; outputs per plate or pooled).
        Returns the group holding the outputs."""
        import time

        t0 = time.perf_counter()
        sub = _new_group(self._step(record), record.plate or "pooled")
        _set_attr(sub, "started", record.started)
        _set_attr(sub, "seconds", record.seconds)
        for name, value in record.outputs.items():
            if name == "traces" and isinstance(value, Mapping):
                continue  # per-plate traces are already stored by the plate steps
            write_artifact(sub, name, value, self.links)
        self.seconds += time.perf_counter() - t0
        return sub

    def forget_plate(self) -> None:
        """Drop what links a plate's objects to later writes: call once a plate of a long batch is written.
        Its arrays and tables stay referenced otherwise (links are found by object identity), over 1 MB a
        384-well plate, and every column's dataset stays open; a plate's objects are not written again by a
        later plate or by the pooled steps (they stack new tables), so nothing is lost but cross-plate
        sharing of equal columns, which a process pool's parts never had either."""
        self.links.clear()

    def add_part(self, records: list[Any], part: bytes) -> dict[str, str]:
        """Add one plate's step records whose outputs a worker already wrote (:func:`write_part`): HDF5's own
        object copy moves the part in whole, in one copy (so data the steps share stays shared), to a
        staging group whose step groups are then linked into place. The driver re-encodes no array.
        Returns label -> the path of the plate's group under that step.

        Low-level calls throughout: this runs once per plate in the process that also feeds the workers,
        and the high-level File object's close alone (which looks for open objects) cost a millisecond."""
        import time

        h5py = _h5py()
        t0 = time.perf_counter()
        out = {}
        staging = b"_part"
        src = h5py.h5f.open_file_image(part)
        try:
            h5py.h5o.copy(src, b"/", self.f.id, staging)
        finally:
            src.close()
        for record in records:
            step = self._step(record)
            name = record.plate or "pooled"
            obj = h5py.h5o.open(self.f.id, staging + b"/" + record.spec.label.encode())
            try:
                h5py.h5o.link(obj, step.id, *_link_name(name))
            finally:
                obj.close()
            out[record.spec.label] = f"{step.name}/{name}"
        root = h5py.h5g.open(self.f.id, b"/")
        try:
            root.unlink(staging)  # the step groups stay reachable through their new links
        finally:
            root.close()
        self.seconds += time.perf_counter() - t0
        return out

    def finish(self, tables: Mapping[str, Table], warnings: list[str], failed: Mapping[str, str],
               derived_from: Mapping[str, Any] | None) -> None:
        """Write the final tables (hard-linked where a step already stored them) and the run's closing
        attributes, and close the file."""
        import time

        t0 = time.perf_counter()
        for sha, ds in self._inputs.items():
            _set_attr(ds, "plates", to_json(self.input_plates.get(sha, [])))
            _set_attr(ds, "names", to_json(self._names.get(sha, [])))
        for label, g in self._step_groups.items():
            _set_attr(g, "seconds", self._seconds.get(label, 0.0))
            _set_attr(g, "warnings", to_json(self._warnings.get(label, [])))
        _set_attr(self.f, "warnings", to_json(list(warnings)))
        _set_attr(self.f, "failed_plates", to_json(dict(failed)))
        _set_attr(self.f, "failed_items", to_json(list(self.failed_items)))
        if derived_from:
            _set_attr(self.f, "derived_from", to_json(dict(derived_from)))
        results = self.f.create_group("results", track_order=True)
        for name, table in tables.items():
            write_table(results, name, table, self.links)
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
