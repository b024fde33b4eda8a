"""Inhibitor titrations through the fit stage: Morrison tight binding, the four-parameter logistic, the
conversion of IC50 / Ki_app to Ki, and the ryegrass dose-response reference."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from vzero.data import Table
from vzero.params import validate
from vzero.plugins import fit as fit_plugin
from vzero.plugins.fit.catalog import BY_NAME
from vzero.plugins.fit.stage import FitStage
from vzero.registry import Registry
from vzero.stage import StageInput

DATA = Path(__file__).resolve().parents[2] / "data" / "reference"
UNITS = {"rate": "uM/min", "substrate": "uM", "inhibitor": "nM", "enzyme": "nM"}


def _run(frame: pd.DataFrame, units: dict[str, str] = UNITS, **settings):
    values, problems = validate(FitStage.params, settings)
    assert not problems, problems
    reg = Registry()
    fit_plugin.vzero_register(reg)
    warnings: list[str] = []
    data = StageInput({"rates": Table(frame, units)}, None, {}, {}, reg, warnings.append)
    return FitStage(**values).run(data).artifacts, warnings


def _titration(group: str, i: np.ndarray, v: np.ndarray, s: float = 6.0, e: float = 10.0) -> list[dict]:
    return [{"plate": "P1", "well": f"B{k + 1}", "group": group, "role": "sample", "substrate": s,
             "inhibitor": float(a), "enzyme": e, "rate": float(b), "flags": ""}
            for k, (a, b) in enumerate(zip(i, v, strict=True))]


def _row(fits: pd.DataFrame, group: str, model: str, name: str) -> pd.Series:
    row = fits[(fits.group == group) & (fits.model == model) & (fits.parameter == name)]
    assert len(row) == 1, (group, model, name)
    return row.iloc[0]


def _logistic(i: np.ndarray, top: float, bottom: float, ic50: float, slope: float) -> np.ndarray:
    return BY_NAME["logistic-4p"].evaluate([top, bottom, ic50, slope], {"inhibitor": i})


DOSES = np.repeat(np.r_[0.0, np.geomspace(0.05, 50, 10)], 2)


@pytest.mark.parametrize(("mechanism", "ic50"), [
    # Reference pack section 6 (Cheng & Prusoff 1973), Km = 2, S = 6, Ki = 0.5:
    ("competitive", 2.0), ("uncompetitive", 0.666666666667), ("noncompetitive", 0.5)])
def test_cheng_prusoff_check_values(mechanism: str, ic50: float) -> None:
    # noise-free invented titration with the IC50 the pack gives for Ki = 0.5 under each mechanism
    frame = pd.DataFrame(_titration("t", DOSES, _logistic(DOSES, 10.0, 0.5, ic50, 1.2)))
    out, _ = _run(frame, models=["logistic-4p"], profile=False, mechanism=mechanism, km="2 uM")
    fits = out["fits"].frame
    np.testing.assert_allclose(_row(fits, "t", "logistic-4p", "IC50").estimate, ic50, rtol=1e-8)
    ki = _row(fits, "t", "logistic-4p", "Ki")
    np.testing.assert_allclose(ki.estimate, 0.5, rtol=1e-8)  # Ki = 0.5 (pack section 6)
    assert ki.unit == "nM" and f"mechanism assumed: {mechanism}" in ki.note
    assert out["fits"].meta["ki_mechanism"] == mechanism


def test_ki_uncertainty_is_propagated_and_refused_without_mechanism() -> None:
    rng = np.random.default_rng(4)
    v = _logistic(DOSES, 10.0, 0.5, 2.0, 1.0) + 0.15 * rng.standard_normal(DOSES.size)  # invented, SD 0.15
    frame = pd.DataFrame(_titration("t", DOSES, v))
    out, _ = _run(frame, models=["logistic-4p"], mechanism="competitive", km="2000 nM", km_stderr="0.2 uM")
    fits = out["fits"].frame
    ic = _row(fits, "t", "logistic-4p", "IC50")
    assert ic.ci_method == "profile" and ic.ci_low < ic.estimate < ic.ci_high and ic.unit == "nM"
    ki = _row(fits, "t", "logistic-4p", "Ki")
    # delta method by hand (first-order Taylor expansion of Ki = IC50/(1 + S/Km), S = 6 uM, Km = 2 +- 0.2 uM,
    # Km given in nM to check the unit conversion)
    f = 1 + 6 / 2
    se = np.hypot(ic.stderr / f, ic.estimate * 6 / 2**2 / f**2 * 0.2)
    np.testing.assert_allclose([ki.estimate, ki.stderr], [ic.estimate / f, se], rtol=1e-12)
    assert ki.ci_low < ki.estimate < ki.ci_high and "Km = 2 uM" in ki.note
    # no mechanism given: the conversion is refused with a note, the IC50 is still reported
    out, _ = _run(frame, models=["logistic-4p"], profile=False)
    ki = _row(out["fits"].frame, "t", "logistic-4p", "Ki")
    assert np.isnan(ki.estimate) and ki.note.startswith("not determined") and "fit.mechanism" in ki.note
    assert out["fits"].meta["ki_mechanism"] == "none"
    # a competitive conversion without Km is refused as well
    out, _ = _run(frame, models=["logistic-4p"], profile=False, mechanism="competitive")
    ki = _row(out["fits"].frame, "t", "logistic-4p", "Ki")
    assert np.isnan(ki.estimate) and "fit.km" in ki.note


def test_morrison_recovers_simulated_tight_binding_ki() -> None:
    # invented tight-binding series: E = 10 nM, Ki_app = 1 nM (E >> Ki_app), v0 = 5 uM/min, noise SD 0.05
    i = np.repeat(np.r_[0.0, np.linspace(1, 30, 12)], 2)
    m = BY_NAME["morrison"]
    x = {"inhibitor": i, "enzyme": np.full_like(i, 10.0)}
    rng = np.random.default_rng(9)
    v = m.evaluate([5.0, 1.0], x) + 0.05 * rng.standard_normal(i.size)
    frame = pd.DataFrame(_titration("tb", i, v) + _titration("flat", i[:4], v[:4]))
    # enzyme given in pM to check its conversion to the inhibitor's unit (10 nM = 10000 pM)
    frame.loc[frame.group == "tb", "enzyme"] = 10000.0
    out, warnings = _run(frame, {**UNITS, "enzyme": "pM"}, models=["morrison", "logistic-4p"],
                         mechanism="competitive", km="2 uM")
    fits = out["fits"].frame
    kapp = _row(fits, "tb", "morrison", "Ki_app")
    assert kapp.success and abs(kapp.estimate - 1.0) < 4 * kapp.stderr and kapp.unit == "nM"
    assert kapp.ci_method == "profile" and kapp.ci_low < 1.0 < kapp.ci_high
    # competitive: Ki = Ki_app/(1 + S/Km) with S = 6 uM, Km = 2 uM (Morrison 1969; pack section 6)
    ki = _row(fits, "tb", "morrison", "Ki")
    np.testing.assert_allclose([ki.estimate, ki.stderr], [kapp.estimate / 4, kapp.stderr / 4], rtol=1e-12)
    # a plain logistic fit of tight-binding data sees IC50 = Ki_app + E/2 = 6 nM (pack section 6, Copeland)
    ic = _row(fits, "tb", "logistic-4p", "IC50")
    assert abs(ic.estimate - 6.0) < 0.5
    # too few inhibitor levels for the model: not determined, the run goes on
    flat = _row(fits, "flat", "morrison", "Ki_app")
    assert not flat.success and "too few" in flat.note and np.isnan(flat.estimate)
    assert any("group flat" in w for w in warnings)


def test_ryegrass_log_logistic_reproduces_published_fit() -> None:
    # Inderjit et al. (2002) data; estimates published by Ritz et al. (2015) PLoS ONE 10:e0146021 (reference
    # pack section 8). Their model f = c + (d - c)/(1 + exp(b(ln x - ln e))) equals ours,
    # v_residual + (v_uninhibited - v_residual)/(1 + (I/IC50)^n), with v_uninhibited = d, v_residual = c,
    # IC50 = e, n = b: no mapping
    # beyond renaming. f(0) = d: the six controls enter at inhibitor 0.
    raw = pd.read_csv(DATA / "ryegrass.csv")
    frame = pd.DataFrame(_titration("rye", raw.conc.to_numpy(), raw.rootl.to_numpy()))
    out, _ = _run(frame, {"rate": "cm", "substrate": "uM", "inhibitor": "mM"}, models=["logistic-4p"])
    fits = out["fits"].frame
    names = ["n", "v_residual", "v_uninhibited", "IC50"]
    est = [_row(fits, "rye", "logistic-4p", n).estimate for n in names]
    se = [_row(fits, "rye", "logistic-4p", n).stderr for n in names]
    # published estimates b, c, d, e (pack section 8; the pack's values from memory, reproduced by its scipy fit)
    np.testing.assert_allclose(est, [2.98222, 0.48141, 7.79296, 3.05795], rtol=1e-5)
    # our SEs come from the Gauss-Newton covariance s^2 (J^T J)^-1, so they are checked against the pack's
    # "Gauss-Newton J^T J" column (the published SEs use the full Hessian and differ by up to 1.4 %)
    np.testing.assert_allclose(se, [0.45843, 0.20951, 0.18973, 0.18583], rtol=1e-4)
    rye = _row(fits, "rye", "logistic-4p", "IC50")
    np.testing.assert_allclose(rye.rss, 5.400215, rtol=1e-6)  # pack section 8 (computed)
    np.testing.assert_allclose(np.sqrt(rye.rss / rye.dof), 0.51963, rtol=1e-4)
    assert rye.dof == 20 and rye.unit == "mM" and _row(fits, "rye", "logistic-4p", "v_uninhibited").unit == "cm"
    assert rye.ci_method == "profile" and rye.ci_low < 3.05795 < rye.ci_high
