"""Rate laws at the edges of their domain: zero substrate, zero inhibitor, h = 1, very large substrate.

Each value is checked against the closed form written out here from the textbook equation (the forms listed
in the docstring of ``vzero.plugins.fit.models``; Cornish-Bowden, *Fundamentals of Enzyme Kinetics*, 4th ed.,
ch. 2, 5 and 6 for the substrate and inhibitor laws; Morrison 1969, Biochim. Biophys. Acta 185:269 for the
tight-binding quadratic), and each Jacobian against central differences computed here with numpy.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from vzero.plugins.fit.catalog import BY_NAME, MODELS

SUBSTRATE_LAWS = {  # name -> parameters (Vmax, Km or K0.5, then the rest)
    "michaelis-menten": [7.0, 3.0],
    "hill": [7.0, 3.0, 2.5],
    "substrate-inhibition": [7.0, 3.0, 40.0],
    "competitive": [7.0, 3.0, 0.5],
    "uncompetitive": [7.0, 3.0, 2.0],
    "mixed": [7.0, 3.0, 0.5, 2.0],
    "noncompetitive": [7.0, 3.0, 1.5],
}


def _x(**cols: float | list[float]) -> dict[str, np.ndarray]:
    return {k: np.atleast_1d(np.asarray(v, float)) for k, v in cols.items()}


def _value(name: str, p: list[float], **cols: float | list[float]) -> np.ndarray:
    return np.asarray(BY_NAME[name].evaluate(p, _x(**cols)), float)


def _jac(name: str, p: list[float], **cols: float | list[float]) -> np.ndarray:
    x = _x(**cols)
    n = max(v.size for v in x.values())
    return np.stack([np.broadcast_to(np.asarray(c, float), (n,)) for c in BY_NAME[name].jacobian(p, x)], axis=1)


def _central(name: str, p: list[float], **cols: float | list[float]) -> np.ndarray:
    """Central differences of the rate in each parameter, step 1e-6 relative (numpy, independent of the
    analytic Jacobian)."""
    x = _x(**cols)
    cols_out = []
    for j, pj in enumerate(p):
        h = 1e-6 * abs(pj)
        up, down = list(p), list(p)
        up[j], down[j] = pj + h, pj - h
        cols_out.append((np.asarray(BY_NAME[name].evaluate(up, x)) - np.asarray(BY_NAME[name].evaluate(down, x)))
                        / (2 * h))
    n = max(v.size for v in x.values())
    return np.stack([np.broadcast_to(c, (n,)) for c in cols_out], axis=1)


@pytest.mark.parametrize("name", sorted(SUBSTRATE_LAWS))
def test_every_substrate_law_is_exactly_zero_without_substrate(name: str) -> None:
    # every law here is v = Vmax·S/(...) or Vmax·S^h/(...): v = 0 at S = 0, with or without inhibitor
    cols = {"substrate": [0.0, 0.0]}
    if "inhibitor" in BY_NAME[name].variables:
        cols["inhibitor"] = [0.0, 1.0]
    assert _value(name, SUBSTRATE_LAWS[name], **cols).tolist() == [0.0, 0.0]
    # and just above zero the rate is positive (the zero is not a floor applied to everything small)
    cols["substrate"] = [1e-6, 1e-6]
    assert np.all(_value(name, SUBSTRATE_LAWS[name], **cols) > 0)


@pytest.mark.parametrize("h", [0.5, 1.0, 2.5])
def test_hill_without_substrate_for_every_coefficient(h: float) -> None:
    # S^h = 0 at S = 0 for every h > 0: v = 0, and dv/dVmax = dv/dK0.5 = dv/dh = 0 there
    assert _value("hill", [7.0, 3.0, h], substrate=0.0)[0] == 0.0
    assert _jac("hill", [7.0, 3.0, h], substrate=0.0)[0].tolist() == [0.0, 0.0, 0.0]
    # at S = K0.5 the rate is Vmax/2 for every h (definition of K0.5)
    assert _value("hill", [7.0, 3.0, h], substrate=3.0)[0] == pytest.approx(3.5, rel=1e-14)


@pytest.mark.parametrize("name", ["competitive", "uncompetitive", "mixed", "noncompetitive"])
def test_inhibitor_laws_without_inhibitor_are_michaelis_menten(name: str) -> None:
    s = [0.1, 1.0, 3.0, 30.0, 3000.0]
    p = SUBSTRATE_LAWS[name]
    # I = 0: every factor (1 + I/Ki) is 1, the law is v = Vmax·S/(Km + S)
    expected = [7.0 * si / (3.0 + si) for si in s]
    np.testing.assert_allclose(_value(name, p, substrate=s, inhibitor=[0.0] * 5), expected, rtol=1e-14)
    # and the inhibition constants do not matter there: dv/dKi = 0
    jac = _jac(name, p, substrate=s, inhibitor=[0.0] * 5)
    assert np.all(jac[:, 2:] == 0.0)
    # dv/dVmax = S/(Km + S), dv/dKm = −Vmax·S/(Km + S)² (hand derivatives of Michaelis–Menten)
    np.testing.assert_allclose(jac[:, 0], [si / (3.0 + si) for si in s], rtol=1e-14)
    np.testing.assert_allclose(jac[:, 1], [-7.0 * si / (3.0 + si) ** 2 for si in s], rtol=1e-14)


def test_inhibitor_laws_at_one_inhibitor_level_by_hand() -> None:
    # S = 6, Km = 3, I = 1 (the parameters of SUBSTRATE_LAWS), closed forms of the module docstring
    s, i = 6.0, 1.0
    assert _value("competitive", [7, 3, 0.5], substrate=s, inhibitor=i)[0] == pytest.approx(
        7 * s / (3 * (1 + i / 0.5) + s), rel=1e-14)
    assert _value("uncompetitive", [7, 3, 2], substrate=s, inhibitor=i)[0] == pytest.approx(
        7 * s / (3 + s * (1 + i / 2)), rel=1e-14)
    assert _value("mixed", [7, 3, 0.5, 2], substrate=s, inhibitor=i)[0] == pytest.approx(
        7 * s / (3 * (1 + i / 0.5) + s * (1 + i / 2)), rel=1e-14)
    # noncompetitive: at I = Ki the rate is half the uninhibited one at every S
    for si in (0.5, 6.0, 600.0):
        assert _value("noncompetitive", [7, 3, 1.5], substrate=si, inhibitor=1.5)[0] == pytest.approx(
            0.5 * 7 * si / (3 + si), rel=1e-14)


def test_hill_with_coefficient_one_is_michaelis_menten() -> None:
    # h = 1: Vmax·S/(K0.5 + S), the Michaelis–Menten law with Km = K0.5; its first two Jacobian columns are
    # Michaelis–Menten's, the third is dv/dh = Vmax·u·ln(S/K)/(1 + u)² with u = S/K (hand derivative)
    s = np.array([0.0, 0.3, 3.0, 30.0])
    np.testing.assert_allclose(_value("hill", [7, 3, 1], substrate=s), _value("michaelis-menten", [7, 3], substrate=s),
                               rtol=1e-14, atol=0)
    jac = _jac("hill", [7, 3, 1], substrate=s)
    np.testing.assert_allclose(jac[:, :2], _jac("michaelis-menten", [7, 3], substrate=s), rtol=1e-13, atol=1e-300)
    u = s / 3
    with np.errstate(divide="ignore", invalid="ignore"):
        dh = np.where(s > 0, 7 * u * np.log(np.where(s > 0, u, 1.0)) / (1 + u) ** 2, 0.0)
    np.testing.assert_allclose(jac[:, 2], dh, rtol=1e-13, atol=1e-300)


def test_large_substrate_limits() -> None:
    s = 1e9  # S ≫ every constant
    assert _value("michaelis-menten", [7, 3], substrate=s)[0] == pytest.approx(7.0, rel=1e-8)
    assert _value("hill", [7, 3, 2.5], substrate=s)[0] == pytest.approx(7.0, rel=1e-8)
    # competitive inhibition is overcome by substrate; uncompetitive and mixed leave Vmax/(1 + I/Kiu);
    # noncompetitive Vmax/(1 + I/Ki) (limits of the closed forms as S → ∞)
    assert _value("competitive", [7, 3, 0.5], substrate=s, inhibitor=1.0)[0] == pytest.approx(7.0, rel=1e-7)
    assert _value("uncompetitive", [7, 3, 2], substrate=s, inhibitor=1.0)[0] == pytest.approx(7 / 1.5, rel=1e-8)
    assert _value("mixed", [7, 3, 0.5, 2], substrate=s, inhibitor=1.0)[0] == pytest.approx(7 / 1.5, rel=1e-7)
    assert _value("noncompetitive", [7, 3, 1.5], substrate=s, inhibitor=1.0)[0] == pytest.approx(7 / (1 + 1 / 1.5),
                                                                                                 rel=1e-8)
    # substrate inhibition falls back towards 0 as Vmax·Ksi/S
    assert _value("substrate-inhibition", [7, 3, 40], substrate=s)[0] == pytest.approx(7 * 40 / s, rel=1e-7)


def test_substrate_inhibition_peak() -> None:
    # dv/dS = 0 at S* = √(Km·Ksi), where v = Vmax/(1 + 2√(Km/Ksi)) (calculus on Vmax·S/(Km + S + S²/Ksi))
    km, ksi = 3.0, 40.0
    peak = math.sqrt(km * ksi)
    assert _value("substrate-inhibition", [7, km, ksi], substrate=peak)[0] == pytest.approx(
        7 / (1 + 2 * math.sqrt(km / ksi)), rel=1e-14)
    near = _value("substrate-inhibition", [7, km, ksi], substrate=[peak * 0.99, peak * 1.01])
    assert np.all(near < _value("substrate-inhibition", [7, km, ksi], substrate=peak)[0])


def _morrison_classic(v0: float, e: float, i: float, k: float) -> float:
    """Morrison (1969), the textbook form v = v0·(1 − ((E + I + K) − √((E + I + K)² − 4EI))/(2E))."""
    b = e + i + k
    return v0 * (1 - (b - math.sqrt(b * b - 4 * e * i)) / (2 * e))


@pytest.mark.parametrize(("e", "i", "k"), [(0.1, 0.1, 0.05), (0.02, 0.01, 0.003), (5.0, 2.0, 0.5), (1.0, 3.0, 0.2)])
def test_morrison_against_the_textbook_form(e: float, i: float, k: float) -> None:
    # small concentrations (the discriminant below 1) and large ones, against the cancellation-prone
    # textbook form, which is accurate at these moderate values
    assert _value("morrison", [4.0, k], inhibitor=i, enzyme=e)[0] == pytest.approx(_morrison_classic(4.0, e, i, k),
                                                                                   rel=1e-12)


def test_morrison_limits() -> None:
    # no inhibitor: v = v0; enzyme far below Ki: the classical hyperbola v0·K/(K + I) (Morrison 1969)
    assert _value("morrison", [4.0, 0.5], inhibitor=0.0, enzyme=2.0)[0] == pytest.approx(4.0, rel=1e-15)
    assert _value("morrison", [4.0, 0.5], inhibitor=1.5, enzyme=1e-9)[0] == pytest.approx(4.0 * 0.5 / 2.0, rel=1e-8)
    # very tight binding (Ki ≪ E) with I < E: stoichiometric titration v/v0 = 1 − I/E
    assert _value("morrison", [4.0, 1e-9], inhibitor=0.25, enzyme=1.0)[0] == pytest.approx(3.0, rel=1e-7)
    # Jacobian at I = 0: dv/dv0 = 1, dv/dKi = 0
    assert _jac("morrison", [4.0, 0.5], inhibitor=0.0, enzyme=2.0)[0].tolist() == [1.0, 0.0]


@pytest.mark.parametrize("n", [1.3, -1.3])
def test_logistic_without_inhibitor(n: float) -> None:
    # (I/IC50)^n is 0 at I = 0 for n > 0 (v = v_uninhibited) and infinite for n < 0 (v = v_residual); the
    # Jacobian takes the same limits: [1, 0, 0, 0] and [0, 1, 0, 0]
    p = [8.0, 2.0, 3.0, n]
    v = _value("logistic-4p", p, inhibitor=0.0)[0]
    jac = _jac("logistic-4p", p, inhibitor=0.0)[0]
    assert v == (8.0 if n > 0 else 2.0)
    assert jac.tolist() == ([1.0, 0.0, 0.0, 0.0] if n > 0 else [0.0, 1.0, 0.0, 0.0])
    # at I = IC50 halfway for either sign (definition of IC50)
    assert _value("logistic-4p", p, inhibitor=3.0)[0] == pytest.approx(5.0, rel=1e-15)


@pytest.mark.parametrize("n", [1.3, -1.3, 1.0])
def test_logistic_jacobian_near_zero_and_far_out(n: float) -> None:
    # central differences (numpy) at inhibitor levels from 1e-6·IC50 to 1e4·IC50, both signs of n
    i = [3e-6, 0.03, 3.0, 300.0, 3e4]
    p = [8.0, 2.0, 3.0, n]
    np.testing.assert_allclose(_jac("logistic-4p", p, inhibitor=i), _central("logistic-4p", p, inhibitor=i),
                               rtol=1e-6, atol=1e-9)


def test_a_rising_titration_with_a_control_well_can_be_fitted() -> None:
    # an activator (rate rising with the titrated compound, invented demo values) with a zero-concentration
    # control well: the start curve rises like the data and the fit recovers the simulated parameters
    # (noise-free data, so to the solver's tolerance)
    from vzero.plugins.fit import engine

    model = BY_NAME["logistic-4p"]
    x = _x(inhibitor=np.r_[0.0, np.geomspace(0.05, 50, 11)])
    truth = [1.0, 10.0, 2.0, 1.2]
    v = np.asarray(model.evaluate(truth, x), float)
    start = model.start(x, v)
    assert start[3] > 0 and start[0] < start[1]
    res = engine.fit(model.evaluate, model.jacobian, x, v, start, model.params, bounds=dict(model.bounds))
    assert res.success, res.message
    np.testing.assert_allclose(res.values, truth, rtol=1e-5)


@pytest.mark.parametrize("model", MODELS, ids=lambda m: m.name)
def test_jacobian_at_the_edges_of_the_domain(model) -> None:
    # central differences (numpy) where a concentration is 0 or very small, or the substrate very large
    edge = [0.0, 1e-6, 0.5, 3.0, 1e5]
    cols = {"substrate": edge, "inhibitor": [0.0, 1e-6, 0.0, 2.0, 1e3][::-1], "enzyme": [1e-3, 0.5, 2.0, 1.0, 10.0]}
    cols = {k: v for k, v in cols.items() if k in model.variables}
    p = {"michaelis-menten": [7.0, 3.0], "hill": [7.0, 3.0, 1.7], "substrate-inhibition": [7.0, 3.0, 40.0],
         "competitive": [7.0, 3.0, 0.5], "uncompetitive": [7.0, 3.0, 2.0], "mixed": [7.0, 3.0, 0.5, 2.0],
         "noncompetitive": [7.0, 3.0, 1.5], "morrison": [4.0, 0.5], "logistic-4p": [8.0, 2.0, 3.0, 1.3]}[model.name]
    analytic = _jac(model.name, p, **cols)
    assert np.all(np.isfinite(analytic))
    np.testing.assert_allclose(analytic, _central(model.name, p, **cols), rtol=1e-6, atol=1e-9)


def _start(name: str, y: list[float], **x: list[float]) -> list[float]:
    return BY_NAME[name].start(_x(**x), np.asarray(y, float))


def test_start_values_from_data_below_one_unit() -> None:
    # every "positive?" test of the start rules must let a small positive figure through unchanged (rates in
    # µM/s and concentrations in mM are often well below 1); only a figure ≤ 0 falls back to 1
    # Michaelis–Menten: Vmax = top rate 0.4; half (0.2) first reached at S = 0.02, level below 0.01 → √(2e-4)
    assert _start("michaelis-menten", [0.1, 0.25, 0.4], substrate=[0.01, 0.02, 0.08]) == pytest.approx(
        [0.4, math.sqrt(0.02 * 0.01)])
    # substrate inhibition: Ksi starts at ten times the top level, 10 · 0.08
    assert _start("substrate-inhibition", [0.1, 0.25, 0.4], substrate=[0.01, 0.02, 0.08])[2] == pytest.approx(0.8)
    # Morrison: v0 at the top rate 0.3; Ki_app at the median positive inhibitor level, median(0.02, 0.2) = 0.11
    assert _start("morrison", [0.3, 0.2, 0.05], inhibitor=[0.0, 0.02, 0.2], enzyme=[0.01] * 3) == pytest.approx(
        [0.3, 0.11])
    # competitive: Kic at median(0.02, 0.2) = 0.11 as well
    assert _start("competitive", [0.1, 0.4, 0.1, 0.1], substrate=[0.01, 0.08, 0.01, 0.08],
                  inhibitor=[0.0, 0.0, 0.02, 0.2])[2] == pytest.approx(0.11)
    # logistic: midpoint at the geometric mean of the positive levels 0.01 and 0.04 = 0.02
    assert _start("logistic-4p", [0.5, 0.3, 0.1], inhibitor=[0.0, 0.01, 0.04]) == pytest.approx([0.5, 0.1, 0.02, 1.0])
