"""A shared check for the batched least-squares models of the rate methods: the analytic Jacobian a model
returns against central differences of its own values (an independent computation of the derivatives)."""

from __future__ import annotations

import numpy as np
from vzero.plugins.kinetics import lsq


def assert_jacobian_matches_central_differences(model: lsq.Model, params: np.ndarray, step: float = 1e-6,
                                                rel: float = 1e-6) -> None:
    """Every column of ``model``'s Jacobian at ``params [wells, p]`` within ``rel`` of the column's largest
    entry of the central difference with ``step`` in that parameter."""
    rows = np.arange(params.shape[0])
    _, jac = model(params, rows)
    for k in range(params.shape[1]):
        d = np.zeros_like(params)
        d[:, k] = step
        num = (model(params + d, rows)[0] - model(params - d, rows)[0]) / (2 * step)
        assert np.max(np.abs(num - jac[:, k])) <= rel * np.max(np.abs(jac[:, k]))
