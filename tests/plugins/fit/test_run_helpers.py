"""The fit step's small helpers, every branch against a hand calculation: per-point standard deviations of
the relative and replicate weightings (floors of 5 % of the largest rate and 10 % of the typical replicate
SD: our documented choices, docs/fitting.md; replicate SD with n − 1 degrees of freedom, numpy's ddof=1),
the Wald interval of a derived quantity (estimate ± t·SE), the one enzyme concentration of a group, and
the saturation check (highest substrate below the fitted Km)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
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


def _titration_fit():
    """A noise-free logistic titration (invented values: IC50 = 2 in the inhibitor unit) fitted by the engine."""
    from vzero.plugins.fit import engine
    from vzero.plugins.fit.catalog import BY_NAME

    model = BY_NAME["logistic-4p"]
    i = np.geomspace(0.05, 50, 12)
    v = model.evaluate([10.0, 0.5, 2.0, 1.0], {"inhibitor": i}) + np.random.default_rng(5).normal(0, 0.05, 12)
    res = engine.fit(model.evaluate, model.jacobian, {"inhibitor": i}, v, [9, 1, 1, 1], model.params,
                     bounds=dict(model.bounds))
    return model, res


def _cfg(mech: str, km: str | None = "2 uM", km_se: str | None = None) -> dict:
    from vzero.units import quantity

    return {"mechanism": mech, "x": "substrate", "km": None if km is None else quantity(km),
            "km_stderr": None if km_se is None else quantity(km_se)}


def test_ki_needs_one_positive_substrate_concentration() -> None:
    # Cheng & Prusoff (1973) need the one S of the titration: S = 0 everywhere, a negative S, or two levels
    # closer than one unit (6 and 6.4) are refused; missing S values (NaN) are left out
    model, res = _titration_fit()
    for s in ([0.0] * 12, [-1.0] * 12, [6.0] * 6 + [6.4] * 6, [np.nan] * 12, [0.5] * 6 + [0.9] * 6):
        row = fit_run._ki_rows(model, res, np.array(s), _cfg("competitive"), "nM", "uM", 0.95)[0]
        assert np.isnan(row["estimate"]) and "one positive substrate concentration" in row["note"], s
    # a small positive S (0.5 below one unit) is accepted: Ki = IC50/(1 + S/Km)
    k = res.value("IC50")
    row = fit_run._ki_rows(model, res, np.r_[np.full(11, 0.5), np.nan], _cfg("competitive"), "nM", "uM", 0.95)[0]
    assert row["estimate"] == pytest.approx(k / (1 + 0.5 / 2.0), rel=1e-12)
    assert row["unit"] == "nM" and "S = 0.5 uM" in row["note"]
    # one well with a known S is enough (the others' S missing)
    one = np.r_[6.0, np.full(11, np.nan)]
    row = fit_run._ki_rows(model, res, one, _cfg("competitive"), "nM", "uM", 0.95)[0]
    assert row["estimate"] == pytest.approx(k / (1 + 6.0 / 2.0), rel=1e-12)


def test_ki_for_each_mechanism_by_hand() -> None:
    model, res = _titration_fit()
    k, k_se = res.value("IC50"), res.params["IC50"].stderr
    s = np.full(12, 6.0)
    # uncompetitive: Ki = IC50/(1 + Km/S); Km given in nM is converted to the substrate unit (2000 nM = 2 uM)
    row = fit_run._ki_rows(model, res, s, _cfg("uncompetitive", "2000 nM"), "nM", "uM", 0.95)[0]
    assert row["estimate"] == pytest.approx(k / (1 + 2.0 / 6.0), rel=1e-12)
    assert row["stderr"] == pytest.approx(k_se / (1 + 2.0 / 6.0), rel=1e-12)  # Km taken as exact
    assert "taken as exact" in row["note"]
    # noncompetitive: Ki = IC50, whatever S and Km; the Wald interval uses Student's t at the fit's dof
    row = fit_run._ki_rows(model, res, s, _cfg("noncompetitive", None), "nM", "uM", 0.95)[0]
    tq = stats.t.ppf(0.975, res.dof)  # scipy.stats as the independent quantile
    assert (row["estimate"], row["stderr"]) == (k, k_se)
    assert row["ci_low"] == pytest.approx(k - tq * k_se, rel=1e-12)
    # refusals: no mechanism, no Km, a Km that is not a concentration
    assert "no mechanism given" in fit_run._ki_rows(model, res, s, _cfg("none"), "nM", "uM", 0.95)[0]["note"]
    assert "needs Km" in fit_run._ki_rows(model, res, s, _cfg("competitive", None), "nM", "uM", 0.95)[0]["note"]
    row = fit_run._ki_rows(model, res, s, _cfg("competitive", "2 s"), "nM", "uM", 0.95)[0]
    assert np.isnan(row["estimate"]) and "cannot be expressed" in row["note"]
    # a model without an IC50-like constant gives no Ki row at all, nor one naming a constant the fit lacks
    assert fit_run._ki_rows(MM, _fit(MM, *_puromycin()), s, _cfg("competitive"), "nM", "uM", 0.95) == []
    import dataclasses

    other = dataclasses.replace(model, ki_from="Kx")
    assert fit_run._ki_rows(other, res, s, _cfg("competitive"), "nM", "uM", 0.95) == []


def test_kcat_and_specificity_constant_by_hand() -> None:
    s, v = _puromycin()  # rates in counts/min² treated here as uM/s, S as uM, E = 0.01 uM (invented units)
    res = _fit(MM, s, v)
    vmax, km = res.params["Vmax"], res.params["Km"]
    rows = fit_run._derived(MM, res, 0.01, "uM", "uM/s", "uM", 0.95)
    kcat, spec = rows
    assert kcat["parameter"] == "kcat" and kcat["unit"] == "1/s"
    assert kcat["estimate"] == pytest.approx(vmax.value / 0.01, rel=1e-12)
    assert kcat["stderr"] == pytest.approx(vmax.stderr / 0.01, rel=1e-12)
    # kcat/Km in 1/(M·s): Vmax/(E·Km) · 1e6 (uM → M); delta-method SE with the Vmax-Km covariance
    # (Bevington & Robinson, eq. 3.14): rel² = (sV/V)² + (sK/K)² − 2·cov/(V·K)
    iv, ik = res.names.index("Vmax"), res.names.index("Km")
    val = vmax.value / (0.01 * km.value) * 1e6
    rel = (vmax.stderr / vmax.value) ** 2 + (km.stderr / km.value) ** 2 - 2 * res.covariance[iv, ik] / (
        vmax.value * km.value)
    assert spec["estimate"] == pytest.approx(val, rel=1e-9)
    assert spec["stderr"] == pytest.approx(val * np.sqrt(rel), rel=1e-9)
    # an enzyme concentration that is unknown, zero or negative gives no kcat, with the reason
    for e, why in [(np.nan, "unknown"), (0.0, "not positive"), (-0.01, "not positive")]:
        (row,) = fit_run._derived(MM, res, e, "uM", "uM/s", "uM", 0.95)
        assert np.isnan(row["estimate"]) and why in row["note"]
    # a rate unit that does not give a turnover with the enzyme unit
    (row,) = fit_run._derived(MM, res, 0.01, "uM", "1/s", "uM", 0.95)
    assert np.isnan(row["estimate"]) and "do not give a turnover" in row["note"]


def test_rate_error_sigma_combines_the_se_with_a_share_of_the_rate() -> None:
    y = np.array([10.0, 2.0, 4.0])
    se = np.array([0.3, np.nan, 0.5])
    sig, note = fit_run._sigma("rate-error", y, np.zeros(3), se, share=0.05)
    # sqrt(SE² + (share·y)²); the missing SE gets the median of the others (0.4)
    np.testing.assert_allclose(sig, np.sqrt(np.array([0.3, 0.4, 0.5]) ** 2 + (0.05 * y) ** 2), rtol=1e-14)
    assert note.startswith("1 rate(s) without a standard error")
    sig, note = fit_run._sigma("rate-error", y, np.zeros(3))
    assert sig is None and note == "no rate has a standard error: fitted unweighted"


def test_saturation_check_only_for_a_successful_substrate_only_fit() -> None:
    s, v = _puromycin()
    res = _fit(MM, s, v)
    low = np.array([0.5 * res.value("Km")])
    assert fit_run._saturation_problem(MM, res, low) != ""
    import dataclasses

    assert fit_run._saturation_problem(MM, dataclasses.replace(res, success=False), low) == ""


def test_saturation_check_is_for_substrate_only_laws_with_both_constants() -> None:
    # the check names Vmax and the half-saturation constant of a law of S alone: a law with another variable,
    # or without a declared limiting rate, is not checked (its own rules apply)
    import dataclasses

    s, v = _puromycin()
    res = _fit(MM, s, v)
    low = np.array([0.5 * res.value("Km")])
    assert fit_run._saturation_problem(dataclasses.replace(MM, variables=("substrate", "inhibitor")), res, low) == ""
    assert fit_run._saturation_problem(dataclasses.replace(MM, limiting_rate=""), res, low) == ""
    assert fit_run._saturation_problem(dataclasses.replace(MM, half_saturation=""), res, low) == ""
