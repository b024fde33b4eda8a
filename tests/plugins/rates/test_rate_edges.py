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


def test_auto_default_rate_drop_is_ten_percent() -> None:
    # the same decaying wells with the default and with max_rate_drop given as 0.10 (common practice, the
    # documented default) agree exactly; 0.20 gives longer windows on some of them, so the default matters
    k = np.linspace(2e-4, 4e-3, 40)
    rng = np.random.default_rng(9)
    y = 0.1 + 5e-4 * (1 - np.exp(-k[:, None] * T)) / k[:, None] + 2e-4 * rng.standard_normal((k.size, T.size))
    default = auto(T, y, find_lag=False)
    given = auto(T, y, find_lag=False, max_rate_drop=0.10)
    wider = auto(T, y, find_lag=False, max_rate_drop=0.20)
    np.testing.assert_array_equal(default.window_end_s, given.window_end_s)
    np.testing.assert_array_equal(default.v0, given.v0)
    assert (wider.window_end_s > default.window_end_s).sum() >= 5


def test_auto_windows_end_on_the_documented_geometric_grid() -> None:
    # candidate window ends: read offsets round(geomspace(min_points - 1, n_t - 1, n_candidates)) after the
    # start (module text, step 2; numpy.geomspace as the reference); every well's window ends on one of them
    k = np.geomspace(5e-5, 5e-3, 60)
    rng = np.random.default_rng(10)
    y = 0.1 + 5e-4 * (1 - np.exp(-k[:, None] * T)) / k[:, None] + 1e-4 * rng.standard_normal((k.size, T.size))
    r = auto(T, y, find_lag=False)
    offs = set(np.round(np.geomspace(5, 59, 16)).astype(int).tolist())
    end_idx = np.round(r.window_end_s / 10.0).astype(int)
    assert set(end_idx.tolist()) <= offs
    assert len(set(end_idx.tolist())) >= 5  # windows of many lengths
