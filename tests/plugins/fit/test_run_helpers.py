"""The fit step's small helpers, every branch against a hand calculation: per-point standard deviations of
the relative and replicate weightings (floors of 5 % of the largest rate and 10 % of the typical replicate
SD: our documented choices, docs/fitting.md; replicate SD with n − 1 degrees of freedom, numpy's ddof=1),
the Wald interval of a derived quantity (estimate ± t·SE), the one enzyme concentration of a group, and
the saturation check (highest substrate below the fitted Km)."""

from __future__ import annotations

import numpy as np
from vzero.plugins.fit import run as fit_run

from tests.plugins.fit.test_statistics import MM, _fit, _puromycin


def test_relative_weighting_floors_at_five_percent_of_the_largest_rate() -> None:
    y = np.array([10.0, 2.0, 0.2, -0.1])
    sig, note = fit_run._sigma("relative", y, np.zeros(4))
    np.testing.assert_allclose(sig, [10.0, 2.0, 0.5, 0.5])
    assert note == ""
    assert fit_run._sigma("none", y, np.zeros(4)) == (None, "")


def test_replicate_weighting_by_hand() -> None:
    levels = np.array([1.0, 1.0, 2.0, 2.0, 2.0, 3.0, 4.0, 4.0])
    y = np.array([1.0, 3.0, 5.0, 6.0, 7.0, 9.0, 8.0, 8.0])
    sig, note = fit_run._sigma("replicate", y, levels)
    # SDs (ddof 1): level 1 → √2, level 2 → 1, level 3 single → median of {√2, 1}, level 4 → 0 → 10 % floor
    typical = float(np.median([np.sqrt(2.0), 1.0]))
    want = [np.sqrt(2.0)] * 2 + [1.0] * 3 + [typical] + [max(0.0, 0.1 * typical)] * 2
    np.testing.assert_allclose(sig, want)
    assert note == ""
    sig, note = fit_run._sigma("replicate", y[:6], levels[:6] * 0 + np.arange(6))  # no replicates
    assert sig is None and "two or more levels" in note
    sig, note = fit_run._sigma("replicate", y[:5], levels[:5])  # replicates at two levels: enough
    assert sig is not None and note == ""
    sig, note = fit_run._sigma("replicate", y[:2], levels[:2])  # at one level only
    assert sig is None


def test_derived_row_interval_and_its_absence() -> None:
    row = fit_run._derived_row("kcat", 10.0, 2.0, "1/s", 2.5, "")
    assert (row["ci_low"], row["ci_high"], row["ci_method"]) == (5.0, 15.0, "wald-t (derived)")
    row = fit_run._derived_row("kcat", 10.0, np.nan, "1/s", 2.5, "no SE")
    assert np.isnan(row["ci_low"]) and np.isnan(row["ci_high"]) and row["ci_method"] == ""
    assert row["note"] == "no SE" and row["unit"] == "1/s" and row["fixed"] is False


def test_group_enzyme_needs_one_concentration() -> None:
    assert fit_run._group_enzyme(np.array([np.nan, 5.0, 5.0])) == 5.0
    assert np.isnan(fit_run._group_enzyme(np.array([5.0, 5.0 * (1 + 1e-6)])))
    assert fit_run._group_enzyme(np.array([5.0, 5.0 * (1 + 1e-12)])) == 5.0
    assert np.isnan(fit_run._group_enzyme(np.array([np.nan])))


def test_saturation_problem_only_when_the_top_level_is_below_km() -> None:
    s, v = _puromycin()  # Km ≈ 0.064 ppm (Bates & Watts 1988); top level 1.1 ppm
    res = _fit(MM, s, v)
    km = res.value("Km")
    assert fit_run._saturation_problem(MM, res, s) == ""
    assert fit_run._saturation_problem(MM, res, np.array([km])) == ""  # top level at Km: not below it
    text = fit_run._saturation_problem(MM, res, np.array([0.9 * km]))
    assert "below the fitted Km" in text and f"{res.value('Vmax') / km:.4g}" in text
