"""One step on one plate (or on the pooled tables): the stage call, its run events and its record.

Shared by the driver (:mod:`vzero.run.runner`) and the worker processes (:mod:`vzero.run.executors`), which
is why it lives apart from both.
"""

from __future__ import annotations

import datetime as _dt
import time
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from vzero.errors import StageError, VzeroError
from vzero.manager import Plugins
from vzero.recipe import PlateSpec, Recipe, StepSpec
from vzero.registry import Entry
from vzero.schema import check_output
from vzero.stage import RawInput, StageInput, StageOutput


@dataclass
class StepEvent:
    """The context object handed to the run-event hooks (new information arrives as new attributes)."""

    run_id: str
    index: int
    kind: str
    method: str
    plate: str | None
    settings: Mapping[str, Any]
    seconds: float | None = None
    output: StageOutput | None = None
    error: BaseException | None = None


@dataclass
class StepRecord:
    """What the audit file keeps of one step on one plate (or pooled)."""

    spec: StepSpec
    plate: str | None
    started: str
    seconds: float
    warnings: list[str]
    outputs: dict[str, Any]
    failed: list[str] = field(default_factory=list)


@dataclass
class PlateOutcome:
    """One plate's result from the plate-scoped steps. A worker process sends the step outputs back already
    written as an in-memory HDF5 file (``part``, with the digest of each step's group in ``part_digests``;
    ``part_traces`` names the step whose traces are final)
    and keeps in ``artifacts`` only the tables the pooled steps stack, as plain column arrays where it can
    (:class:`vzero.run.packed.PackedTable`)."""

    plate: str
    artifacts: dict[str, Any] = field(default_factory=dict)
    records: list[StepRecord] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    error: str | None = None
    part: bytes | None = None
    part_traces: str | None = None
    part_digests: dict[str, str] = field(default_factory=dict)
    cpu_seconds: float = 0.0
    """Processor time the worker process spent on this plate (``time.process_time``; for the benchmarks)."""


def process_plate(
    plate: PlateSpec,
    raws: Mapping[str, RawInput],
    rec: Recipe,
    plugins: Plugins,
    steps: list[StepSpec],
    run_id: str,
) -> PlateOutcome:
    """Run the plate-scoped steps on one plate. A :class:`VzeroError` becomes the plate's error; the batch
    goes on with the other plates."""
    outcome = PlateOutcome(plate.name)
    artifacts: dict[str, Any] = {}
    try:
        preflight_plate(plate, raws, rec, plugins, steps)
    except VzeroError as exc:
        outcome.error = str(exc)
        outcome.artifacts = {"exception": exc}
        return outcome
    for spec in steps:
        try:
            output, record = run_step(spec, plugins, plate, artifacts, raws, rec, run_id)
        except VzeroError as exc:
            outcome.error = str(exc)
            outcome.artifacts = {"exception": exc}
            return outcome
        artifacts.update(output.artifacts)
        outcome.records.append(record)
        outcome.warnings.extend(record.warnings)
    outcome.artifacts = artifacts
    return outcome


def preflight_plate(
    plate: PlateSpec,
    raws: Mapping[str, RawInput],
    rec: Recipe,
    plugins: Plugins,
    steps: list[StepSpec],
    skip: Any = None,
) -> list[str]:
    """Run every plate-scoped step's :meth:`vzero.stage.Stage.preflight` on one plate, in recipe order, and
    return their warnings; a :class:`VzeroError` names the step. Steps for which ``skip(spec)`` is true are
    left out (``vzero check`` does not run code from recipe-named plugin files). Nothing is written."""
    artifacts: dict[str, Any] = {}
    warnings: list[str] = []
    plate_info = {"name": plate.name, "files": dict(plate.files)}
    for spec in steps:
        if skip is not None and skip(spec):
            continue
        stage = plugins.registry.get(spec.kind, spec.method).component(**spec.settings)
        data = StageInput(artifacts=dict(artifacts), plate=plate_info, inputs=dict(raws), recipe=rec.data,
                          registry=plugins.registry, warn=warnings.append)
        try:
            found = stage.preflight(data)
        except VzeroError as exc:
            exc.args = (f"step {spec.index} ({spec.kind}: {spec.method}): {exc}",)
            raise
        if isinstance(found, StageOutput):
            artifacts.update(found.artifacts)
    return warnings


