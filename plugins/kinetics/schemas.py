"""The output schema of every built-in step kind, registered as components of kind ``"schema"``.

The core checks each step's output against the schema of its kind (:func:`vzero.schema.check_output`) and
names the step and the plugin that made a table that breaks it. The schemas of import, blank and rates also
name the framework-owned base class (:mod:`vzero.plugins.kinetics.methods`) every method of the kind derives
from, so that none can skip the recipe's exclusions, overrides and failure rules. docs/schemas.md is
:func:`vzero.schema.describe` of each schema here (a test keeps them equal).

This module is a plugin of its own (entry point ``builtin_kinetics``), so the schemas hold whichever stage
packages are installed or loaded.
"""

from __future__ import annotations

from typing import Any

from vzero import hookimpl
from vzero.plugins.kinetics import flags
from vzero.plugins.kinetics.methods import BlankMethod, ConvertMethod, ImportMethod, RateMethod
from vzero.schema import Column, KindSchema, TableSchema, TracesSchema

FLAG_COLUMN = Column("flags", "text", "quality flags, names joined by ';' ('' when none)",
                     tokens=frozenset(flags.NAMES))

WELL_TABLE = (
    Column("well", "text", "well name, like A1"),
    Column("role", "text", "sample, blank, standard, empty, ..."),
    Column("group", "text", "group the well is fitted in", required=False),
    Column("excluded", "bool", "the recipe excludes the whole well", required=False),
    Column("note", "text", "the recipe's reasons for this well (exclusions, overrides)", required=False),
)

#: Columns every per-well rates table has, whichever step made it.
RATE_COLUMNS = (
    Column("plate", "text", "plate name (the runner adds it when tables are pooled)", required=False),
    Column("well", "text", "well name (or row label for rates read from a table)"),
    Column("group", "text", "group the well is fitted in", required=False),
    Column("role", "text", "sample, blank, standard, ..."),
    Column("substrate", "float", "substrate concentration", like="*", required=False),
    Column("enzyme", "float", "enzyme concentration", like="*", required=False),
    Column("inhibitor", "float", "inhibitor concentration", like="*", required=False),
    Column("rate", "float", "initial rate v0 (NaN: no rate)", like="*"),
    Column("rate_stderr", "float", "standard error of the rate", like="*"),
    Column("rate_unit", "text", "unit of rate, as text"),
    Column("method", "text", "method that gave the rate ('window (override)' for a recipe override)"),
    FLAG_COLUMN,
    Column("note", "text", "the recipe's reasons for this well", required=False),
)

#: Columns a rates method adds (the builder in :mod:`vzero.plugins.kinetics.rates_table` writes them).
WINDOW_COLUMNS = (
    Column("window_start_s", "float", "first read the rate was taken from", unit="s"),
    Column("window_end_s", "float", "last read the rate was taken from", unit="s"),
    Column("n_points", "int", "reads used"),
    Column("lag_s", "float", "lag before the window (NaN: not assessed)", unit="s"),
)


def _rates(rate_like: str, extra: tuple[Column, ...] = (), doc: str = "") -> TableSchema:
    cols = tuple(Column(c.name, c.dtype, c.doc, c.unit, rate_like, c.required, c.tokens)
                 if c.name in ("rate", "rate_stderr") else c for c in RATE_COLUMNS)
    return TableSchema(cols + extra, doc)


TRACES = TracesSchema(WELL_TABLE, "One plate's time courses: time [n_time] s, signal [n_wells, n_time], mask.")

SCHEMAS = (
    KindSchema("import", {"traces": TRACES,
                          "rates": _rates("*", doc="Initial rates measured elsewhere, in their own unit.")},
               "Reads one plate's raw files.", any_of=("traces", "rates"), base=ImportMethod),
    KindSchema("blank", {"traces": TRACES}, "Corrects the signal for blank wells.", required=("traces",),
               keeps_rows={"traces": "traces"}, base=BlankMethod),
    KindSchema("rates", {"rates": _rates("1/s", WINDOW_COLUMNS, "Per-well initial rates in signal units "
                                                                "per second.")},
               "Initial rates per well from the traces.", required=("rates",), keeps_rows={"rates": "traces"},
               base=RateMethod),
    KindSchema("convert", {"rates": _rates("M/s", (
        Column("signal_rate", "float", "the rate before conversion, in signal units per second", like="1/s"),
        Column("turnover", "float", "rate per enzyme concentration (kcat-like)", unit="1/s", required=False),
    ), "The rates table in concentration per time; every other column kept.")},
               "Rates in signal per time to concentration per time.", required=("rates",),
               keeps_rows={"rates": "rates"}, base=ConvertMethod),
    KindSchema("fit", {
        "fits": TableSchema((
            Column("step", "text", "label of the fit step (added by the runner: several fit steps add up)",
                   required=False),
            Column("group", "text", "group fitted"),
            Column("model", "text", "registered model name"),
            Column("parameter", "text", "parameter name"),
            Column("estimate", "float", "value (NaN when not determined)"),
            Column("stderr", "float", "standard error"),
            Column("ci_low", "float", "lower confidence limit"),
            Column("ci_high", "float", "upper confidence limit"),
            Column("unit", "text", "unit of estimate, stderr and limits, as text"),
            Column("success", "bool", "whether the fit converged"),
            Column("errorbars", "bool", "whether stderr and limits could be computed"),
            Column("note", "text", "why a value or an uncertainty is missing"),
        ), "One row per group, model and parameter."),
    }, "Rate laws fitted to the pooled rates, per group; several fit steps add up (a `step` column keeps them "
       "apart).", required=("fits",), stacks=True),
    KindSchema("report", {}, "A report of the run, as files.", files=True),
)


@hookimpl
def vzero_register(registry: Any) -> None:
    for schema in SCHEMAS:
        registry.add(schema)
