"""Tables sent from workers as plain column arrays (vzero.run.packed): unpacked and stacked, they equal the
tables they came from and what Table.concat gives."""

from __future__ import annotations

import pickle

import numpy as np
import pandas as pd
import pandas.testing as pdt
from vzero.data import Table
from vzero.run.packed import PackedTable, pack, stack


def rates_table(plate: str, n: int = 5, seed: int = 0) -> Table:
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({
        "plate": [plate] * n,
        "well": [f"A{i + 1}" for i in range(n)],
        "rate": rng.normal(size=n),
        "n_points": np.arange(n, dtype=np.int64),
        "flags": ["", "lag", np.nan, "noisy", ""][:n],
    })
    return Table(frame, {"rate": "uM/min"}, {"signal_unit": "AU"})


def test_pack_then_unpack_gives_the_same_table_through_pickle():
    table = rates_table("p1")
    packed = pickle.loads(pickle.dumps(pack(table)))
    assert isinstance(packed, PackedTable)
    back = packed.unpack()
    pdt.assert_frame_equal(back.frame, table.frame, check_exact=True)
    assert back.frame.dtypes.equals(table.frame.dtypes)
    assert dict(back.units) == dict(table.units) and dict(back.meta) == dict(table.meta)
    assert back.frame["flags"].isna().tolist() == [False, False, True, False, False]


def test_stack_equals_table_concat():
    tables = [rates_table(f"p{i}", seed=i) for i in range(4)]
    stacked = stack([pack(t) for t in tables])  # type: ignore[misc]
    expected = Table.concat(tables)
    assert stacked is not None
    pdt.assert_frame_equal(stacked.frame, expected.frame, check_exact=True)
    assert stacked.frame.to_csv() == expected.frame.to_csv()
    assert dict(stacked.units) == dict(expected.units)


def test_stack_declines_tables_that_differ():
    a, b = rates_table("p1"), rates_table("p2")
    other_unit = Table(b.frame, {"rate": "mM/min"}, b.meta)
    assert stack([pack(a), pack(other_unit)]) is None  # type: ignore[list-item]
    fewer = Table(b.frame.drop(columns="flags"), b.units, b.meta)
    assert stack([pack(a), pack(fewer)]) is None  # type: ignore[list-item]


def test_tables_outside_the_simple_case_travel_as_they_are():
    table = rates_table("p1")
    shifted = Table(table.frame.set_axis(range(10, 15)), table.units)
    assert pack(shifted) is shifted
    with_objects = Table(table.frame.assign(extra=[{"a": 1}] * 5), table.units)
    assert pack(with_objects) is with_objects
    empty = Table(pd.DataFrame())
    assert pack(empty) is empty
