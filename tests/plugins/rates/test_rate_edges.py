"""Rate-method rules at the last bit of their thresholds (invented straight-line data).

HIGH_CONVERSION in ``auto`` marks a well whose shortest window already converts more than ``max_conversion``
of the substrate, with a rounding allowance of 1e-4 relative (the conversion is recomputed from the
window's fit, so a window that stopped at the limit may come out above it in the last bits). The test sets
the limit on either side of that allowance around one well's own reported conversion (hand calculation:
the shortest window fails at any limit below its conversion, so the conversion does not move).
"""

from __future__ import annotations

import numpy as np
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.rates.auto import auto

T = np.arange(60) * 10.0


def test_high_conversion_allows_one_part_in_ten_thousand() -> None:
    s0, spc = np.full(1, 2.0), 0.5
    v = 0.2 * s0 / T[5]  # about 20 % converted by the sixth read
    y = 0.1 + spc * v[:, None] * T[None, :] + 1e-4 * np.random.default_rng(4).standard_normal((1, T.size))
    first = auto(T, y, s0=s0, signal_per_conc=spc, find_lag=False)
    conv = float(first.extra["conversion"][0])
    assert first.window_end_s[0] == T[5] and conv > 0.15
    for limit, flagged in ((conv / 1.00005, False), (conv / 1.0002, True), (conv / 1.5, True), (conv * 1.5, False)):
        r = auto(T, y, s0=s0, signal_per_conc=spc, find_lag=False, max_conversion=limit)
        assert bool(r.flags[0] & Flag.HIGH_CONVERSION) == flagged, limit
        if limit < conv:  # the shortest window either way: the same conversion
            assert r.extra["conversion"][0] == conv and r.window_end_s[0] == T[5]
