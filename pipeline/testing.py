"""A conformance kit for plugin authors: call it from your own tests to check a stage method or a fit model
against vzero's contract (docs/plugins.md).

* :func:`check_stage` runs a stage method twice on inputs you give and checks its declaration (scope,
  parameters, sealed methods), its settings, that it returns a :class:`~vzero.stage.StageOutput`, that it
  does not change its inputs, that every table's units are real units of real columns, that its output
  follows the schema registered for its kind (columns, dtypes, units, flag names, rows kept; see
  docs/schemas.md) and that the two runs give identical bytes (determinism).
* :func:`check_model` checks a fit model (any component with ``params``, ``units``, ``variables``,
  ``evaluate``, ``jacobian`` and ``start``): shapes, finite values, its analytic Jacobian against central
  differences, start values, determinism, and that it leaves its inputs alone.

Both raise :class:`AssertionError` listing every problem found, so a failing test says all that is wrong at
once. The core knows no chemistry: the schemas come from the registry the caller hands over, and the points a
model is checked at come from the caller.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from vzero.data import Table, Traces
from vzero.params import validate
from vzero.registry import Registry, Source, check_stage_class
from vzero.schema import check_output
from vzero.stage import Stage, StageInput, StageOutput


def check_stage(stage_cls: type[Stage], data: StageInput, settings: Mapping[str, Any] | None = None,
                registry: Registry | None = None, *, same_files: bool = True) -> StageOutput:
    """Check ``stage_cls`` run with ``settings`` (as a recipe writes them) on ``data``; return its output.

    ``registry`` supplies the schema of the stage's kind (default: ``data.registry``); without one, or
    without a schema for the kind, the schema check is skipped and only the generic checks run.
    ``same_files=False`` leaves the returned files out of the determinism check (for a final stage that
    stamps the time it ran into a file); artifacts, records and failures are compared all the same.
    """
    problems: list[str] = []
    try:
        check_stage_class(stage_cls, Source("under test", stage_cls.__module__, "under test", "0"))
    except Exception as exc:  # a PluginError saying what is wrong with the declaration
        problems.append(str(exc))
    values, bad = validate(stage_cls.params, dict(settings or {}))
    problems += [f"setting {key!r}: {why}" for key, why in bad]
    problems += [f"setting {key!r}: {why}" for key, why in stage_cls.check_settings(values)]
    _fail(stage_cls.__name__, problems)
    before = digest(data.artifacts)
    first = stage_cls(**values).run(data)
    if not isinstance(first, StageOutput):
        _fail(stage_cls.__name__, [f"run returned {type(first).__name__}, not a StageOutput"])
    if digest(data.artifacts) != before:
        problems.append("run changed the artifacts it was given (return new ones instead)")
    for name, value in {**first.artifacts, **first.record}.items():
        problems += [f"{name}: {p}" for p in _unit_problems(value)]
    registry = registry if registry is not None else data.registry
    schema = registry.schema(stage_cls.kind) if isinstance(registry, Registry) else None
    if schema is not None:
        problems += check_output(schema, first.artifacts, data.artifacts, first.files)
    second = stage_cls(**values).run(data)
    if isinstance(second, StageOutput) and _output_digest(second, same_files) != _output_digest(first, same_files):
        problems.append("two runs on the same input gave different outputs (not deterministic)")
    _fail(stage_cls.__name__, problems)
    return first


def check_model(model: Any, x: Mapping[str, np.ndarray], y: np.ndarray, *, rtol: float = 1e-4) -> list[float]:
    """Check a fit model at the points ``x`` (variable name -> 1-D array) with data ``y`` for its start
    values; the Jacobian is compared with central differences at those start values. Returns them."""
    name = getattr(model, "name", repr(model))
    problems: list[str] = []
    params = tuple(getattr(model, "params", ()))
    if not params or not all(isinstance(p, str) for p in params):
        problems.append("params must be a non-empty tuple of parameter names")
    if set(getattr(model, "units", {})) != set(params):
        problems.append(f"units must name a unit role for each parameter {params}, got {dict(model.units)}")
    missing = [v for v in getattr(model, "variables", ()) if v not in x]
    if missing:
        problems.append(f"no points given for the variables {missing}")
    _fail(name, problems)
    x = {k: np.asarray(v, dtype=float) for k, v in x.items()}
    frozen = digest(x)
    start = model.start(x, np.asarray(y, dtype=float))
    if len(start) != len(params) or not np.all(np.isfinite(start)):
        _fail(name, [f"start gave {start!r}: expected {len(params)} finite values"])
    p = [float(v) for v in start]
    n = len(np.asarray(y))
    v = np.asarray(model.evaluate(p, x), dtype=float)
    if v.shape != (n,):
        problems.append(f"evaluate gave shape {v.shape}, expected ({n},)")
    elif not np.isfinite(v).all():
        problems.append("evaluate gave values that are not finite at the start values")
    if not np.array_equal(np.asarray(model.evaluate(p, x), dtype=float), v, equal_nan=True):
        problems.append("evaluate is not deterministic")
    jac = [np.broadcast_to(np.asarray(d, dtype=float), (n,)) for d in model.jacobian(p, x)]
    if len(jac) != len(params):
        problems.append(f"jacobian gave {len(jac)} derivatives for {len(params)} parameters")
    for i, (pname, d) in enumerate(zip(params, jac, strict=False)):
        h = 1e-6 * max(abs(p[i]), 1e-3)
        up, down = list(p), list(p)
        up[i], down[i] = p[i] + h, p[i] - h
        numeric = (np.asarray(model.evaluate(up, x), float) - np.asarray(model.evaluate(down, x), float)) / (2 * h)
        scale = np.max(np.abs(numeric)) + np.max(np.abs(v)) * 1e-9 + 1e-300
        if not np.allclose(d, numeric, rtol=rtol, atol=rtol * scale):
            problems.append(f"d/d{pname} of the jacobian differs from central differences "
                            f"(largest gap {np.max(np.abs(d - numeric)):.3g})")
    if digest(x) != frozen:
        problems.append("the model changed the points it was given")
    problems += _declared_curve_parts(model, p, x, v, rtol)
    _fail(name, problems)
    return p


def _declared_curve_parts(model: Any, p: list[float], x: Mapping[str, np.ndarray], v: np.ndarray,
                          rtol: float) -> list[str]:
    """What a model declares for progress-curve fitting must match its own rate law: ``rate_slope`` against
    a central difference in the substrate, ``apparent`` constants V', K' against v = V'·S/(K' + S)."""
    declared = getattr(model, "declared", None)
    if declared is None or "substrate" not in x or v.shape != np.shape(x["substrate"]):
        return []
    problems = []
    s = x["substrate"]
    slope = declared("rate_slope")
    if slope is not None:
        h = 1e-6 * np.maximum(np.abs(s), 1e-6)
        up = np.asarray(model.evaluate(p, {**x, "substrate": s + h}), float)
        down = np.asarray(model.evaluate(p, {**x, "substrate": s - h}), float)
        numeric = (up - down) / (2 * h)
        got = np.broadcast_to(np.asarray(slope(p, x), float), s.shape)
        scale = np.max(np.abs(numeric)) + 1e-300
        if not np.allclose(got, numeric, rtol=rtol, atol=rtol * scale):
            problems.append(f"rate_slope differs from a central difference of evaluate in the substrate "
                            f"(largest gap {np.max(np.abs(got - numeric)):.3g})")
    apparent = declared("apparent")
    if apparent is not None:
        vp, kp, _, _ = apparent(p, x)
        mm = np.asarray(vp * s / (kp + s), float)
        if not np.allclose(mm, v, rtol=rtol, atol=rtol * (np.max(np.abs(v)) + 1e-300)):
            problems.append("the apparent constants V', K' do not reproduce evaluate as V'·S/(K' + S)")
    return problems


def digest(value: Any) -> str:
    """A sha256 of ``value``'s content (tables, traces, arrays, bytes, mappings and sequences of them)."""
    h = hashlib.sha256()
    _feed(h, value)
    return h.hexdigest()


