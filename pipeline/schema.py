"""Declared shapes of what each step kind returns, checked by the runner after every step.

The core knows no chemistry, so it does not know what a rates table holds. The plugin that defines a step
kind declares it: a :class:`KindSchema` (a registry component of kind ``"schema"``, named after the step kind)
lists the artifacts a step of that kind returns, the columns of each table (name, dtype, unit) and, where a
kind has a framework-owned base class, the class every stage method of the kind must derive from. The runner
checks every step's output against the schema of its kind (:func:`check_output`) and names the step and the
plugin when a table breaks it, so a bad table is caught where it was made and not in the next stage.

Schemas are open: a table may hold more columns than declared (a method's own diagnostics), never fewer.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import pandas as pd
    from vzero.data import Table

# numpy, pandas and vzero.data are imported inside the checks: the registry imports this module, and the
# command line builds --help from the registry without loading them.

DTYPES = ("float", "int", "text", "bool")


@dataclass(frozen=True)
class Column:
    """One column of a table.

    ``dtype`` is ``float``, ``int``, ``text`` or ``bool``. ``unit`` is the exact unit the table must give the
    column (``"s"``); ``like`` a unit it must convert to (``"M/s"``; ``"*"``: any unit, but one must be
    given once the column holds a value). ``tokens``: for a text column of names joined by ``;`` (flags),
    the names allowed. A column that is not ``required`` is checked only when present.
    """

    name: str
    dtype: str
    doc: str = ""
    unit: str | None = None
    like: str | None = None
    required: bool = True
    tokens: frozenset[str] | None = None

    def check(self, table: Table) -> list[str]:
        """Problems of this column in ``table`` (empty when it conforms)."""
        import pandas as pd

        frame = table.frame
        if self.name not in frame.columns:
            return [f"column {self.name!r} is missing ({self.doc or self.dtype})"] if self.required else []
        out = []
        series = frame[self.name]
        if len(series) and not _dtype_ok(series, self.dtype):
            out.append(f"column {self.name!r} holds {series.dtype} values, expected {self.dtype}")
        given = table.units.get(self.name, "")
        if self.unit is not None and given != self.unit:
            out.append(f"column {self.name!r} has unit {given!r}, expected {self.unit!r}")
        if self.like is not None:
            if not given and series.notna().any():  # a column of NaN alone needs no unit
                out.append(f"column {self.name!r} has no unit (expected one like {self.like!r})")
            elif self.like != "*" and not _converts(given, self.like):
                out.append(f"column {self.name!r} has unit {given!r}, which does not convert to {self.like!r}")
        if self.tokens is not None and len(series):
            unknown = sorted({t for text in pd.unique(series.astype(str)) for t in str(text).split(";") if t}
                             - self.tokens)
            if unknown:
                out.append(f"column {self.name!r} holds unknown names {', '.join(map(repr, unknown[:5]))} "
                           f"(allowed: {', '.join(sorted(self.tokens))})")
        return out


@dataclass(frozen=True)
class TableSchema:
    """A :class:`vzero.data.Table` artifact: its columns, in the order they are documented."""

    columns: tuple[Column, ...]
    doc: str = ""

    def check(self, value: Any) -> list[str]:
        from vzero.data import Table

        if not isinstance(value, Table):
            return [f"expected a vzero.data.Table, got {type(value).__name__}"]
        return [p for c in self.columns for p in c.check(value)]


@dataclass(frozen=True)
class TracesSchema:
    """A :class:`vzero.data.Traces` artifact: time strictly increasing and finite, a boolean mask, and the
    declared columns of its well table (units from ``well_units``)."""

    well_columns: tuple[Column, ...]
    doc: str = ""

    def check(self, value: Any) -> list[str]:
        import numpy as np
        from vzero.data import Table, Traces

        if not isinstance(value, Traces):
            return [f"expected vzero.data.Traces, got {type(value).__name__}"]
        out = []
        t = np.asarray(value.time)
        if t.dtype.kind != "f" or not np.isfinite(t).all() or (t.size > 1 and not (np.diff(t) > 0).all()):
            out.append("time must be finite float seconds, strictly increasing")
        if np.asarray(value.mask).dtype.kind != "b" or np.asarray(value.saturated).dtype.kind != "b":
            out.append("mask and saturated must be boolean arrays")
        if np.asarray(value.signal).dtype.kind != "f":
            out.append(f"signal holds {np.asarray(value.signal).dtype} values, expected float")
        wells = Table(value.wells, value.well_units)
        return out + [f"well table: {p}" for c in self.well_columns for p in c.check(wells)]


@dataclass(frozen=True)
class KindSchema:
    """What every step of kind ``name`` returns, declared by the plugin that defines the kind.

    ``outputs`` maps artifact names to their schemas (checked when the step returns that artifact);
    ``required`` lists artifacts every such step must return, ``any_of`` artifacts of which it must return
    at least one; ``keeps_rows`` maps an output artifact to the input artifact whose rows (wells) it must
    keep, in order; ``files``: the step must return files. ``base``: the framework-owned class every stage
    method of this kind derives from (the registry refuses one that does not). ``stacks``: several pooled
    steps of this kind add up instead of the last one replacing the others: every table such a step returns
    gets a first column ``step`` (the step's label, ``05-fit-nls``) and is stacked under the same table of
    the earlier steps of the kind (:func:`vzero.run.steps.stack_step_tables`).
    """

    name: str
    outputs: Mapping[str, TableSchema | TracesSchema]
    doc: str = ""
    required: tuple[str, ...] = ()
    any_of: tuple[str, ...] = ()
    keeps_rows: Mapping[str, str] = field(default_factory=dict)
    files: bool = False
    base: type | None = None
    stacks: bool = False
    kind: str = "schema"


def check_output(schema: KindSchema, artifacts: Mapping[str, Any], given: Mapping[str, Any],
                 files: Mapping[str, bytes] | None = None) -> list[str]:
    """Problems of a step's returned ``artifacts`` (and ``files``) against ``schema``; ``given`` are the
    artifacts the step received (for ``keeps_rows``). One message per problem, each naming the artifact."""
    out = [f"{name!r} is missing" for name in schema.required if name not in artifacts]
    if schema.any_of and not any(name in artifacts for name in schema.any_of):
        out.append(f"none of {', '.join(map(repr, schema.any_of))} was returned")
    if schema.files and not files:
        out.append("no files were returned")
    for name, value in artifacts.items():
        declared = schema.outputs.get(name)
        if declared is not None:
            out += [f"{name}: {p}" for p in declared.check(value)]
    for name, source in schema.keeps_rows.items():
        if name in artifacts and source in given:
            problem = _same_rows(_wells(artifacts[name]), _wells(given[source]))
            if problem:
                out.append(f"{name}: {problem} of the {source} it was given")
    return out


def _wells(value: Any) -> list[str] | None:
    from vzero.data import Traces

    frame = value.wells if isinstance(value, Traces) else getattr(value, "frame", None)
    if frame is None or "well" not in frame.columns:
        return None
    return [str(w) for w in frame["well"]]


def _same_rows(got: list[str] | None, want: list[str] | None) -> str:
    if got is None or want is None:
        return ""
    if len(got) != len(want):
        return f"has {len(got)} rows, not the {len(want)} wells"
    return "" if got == want else "does not keep the wells in the order"


def _dtype_ok(series: pd.Series, dtype: str) -> bool:
    import pandas as pd

    kind = series.dtype.kind
    if dtype == "float":
        return kind == "f"
    if dtype == "int":
        return kind in "iu"
    if dtype == "bool":
        return kind == "b"
    if dtype == "text":
        if isinstance(series.dtype, pd.StringDtype):
            return True  # holds text (or missing values) by construction
        return kind in "OU" and pd.api.types.infer_dtype(series, skipna=True) in ("string", "empty")
    raise ValueError(f"unknown column dtype {dtype!r}; use one of {DTYPES}")


@functools.lru_cache(maxsize=256)
def _converts(unit: str, like: str) -> bool:
    from vzero import units
    from vzero.errors import UnitError

    try:
        units.factor(unit, like)
    except UnitError:
        return False
    return True


def describe(schema: KindSchema) -> str:
    """The schema as Markdown (the tables of docs/schemas.md are this text; a test keeps them equal)."""
    lines = [f"## {schema.name}", "", schema.doc, ""]
    if schema.base is not None:
        lines += [f"Stage methods of this kind derive from `{schema.base.__module__}.{schema.base.__qualname__}`.",
                  ""]
    musts = [*(f"`{n}`" for n in schema.required)]
    if schema.any_of:
        musts.append("one of " + " or ".join(f"`{n}`" for n in schema.any_of))
    if schema.files:
        musts.append("files")
    if musts:
        lines += ["Returns: " + ", ".join(musts) + ".", ""]
    for name, art in schema.outputs.items():
        columns = art.columns if isinstance(art, TableSchema) else art.well_columns
        what = "table" if isinstance(art, TableSchema) else "traces; columns of the well table"
        keeps = schema.keeps_rows.get(name)
        lines += [f"### `{name}` ({what})", "", art.doc + (f" One row per well of the `{keeps}` received, in "
                                                           "order." if keeps else ""), ""]
        lines += ["| column | dtype | unit | required | meaning |", "|---|---|---|---|---|"]
        for c in columns:
            unit = c.unit if c.unit is not None else (f"like {c.like}" if c.like not in (None, "*") else
                                                      "any, given" if c.like == "*" else "")
            lines.append(f"| `{c.name}` | {c.dtype} | {unit} | {'yes' if c.required else 'no'} | {c.doc} |")
        lines.append("")
    return "\n".join(lines)
