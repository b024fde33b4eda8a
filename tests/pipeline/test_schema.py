"""The core's generic schema check (vzero.schema): each rule on its own, with a table built to break it."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from vzero.data import Table, Traces
from vzero.errors import PluginError
from vzero.schema import Column, KindSchema, TableSchema, TracesSchema, check_output, describe
from vzero.stage import Stage

SCHEMA = KindSchema("thing", {"out": TableSchema((
    Column("name", "text", "a name"),
    Column("count", "int", "how many"),
    Column("speed", "float", "how fast", like="m/s"),
    Column("span", "float", "how long", unit="s"),
    Column("tags", "text", "names joined by ;", tokens=frozenset({"red", "blue"})),
    Column("extra", "bool", "optional", required=False),
))}, "A kind of our own.", required=("out",), keeps_rows={"out": "in"})


def _table(**change):
    frame = pd.DataFrame({"well": ["A1", "A2"], "name": ["x", "y"], "count": [1, 2], "speed": [0.5, 1.5],
                          "span": [3.0, 4.0], "tags": ["red;blue", ""]})
    units = {"speed": "km/h", "span": "s"}
    for key, value in change.items():
        if key == "units":
            units = value
        elif value is None:
            frame = frame.drop(columns=[key])
        else:
            frame[key] = value
    return Table(frame, units)


def _given():
    return {"in": Table(pd.DataFrame({"well": ["A1", "A2"]}))}


def test_a_conforming_table_has_no_problems():
    assert check_output(SCHEMA, {"out": _table()}, _given()) == []


@pytest.mark.parametrize(("change", "problem"), [
    ({"name": None}, "column 'name' is missing"),
    ({"count": [1.0, 2.0]}, "column 'count' holds float64 values, expected int"),
    ({"name": [1, "y"]}, "column 'name' holds object values, expected text"),
    ({"units": {"speed": "s", "span": "s"}}, "column 'speed' has unit 's', which does not convert to 'm/s'"),
    ({"units": {"speed": "m/s"}}, "column 'span' has unit '', expected 's'"),
    ({"units": {"span": "s"}}, "column 'speed' has no unit"),
    ({"tags": ["red;green", ""]}, "column 'tags' holds unknown names 'green'"),
])
def test_each_rule_names_its_column(change, problem):
    problems = check_output(SCHEMA, {"out": _table(**change)}, _given())
    assert any(problem in p for p in problems), problems


def test_missing_artifact_and_lost_rows_are_problems():
    assert check_output(SCHEMA, {}, _given()) == ["'out' is missing"]
    three = {"in": Table(pd.DataFrame({"well": ["A1", "A2", "A3"]}))}
    assert check_output(SCHEMA, {"out": _table()}, three) == ["out: has 2 rows, not the 3 wells of the in it was given"]
    swapped = {"in": Table(pd.DataFrame({"well": ["A2", "A1"]}))}
    assert "does not keep the wells in the order" in check_output(SCHEMA, {"out": _table()}, swapped)[0]


def test_traces_schema_checks_time_and_the_well_table():
    t = np.array([0.0, 10.0, 5.0])
    signal = np.zeros((1, 3))
    traces = Traces("p", t, signal, np.ones((1, 3), bool), np.zeros((1, 3), bool), pd.DataFrame({"well": ["A1"]}),
                    "AU")
    problems = TracesSchema((Column("well", "text"), Column("role", "text")),).check(traces)
    assert problems == ["time must be finite float seconds, strictly increasing", "well table: column 'role' is "
                        "missing (text)"]


def test_describe_lists_every_column():
    text = describe(SCHEMA)
    assert "## thing" in text and "| `speed` | float | like m/s | yes | how fast |" in text


def test_a_sealed_method_cannot_be_overridden():
    class Base(Stage):
        kind, method = "thing", "base"
        sealed = ("run",)

        def run(self, data):
            return None

    with pytest.raises(PluginError, match=r"overrides run\(\), which .*Base owns"):
        class Child(Base):
            def run(self, data):
                return 1
