"""The integrated Hill and substrate-inhibition curves keep the least-squares model contract (invented values):
one Jacobian row per parameter and one column per read (:data:`vzero.plugins.kinetics.lsq.Model`,
``jac [wells, parameters, reads]``); a spare, unset row would enter the solver's normal equations
(:func:`vzero.plugins.kinetics.lsq.unit_covariance` forms J Jᵀ from the whole array). The rows' values are
checked against central differences in test_hillcurve.py and test_sicurve.py.
"""

from __future__ import annotations

import numpy as np
from vzero.plugins.rates.hillcurve import hill_model
from vzero.plugins.rates.sicurve import si_model

T = np.arange(25) * 12.0  # s
SPC = 3.0  # AU/mM, invented


def test_hill_model_has_one_jacobian_row_per_parameter() -> None:
    params = np.array([[0.1, np.log(2e-4), 1.0, -0.4], [0.0, np.log(3e-4), 0.2, -1.4], [0.05, np.log(1e-4), 0.5, 0.3]])
    f, jac = hill_model(T, np.array([[0.3], [0.6], [1.2]]), SPC)(params, np.arange(3))
    assert f.shape == (3, T.size) and jac.shape == (3, 4, T.size)
    assert np.isfinite(jac).all()


def test_inhibition_model_has_one_jacobian_row_per_parameter() -> None:
    params = np.array([[0.1, np.log(4e-4), 0.1, 0.3], [0.0, np.log(2e-4), 0.02, 0.6]])
    f, jac = si_model(T, np.array([[1.5], [6.0]]), SPC)(params, np.arange(2))
    assert f.shape == (2, T.size) and jac.shape == (2, 4, T.size)
    assert np.isfinite(jac).all()

