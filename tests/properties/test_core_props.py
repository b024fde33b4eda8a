"""Property tests of the core: units round-trip, blank subtraction of constants, table storage."""

from __future__ import annotations

import h5py
import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from vzero import units
from vzero.audit.codec import read_table, write_table
from vzero.data import Table, Traces
from vzero.plugins.blank import MeanBlank
from vzero.stage import StageInput

CONC_UNITS = ["M", "mM", "uM", "µM", "nM", "pM"]
TIME_UNITS = ["s", "min", "h", "ms"]
# Physical values: zero or magnitudes far from the subnormal range (a factor like 1e-3/60 must not underflow).
finite = st.one_of(st.just(0.0), st.floats(1e-100, 1e12), st.floats(-1e12, -1e-100))


@given(st.sampled_from(CONC_UNITS), st.sampled_from(CONC_UNITS), st.sampled_from(TIME_UNITS),
       st.sampled_from(TIME_UNITS), finite)
def test_rate_unit_conversion_and_inverse_give_back_the_input(c1, c2, t1, t2, value):
    forward = units.factor(f"{c1}/{t1}", f"{c2}/{t2}")
    back = units.factor(f"{c2}/{t2}", f"{c1}/{t1}")
    assert_allclose(value * forward * back, value, rtol=1e-12, atol=0)


@given(st.floats(-5, 5), st.floats(-5, 5), st.integers(2, 30), st.integers(1, 4))
@settings(max_examples=50)
def test_constant_blank_from_constant_trace_is_constant_difference(level, blank, n_time, n_blank):
    n = 3 + n_blank
    signal = np.vstack([np.full((3, n_time), level), np.full((n_blank, n_time), blank)])
    wells = pd.DataFrame({"well": [f"A{i + 1}" for i in range(n)], "role": ["sample"] * 3 + ["blank"] * n_blank})
    traces = Traces("p", np.arange(n_time, dtype=float), signal, np.ones_like(signal, bool),
                    np.zeros_like(signal, bool), wells, "AU")
    data = StageInput({"traces": traces}, {"name": "p"}, {}, {}, None, lambda _: None)
    out = MeanBlank(match="none", role="blank").run(data).artifacts["traces"]
    assert_allclose(out.signal[:3], level - blank, rtol=0, atol=1e-12)
    assert_allclose(out.signal[3:], 0.0, atol=1e-12)  # the mean of equal floats may differ by an ulp


# HDF5 variable-length strings cannot hold NUL characters, so generated text leaves them out.
# Text read from files is valid Unicode (no lone surrogates, category Cs).
TEXT = st.text(st.characters(exclude_characters="\x00", exclude_categories=("Cs",)), max_size=8)


@given(st.lists(st.tuples(TEXT, finite, st.integers(-(2**40), 2**40), st.booleans()), max_size=20))
@settings(max_examples=40, deadline=None)
def test_table_write_then_read_is_identical(tmp_path_factory, rows):
    frame = pd.DataFrame(rows, columns=["name", "value", "count", "ok"]).astype(
        {"name": object, "value": float, "count": np.int64, "ok": bool}
    )
    path = tmp_path_factory.mktemp("t") / "t.h5"
    with h5py.File(path, "w") as f:
        write_table(f, "t", Table(frame, {"value": "uM/min"}))
    with h5py.File(path, "r") as f:
        back = read_table(f["t"])
    assert back.units == {"value": "uM/min"}
    assert list(back.frame["name"]) == list(frame["name"])
    assert back.frame["value"].to_numpy().tobytes() == frame["value"].to_numpy().tobytes()
    assert (back.frame["count"].to_numpy() == frame["count"].to_numpy()).all()
    assert (back.frame["ok"].to_numpy() == frame["ok"].to_numpy()).all()


def test_pooling_converts_equivalent_and_compatible_units():
    import pytest
    from vzero.errors import UnitError

    a = Table(pd.DataFrame({"substrate": [1.0], "substrate_unit": ["uM"]}), {"substrate": "uM"})
    b = Table(pd.DataFrame({"substrate": [2.0], "substrate_unit": ["µM"]}), {"substrate": "µM"})
    c = Table(pd.DataFrame({"substrate": [0.003], "substrate_unit": ["mM"]}), {"substrate": "mM"})
    pooled = Table.concat([a, b, c])
    assert_allclose(pooled.frame["substrate"], [1.0, 2.0, 3.0], rtol=1e-12)
    assert list(pooled.frame["substrate_unit"]) == ["uM"] * 3 and pooled.units["substrate"] == "uM"
    d = Table(pd.DataFrame({"substrate": [1.0]}), {"substrate": "s"})
    with pytest.raises(UnitError, match="'uM' on one plate and in 's' on another"):
        Table.concat([a, d])
