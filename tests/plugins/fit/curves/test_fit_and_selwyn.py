"""The joint curve fit on simulated curves (reference curves from scipy's solve_ivp), and Selwyn's test."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from vzero.plugins.fit.catalog import BY_NAME
from vzero.plugins.fit.curves import selwyn
from vzero.plugins.fit.curves.curve import Wells
from vzero.plugins.fit.curves.fit import CurveGroup, fit_groups

T = np.arange(0.0, 1200.0, 10.0)


def _simulate(model: str, theta: list[float], s0: np.ndarray, enzyme: np.ndarray, *, kinact: float = 0.0,
              noise: float = 0.05, seed: int = 0, name: str = "g") -> CurveGroup:
    """Product curves by scipy's solve_ivp (Radau, rtol 1e-10), a random baseline per well and Gaussian
    read noise (invented scenario: rates in uM/min, substrate in uM, enzyme in nM)."""
    rng = np.random.default_rng(seed)
    m = BY_NAME[model]
    e_ref = float(np.median(enzyme))
    ys = []
    for s, e in zip(s0, enzyme, strict=True):
        def rhs(t: float, y: np.ndarray, s=s, e=e) -> list[float]:
            v = m.evaluate(theta, {"substrate": np.array([max(s - y[0], 0.0)])})[0]
            return [float(v) / 60 * e / e_ref * np.exp(-kinact * t)]

        sol = solve_ivp(rhs, (0, T[-1]), [0.0], method="Radau", rtol=1e-10, atol=1e-12, t_eval=T)
        ys.append(sol.y[0] + rng.uniform(-0.5, 0.5) + noise * rng.standard_normal(T.size))
    y = np.array(ys)
    n = len(s0)
    wells = Wells(np.asarray(s0, float), np.zeros(n), np.asarray(enzyme, float), np.tile(T, (n, 1)),
                  np.asarray(enzyme, float) / e_ref / 60)
    rates = m.evaluate(theta, {"substrate": np.asarray(s0, float)}) * (1 + 0.2 * rng.standard_normal(n))
    return CurveGroup(name, wells, y, np.ones(y.shape, bool), rates, [("P1", f"A{k + 1}") for k in range(n)],
                      e_ref)


S0 = np.repeat(np.geomspace(2.0, 200.0, 6), 2)


@pytest.mark.parametrize(("model", "theta"), [("michaelis-menten", [5.0, 20.0]), ("hill", [5.0, 20.0, 2.2]),
                                              ("substrate-inhibition", [5.0, 20.0, 60.0])])
def test_joint_fit_recovers_parameters(model: str, theta: list[float]) -> None:
    groups = [_simulate(model, theta, S0, np.full(S0.size, 10.0), seed=k, name=f"g{k}") for k in range(3)]
    out = fit_groups(BY_NAME[model], groups, units={"Vmax": "uM/min"})
    for cf in out:
        res = cf.result
        assert res.success and res.errorbars
        # baselines counted: n - p - n_wells degrees of freedom
        assert res.dof == S0.size * T.size - len(theta) - S0.size
        for name, true in zip(BY_NAME[model].params, theta, strict=True):
            p = res.params[name]
            assert abs(p.value - true) < 4.5 * p.stderr, (name, p.value, p.stderr)
            if name in BY_NAME[model].profile:
                assert p.ci_method == "profile" and p.ci_low < p.value < p.ci_high
        # the fitted curves leave residuals at the noise level (SD 0.05)
        assert np.std(cf.fitted - groups[out.index(cf)].y) == pytest.approx(0.05, rel=0.1)


def test_joint_fit_with_inactivation_recovers_kinact() -> None:
    g = _simulate("michaelis-menten", [5.0, 20.0], S0, np.full(S0.size, 10.0), kinact=1e-3, seed=3)
    res = fit_groups(BY_NAME["michaelis-menten"], [g], kinact=True)[0].result
    k = res.params["kinact"]
    assert abs(k.value - 1e-3) < 4 * k.stderr and k.ci_method == "profile"


def test_numerical_route_gives_the_same_fit() -> None:
    g = _simulate("hill", [5.0, 20.0, 2.2], S0[::2], np.full(S0.size // 2, 10.0), seed=5)
    a = fit_groups(BY_NAME["hill"], [g], profile=False, route="closed")[0].result
    b = fit_groups(BY_NAME["hill"], [g], profile=False, route="ode")[0].result
    np.testing.assert_allclose(a.values, b.values, rtol=1e-6)


def test_selwyn_passes_a_stable_enzyme_and_fails_an_unstable_one() -> None:
    s0 = np.full(4, 100.0)
    e = np.array([5.0, 5.0, 10.0, 10.0])
    stable = selwyn.test(_simulate("michaelis-menten", [5.0, 20.0], s0, e, seed=1), alpha=0.05)
    assert len(stable.rows) == 1 and not stable.failed and stable.rows[0]["superimpose"]
    # first-order inactivation (half-life about 3.5 min): P depends on E·(1 − e^−kt)/k, not on E·t
    unstable = selwyn.test(_simulate("michaelis-menten", [5.0, 20.0], s0, e, kinact=3.3e-3, seed=1), alpha=0.05)
    assert unstable.failed and unstable.rows[0]["p"] < 0.05 and unstable.rows[0]["max_difference"] > 0.05
    assert {pt["enzyme"] for pt in unstable.points} == {5.0, 10.0}


def test_selwyn_compares_wells_of_one_enzyme_lot() -> None:
    # a stable enzyme from two lots, lot B at 60 % of lot A's activity: A at 5 and 10 nM, B at 10 and 20 nM.
    # Within a lot the curves superimpose on E·t; pooled, the 10-nM level mixes the lots and they do not,
    # which says nothing about stability
    import dataclasses

    s0 = np.full(4, 100.0)
    nominal = np.array([5.0, 10.0, 10.0, 20.0])
    g = _simulate("michaelis-menten", [5.0, 20.0], s0, nominal * np.array([1, 1, 0.6, 0.6]), seed=2)
    g = dataclasses.replace(g, wells=dataclasses.replace(g.wells, enzyme=nominal))
    mixed = selwyn.test(g, alpha=0.05)  # lots not modelled: one set of four wells
    assert len(mixed.rows) == 1 and mixed.failed
    by_lot = selwyn.test(dataclasses.replace(g, lots=("A", "B"), lot=np.array([0, 0, 1, 1])), alpha=0.05)
    assert [r["lot"] for r in by_lot.rows] == ["A", "B"] and not by_lot.failed
    assert all(r["superimpose"] and r["n_wells"] == 2 for r in by_lot.rows)


def test_selwyn_needs_two_enzyme_levels() -> None:
    res = selwyn.test(_simulate("michaelis-menten", [5.0, 20.0], S0[:4], np.full(4, 10.0)), alpha=0.05)
    assert res.rows == [] and not res.failed


def test_a_group_gets_the_same_fit_alone_and_in_a_batch() -> None:
    # the batch shares one solver run (and profiles search both sides of every group at once): a group's
    # estimates and profile intervals must not depend on the other groups
    groups = [_simulate("hill", [5.0, 20.0, 2.2], S0[::2], np.full(S0.size // 2, 10.0), seed=k, name=f"g{k}")
              for k in range(3)]
    alone = fit_groups(BY_NAME["hill"], groups[:1])[0].result
    batch = fit_groups(BY_NAME["hill"], groups)[0].result
    for name in ("Vmax", "K0.5", "h"):
        a, b = alone.params[name], batch.params[name]
        np.testing.assert_allclose([b.value, b.ci_low, b.ci_high], [a.value, a.ci_low, a.ci_high], rtol=1e-6)


def test_a_stalled_curve_fit_counts_as_converged_only_at_a_stationary_point() -> None:
    # residuals orthogonal to the Jacobian's columns (a least-squares minimum) pass; a residual with a
    # component along a column (cosine 1e-3) does not; a zero column (fixed parameter) is ignored
    from vzero.plugins.fit.curves.solver import CURVE_GTOL, stationary

    rng = np.random.default_rng(4)
    j = rng.standard_normal((2, 50, 3))
    j[:, :, 2] = 0.0
    r = rng.standard_normal((2, 50))
    q, _ = np.linalg.qr(j[0, :, :2])
    r[0] -= q @ (q.T @ r[0])  # projected off the columns: cosine at rounding level
    along = j[1, :, 0] / np.linalg.norm(j[1, :, 0])
    r[1] -= np.linalg.qr(j[1, :, :2])[0] @ (np.linalg.qr(j[1, :, :2])[0].T @ r[1])
    r[1] += 1e-3 * np.linalg.norm(r[1]) * along
    assert CURVE_GTOL == 1e-6
    assert stationary(r, j).tolist() == [True, False]
