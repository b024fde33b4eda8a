"""The fast CSV writer of the run folder gives exactly the text pandas' ``to_csv(index=False)`` gives."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st
from vzero.run._csv_fast import csv_text
from vzero.run.outputs import plain_csv_text
from vzero.spreadsheet import inert_frame


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
    assert csv_text(frame) == inert_frame(frame).to_csv(index=False)  # formula-like text made inert first


def test_pieces_split_by_rows_join_into_the_same_text():
    """Large tables are written by worker processes in pieces of rows, the first with the header: joined,
    they must be the text of the whole table (quoting and missing values decided row by row)."""
    frame = pd.DataFrame({"x": [1.5, np.nan, -0.0, 2.0, 1e-9], "w": ["a,b", None, 'q"', "plain", "line\nbreak"],
                          "n": [1, 2, 3, 4, 5]})
    whole = frame.to_csv(index=False)
    for cut in range(1, 5):
        assert csv_text(frame.iloc[:cut]) + csv_text(frame.iloc[cut:], header=False) == whole
    plain = pd.DataFrame({"x": [1.0, 2.0], "y": ["a", "b"]})
    assert csv_text(plain.iloc[:1]) + csv_text(plain.iloc[1:], header=False) == plain.to_csv(index=False)
    assert csv_text(plain.iloc[:0], header=False) == ""


def test_tables_written_in_pieces_by_workers(tmp_path):
    """CsvInWorkers: a large table split over the workers joins into the table's CSV; a table replaced by a
    later step is not used (the new one is written instead) and no piece is left in the folder."""
    from concurrent.futures import ThreadPoolExecutor

    from vzero.data import Table
    from vzero.run import outputs

    class Pool:  # the executor interface, on threads
        workers, shares_disk = 2, True

        def __init__(self) -> None:
            self.pool = ThreadPoolExecutor(2)

        def submit(self, fn, arg):
            return self.pool.submit(fn, arg)

    rows = outputs.CSV_IN_WORKERS_ROWS
    first = Table(pd.DataFrame({"x": np.arange(rows + 7) * 0.1, "w": ["a", "b,c"] * ((rows + 7) // 2) + ["d"]}))
    later = Table(first.frame.assign(x=first.frame["x"] * 2))
    small = Table(pd.DataFrame({"x": [1.0]}))
    (tmp_path / "run.h5").write_bytes(b"")  # the run folder's audit file, flushed with the rest
    workers = outputs.CsvInWorkers(Pool(), tmp_path)
    workers.start({"rates": first, "small": small})
    assert len(workers.started["rates"].paths) == 2 and "small" not in workers.started
    workers.start({"rates": later})
    dated = Table(pd.DataFrame({"t": pd.to_datetime(["2024-01-01 00:00"] * rows + ["2024-01-01 12:30"])}))
    workers.start({"dated": dated})
    assert len(workers.started["dated"].paths) == 1  # left to pandas, which needs every row at once
    outputs.write_outputs(tmp_path, {"dated": dated}, {}, {}, workers)
    assert (tmp_path / "dated.csv").read_text("utf-8") == dated.frame.to_csv(index=False)
    (tmp_path / "dated.csv").unlink()
    outputs.write_outputs(tmp_path, {"rates": later, "small": small}, {}, {}, workers)
    assert (tmp_path / "rates.csv").read_text("utf-8") == later.frame.to_csv(index=False)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["rates.csv", "run.h5", "small.csv"]

    class Broken(Pool):  # a pool whose workers fail: the table is written here instead
        def submit(self, fn, arg):
            return self.pool.submit(lambda: 1 / 0)

    (tmp_path / "rates.csv").unlink()
    workers = outputs.CsvInWorkers(Broken(), tmp_path)
    workers.start({"rates": later})
    workers.detach()  # as before a report step: a failed piece does not stop the run here either
    outputs.write_outputs(tmp_path, {"rates": later}, {}, {}, workers)
    assert (tmp_path / "rates.csv").read_text("utf-8") == later.frame.to_csv(index=False)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["rates.csv", "run.h5", "small.csv"]


def test_large_tables_are_written_a_block_of_rows_at_a_time(tmp_path, monkeypatch):
    """write_csv formats a block of rows at a time (bounded memory); the file is pandas' text all the same, also
    for a table left to pandas (a date column) and for a table without rows."""
    from vzero.run import outputs

    monkeypatch.setattr(outputs, "CSV_BLOCK_ROWS", 3)
    frames = [pd.DataFrame({"x": np.arange(10) / 3, "w": ["a,b", None, "c"] * 3 + ["d"]}),
              # pandas drops the time of day only when no row has one: such a table is written in one go
              pd.DataFrame({"t": pd.to_datetime(["2024-01-01 00:00"] * 6 + ["2024-01-01 12:30"]), "v": np.arange(7)}),
              pd.DataFrame({"a": pd.Series([], dtype=float)})]
    for i, frame in enumerate(frames):
        outputs.write_csv(str(tmp_path / f"{i}.csv"), frame)
        assert (tmp_path / f"{i}.csv").read_text("utf-8") == frame.to_csv(index=False)


def test_the_fast_twin_gives_the_plain_path_s_bytes():
    """vzero.run._csv_fast.csv_text against vzero.run.outputs.plain_csv_text (pandas), formula-like cells and
    quoting included: the two paths must write the same file."""
    frame = pd.DataFrame({"group": ["=1+1", "+x", "-y", "@z", "plain", "a,b"],
                          "rate": [1.5, -2.0, np.nan, 0.0, 1e-12, 3.0], "n": [1, 2, 3, 4, 5, 6],
                          "ok": [True, False] * 3})
    assert csv_text(frame) == plain_csv_text(frame)
    assert csv_text(frame, header=False) == plain_csv_text(frame, header=False)
