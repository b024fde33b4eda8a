"""Whole-pipeline benchmark: time per stage, audit file share and peak memory of ``vzero run`` on synthetic
plates, and the peer script (bench/peer.py) on the same files.

Each measurement runs in a fresh subprocess (``python -m bench.pipeline_bench plate 384 120 auto``) that
prints one JSON line, so peak memory (``resource.getrusage``, whole process; and tracemalloc's peak of
Python-tracked allocations during the run alone) belongs to that measurement only. One BLAS thread, so the
figures are per core. Plates are invented: a Michaelis–Menten series simulated with
:func:`vzero.plugins.kinetics.simulate.simulate_plate`, NADH-like absorbance (6220 M^-1 cm^-1, 0.55 cm), read noise
0.001 AU, every 16th well a blank.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import json  # noqa: E402
import shutil  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402
from typing import Any  # noqa: E402

EPSILON, PATHLENGTH = 6220.0, 0.55  # M^-1 cm^-1 and cm (NADH at 340 nm, a half-area well)
PER_UM = EPSILON * PATHLENGTH * 1e-6  # AU per µM
KM_UM = {"g1": 40.0, "g2": 120.0, "g3": 60.0, "g4": 250.0}  # invented

RATES = {
    "auto": "{method: auto, epsilon: \"6220 M^-1 cm^-1\", pathlength: \"0.55 cm\"}",
    "progress": "{method: progress, epsilon: \"6220 M^-1 cm^-1\", pathlength: \"0.55 cm\"}",
    "window": "{method: window, start: \"0 s\", end: \"120 s\"}",
}


def recipe_text(rates: str, plates: str) -> str:
    return (
        f"vzero: 1\nname: bench\nplates:\n{plates}steps:\n"
        "  - import: {method: table, signal_unit: AU}\n"
        "  - blank: {method: mean}\n"
        f"  - rates: {RATES[rates]}\n"
        "  - convert: {method: beer-lambert, epsilon: \"6220 M^-1 cm^-1\", pathlength: \"0.55 cm\", "
        "output_unit: \"uM/min\"}\n"
        "  - fit: {method: nls, models: [michaelis-menten]}\n"
    )


def write_plate(folder: Path, n_wells: int, n_time: int, seed: int = 0, name: str = "plate") -> tuple[Path, Path]:
    """Write a synthetic wide-table plate and its long layout; return (data, layout) paths."""
    import numpy as np
    import pandas as pd
    from vzero.plugins.kinetics.simulate import simulate_plate
    from vzero.plugins.kinetics.wells import all_wells

    wells = all_wells(n_wells)
    t = np.linspace(0.0, 600.0, n_time)
    groups = np.array([f"g{1 + (i * 4) // n_wells}" for i in range(n_wells)])
    s0 = np.resize(np.geomspace(10.0, 800.0, 12), n_wells)
    blank = np.arange(n_wells) % 16 == 15
    km = np.array([KM_UM[g] for g in groups])
    vmax = np.where(blank, 0.0, 0.04)  # µM/s
    plate = simulate_plate(t, s0, km, vmax, signal_per_conc=PER_UM, baseline=0.05, noise=0.001, seed=seed)
    folder.mkdir(parents=True, exist_ok=True)
    data = folder / f"{name}.csv"
    frame = pd.DataFrame(np.round(plate.signal.T, 5), columns=wells)
    frame.insert(0, "time (s)", t)
    frame.to_csv(data, index=False)
    layout = folder / "layout.csv"
    if not layout.exists():
        pd.DataFrame({
            "well": wells, "role": np.where(blank, "blank", "sample"), "substrate (uM)": np.where(blank, 0.0, s0),
            "enzyme (nM)": np.where(blank, 0.0, 5.0), "group": np.where(blank, "blank", groups),
        }).to_csv(layout, index=False)
    return data, layout


def _stage_seconds(audit: Path) -> dict[str, float]:
    import h5py

    with h5py.File(audit) as f:
        return {str(f["steps"][k].attrs["kind"]): float(f["steps"][k].attrs["seconds"]) for k in f["steps"]}


def measure_plate(n_wells: int, n_time: int, rates: str, repeat: int) -> dict[str, Any]:
    """In this process: best-of-``repeat`` run of the pipeline on one plate, per stage, audit and memory."""
    import resource
    import tracemalloc

    from vzero.run import runner

    work = Path(tempfile.mkdtemp(prefix="vzero-bench-"))
    try:
        write_plate(work, n_wells, n_time)
        recipe = work / "bench.yaml"
        recipe.write_text(recipe_text(rates, "  - {name: p1, data: plate.csv, layout: layout.csv}\n"), "utf-8")
        runner.run(recipe, work / "warm", force=True)  # imports, caches
        best: dict[str, Any] = {}
        cpu, audit_cpu = [], []
        for _ in range(repeat):
            t0, c0 = time.perf_counter(), time.process_time()
            result = runner.run(recipe, work / "out", force=True)
            total = time.perf_counter() - t0
            cpu.append(time.process_time() - c0)
            audit_cpu.append(result.cpu.get("audit", float("nan")))
            if not best or total < best["total"]:
                # audit_seconds: time spent writing the audit file, summed over the run (it is written as
                # plates finish, not in one piece at the end)
                best = {"total": total, "audit": result.audit_seconds, "csv": result.csv_seconds,
                        "stages": _stage_seconds(result.audit_path)}
        # processor time of this process (least of the runs): what the run itself cost, whatever else the
        # machine was doing; the audit file's part of it likewise
        best["cpu"], best["audit_cpu"] = min(cpu), min(audit_cpu)
        rss_before_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        tracemalloc.start()
        runner.run(recipe, work / "traced", force=True)
        best["traced_peak_mb"] = tracemalloc.get_traced_memory()[1] / 2**20
        tracemalloc.stop()
        best["maxrss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        best["maxrss_before_mb"] = rss_before_mb
        return best
    finally:
        shutil.rmtree(work, ignore_errors=True)


def measure_peer(n_wells: int, n_time: int, method: str) -> dict[str, Any]:
    """In this process: the peer script on the same synthetic plate (time after its imports)."""
    from bench.peer import run_peer

    work = Path(tempfile.mkdtemp(prefix="vzero-bench-"))
    try:
        data, layout = write_plate(work, n_wells, n_time)
        t0 = time.perf_counter()
        run_peer(data, layout, work / "peer", method=method)
        return {"total": time.perf_counter() - t0}
    finally:
        shutil.rmtree(work, ignore_errors=True)


def write_batch(folder: Path, n_plates: int, n_wells: int = 96, n_time: int = 60) -> Path:
    """Write ``n_plates`` synthetic plates and a recipe for them under ``folder``; return the recipe."""
    for i in range(n_plates):
        write_plate(folder / "plates", n_wells, n_time, seed=i, name=f"p{i:03d}")
    recipe = folder / "batch.yaml"
    plates = '  - data: "plates/p*.csv"\n    layout: plates/layout.csv\n'
    recipe.write_text(recipe_text("auto", plates), "utf-8")
    return recipe


def measure_batch(n_plates: int, jobs: int, folder: str | None = None) -> dict[str, Any]:
    """In this process: ``n_plates`` plates through one recipe with ``jobs`` worker processes (the plates of
    :func:`write_batch` in ``folder`` when given, else written here first)."""
    from vzero.run import runner

    work = Path(tempfile.mkdtemp(prefix="vzero-bench-"))
    try:
        recipe = Path(folder) / "batch.yaml" if folder else write_batch(work, n_plates)
        t0 = time.perf_counter()
        result = runner.run(recipe, work / "out", force=True, jobs=jobs)
        total = time.perf_counter() - t0
        return {"total": total, "plates": n_plates, "failed": len(result.failed),
                "stages": _stage_seconds(result.audit_path), "cpu": result.cpu}
    finally:
        shutil.rmtree(work, ignore_errors=True)


def spin(n: int) -> float:
    """A fixed piece of pure compute (Python and numpy), the same in every process."""
    import numpy as np

    total = 0.0
    for i in range(n):
        total += i * 0.5
    a = np.linspace(0.0, 1.0, 90_000).reshape(300, 300)
    for _ in range(15):
        a = a @ a / 300.0
    return total + float(a[0, 0])


def in_subprocess(*args: str) -> dict[str, Any]:
    """Run one measurement in a fresh interpreter and return its JSON result."""
    root = Path(__file__).resolve().parent.parent
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(root), os.environ.get("PYTHONPATH", "")])}
    proc = subprocess.run([sys.executable, "-m", "bench.pipeline_bench", *args], capture_output=True, text=True,
                          cwd=root, env=env, timeout=3600)
    if proc.returncode != 0:
        raise RuntimeError(f"bench {' '.join(args)} failed:\n{proc.stderr[-3000:]}")
    return dict(json.loads(proc.stdout.strip().splitlines()[-1]))


def wall(cmd: list[str], cwd: Path | None = None) -> float:
    """Wall time of a command, interpreter start included."""
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, capture_output=True, cwd=cwd, timeout=600)
    return time.perf_counter() - t0


def main(argv: list[str]) -> int:
    """``plate N_WELLS N_TIME RATES REPEAT`` | ``peer N_WELLS N_TIME METHOD`` | ``batch N_PLATES JOBS [FOLDER]``."""
    what = argv[0]
    if what == "plate":
        out = measure_plate(int(argv[1]), int(argv[2]), argv[3], int(argv[4]))
    elif what == "peer":
        out = measure_peer(int(argv[1]), int(argv[2]), argv[3])
    elif what == "batch":
        out = measure_batch(int(argv[1]), int(argv[2]), argv[3] if len(argv) > 3 else None)
    else:
        raise SystemExit(f"unknown measurement {what!r}; see python -m bench --help")
    print(json.dumps(out))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
