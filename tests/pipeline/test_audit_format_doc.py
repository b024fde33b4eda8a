"""docs/audit-format.md shows how to read a table with plain h5py and pandas, without vzero: run exactly those
lines on a fresh run.h5 and compare with what vzero reads."""

from __future__ import annotations

import os
import re
from pathlib import Path

import numpy as np
from vzero.audit import reader
from vzero.run.runner import run

from tests.conftest import linear_plate

DOC = Path(__file__).resolve().parents[2] / "docs" / "audit-format.md"


def _doc_snippet() -> str:
    text = DOC.read_text("utf-8")
    section = text[text.index("## Reading a table without vzero"):]
    return re.search(r"```python\n(.*?)```", section, re.S).group(1)  # type: ignore[union-attr]


def test_the_five_lines_in_the_docs_read_the_rates_table(tmp_path: Path):
    snippet = _doc_snippet()
    assert len(snippet.strip().splitlines()) == 5
    assert "vzero" not in snippet
    result = run(linear_plate(tmp_path / "in"), tmp_path / "out")
    here = os.getcwd()
    os.chdir(result.out_dir)
    try:
        scope: dict[str, object] = {}
        exec(compile(snippet, str(DOC), "exec"), scope)  # the documentation's own code, run as a user would
    finally:
        os.chdir(here)
    plain = scope["rates"]
    with reader.open_audit(result.audit_path) as f:
        ours = reader.read_results(f)["rates"].frame
    assert list(plain.columns) == list(ours.columns)  # type: ignore[attr-defined]
    for column in ours.columns:
        got, want = plain[column].to_numpy(), ours[column].to_numpy()  # type: ignore[index]
        if want.dtype.kind == "f":
            np.testing.assert_array_equal(got, want)
        else:
            assert got.tolist() == want.tolist(), column
    assert "A1" in set(plain["well"])  # type: ignore[index]
