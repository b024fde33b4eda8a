"""The standard error of the `progress` rate fitted in signal units (no S0): the Jacobian it is taken from.

The columns of :func:`signal_ln_v0_var` in (baseline, ln v0, c1, r) are checked against central finite
differences of the fit's own model (:func:`_signal_model`, parameters (baseline, ln v0, ln c1, logit r)),
an independent route to the same derivatives; at zero curvature, where the fit's own columns vanish, the
variance must be that of the slope at t = 0 of a cubic in time (numpy.polyfit's unscaled covariance), since
the curve is a straight line there and c1 and r then move it by t² and t³ terms. Invented data.
"""

from __future__ import annotations

import numpy as np
import pytest
from vzero.plugins.rates.progress import _rate_drop_terms, _signal_model, signal_ln_v0_var

T = np.arange(60) * 10.0


def _params(v0: float, c1: float, r: float) -> np.ndarray:
    return np.array([[0.1, np.log(v0), np.log(c1), np.log(r / (1 - r))]])


@pytest.mark.parametrize("x", [1e-6, 5e-4, 2e-3, 0.3, 0.9])
def test_rate_drop_terms_series_and_closed_form_agree(x: float) -> None:
    # k(x) = (x/(1 - x) + ln(1 - x))/x², m(x) = 1 + 2 ln(1 - x)/x + 1/(1 - x), in extended precision
    xl = np.longdouble(x)
    k_ref = (xl / (1 - xl) + np.log1p(-xl)) / (xl * xl)
    m_ref = 1 + 2 * np.log1p(-xl) / xl + 1 / (1 - xl)
    k, m = _rate_drop_terms(np.array([x]))
    # below 1e-3 the extended-precision closed forms themselves lose digits (m ~ x²/3 from terms of order 1)
    assert k[0] == pytest.approx(float(k_ref), rel=1e-5 if x < 1e-3 else 1e-9)
    assert m[0] == pytest.approx(float(m_ref), rel=1e-4 if x < 1e-3 else 1e-9)


@pytest.mark.parametrize(("c1", "r"), [(0.3, 0.5), (0.05, 0.9), (1.0, 0.1)])
def test_variance_matches_finite_difference_jacobian(c1: float, r: float) -> None:
    # a curve well inside the model's range: the delta method from central differences of the fit's own
    # model, mapped to (c1, r) by the chain rule, gives the same Var(ln v0)
    p = _params(2e-3, c1, r)
    d = np.array([1.0])
    model = _signal_model(T, d)
    fitted, _ = model(p, np.array([0]))
    cols = []
    for j, scale in enumerate([1.0, 1.0, 1.0 / c1, 1.0 / (r * (1 - r))]):  # d(ln c1)/dc1, d(logit r)/dr
        h = 1e-6
        up, dn = p.copy(), p.copy()
        up[0, j] += h
        dn[0, j] -= h
        cols.append((model(up, np.array([0]))[0][0] - model(dn, np.array([0]))[0][0]) / (2 * h) * scale)
    jac = np.array(cols)
    want = np.linalg.inv(jac @ jac.T)[1, 1]
    got = signal_ln_v0_var(T, p, fitted, np.ones((1, T.size)), d, np.array([1.0]))[0]
    assert got == pytest.approx(want, rel=1e-4)


def test_straight_line_corner_has_the_cubic_slope_variance() -> None:
    # where the fit ran to zero curvature (ln c1 = -27, logit r = -27: a first-order curve of huge amplitude)
    # the fit's own columns for ln c1 and logit r vanish; here the curvature and shape still count, as the
    # t² and t³ terms of a cubic. Reference: numpy.polyfit's unscaled covariance of the linear coefficient
    v0 = 1e-3
    p = np.array([[0.1, np.log(v0), -27.0, -27.0]])
    d = np.array([1.0])
    # the straight line itself (the fit's model evaluates it as A - S with A near 5e11, a few 1e-4 off)
    fitted = (0.1 + v0 * T)[None, :]
    y = fitted[0] + 0.002 * np.random.default_rng(3).standard_normal(T.size)
    _, cov = np.polyfit(T, y, 3, cov="unscaled")
    want = cov[2, 2] / v0**2  # polyfit orders coefficients from the highest power: index 2 is t¹
    got = signal_ln_v0_var(T, p, fitted, np.ones((1, T.size)), d, np.array([1.0]))[0]
    assert got == pytest.approx(want, rel=1e-6)
    line = np.polyfit(T, y, 1, cov="unscaled")[1][0, 0] / v0**2
    assert got > 10 * line  # not a straight line's variance, as the fit's own coordinates gave
