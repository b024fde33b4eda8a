"""The invented demo: a 96-well absorbance assay of an invented cooperative enzyme.

Scenario (invented for the demo; no real enzyme, lab or data): "VZ-7", a hypothetical allosteric
dehydrogenase, makes NADH from its substrate; the plate reader follows NADH at 340 nm every 10 s for
10 minutes. Rows A–C hold the cooperative wild type in triplicate, rows D–F an invented variant ("VZ-7 K52A")
that lost cooperativity, across 12 substrate levels (columns 1–12). Row G holds substrate-only blanks (one per
level); row H holds buffer blanks.

Progress curves are integrated from the rate law by the shared simulator
(:func:`vzero.plugins.kinetics.simulate.simulate_plate`: substrate depletes as the reaction runs), then
turned into absorbance with the Beer–Lambert law and given read noise, a small substrate background and a
slow drift shared by all wells.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

ROWS = "ABCDEFGH"
SUBSTRATE_UM = np.array([0.0, 15, 30, 50, 75, 100, 150, 200, 300, 450, 700, 1000])
EPSILON_PER_M_CM = 6220.0  # NADH at 340 nm (Horecker & Kornberg 1948, as quoted in handbooks)
PATHLENGTH_CM = 0.55  # an invented, typical value for ~200 µL in a 96-well plate (from memory)
ENZYME_NM = 5.0
READ_NOISE_AU = 0.0015
TIMES_S = np.arange(0.0, 601.0, 10.0)


@dataclass(frozen=True)
class Truth:
    """True parameters of one demo group (Vmax in µM/min, K0.5 in µM)."""

    group: str
    vmax_um_per_min: float
    k_half_um: float
    hill: float

    @property
    def kcat_per_s(self) -> float:
        return self.vmax_um_per_min / 60.0 / (ENZYME_NM * 1e-3)


TRUTH = (
    Truth("VZ-7 wild type", vmax_um_per_min=12.0, k_half_um=150.0, hill=2.4),
    Truth("VZ-7 K52A", vmax_um_per_min=8.0, k_half_um=220.0, hill=1.0),
)


def layout() -> pd.DataFrame:
    """The plate layout: well, role, substrate (µM), enzyme (nM), inhibitor, group, replicate."""
    rows = []
    for r, row in enumerate(ROWS):
        for c in range(12):
            s = SUBSTRATE_UM[c]
            if r < 6:
                truth = TRUTH[r // 3]
                rows.append((f"{row}{c + 1}", "sample", s, ENZYME_NM, truth.group, str(r % 3 + 1)))
            elif r == 6:
                rows.append((f"{row}{c + 1}", "blank", s, 0.0, "substrate blank", "1"))
            else:
                rows.append((f"{row}{c + 1}", "blank", 0.0, 0.0, "buffer blank", str(c + 1)))
    return pd.DataFrame(rows, columns=["well", "role", "substrate (uM)", "enzyme (nM)", "group", "replicate"])


def simulate(seed: int = 7) -> pd.DataFrame:
    """The wide absorbance table: ``time (s)`` then one column per well (A1 ... H12)."""
    from vzero.plugins.kinetics.simulate import simulate_plate

    rng = np.random.default_rng(seed)
    lay = layout()
    s0 = lay["substrate (uM)"].to_numpy(dtype=float)
    enzyme = lay["enzyme (nM)"].to_numpy(dtype=float) > 0
    vmax = np.zeros(len(lay))
    k = np.ones(len(lay))
    h = np.ones(len(lay))
    for truth in TRUTH:
        sel = (lay["group"] == truth.group).to_numpy()
        vmax[sel], k[sel], h[sel] = truth.vmax_um_per_min / 60.0, truth.k_half_um, truth.hill
    vmax = np.where(enzyme, vmax, 0.0)

    product_um = simulate_plate(TIMES_S, s0, k, vmax, hill=h, rtol=1e-10, atol=1e-12).product
    absorb_per_um = EPSILON_PER_M_CM * 1e-6 * PATHLENGTH_CM
    background = 0.045 + 0.00002 * s0  # plate, buffer and a faint substrate absorbance (invented)
    drift = 2e-6 * TIMES_S  # a slow lamp drift common to all wells, removed by blank subtraction
    signal = background[:, None] + drift[None, :] + absorb_per_um * product_um
    signal += rng.normal(0.0, READ_NOISE_AU, signal.shape)
    table = pd.DataFrame(np.round(signal.T, 5), columns=lay["well"])
    table.insert(0, "time (s)", TIMES_S)
    return table
