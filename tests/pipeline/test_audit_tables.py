"""Tables in the audit file (format 2.0): one compound dataset per table whose field names are the column
names, units as a string attribute, text as UTF-8; the digest equal to the formula written in
docs/audit-format.md, recomputed here with hashlib alone."""

from __future__ import annotations

import hashlib
import io

import h5py
import numpy as np
import pandas as pd
import pytest
from vzero.audit.codec import read_table, write_table
from vzero.audit.digest import object_digest
from vzero.data import Table


def _n(b: bytes) -> bytes:
    return len(b).to_bytes(8, "little") + b


def _documented_digest(columns: list[str], values: list[list[object]], attrs: dict[str, object]) -> bytes:
    """A table dataset's digest as docs/audit-format.md defines it: ``D``, the value (shape, ``c``, then each
    field's name and values), then each attribute in name order."""
    n = len(values[0])
    h = hashlib.sha256(b"D" + f"|({n},)|".encode() + b"c")
    for name, col in zip(columns, values, strict=True):
        h.update(_n(name.encode()) + f"|({n},)|".encode())
        if isinstance(col[0], str):
            h.update(b"t" + b"".join(_n(str(v).encode()) for v in col))
        else:
            arr = np.asarray(col)
            little = arr.dtype.newbyteorder("<")
            h.update(little.str.encode() + arr.astype(little).tobytes())
    for key in sorted(attrs):
        h.update(_n(key.encode()))
        value = attrs[key]
        if isinstance(value, str):
            h.update(b"s" + _n(value.encode()))
        else:  # a list of text
            h.update(f"|({len(value)},)|".encode() + b"t" + b"".join(_n(v.encode()) for v in value))  # type: ignore[arg-type]
    return h.digest()


def _write(table: Table) -> tuple[io.BytesIO, bytes]:
    buf = io.BytesIO()
    with h5py.File(buf, "w") as f:
        ds = write_table(f, "t", table)
        return buf, object_digest(ds)


def test_table_is_one_compound_dataset_named_by_its_columns_and_digest_follows_the_formula():
    words = ["A1", "Ångström µM", "", "β-NADH"]
    table = Table(pd.DataFrame({"well": words, "rate": [1.0, np.nan, -2.5, 3e-9], "n": [1, 2, 3, 4]}),
                  {"rate": "uM/min"}, {"note": "β-NADH at 340 nm, µM"})
    buf, digest = _write(table)
    assert digest == _documented_digest(
        ["well", "rate", "n"], [words, [1.0, np.nan, -2.5, 3e-9], [1, 2, 3, 4]],
        {"kind": "table", "units": ["", "uM/min", ""], "meta": '{"note": "β-NADH at 340 nm, µM"}'})
    with h5py.File(buf, "r") as f:
        ds = f["t"]
        assert isinstance(ds, h5py.Dataset) and ds.dtype.names == ("well", "rate", "n")
        assert list(ds.attrs["units"]) == ["", "uM/min", ""]
        member = ds.id.get_type().get_member_type(0)
        assert member.get_cset() == h5py.h5t.CSET_UTF8  # text marked UTF-8 for every reader
        assert [v.decode("utf-8") for v in ds["well"]] == words
        assert ds["n"].dtype == np.int64 and ds["rate"].dtype == np.float64
        back = read_table(ds)
    assert list(back.frame["well"]) == words and back.units == {"rate": "uM/min"}
    assert back.meta == {"note": "β-NADH at 340 nm, µM"}


def test_text_with_nul_is_refused_not_cut_short():
    """HDF5 strings (fixed or variable length) cannot hold NUL; storing a shortened value would break the
    hash check, so writing refuses it."""
    with pytest.raises(ValueError, match="NUL"):
        _write(Table(pd.DataFrame({"note": ["a\x00", "b"]})))


