"""Invented plates for the cookbook recipes in configs/cookbook/ (no real enzyme, lab or measurement).

Each writer simulates the scenario its recipe describes and writes the files the recipe names into a folder.
Progress curves are integrated from the rate law with small explicit steps (substrate is used up as the
reaction runs), then turned into signal and given read noise.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd

ROWS = "ABCDEFGHIJKLMNOP"
KCAT, KM = 20.0, 50.0  # 1/s and uM of the invented enzymes
EPS_L_405 = 18000.0 * 0.5 * 1e-6  # AU per uM of product: 18000 M^-1 cm^-1 over 0.5 cm
EPS_L_340 = 6220.0 * 0.5 * 1e-6  # AU per uM of NADH over 0.5 cm


def product_um(s0: np.ndarray, e_nm: np.ndarray, t: np.ndarray, *, km: float = KM, ksi: float = np.inf,
               inhibitor: np.ndarray | None = None, kic: float = np.inf, lag_s: float = 0.0,
               kinact: float = 0.0) -> np.ndarray:
    """Product (uM) of each well at times ``t`` (s): v = kcat·E·S/(Km(1 + I/Kic) + S + S²/Ksi), with an
    activation lag (1 − e^(−t/lag)) and first-order inactivation e^(−kinact·t); Euler steps of 0.25 s."""
    inh = np.zeros_like(s0) if inhibitor is None else inhibitor
    vmax = KCAT * e_nm * 1e-3
    dt = 0.25
    steps = round(float(t[-1]) / dt)
    p = np.zeros_like(s0, dtype=float)
    out = np.zeros((s0.size, t.size))
    k = 0
    for i in range(steps + 1):
        now = i * dt
        while k < t.size and now >= t[k] - 1e-9:
            out[:, k] = p
            k += 1
        s = np.maximum(s0 - p, 0.0)
        act = (1.0 - np.exp(-now / lag_s) if lag_s > 0 else 1.0) * np.exp(-kinact * now)
        p = p + dt * act * vmax * s / (km * (1 + inh / kic) + s + s * s / ksi)
    return out


def _wide(t: np.ndarray, wells: list[str], signal: np.ndarray) -> pd.DataFrame:
    frame = pd.DataFrame(signal.T, columns=wells)
    frame.insert(0, "time (s)", t)
    return frame


def product_plate(folder: Path, seed: int = 1, data: str = "product-plate.csv", layout: bool = True) -> None:
    """96 wells: rows A-C samples (substrate 0-800 uM along the columns), row H substrate blanks."""
    rng = np.random.default_rng(seed)
    levels = np.array([0, 5, 10, 20, 35, 50, 75, 100, 150, 250, 400, 800.0])
    wells = [f"{r}{c}" for r in "ABCH" for c in range(1, 13)]
    s0 = np.tile(levels, 4)
    e = np.where(np.array([w[0] == "H" for w in wells]), 0.0, 2.0)
    t = np.arange(0.0, 601.0, 15.0)
    a = 0.05 + 2e-5 * s0[:, None] + EPS_L_405 * product_um(s0, e, t) + rng.normal(0, 1e-3, (len(wells), t.size))
    folder.mkdir(parents=True, exist_ok=True)
    _wide(t, wells, a).to_csv(folder / data, index=False)
    if layout:
        pd.DataFrame({"well": wells, "role": ["blank" if w[0] == "H" else "sample" for w in wells],
                      "substrate (uM)": s0, "enzyme (nM)": e,
                      "group": ["blank" if w[0] == "H" else "VZ-3" for w in wells]}).to_csv(
            folder / "product-layout.csv", index=False)


def nadh_plate(folder: Path) -> None:
    """NADH consumed: rows A-C samples (NADH 5-250 uM along the columns), row H NADH-only blanks."""
    rng = np.random.default_rng(5)
    levels = np.array([5, 10, 15, 20, 30, 40, 60, 80, 100, 150, 200, 250.0])
    wells = [f"{r}{c}" for r in "ABCH" for c in range(1, 13)]
    s0 = np.tile(levels, 4)
    e = np.where(np.array([w[0] == "H" for w in wells]), 0.0, 3.0)
    t = np.arange(0.0, 301.0, 5.0)
    p = product_um(s0, e, t, km=30.0)
    a = 0.04 + EPS_L_340 * (s0[:, None] - p) + rng.normal(0, 3e-4, (len(wells), t.size))
    _wide(t, wells, a).to_csv(folder / "nadh-plate.csv", index=False)
    pd.DataFrame({"well": wells, "role": ["blank" if w[0] == "H" else "sample" for w in wells],
                  "substrate (uM)": s0, "enzyme (nM)": e,
                  "group": ["blank" if w[0] == "H" else "VZ-5" for w in wells]}).to_csv(
        folder / "nadh-layout.csv", index=False)


def fluor_plate(folder: Path) -> None:
    """384 wells, European export: rows A-C samples with substrate inhibition (24 levels), row O blanks,
    row P standards of the free fluorophore (0-800 uM; the top one reads OVER)."""
    rng = np.random.default_rng(9)
    levels = np.geomspace(2.0, 8000.0, 24)
    rows = "ABCOP"
    wells = [f"{r}{c}" for r in rows for c in range(1, 25)]
    role = {"A": "sample", "B": "sample", "C": "sample", "O": "blank", "P": "standard"}
    s0 = np.array([levels[int(w[1:]) - 1] if w[0] in "ABCO" else 0.0 for w in wells])
    std = np.array([25.0 * (int(w[1:]) - 1) if w[0] == "P" else np.nan for w in wells])
    std[[i for i, w in enumerate(wells) if w == "P24"]] = 800.0
    e = np.array([1.0 if w[0] in "ABC" else 0.0 for w in wells])
    t = np.arange(0.0, 601.0, 20.0)
    rfu_per_um = 80.0
    p = product_um(s0, e, t, ksi=2000.0)
    f = 500.0 + rfu_per_um * (p + np.nan_to_num(std)[:, None]) + rng.normal(0, 5.0, (len(wells), t.size))
    text = np.char.replace(np.char.mod("%.2f", f), ".", ",").astype(object)
    text[f > 60000.0] = "OVER"
    frame = pd.DataFrame(text.T, columns=wells)
    frame.insert(0, "time (s)", [f"{x:g}" for x in t])
    frame.to_csv(folder / "fluor-plate.csv", sep=";", index=False)
    layout = pd.DataFrame({"well": wells, "role": [role[w[0]] for w in wells], "substrate (uM)": s0,
                           "enzyme (nM)": e, "product (uM)": std,
                           "group": [{"O": "blank", "P": "standard"}.get(w[0], "VZ-9") for w in wells]})
    layout.to_csv(folder / "fluor-layout.csv", sep=";", decimal=",", index=False)


def matrix_plate(folder: Path) -> None:
    """Substrate 0-640 uM along columns 1-8, competitive inhibitor 0-80 uM down rows A-F (Kic 15 uM),
    row G blanks without enzyme."""
    rng = np.random.default_rng(11)
    sub = np.array([0, 10, 20, 40, 80, 160, 320, 640.0])
    inh = dict(zip("ABCDEFG", [0, 5, 10, 20, 40, 80, 0.0], strict=True))
    wells = [f"{r}{c}" for r in "ABCDEFG" for c in range(1, 9)]
    s0 = np.array([sub[int(w[1:]) - 1] for w in wells])
    i0 = np.array([inh[w[0]] for w in wells])
    e = np.array([0.0 if w[0] == "G" else 5.0 for w in wells])
    t = np.arange(0.0, 181.0, 10.0)
    p = product_um(s0, e * 0.2, t, inhibitor=i0, kic=15.0)
    a = 0.05 + EPS_L_340 * p + rng.normal(0, 5e-4, (len(wells), t.size))
    _wide(t, wells, a).to_csv(folder / "matrix-plate.csv", index=False)
    pd.DataFrame({"well": wells, "role": ["blank" if w[0] == "G" else "sample" for w in wells],
                  "substrate (uM)": s0, "inhibitor (uM)": i0, "enzyme (nM)": e,
                  "group": ["blank" if w[0] == "G" else "VZ-11 + VZI-2" for w in wells]}).to_csv(
        folder / "matrix-layout.csv", index=False)


def declared_plate(folder: Path) -> None:
    """All 96 wells read; rows A-C a two-fold series 400 uM -> 0 (last column), row H blanks (400 uM)."""
    rng = np.random.default_rng(3)
    wells = [f"{r}{c}" for r in "ABCDEFGH" for c in range(1, 13)]
    step = np.array([400.0 * 0.5 ** (c - 1) if c < 12 else 0.0 for c in range(1, 13)])
    s0 = np.array([step[int(w[1:]) - 1] if w[0] in "ABC" else (400.0 if w[0] == "H" else 0.0) for w in wells])
    e = np.array([2.0 if w[0] in "ABC" else 0.0 for w in wells])
    t = np.arange(0.0, 301.0, 15.0)
    a = 0.05 + EPS_L_405 * product_um(s0, e, t) + rng.normal(0, 1e-3, (len(wells), t.size))
    _wide(t, wells, a).to_csv(folder / "declared-plate.csv", index=False)


def lag_plate(folder: Path) -> None:
    """Rows A-C: a hysteretic enzyme (lag 40 s, inactivation half-life 300 s), 12 substrate levels."""
    rng = np.random.default_rng(13)
    levels = np.array([5, 10, 20, 35, 50, 75, 100, 150, 250, 400, 600, 800.0])
    wells = [f"{r}{c}" for r in "ABCH" for c in range(1, 13)]
    s0 = np.tile(levels, 4)
    e = np.where(np.array([w[0] == "H" for w in wells]), 0.0, 2.0)
    t = np.arange(0.0, 901.0, 10.0)
    p = product_um(s0, e, t, lag_s=40.0, kinact=np.log(2) / 300.0)
    a = 0.05 + EPS_L_405 * p + rng.normal(0, 5e-4, (len(wells), t.size))
    _wide(t, wells, a).to_csv(folder / "lag-plate.csv", index=False)
    pd.DataFrame({"well": wells, "role": ["blank" if w[0] == "H" else "sample" for w in wells],
                  "substrate (uM)": s0, "enzyme (nM)": e,
                  "group": ["blank" if w[0] == "H" else "VZ-13" for w in wells]}).to_csv(
        folder / "lag-layout.csv", index=False)


def batch_plates(folder: Path) -> None:
    """Three plates of the product scenario (different read noise) in batch/, with one shared layout."""
    product_plate(folder, seed=1, data="product-plate.csv")
    for i in (1, 2, 3):
        (folder / "batch").mkdir(exist_ok=True)
        product_plate(folder, seed=20 + i, data=f"batch/plate-{i}.csv", layout=False)


def two_question_plate(folder: Path) -> None:
    """Rows A-B: substrate series 0-640 uM without inhibitor (group VZ-7); rows C-D: inhibitor VZI-4 at
    0-1000 uM with 50 uM substrate (group VZ-7 + VZI-4, competitive, Kic 20 uM); row H blanks; water-peak
    reads for a 0.5 cm pathlength in every well."""
    rng = np.random.default_rng(21)
    sub = np.array([0, 10, 20, 40, 80, 160, 320, 640.0])
    inh = np.array([0, 1, 3, 10, 30, 100, 300, 1000.0])
    wells = [f"{r}{c}" for r in "ABCDH" for c in range(1, 9)]
    s0 = np.array([sub[int(w[1:]) - 1] if w[0] in "AB" else 50.0 for w in wells])
    i0 = np.array([inh[int(w[1:]) - 1] if w[0] in "CD" else 0.0 for w in wells])
    e = np.array([0.0 if w[0] == "H" else 2.0 for w in wells])
    t = np.arange(0.0, 301.0, 20.0)
    a = 0.05 + EPS_L_405 * product_um(s0, e, t, inhibitor=i0, kic=20.0) + rng.normal(0, 1e-3, (len(wells), t.size))
    _wide(t, wells, a).to_csv(folder / "two-question-plate.csv", index=False)
    group = {"A": "VZ-7", "B": "VZ-7", "C": "VZ-7 + VZI-4", "D": "VZ-7 + VZI-4", "H": "blank"}
    pd.DataFrame({"well": wells, "role": ["blank" if w[0] == "H" else "sample" for w in wells],
                  "substrate (uM)": s0, "inhibitor (uM)": i0, "enzyme (nM)": e,
                  "group": [group[w[0]] for w in wells]}).to_csv(folder / "two-question-layout.csv", index=False)
    pd.DataFrame({"well": wells, "a977": 0.5 * 0.18 + 0.04, "a900": 0.04}).to_csv(
        folder / "two-question-water.csv", index=False)


WRITERS: dict[str, Callable[[Path], None]] = {
    "absorbance-product.yaml": product_plate,
    "absorbance-product-rerun.yaml": product_plate,
    "substrate-consumed.yaml": nadh_plate,
    "fluorescence-standard-curve.yaml": fluor_plate,
    "inhibitor-matrix.yaml": matrix_plate,
    "declared-layout.yaml": declared_plate,
    "lag-inactivation.yaml": lag_plate,
    "batch.yaml": batch_plates,
    "models-per-group.yaml": two_question_plate,
}
"""For each cookbook recipe, the writer of the invented files it names."""
