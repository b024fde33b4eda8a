"""The kept audit files (tests/data/audit/linear-v1.1.h5 and linear-v1.2.h5, formats 1.1 and 1.2): every later
vzero must read, verify and rerun them.

Expected values come from how the invented plate was built (tests/conftest.py ``linear_plate``: straight lines
with slopes ``linspace(1e-4, 1e-3, 96)`` AU/s plus a drift shared with the row-H blanks), not from vzero.
"""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from vzero.audit import reader
from vzero.audit.verify import verify
from vzero.run.rerun import rerun

from tests.conftest import DATA

KEPT_FILES = {"1.1": DATA / "audit" / "linear-v1.1.h5", "1.2": DATA / "audit" / "linear-v1.2.h5"}
kept = pytest.mark.parametrize("version", sorted(KEPT_FILES))
SLOPES = np.linspace(1e-4, 1e-3, 96)


@kept
def test_kept_file_reads_with_known_rates(version: str):
    KEPT = KEPT_FILES[version]
    with reader.open_audit(KEPT) as f:
        head = reader.header(f)
        inputs = reader.read_inputs(f)
        rates = reader.read_results(f)["rates"]
        traces = reader.read_step_traces(f)["p1"]
    assert head["format"] == "vzero-audit" and head["format_version"] == version
    assert head["assay"]["pH"] == 7.5 and head["assay"]["temperature"] == "25 degC"
    assert [e["well"] for e in head["exclusions"]] == ["B7", "C3"]
    assert [i.name for i in inputs] == ["plate.csv", "layout.csv"]
    for i in inputs:  # the stored bytes still hash to the recorded sha256
        assert hashlib.sha256(i.data).hexdigest() == i.sha256 and len(i.data) == i.size
    frame = rates.frame.set_index("well")
    samples = [w for w in frame.index if not w.startswith("H") and w != "B7"]
    idx = [int("ABCDEFGH".index(w[0]) * 12 + int(w[1:]) - 1) for w in samples]
    # construction of the plate: the blank-corrected slope of each well is exactly its SLOPES entry
    assert_allclose(frame.loc[samples, "rate"].to_numpy(), SLOPES[idx], rtol=1e-9)
    assert np.isnan(frame.loc["B7", "rate"])  # excluded well: every read masked
    assert rates.units["rate"] == "AU/s"
    c3 = traces.well_names.index("C3")
    masked = traces.time[~traces.mask[c3]]
    assert_allclose(masked, [30.0, 45.0, 60.0])  # reads every 15 s; the excluded range is 30-60 s inclusive


@kept
def test_kept_file_verifies(version: str):
    KEPT = KEPT_FILES[version]
    report = verify(KEPT)
    assert report.ok, report.text()
    assert len(report.checked) >= 4  # recipe, 2 inputs, results tables


@kept
def test_kept_file_reruns_without_original_files(version: str, tmp_path: Path):
    KEPT = KEPT_FILES[version]
    old = tmp_path / "old.h5"
    shutil.copy(KEPT, old)
    result = rerun(old, tmp_path / "again")
    with reader.open_audit(KEPT) as f:
        before = reader.read_results(f)["rates"].frame
    after = result.rates
    assert_allclose(after["rate"].to_numpy(), before["rate"].to_numpy(), rtol=0, atol=0, equal_nan=True)
