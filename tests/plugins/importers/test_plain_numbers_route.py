"""The fast route for plain numbers (:func:`readers._plain_numbers`) does its documented job itself: every
cell a finite number gives the float array (Python's float parsing), anything else None (the careful route
then reads the cells and names a bad one). Invented cells."""

from __future__ import annotations

import numpy as np
from vzero.plugins.importers import readers


def test_plain_cells_give_the_array_and_others_none() -> None:
    rows = [["0", "25.0", "0.1", " 1e-05"], ["30", "25.1", "+2.5", "7."]]
    got = readers._plain_numbers(rows, [0, 2, 3])
    assert got is not None
    # the reference: Python's float() of each cell
    np.testing.assert_array_equal(got, [[float(r[c]) for c in (0, 2, 3)] for r in rows])
    assert readers._plain_numbers(rows, [1]).tolist() == [[25.0], [25.1]]
    assert readers._plain_numbers([["0", "OVER"]], [0, 1]) is None  # a token: the careful route
    assert readers._plain_numbers([["0", "inf"]], [0, 1]) is None  # not finite
    assert readers._plain_numbers(rows, []) is None  # no columns to read
