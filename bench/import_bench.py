"""Benchmark: reading a 1536-well x 200-read export with :func:`read_table` against plain pandas.

Run on demand (not a test): ``python -m bench.import_bench [--reads N] [--no-xlsx]``. The plate is invented
(random reads with a few overflow tokens). ``pandas.read_csv`` is the floor: it parses numbers but does no
header search, block splitting, token handling or checks. Targets: CSV well under 1 s on one core; xlsx a
few seconds (openpyxl parses the XML cell by cell).
"""

from __future__ import annotations

import argparse
import io
import time
from collections.abc import Callable

import numpy as np
import pandas as pd
from vzero.plugins.importers.readers import ReadOptions, read_table
from vzero.plugins.kinetics.wells import all_wells


def make_csv(n_reads: int, seed: int = 0) -> bytes:
    """A wide CSV: settings lines, then Time (s), Temp (°C) and 1536 well columns, ``n_reads`` rows."""
    rng = np.random.default_rng(seed)
    wells = all_wells(1536)
    sig = np.round(rng.uniform(0.05, 3.0, (n_reads, len(wells))), 4).astype(str)
    sig[rng.random(sig.shape) < 0.001] = "OVER"
    lines = ["Invented benchmark plate", "Read interval,10 s", "", ",".join(["Time (s)", "Temp (°C)", *wells])]
    for t in range(n_reads):
        lines.append(f"{10 * t},25.0," + ",".join(sig[t]))
    return ("\n".join(lines) + "\n").encode()


def make_xlsx(n_reads: int, seed: int = 0) -> bytes:
    """The same table as one worksheet (numbers as numeric cells)."""
    import openpyxl

    rng = np.random.default_rng(seed)
    wells = all_wells(1536)
    wb = openpyxl.Workbook(write_only=True)
    ws = wb.create_sheet("plate")
    ws.append(["Time (s)", "Temp (°C)", *wells])
    for t in range(n_reads):
        ws.append([10.0 * t, 25.0, *np.round(rng.uniform(0.05, 3.0, len(wells)), 4).tolist()])
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


def best_of(fn: Callable[[], object], repeat: int) -> float:
    """Fastest of ``repeat`` runs, in seconds."""
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main(argv: list[str] | None = None) -> int:
    """Print timings and ratios; returns 0."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--reads", type=int, default=200)
    ap.add_argument("--no-xlsx", action="store_true")
    args = ap.parse_args(argv)
    data = make_csv(args.reads)
    opts = ReadOptions()
    (block,) = read_table(data, source="bench.csv", options=opts)
    assert block.signal.shape == (1536, args.reads)
    ours = best_of(lambda: read_table(data, source="bench.csv", options=opts), 3)
    floor = best_of(lambda: pd.read_csv(io.BytesIO(data), skiprows=3), 3)
    print(f"CSV  {len(data) / 1e6:.1f} MB, 1536 wells x {args.reads} reads")
    print(f"  read_table       {ours:7.3f} s")
    print(f"  pandas.read_csv  {floor:7.3f} s")
    print(f"  ratio            {ours / floor:7.1f} x")
    if not args.no_xlsx:
        xdata = make_xlsx(args.reads)
        ours_x = best_of(lambda: read_table(xdata, source="bench.xlsx", options=opts), 1)
        floor_x = best_of(lambda: pd.read_excel(io.BytesIO(xdata), engine="openpyxl"), 1)
        print(f"XLSX {len(xdata) / 1e6:.1f} MB")
        print(f"  read_table       {ours_x:7.3f} s")
        print(f"  pandas.read_excel{floor_x:7.3f} s")
        print(f"  ratio            {ours_x / floor_x:7.1f} x")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