def run_step(
    spec: StepSpec,
    plugins: Plugins,
    plate: PlateSpec | None,
    artifacts: Mapping[str, Any],
    raws: Mapping[str, RawInput],
    rec: Recipe,
    run_id: str,
    run_info: Mapping[str, Any] | None = None,
) -> tuple[StageOutput, StepRecord]:
    entry = plugins.registry.get(spec.kind, spec.method)
    stage = entry.component(**spec.settings)
    step_warnings: list[str] = []
    plate_info = {"name": plate.name, "files": dict(plate.files)} if plate else None
    event = StepEvent(run_id, spec.index, spec.kind, spec.method, plate.name if plate else None, spec.settings)
    plugins.hook.vzero_before_step(event=event)
    started = utc_now()
    t0 = time.perf_counter()
    data = StageInput(
        artifacts=dict(artifacts), plate=plate_info, inputs=dict(raws), recipe=rec.data,
        registry=plugins.registry, warn=step_warnings.append, run=dict(run_info or {}),
    )
    try:
        output = stage.run(data)
    except VzeroError as exc:
        event.error = exc
        plugins.hook.vzero_step_error(event=event)
        where = f"step {spec.index} ({spec.kind}: {spec.method}, from {entry.source.describe()})"
        exc.args = (f"{where}: {exc}",)
        raise
    except Exception as exc:
        event.error = exc
        plugins.hook.vzero_step_error(event=event)
        src = entry.source
        raise StageError(
            f"step {spec.index} ({spec.kind}: {spec.method}, from {src.describe()}) failed"
            + (f" on plate {plate.name}" if plate else "") + f": {type(exc).__name__}: {exc}",
            hint="This is a bug in that stage method; run with --debug for the traceback and report it.",
        ) from exc
    if not isinstance(output, StageOutput):
        raise StageError(
            f"step {spec.index} ({spec.kind}: {spec.method}, from {entry.source.describe()}) returned "
            f"{type(output).__name__}, not a StageOutput; fix the plugin"
        )
    _check_schema(spec, entry, plugins, plate, output, artifacts)
    schema = plugins.registry.schema(spec.kind)
    if plate is None and schema is not None and schema.stacks:
        output.artifacts = tag_step(spec.label, output.artifacts)
    seconds = time.perf_counter() - t0
    event.seconds, event.output = seconds, output
    plugins.hook.vzero_after_step(event=event)
    outputs = {**output.artifacts, **output.record}
    prefix = f"{plate.name} " if plate else ""
    return output, StepRecord(spec, plate.name if plate else None, started, seconds, step_warnings, outputs,
                              [prefix + str(item) for item in output.failed])


def tag_step(label: str, artifacts: Mapping[str, Any]) -> dict[str, Any]:
    """The artifacts with a first column ``step`` (the step's label) in every table, for a kind whose steps
    stack (:attr:`vzero.schema.KindSchema.stacks`)."""
    from vzero.data import Table

    out = dict(artifacts)
    for name, value in artifacts.items():
        if isinstance(value, Table):
            frame = value.frame.drop(columns="step", errors="ignore")
            frame.insert(0, "step", label)
            out[name] = value.with_frame(frame)
    return out


def stack_step_tables(pooled: Mapping[str, Any], artifacts: Mapping[str, Any], stacked: set[str]) -> dict[str, Any]:
    """The tables of a stacking step (already tagged by :func:`tag_step`) under those of the earlier steps of
    its kind: ``stacked`` names the tables such steps returned so far (updated in place). Units agreeing
    between the steps are kept; a column given in different units by two steps keeps none (its values are
    per step, in the unit that step's own audit record names)."""
    import pandas as pd
    from vzero.data import Table

    out = dict(artifacts)
    for name, value in artifacts.items():
        if not isinstance(value, Table):
            continue
        before = pooled.get(name)
        if name in stacked and isinstance(before, Table):
            units = {k: u for k, u in before.units.items() if value.units.get(k, u) == u}
            units |= {k: u for k, u in value.units.items() if k not in before.units}
            frames = [f for f in (before.frame, value.frame) if len(f)]  # a step that fitted nothing adds nothing
            frame = pd.concat(frames, ignore_index=True) if len(frames) == 2 else (frames or [value.frame])[0]
            out[name] = Table(frame, units, {**before.meta, **value.meta})
        stacked.add(name)
    return out


def _check_schema(spec: StepSpec, entry: Entry, plugins: Plugins, plate: PlateSpec | None, output: StageOutput,
                  given: Mapping[str, Any]) -> None:
    """Check the step's output against the schema its kind's plugin declared (docs/schemas.md); a table that
    breaks it is an error naming this step and the plugin that made it, not the next stage that reads it."""
    schema = plugins.registry.schema(spec.kind)
    if schema is None:
        return
    problems = check_output(schema, output.artifacts, given, output.files)
    if problems:
        raise StageError(
            f"step {spec.index} ({spec.kind}: {spec.method}, from {entry.source.describe()})"
            + (f" on plate {plate.name}" if plate else "")
            + f" returned output that breaks the {spec.kind} schema (docs/schemas.md): " + "; ".join(problems),
            hint="This is a bug in that plugin; report it to its authors.",
        )


def utc_now() -> str:
    return _dt.datetime.now(_dt.UTC).isoformat(timespec="milliseconds")
