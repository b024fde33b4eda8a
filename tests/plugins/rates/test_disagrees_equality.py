"""DISAGREES at its threshold exactly: :func:`vzero.plugins.rates.checks.mark_disagreement` flags a well whose
model-free gap *exceeds* ``z`` (its docstring), so a gap equal to ``z`` is no disagreement and the next float
below ``z`` is.

The gap is read once from :func:`model_free_gap` (deterministic: the same number bit for bit when
``mark_disagreement`` computes it again) and ``z`` is set to it. Invented well: Michaelis–Menten, S0 = Km,
integrated by scipy's solve_ivp (:func:`vzero.plugins.kinetics.simulate.simulate_plate`), with a reported
rate 4 % above the model-free estimate.
"""

from __future__ import annotations

import numpy as np
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates import checks

T = np.arange(120) * 5.0  # s
SPC = 5.0  # AU/mM (invented)
S0 = np.array([0.5])  # mM


def test_disagrees_needs_a_gap_above_z() -> None:
    y = simulate_plate(T, S0, 0.5, 2e-4, signal_per_conc=SPC, baseline=0.05, noise=0.002, seed=31).signal
    ref = checks.model_free(T, y, s0=S0, signal_per_conc=SPC)
    res = RateResult(v0=ref.v0 * 1.04, stderr=0.2 * ref.se)
    gap = float(checks.model_free_gap(T, y, res.v0, res.stderr, s0=S0, signal_per_conc=SPC)[0])
    # (a NaN gap would fail both checks below: NaN > z is never true)
    at = checks.mark_disagreement(T, y, res, s0=S0, signal_per_conc=SPC, z=gap)
    assert not int(np.asarray(at.flags)[0]) & Flag.DISAGREES  # equal: does not exceed
    below = checks.mark_disagreement(T, y, res, s0=S0, signal_per_conc=SPC, z=float(np.nextafter(gap, -np.inf)))
    assert int(np.asarray(below.flags)[0]) & Flag.DISAGREES  # one float below the gap: exceeds
