"""Tables in the audit file (format 1.2): units in one group attribute, text as fixed-length UTF-8, and the
stored hash equal to the formula written in docs/audit-format.md, recomputed here without vzero's code."""

from __future__ import annotations

import hashlib
import io
import json

import h5py
import numpy as np
import pandas as pd
import pytest
from vzero.audit.codec import read_table, table_sha256, write_table
from vzero.data import Table


def _documented_hash(columns: list[str], units: list[str], values: list[list[object]]) -> str:
    """The table hash as docs/audit-format.md defines it, written out with hashlib and struct-free bytes."""
    h = hashlib.sha256(json.dumps(columns, sort_keys=True, ensure_ascii=False).encode("utf-8"))
    for unit, col in zip(units, values, strict=True):
        if isinstance(col[0], str):
            h.update(f"|{unit}|O|({len(col)},)|".encode())
            for v in col:
                b = str(v).encode("utf-8")
                h.update(len(b).to_bytes(8, "little") + b)
        else:
            arr = np.asarray(col)
            h.update(f"|{unit}|{arr.dtype.kind}|({len(col)},)|".encode())
            h.update(arr.astype(arr.dtype.newbyteorder("<")).tobytes())
    return h.hexdigest()


def _write(table: Table) -> tuple[io.BytesIO, str]:
    buf = io.BytesIO()
    with h5py.File(buf, "w") as f:
        g = write_table(f, "t", table)
        return buf, str(g.attrs["sha256"])


def test_hash_follows_the_documented_formula_with_multibyte_text():
    words = ["A1", "Ångström µM", "", "β-NADH"]
    table = Table(pd.DataFrame({"well": words, "rate": [1.0, np.nan, -2.5, 3e-9], "n": [1, 2, 3, 4]}),
                  {"rate": "uM/min"}, {"note": "β-NADH at 340 nm, µM"})
    buf, digest = _write(table)
    assert digest == _documented_hash(["well", "rate", "n"], ["", "uM/min", ""],
                                      [words, [1.0, np.nan, -2.5, 3e-9], [1, 2, 3, 4]])
    with h5py.File(buf, "r") as f:
        g = f["t"]
        assert json.loads(g.attrs["units"]) == ["", "uM/min", ""]
        assert g["000"].dtype.kind == "S" and list(g["000"].asstr()[()]) == words  # plain HDF5 UTF-8 text
        assert not dict(g["001"].attrs)  # no per-column attributes in format 1.2
        assert table_sha256(g) == digest
        back = read_table(g)
    assert list(back.frame["well"]) == words and back.units == {"rate": "uM/min"}
    assert back.meta == {"note": "β-NADH at 340 nm, µM"}


def test_text_with_nul_is_refused_not_cut_short():
    """HDF5 strings (fixed or variable length) cannot hold NUL; storing a shortened value would break the
    hash check, so writing refuses it."""
    with pytest.raises(ValueError, match="NUL"):
        _write(Table(pd.DataFrame({"note": ["a\x00", "b"]})))


def test_empty_text_column():
    buf, digest = _write(Table(pd.DataFrame({"note": pd.Series([], dtype=object)})))
    with h5py.File(buf, "r") as f:
        assert len(read_table(f["t"]).frame) == 0 and table_sha256(f["t"]) == digest


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
    """Columns are read without a Series each where pandas allows; a table with a repeated column name, or
    with pandas' nullable and text dtypes, is stored as before: the hash of the formula, values read back."""
    frame = pd.DataFrame({"a": [1.5, 2.5], "s": pd.array(["x", None], dtype="string"),
                          "n": pd.array([1, 2], dtype="Int64"), "b": pd.array([True, False], dtype="boolean")})
    buf, digest = _write(Table(frame))
    assert digest == _documented_hash(["a", "s", "n", "b"], ["", "", "", ""],
                                      [[1.5, 2.5], ["x", ""], [1, 2], [True, False]])
    twice = pd.DataFrame([[1.0, "p"], [2.0, "q"]], columns=["v", "v"])
    buf, digest = _write(Table(twice))
    assert digest == _documented_hash(["v", "v"], ["", ""], [[1.0, 2.0], ["p", "q"]])
    with h5py.File(buf, "r") as f:
        assert read_table(f["t"]).frame.iloc[:, 1].tolist() == ["p", "q"]


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
