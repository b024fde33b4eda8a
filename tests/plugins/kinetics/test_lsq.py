"""The shared batched least-squares solver (vzero.plugins.kinetics.lsq) against scipy's least_squares, and its
one bound rule (open bounds)."""

from __future__ import annotations

import numpy as np
from scipy.optimize import least_squares
from vzero.plugins.kinetics import lsq

T = np.linspace(0.0, 10.0, 40)


def _decay(p: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """a·exp(-k t) + c for each problem: values [m, n] and Jacobian [m, 3, n]."""
    a, k, c = p[:, 0:1], p[:, 1:2], p[:, 2:3]
    e = np.exp(-k * T[None, :])
    jac = np.stack([e, -a * T[None, :] * e, np.ones_like(e)], axis=1)
    return a * e + c, jac


def _data(n: int, seed: int = 3) -> np.ndarray:
    rng = np.random.default_rng(seed)
    truth = np.stack([rng.uniform(1, 3, n), rng.uniform(0.2, 1.0, n), rng.uniform(-0.5, 0.5, n)], axis=1)
    y, _ = _decay(truth, np.arange(n))
    return y + rng.normal(0.0, 0.02, y.shape)


def test_batch_agrees_with_scipy_least_squares() -> None:
    # independent reference: scipy.optimize.least_squares (trust-region reflective), one problem at a time
    y = _data(8)
    w = np.ones_like(y)
    w[:, ::5] = 0.0  # some points do not count
    p0 = np.tile([1.0, 0.5, 0.0], (8, 1))
    sol = lsq.solve(_decay, p0, y, w, ftol=1e-14, xtol=1e-12)
    assert sol.converged.all()
    for i in range(8):
        keep = w[i] > 0

        def resid(q: np.ndarray, i: int = i, keep: np.ndarray = keep) -> np.ndarray:
            return (_decay(q[None, :], np.array([i]))[0][0] - y[i])[keep]

        ref = least_squares(resid, p0[i], xtol=1e-15, ftol=1e-15, gtol=1e-15)
        np.testing.assert_allclose(sol.params[i], ref.x, rtol=1e-7, atol=1e-10)
        np.testing.assert_allclose(sol.cost[i], 2 * ref.cost, rtol=1e-9)


def test_held_parameters_stay_and_open_bounds_are_never_reached() -> None:
    y = _data(4, seed=5)
    p0 = np.tile([1.0, 0.5, 0.0], (4, 1))
    # the offset held at 0.25 in every problem: it must not move
    held = lsq.solve(_decay, p0 + np.array([0, 0, 0.25]), y, np.ones_like(y), free=np.array([True, True, False]))
    assert np.all(held.params[:, 2] == 0.25) and held.converged.all()
    # an upper bound on the amplitude below every optimum: the fit approaches it from inside, never on it,
    # and ends at the constrained optimum (reference: scipy least_squares with the amplitude fixed there)
    sol = lsq.solve(_decay, p0 * [0.5, 1, 1], y, np.ones_like(y), upper=np.array([0.8, np.inf, np.inf]))
    assert sol.converged.all() and np.all(sol.params[:, 0] < 0.8)
    np.testing.assert_allclose(sol.params[:, 0], 0.8, rtol=1e-6)
    for i in range(4):
        def resid(q: np.ndarray, i: int = i) -> np.ndarray:
            return _decay(np.array([[0.8, *q]]), np.array([i]))[0][0] - y[i]

        ref = least_squares(resid, [0.5, 0.0], xtol=1e-15, ftol=1e-15, gtol=1e-15)
        np.testing.assert_allclose(sol.params[i, 1:], ref.x, rtol=1e-4, atol=1e-6)


def test_unit_covariance_is_the_inverse_normal_matrix() -> None:
    rng = np.random.default_rng(0)
    jac = rng.normal(size=(3, 2, 10))
    cov = lsq.unit_covariance(jac.copy())
    for i in range(3):
        np.testing.assert_allclose(cov[i], np.linalg.inv(jac[i] @ jac[i].T), rtol=1e-12)
    singular = np.zeros((1, 2, 10))
    assert np.all(np.isnan(lsq.unit_covariance(singular)))


def test_three_parameter_covariance_in_closed_form_matches_numpy_inverse() -> None:
    # independent reference: numpy.linalg.inv (LAPACK) of each normal matrix, on columns of very different
    # scales (a baseline beside a log-rate and a curvature), as the rate curves have them
    rng = np.random.default_rng(1)
    jac = rng.normal(size=(50, 3, 20)) * np.array([4.0, 0.05, 1e-3])[None, :, None]
    cov = lsq.unit_covariance(jac.copy())
    for i in range(50):
        np.testing.assert_allclose(cov[i], np.linalg.inv(jac[i] @ jac[i].T), rtol=1e-10)
    direct = lsq.sym3_inverse(jac @ jac.transpose(0, 2, 1))
    np.testing.assert_allclose(direct, np.linalg.inv(jac @ jac.transpose(0, 2, 1)), rtol=1e-10)
    # singular (a zero column, or two equal columns) and non-finite normal matrices give NaN, as for two parameters
    bad = np.ones((3, 3, 20))
    bad[0, 2] = 0.0
    bad[2, 1, 0] = np.inf
    assert np.all(np.isnan(lsq.unit_covariance(bad)))
