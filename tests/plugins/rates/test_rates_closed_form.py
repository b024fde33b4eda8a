"""The closed-form integrated Michaelis–Menten equation used by the progress-curve kernel.

Sources: the closed form of Schnell & Mendoza (1997, J. Theor. Biol. 187:207-212); check values and the ODE
cross-check recipe from the project's reference pack (REFERENCES.md section 5, computed with scipy);
independent numerics: scipy.integrate.solve_ivp (Radau, rtol 1e-12) and scipy.special.lambertw.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.special import lambertw, wrightomega
from vzero.plugins.rates.progress import (
    _concentration_model,
    _mm_curve,
    _power_model,
    _signal_model,
    fit_wells,
    integrated_mm,
    wright_omega,
)

# (S0, Km, Vmax, t, S(t)) from REFERENCES.md section 5 "Check values" (computed there with the closed form)
CHECK = [
    (1.0, 0.5, 0.05, 10, 0.687411264092),
    (1.0, 0.5, 0.05, 30, 0.231527756683),
    (1.0, 0.5, 0.05, 60, 0.017679337828),
    (0.1, 1.0, 0.01, 10, 0.091276527161),
    (0.1, 1.0, 0.01, 60, 0.057276677070),
    (10.0, 1.0, 0.5, 10, 5.582880271997),
    (10.0, 1.0, 0.5, 30, 0.063249717100),
    (1000, 1.0, 10, 50, 500.6917646075),  # S0/Km = 1000: exp() would overflow; Wright omega does not
    (1000, 1.0, 10, 99, 14.2509329072),
]


@pytest.mark.parametrize(("s0", "km", "vmax", "t", "expected"), CHECK)
def test_check_values(s0: float, km: float, vmax: float, t: float, expected: float) -> None:
    # printed to 12 significant digits in the reference pack
    np.testing.assert_allclose(integrated_mm(t, s0, km, vmax), expected, rtol=2e-11)


@pytest.mark.parametrize(("s0", "km", "vmax"), [(1.0, 0.5, 0.05), (0.1, 1.0, 0.01), (10.0, 1.0, 0.5), (3.0, 1.0, 2e-3)])
def test_agrees_with_ode_solver(s0: float, km: float, vmax: float) -> None:
    # independent: numerical integration of dS/dt = -Vmax S/(Km + S) with scipy's Radau (implicit RK, order 5)
    t_end = 2 * (s0 + km * np.log(100)) / vmax  # to 99 % conversion and beyond (REFERENCES.md section 5)
    t = np.linspace(0, t_end, 201)
    sol = solve_ivp(lambda _t, s: -vmax * s / (km + s), (0, t_end), [s0], method="Radau", t_eval=t,
                    rtol=1e-12, atol=1e-15 * s0)
    closed = integrated_mm(t, s0, km, vmax)
    assert np.max(np.abs(closed - sol.y[0])) <= 1e-8 * s0


def test_matches_lambertw_form_and_implicit_equation() -> None:
    # Schnell & Mendoza's form with scipy.special.lambertw (principal branch), and the implicit integrated
    # equation Vmax t = (S0 - S) + Km ln(S0/S) it solves
    s0, km, vmax = 2.0, 0.7, 0.03
    t = np.linspace(0, 300, 61)
    s = integrated_mm(t, s0, km, vmax)
    lw = km * lambertw((s0 / km) * np.exp((s0 - vmax * t) / km)).real
    np.testing.assert_allclose(s, lw, rtol=1e-12)
    np.testing.assert_allclose(vmax * t, (s0 - s) + km * np.log(s0 / s), rtol=0, atol=1e-12 * vmax * t[-1])


def test_jacobian_matches_finite_differences() -> None:
    # central differences (step 1e-6 in the log parameters) as the independent check of the analytic terms
    t = np.linspace(0, 400, 41)[None, :]
    s0, km, vm = np.array([[1.3]]), np.array([[0.8]]), np.array([[4e-3]])
    _, d_s0, d_km, d_v = _mm_curve(t, s0, km, vm)
    h = 1e-6
    for arg, analytic in ((0, d_s0), (1, d_km), (2, d_v)):
        up = [s0, km, vm]
        dn = [s0, km, vm]
        up[arg] = up[arg] * np.exp(h)
        dn[arg] = dn[arg] * np.exp(-h)
        numeric = (_mm_curve(t, *up)[0] - _mm_curve(t, *dn)[0]) / (2 * h)
        # central-difference error: truncation ~h² relative, rounding ~eps * S0 / h ~ 1.5e-10 absolute
        np.testing.assert_allclose(analytic, numeric, rtol=1e-6, atol=1e-9)


@pytest.mark.parametrize("which", ["concentration", "signal", "power"])
def test_fit_model_jacobians_match_finite_differences(which: str) -> None:
    # the batched fit's models in their own parameters (baseline, ln v0, u = Km/(Km + S0) / ln c1, logit r):
    # analytic columns
    # against central differences (step 1e-6), as in the test above
    t = np.linspace(0, 600, 31)
    if which == "concentration":
        model = _concentration_model(t, np.array([[0.4], [3.0]]), -2.5)
        p = np.array([[0.1, np.log(4e-4), 0.3], [0.05, np.log(1e-3), 0.85]])
    elif which == "power":  # the power-law depletion model (baseline, ln v0, order - 1)
        model = _power_model(t, np.array([[50.0], [120.0]]), 3.421e-3)
        p = np.array([[0.05, np.log(0.01), 1.4], [0.02, np.log(0.05), -0.3]])
    else:
        model = _signal_model(t, np.array([1.0, -1.0]))
        p = np.array([[0.1, np.log(2e-3), np.log(0.8), 0.3], [0.9, np.log(1e-3), np.log(2.0), -0.7]])
    rows = np.arange(2)
    _, jac = model(p, rows)
    h = 1e-6
    for k in range(p.shape[1]):
        up, dn = p.copy(), p.copy()
        up[:, k] += h
        dn[:, k] -= h
        numeric = (model(up, rows)[0] - model(dn, rows)[0]) / (2 * h)
        # rounding of the differences: about eps * |signal| / h ~ 1e-9
        np.testing.assert_allclose(jac[:, k], numeric, rtol=1e-6, atol=1e-8)


def test_fit_wells_settles_on_a_bound() -> None:
    """When the optimum lies beyond a bound, the fit ends on the bound at the constrained optimum, in a few
    iterations. Reference: the linear least-squares fit with that parameter fixed (numpy.linalg.lstsq)."""
    x = np.linspace(0.0, 1.0, 50)
    rng = np.random.default_rng(0)
    y = np.stack([0.3 + 2.0 * x + 0.5 * x**2 + rng.normal(0.0, 0.01, 50) for _ in range(6)])  # slope 2

    def fun(p: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        basis = np.stack([np.ones_like(x), x, x**2])
        return p @ basis, np.broadcast_to(basis, (rows.size, 3, x.size)).copy()

    fit = fit_wells(fun, np.zeros((6, 3)), y, np.ones_like(y), upper=np.array([np.inf, 1.0, np.inf]))
    assert fit.converged.all() and fit.n_iter < 20  # it was 136, ending short of the optimum, before
    for i in range(6):
        fixed = np.linalg.lstsq(np.stack([np.ones_like(x), x**2], axis=1), y[i] - x, rcond=None)[0]
        np.testing.assert_allclose(fit.params[i], [fixed[0], 1.0, fixed[1]], rtol=1e-6)


def test_wright_omega_against_scipy() -> None:
    # independent: scipy.special.wrightomega and scipy.special.lambertw (principal branch) of exp(x)
    x = np.concatenate([np.linspace(-745, 60, 20001), np.linspace(-4, 4, 8001), np.geomspace(60, 1e200, 2001)])
    np.testing.assert_allclose(wright_omega(x), wrightomega(x), rtol=1e-13, atol=0)
    xm = np.linspace(-700, 700, 14001)
    np.testing.assert_allclose(wright_omega(xm), lambertw(np.exp(xm)).real, rtol=1e-12, atol=0)
    assert wright_omega(-800.0) == np.exp(-800.0) and np.isscalar(wright_omega(1.0))
    assert wright_omega(1.0) == pytest.approx(1.0, rel=1e-15)  # omega(1) = 1 exactly (1 + ln 1 = 1)


def test_concentration_model_jacobian_when_the_substrate_runs_out() -> None:
    # a curve that runs to completion with Km far below S0 (u = 0.01, 0.05): the u column must stay finite
    # (computed as ln(S/S0) from P it was -inf once P/S0 rounded to 1) and match central differences
    t = np.linspace(0.0, 1800.0, 61)
    model = _concentration_model(t, np.array([[1.0], [1.0]]), 1.0)
    p = np.array([[0.0, np.log(0.01), 0.01], [0.0, np.log(0.004), 0.05]])  # used up after ~100 and ~250 s
    rows = np.arange(2)
    f, jac = model(p, rows)
    assert np.all(f[:, -1] > 1.0 - 1e-12) and np.all(np.isfinite(jac))
    h = 1e-7
    up, dn = p.copy(), p.copy()
    up[:, 2] += h
    dn[:, 2] -= h
    numeric = (model(up, rows)[0] - model(dn, rows)[0]) / (2 * h)
    np.testing.assert_allclose(jac[:, 2], numeric, rtol=1e-5, atol=1e-7)
