"""Long tables whose wells are stamped a few seconds apart within each read cycle (common in exports that
list every read with its own time): reads are aligned by cycle, so blanks and samples share a time axis."""

from __future__ import annotations

import numpy as np
from numpy.testing import assert_allclose
from vzero.plugins.importers.readers import ReadOptions, read_table


def _long_csv(offsets: dict[str, float], cycle_s: float = 30.0, n: int = 6) -> bytes:
    rows = ["well,time (s),signal"]
    for k in range(n):
        for well, off in offsets.items():
            rows.append(f"{well},{k * cycle_s + off:g},{0.1 + 0.01 * k + (0.002 if well != 'A1' else 0):g}")
    return ("\n".join(rows) + "\n").encode()


def test_staggered_reads_are_aligned_by_cycle():
    block = read_table(_long_csv({"A1": 0.0, "A2": 2.0, "A3": 4.0}), source="staggered.csv",
                       options=ReadOptions())[0]
    assert block.signal.shape == (3, 6) and np.isfinite(block.signal).all()
    assert_allclose(block.time_s, np.arange(6) * 30.0 + 2.0)  # the median stamp of each cycle
    assert any("aligned by cycle" in note and "4 s apart" in note for note in block.assumptions)


def test_reads_far_apart_are_kept_as_read_with_a_note():
    block = read_table(_long_csv({"A1": 0.0, "A2": 20.0}), source="apart.csv", options=ReadOptions())[0]
    assert block.signal.shape == (2, 12)  # not aligned: 20 s stagger on a 30 s cycle
    assert any("could not be aligned" in note for note in block.assumptions)


def test_shared_times_are_left_alone():
    block = read_table(_long_csv({"A1": 0.0, "A2": 0.0}), source="shared.csv", options=ReadOptions())[0]
    assert block.signal.shape == (2, 6) and not any("cycle" in n for n in block.assumptions)