def _feed(h: Any, value: Any) -> None:
    import pandas as pd

    if isinstance(value, Table):
        _feed(h, value.frame)
        h.update(json.dumps([dict(value.units), dict(value.meta)], sort_keys=True, default=str).encode())
    elif isinstance(value, Traces):
        for name in ("time", "signal", "mask", "saturated", "temperature", "wells"):
            _feed(h, getattr(value, name))
        h.update(json.dumps([value.plate, value.signal_unit, dict(value.well_units)], sort_keys=True).encode())
    elif isinstance(value, pd.DataFrame):
        h.update(json.dumps([list(map(str, value.columns)), list(map(str, value.dtypes))]).encode())
        h.update(pd.util.hash_pandas_object(value, index=True).to_numpy().tobytes())
    elif isinstance(value, np.ndarray):
        h.update(f"{value.dtype}{value.shape}".encode())
        h.update(np.ascontiguousarray(value).tobytes() if value.dtype.kind != "O" else repr(value.tolist()).encode())
    elif isinstance(value, bytes | bytearray):
        h.update(bytes(value))
    elif isinstance(value, Mapping):
        for key in sorted(value, key=str):
            h.update(str(key).encode())
            _feed(h, value[key])
    elif isinstance(value, Sequence) and not isinstance(value, str):
        for item in value:
            _feed(h, item)
    else:
        h.update(repr(value).encode())


def _output_digest(out: StageOutput, files: bool = True) -> str:
    return digest([out.artifacts, out.files if files else sorted(out.files), out.record, out.failed])


def _unit_problems(value: Any) -> list[str]:
    from vzero import units
    from vzero.errors import UnitError

    if isinstance(value, Traces):
        table, what = Table(value.wells, value.well_units), "well table "
    elif isinstance(value, Table):
        table, what = value, ""
    else:
        return []
    out = []
    for column, unit in table.units.items():
        if column not in table.frame.columns:
            out.append(f"{what}unit {unit!r} given for {column!r}, which is not a column")
        elif unit:
            try:
                units.unit(unit)
            except UnitError:
                out.append(f"{what}column {column!r} has unit {unit!r}, which vzero does not know")
    return out


def _fail(name: str, problems: list[str]) -> None:
    if problems:
        raise AssertionError(f"{name} breaks the vzero contract:\n" + "\n".join(f"- {p}" for p in problems))


__all__ = ["check_model", "check_stage", "digest"]
