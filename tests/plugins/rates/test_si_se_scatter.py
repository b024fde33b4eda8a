"""The substrate-inhibition curve's standard error of v0 describes the scatter of v0 over replicate wells.

Invented plate: 200 replicate wells of the inhibited enzyme of test_sicurve.py (Km 0.3 mM, Ki 3 mM, Vmax
8e-4 mM/s; curves from scipy's Radau) at S0 = 0.4 mM, where the curve determines its shape (both shares
well inside their bounds), with white read noise 0.002 AU. The reference is the empirical standard
deviation of the fitted v0 over the wells (numpy, ddof 1), known to about 5 % from 200 wells; the median
reported SE must match it within 15 % (three times that). Further above Ki/2 the reported SE overstates
the scatter (not checked here).
"""

from __future__ import annotations

import numpy as np
from vzero.plugins.rates.sicurve import fit_si_curve

from tests.plugins.rates.test_sicurve import SPC, T, radau_substrate, v0_true

S0 = 0.4  # mM
N = 200
NOISE = 0.002  # AU


def test_reported_se_matches_the_scatter_over_replicate_wells() -> None:
    rng = np.random.default_rng(7)
    y = 0.05 + SPC * (S0 - radau_substrate(np.array([S0]))) + NOISE * rng.standard_normal((N, T.size))
    start = np.stack([np.full(N, 0.05), np.full(N, np.log(v0_true(S0) * 0.97)), np.full(N, 0.1),
                      np.full(N, 0.2)], axis=1)
    fit = fit_si_curve(T, y, np.ones(y.shape, bool), np.full(N, S0), SPC, np.full(N, NOISE), start, max_iter=60)
    ok = fit["converged"]
    assert ok.sum() >= 0.9 * N
    ratio = np.std(fit["v0"][ok], ddof=1) / np.median(fit["se"][ok])
    assert 0.85 <= ratio <= 1.15
