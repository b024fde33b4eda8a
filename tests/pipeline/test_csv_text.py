"""The fast CSV writer of the run folder gives exactly the text pandas' ``to_csv(index=False)`` gives."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from pipeline.runner import csv_text


def test_same_text_as_pandas_for_every_column_type():
    rng = np.random.default_rng(3)
    n = 50
    frame = pd.DataFrame({
        "rate (uM/min)": rng.normal(size=n) * 10.0 ** rng.integers(-12, 18, n),
        "n": rng.integers(-5, 10**12, n),
        "ok": rng.random(n) > 0.5,
        "well": [f"{'ABCDEFGH'[i % 8]}{i // 8 + 1}" for i in range(n)],
        'note, "quoted"': ["a,b", 'say "x"', "line\nbreak", "µM β", None] * (n // 5),
        "count": rng.integers(0, 255, n).astype(np.uint8),
    })
    frame.loc[[0, 7, 9], "rate (uM/min)"] = [np.nan, np.inf, -0.0]
    frame["str"] = pd.Series(["x", None] * (n // 2), dtype="string")
    frame["level"] = [0.0, -0.0, np.nan, 1e-7, 250.0] * (n // 5)  # repeats: each distinct value formatted once
    assert csv_text(frame) == frame.to_csv(index=False)  # pandas itself is the reference


def test_empty_and_unhandled_frames():
    frame = pd.DataFrame({"a": pd.Series([], dtype=float), "b": pd.Series([], dtype=object)})
    assert csv_text(frame) == frame.to_csv(index=False)
    assert csv_text(pd.DataFrame({"t": pd.to_datetime(["2024-01-01"])})) is None  # left to pandas


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(allow_nan=True, allow_infinity=True), max_size=20),
       st.lists(st.text(max_size=6), min_size=20, max_size=20))
def test_any_floats_and_text_match_pandas(xs: list[float], words: list[str]):
    frame = pd.DataFrame({"x": np.array(xs, dtype=np.float64), "w": pd.Series(words[: len(xs)], dtype=object)})
    assert csv_text(frame) == frame.to_csv(index=False)