def test_empty_text_column_and_a_table_without_columns():
    buf, digest = _write(Table(pd.DataFrame({"note": pd.Series([], dtype=object)})))
    with h5py.File(buf, "r") as f:
        assert len(read_table(f["t"]).frame) == 0 and object_digest(f["t"]) == digest
    buf, _ = _write(Table(pd.DataFrame(index=range(3))))
    with h5py.File(buf, "r") as f:
        assert read_table(f["t"]).frame.shape == (3, 0)


def test_text_of_mixed_and_missing_values():
    """Each value's text is str(value), missing ones "" (pd.isna); equal-hashing values such as 1, 1.0 and
    True keep their own texts (a hash table that merged them would print "1" three times)."""
    from vzero.audit.codec import text_codes

    values = np.array([1, 1.0, True, None, "a", np.nan, pd.NA], dtype=object)
    texts, codes = text_codes(values)
    assert [texts[c] for c in codes] == ["1", "1.0", "True", "", "a", "", ""]
    texts, codes = text_codes(np.array(["b", None, "a", "b", np.str_("a")], dtype=object))
    assert [texts[c] for c in codes] == ["b", "", "a", "b", "a"]


def test_text_of_columns_holding_one_text():
    """A column of one text throughout takes a shortcut; a missing value (None, NaN, pd.NA) or another text
    anywhere in it, first and last rows equal, must still come out row by row."""
    from vzero.audit.codec import text_codes

    for values, expected in [
        (["uM"] * 4, ["uM"] * 4),
        (["uM", np.str_("uM"), "uM"], ["uM"] * 3),
        (["x", pd.NA, "x"], ["x", "", "x"]),
        (["x", None, "x"], ["x", "", "x"]),
        (["x", np.nan, "x"], ["x", "", "x"]),
        (["x", "y", "x"], ["x", "y", "x"]),
        (["x", 1, "x"], ["x", "1", "x"]),
    ]:
        texts, codes = text_codes(np.array(values, dtype=object))
        assert [texts[c] for c in codes] == expected


def test_repeated_column_names_and_pandas_own_dtypes():
    """pandas' nullable and text dtypes are stored as plain numbers and text; a repeated or empty column name
    (which a compound field cannot have) gets a stand-in field name, and the exact names are kept."""
    frame = pd.DataFrame({"a": [1.5, 2.5], "s": pd.array(["x", None], dtype="string"),
                          "n": pd.array([1, 2], dtype="Int64"), "b": pd.array([True, False], dtype="boolean")})
    buf, _ = _write(Table(frame))
    with h5py.File(buf, "r") as f:
        assert f["t"].dtype == np.dtype([("a", "<f8"), ("s", "S1"), ("n", "<i8"), ("b", "?")])
        assert read_table(f["t"]).frame["s"].tolist() == ["x", ""]
    twice = pd.DataFrame([[1.0, "p", 3]], columns=["v", "v", ""])
    buf, _ = _write(Table(twice))
    with h5py.File(buf, "r") as f:
        assert f["t"].dtype.names == ("v", "v (2)", "column 3")
        back = read_table(f["t"]).frame
    assert list(back.columns) == ["v", "v", ""] and back.iloc[0, 1] == "p"


def test_one_text_shortcut_keeps_odd_cells_as_they_are():
    """Between two equal texts, a cell that is not text (an array, a number) keeps its own str() (a review
    found that an array cell comparing equal to the text was taken for that text, and one that did not compare
    at all raised)."""
    from vzero.audit.codec import text_codes

    cells = np.empty(3, dtype=object)
    cells[:] = ["x", None, "x"]
    cells[1] = np.array(["x"])
    texts, codes = text_codes(cells)
    assert [texts[c] for c in codes] == ["x", str(np.array(["x"])), "x"]
    cells[1] = np.array(["x", "y"])
    texts, codes = text_codes(cells)
    assert [texts[c] for c in codes] == ["x", str(np.array(["x", "y"])), "x"]
