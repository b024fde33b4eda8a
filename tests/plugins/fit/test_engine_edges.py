"""Why a fit has no standard errors, at the edges of each reason (invented data).

No degrees of freedom left (as many points as free parameters) and a Jacobian whose columns are not
separately determined are two different reasons, and the note says which. The rank rule is numpy's
(numpy.linalg.matrix_rank: singular values at or below ``S.max() * max(M, N) * eps`` count as zero), checked
on a two-parameter linear model whose second column differs from the first by a chosen amount.
"""

from __future__ import annotations

import numpy as np
import pytest
from vzero.plugins.fit import engine
from vzero.plugins.fit.catalog import BY_NAME


def test_as_many_points_as_parameters_leaves_no_degrees_of_freedom() -> None:
    mm = BY_NAME["michaelis-menten"]
    s, v = np.array([1.0, 4.0]), np.array([0.5, 0.8])
    res = engine.fit(mm.evaluate, mm.jacobian, {"substrate": s}, v, [1.0, 1.0], mm.params)
    assert res.dof == 0 and not res.errorbars
    assert res.note.startswith("no degrees of freedom left (2 points for 2 free parameters)")
    three = engine.fit(mm.evaluate, mm.jacobian, {"substrate": np.array([1.0, 4.0, 9.0])},
                       np.array([0.5, 0.8, 0.9]), [1.0, 1.0], mm.params)
    assert three.dof == 1 and three.errorbars and three.note == ""


def _line_pair(delta: float, n: int = 200) -> tuple:
    x = np.linspace(1.0, 2.0, n)
    a, b = x, x + delta * (x - 1.5) ** 2

    def f(p, _x):
        return p[0] * a + p[1] * b

    def jac(p, _x):
        return [a, b]

    y = 2.0 * a + 1.0 * b + 0.01 * np.random.default_rng(3).standard_normal(n)
    return f, jac, y, np.column_stack([a, b])


@pytest.mark.parametrize("delta", [1e-15, 3e-14, 1e-13, 1e-11])
def test_singular_jacobian_follows_numpys_rank_rule(delta: float) -> None:
    f, jac, y, j = _line_pair(delta)
    res = engine.fit(f, jac, {}, y, [1.0, 1.0], ("a", "b"))
    full_rank = np.linalg.matrix_rank(j) == 2  # numpy.linalg.matrix_rank, default tolerance
    assert res.errorbars == full_rank
    if not full_rank:
        assert "singular Jacobian" in res.note


def test_the_rank_cases_fall_on_both_sides_of_the_tolerance() -> None:
    # the parametrised deltas straddle numpy's tolerance for 200 points: the engine gives error bars on some
    # and calls the Jacobian singular on others; and at least one lies between the tolerance for 200 points
    # and that for 2 columns (where max(M, N) matters)
    errorbars = []
    for d in (1e-15, 3e-14, 1e-13, 1e-11):
        f, jac, y, _ = _line_pair(d)
        errorbars.append(engine.fit(f, jac, {}, y, [1.0, 1.0], ("a", "b")).errorbars)
    assert set(errorbars) == {True, False}
    between = []
    for d in (3e-14, 1e-13):
        sv = np.linalg.svd(_line_pair(d)[3], compute_uv=False)
        eps = np.finfo(float).eps
        between.append(sv[0] * 2 * eps < sv[-1] <= sv[0] * 200 * eps)
    assert any(between)
