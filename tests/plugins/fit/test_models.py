"""Rate laws: check values, Jacobians, and fits to published data sets."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import approx_fprime
from vzero.plugins.fit import engine
from vzero.plugins.fit.catalog import BY_NAME, MODELS

DATA = Path(__file__).resolve().parents[2] / "data" / "reference"


def _value(name: str, p: list[float], **x: float) -> float:
    return float(BY_NAME[name].evaluate(p, {k: np.asarray(v, float) for k, v in x.items()}))


def test_check_values() -> None:
    # Reference pack section 6 (computed in exact arithmetic from the textbook equations)
    # Hill (Vmax = 1, K0.5 = 3, h = 2.5)
    for s, v in [(1, 0.060282881273), (3, 0.5), (9, 0.939717118727)]:
        assert _value("hill", [1, 3, 2.5], substrate=s) == pytest.approx(v, rel=1e-12)
    # inhibition (Vmax = 10, Km = 2, S = 6, I = 1)
    assert _value("mixed", [10, 2, 0.5, 2], substrate=6, inhibitor=1) == pytest.approx(4.0, rel=1e-12)
    assert _value("competitive", [10, 2, 0.5], substrate=6, inhibitor=1) == pytest.approx(5.0, rel=1e-12)
    assert _value("uncompetitive", [10, 2, 2], substrate=6, inhibitor=1) == pytest.approx(5.454545454545, rel=1e-12)
    # substrate inhibition (Vmax = 10, Km = 1, Ksi = 100): maximum at S* = 10, v = 8.333333333333
    assert _value("substrate-inhibition", [10, 1, 100], substrate=10) == pytest.approx(8.333333333333, rel=1e-12)
    # Morrison (E, I, Ki_app) -> v/v0, reference pack section 6 (Morrison 1969)
    for e, i, k, frac in [(1, 1, 1, 0.618033988750), (10, 10, 1, 0.270156211872), (1, 0.5, 0.1, 0.574165738677),
                          (0.001, 1, 1, 0.500124999992)]:
        assert _value("morrison", [1, k], inhibitor=i, enzyme=e) == pytest.approx(frac, rel=1e-11)
    # Michaelis-Menten at S = Km is Vmax/2 (definition of Km)
    assert _value("michaelis-menten", [7, 3], substrate=3) == pytest.approx(3.5, rel=1e-15)
    # 4-parameter logistic at I = IC50 is halfway (definition of IC50)
    assert _value("logistic-4p", [8, 2, 3, 1.7], inhibitor=3) == pytest.approx(5.0, rel=1e-15)


@pytest.mark.parametrize("model", MODELS, ids=lambda m: m.name)
def test_analytic_jacobian_matches_finite_differences(model) -> None:
    # scipy.optimize.approx_fprime (forward differences) as the independent derivative
    rng = np.random.default_rng(1)
    x = {v: rng.uniform(0.2, 5.0, 7) for v in model.variables}
    p = np.array(model.start(x, rng.uniform(1, 2, 7)), float)
    p = np.where(p == 0, 0.7, p) * rng.uniform(0.8, 1.2, p.size)
    analytic = np.stack([np.broadcast_to(c, (7,)) for c in model.jacobian(list(p), x)], axis=1)
    for j in range(7):
        numeric = approx_fprime(p, lambda q, j=j: float(model.evaluate(list(q), x)[j]), 1e-7 * np.abs(p))
        np.testing.assert_allclose(analytic[j], numeric, rtol=2e-5, atol=1e-8)


def _puromycin(state: str) -> tuple[np.ndarray, np.ndarray]:
    raw = np.genfromtxt(DATA / "puromycin.csv", delimiter=",", names=True, dtype=None, encoding="utf-8")
    sel = raw["state"] == state
    return raw["conc"][sel].astype(float), raw["rate"][sel].astype(float)


def test_puromycin_treated_and_untreated() -> None:
    mm = BY_NAME["michaelis-menten"]
    # Treated: An Introduction to R, section 11.7.1 (nls output): Vm 212.68370711, K 0.06412123,
    # SE 6.947 and 8.281e-03, residual SE 10.93 on 10 df, corr 0.7651; reference pack section 2.1.
    s, v = _puromycin("treated")
    res = engine.fit(mm.evaluate, mm.jacobian, {"substrate": s}, v, mm.start({"substrate": s}, v), mm.params)
    np.testing.assert_allclose([res.value("Vmax"), res.value("Km")], [212.68370711, 0.06412123], rtol=1e-5)
    np.testing.assert_allclose([res.params["Vmax"].stderr, res.params["Km"].stderr], [6.947, 8.281e-03], rtol=5e-4)
    np.testing.assert_allclose(np.sqrt(res.rss / res.dof), 10.93, rtol=5e-4)
    assert res.dof == 10
    np.testing.assert_allclose(res.correlation[0, 1], 0.7651, rtol=5e-4)
    np.testing.assert_allclose(res.rss, 1195.449, atol=1e-3)
    # Untreated: Bates & Watts values (memory in the reference pack) matched by the pack's scipy
    # computation: Vm 160.280046, K 0.0477081845, SE 6.480246, 0.00778188; section 2.2.
    s, v = _puromycin("untreated")
    res = engine.fit(mm.evaluate, mm.jacobian, {"substrate": s}, v, mm.start({"substrate": s}, v), mm.params)
    np.testing.assert_allclose([res.value("Vmax"), res.value("Km")], [160.280046, 0.0477081845], rtol=1e-6)
    np.testing.assert_allclose([res.params["Vmax"].stderr, res.params["Km"].stderr], [6.480246, 0.00778188],
                               rtol=1e-5)


def _severinghaus(p: np.ndarray) -> np.ndarray:
    # Severinghaus (1979) J. Appl. Physiol. 46:599, Eq. 1: S = 1/(23400/(P^3 + 150 P) + 1)
    return 1.0 / (23400.0 / (p**3 + 150.0 * p) + 1.0)


def test_severinghaus_hill_fit() -> None:
    hill = BY_NAME["hill"]
    p = np.arange(15.0, 61.0)  # 46 points, 15..60 mmHg, as in the reference pack section 3
    s = _severinghaus(p)
    res = engine.fit(hill.evaluate, hill.jacobian, {"substrate": p}, s, hill.start({"substrate": p}, s), hill.params,
                     fixed={"Vmax": 1.0}, bounds=hill.bounds)
    # regression check (reference pack section 3, computed with scipy least_squares at 1e-15)
    np.testing.assert_allclose([res.value("K0.5"), res.value("h")], [26.59379403, 2.69131570], rtol=1e-6)
    np.testing.assert_allclose(res.rss, 1.5936849e-03, rtol=1e-6)
    # physiology band: P50 of Eq. 1 = 26.86 mmHg (root of P^3 + 150P = 23400) and Hill n "usually 2.7"
    # (Severinghaus's revised text); bands +-0.5 mmHg and +-0.1 are honest only on this grid (pack section 3)
    assert abs(res.value("K0.5") - 26.86) <= 0.5
    assert abs(res.value("h") - 2.7) <= 0.1
