"""The hysteretic lag of the curve fit (``lag: true``): effective time, its derivatives, whole curves, a fit.

Independent references: scipy.integrate.quad for the effective time τ = c·∫₀ᵗ a(u) du, with a(u) the active
fraction of the sequential scheme (inactive precursor → active enzyme at 1/λ → lost at k; the precursor
stable), a(u) = (e^{−ku} − e^{−u/λ})/(1 − kλ); scipy's solve_ivp (Radau, rtol 1e-10) on the scheme's
own differential equations and their forward sensitivities for τ, ∂τ/∂k and ∂τ/∂λ, through kλ = 1; central
finite differences for ∂τ/∂λ and ∂τ/∂k; solve_ivp (Radau, rtol 1e-10) for whole progress curves. Parameters
and data are invented.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.integrate import quad, solve_ivp
from vzero.cli.main import main
from vzero.plugins.fit.catalog import BY_NAME
from vzero.plugins.fit.curves import curve
from vzero.plugins.fit.curves.fit import LAG, CurveGroup, fit_groups

T = np.concatenate([[0.0, 1e-9, 1e-4], np.linspace(0.5, 1800.0, 60)])
SCALE = 1 / 60  # rate in uM/min, substrate in uM: 1 s of read time is 1/60 min of rate time


def _wells(s0: np.ndarray, time: np.ndarray = T) -> curve.Wells:
    n = len(s0)
    return curve.Wells(np.asarray(s0, float), np.zeros(n), np.ones(n), np.tile(time, (n, 1)), np.full(n, SCALE))


def _tau_quad(t: float, k: float, lam: float) -> float:
    """c·∫₀ᵗ a(u) du by adaptive quadrature (scipy.integrate.quad), the lag's active fraction written out."""
    if t == 0:
        return 0.0

    def active(u: float) -> float:
        # the Bateman form (e^{−ku} − e^{−u/λ})/(1 − kλ), written as e^{−ku}·(1 − e^{−(1/λ − k)u})/(1 − kλ)
        if lam == 0:
            return float(np.exp(-k * u))
        return float(np.exp(-k * u) * -np.expm1(-(1 / lam - k) * u) / (1 - k * lam))

    # two pieces, split where the rise is over (50 λ), so that quad sees the steep start of a short lag
    cut = min(50 * lam, t)
    pieces = [quad(active, a, b, epsabs=0.0, epsrel=1e-13, limit=200)[0] for a, b in ((0.0, cut), (cut, t)) if b > a]
    return SCALE * sum(pieces)


@pytest.mark.parametrize("k", [None, 8e-4, 0.05])
@pytest.mark.parametrize("lam", [0.0, 1e-7, 0.3, 60.0, 5e3, 1e9])
def test_effective_time_matches_quadrature(k: float | None, lam: float) -> None:
    tau, dk, dlag = curve.effective_time(_wells([1.0]), k, lam)
    ref = np.array([_tau_quad(t, k or 0.0, lam) for t in T])
    # reference: scipy.integrate.quad to 1e-13 relative
    np.testing.assert_allclose(tau[0], ref, rtol=1e-10, atol=1e-300)
    assert dlag is not None and np.all(np.isfinite(dlag))
    assert (dk is None) == (k is None)


@pytest.mark.parametrize("k", [None, 8e-4, 0.05])
@pytest.mark.parametrize("lam", [0.01, 0.3, 60.0, 5e3])
def test_lag_derivatives_match_finite_differences(k: float | None, lam: float) -> None:
    w = _wells([1.0])
    _, dk, dlag = curve.effective_time(w, k, lam)
    h = 1e-4 * lam
    up, _, _ = curve.effective_time(w, k, lam + h)
    down, _, _ = curve.effective_time(w, k, lam - h)
    # reference: central finite differences, error O(h²) relative to τ's scale; their own rounding, about
    # 1e-15·τ/h, bounds what they can check
    np.testing.assert_allclose(dlag, (up - down) / (2 * h), rtol=1e-6,
                               atol=max(1e-9 * SCALE, 1e-15 * np.max(np.abs(up)) / h))
    if k is not None:
        hk = 1e-5 * k
        up, _, _ = curve.effective_time(w, k + hk, lam)
        down, _, _ = curve.effective_time(w, k - hk, lam)
        # the difference quotient's own rounding, about 1e-15·τ/hk, bounds what it can check
        scale = max(1e-8 * np.max(np.abs(dk)), 1e-15 * np.max(np.abs(up)) / hk)
        np.testing.assert_allclose(dk, (up - down) / (2 * hk), rtol=1e-6, atol=scale)


@pytest.mark.parametrize("k", [None, 8e-4])
def test_zero_lag_is_no_lag(k: float | None) -> None:
    """λ = 0 is the model without a lag; its one-sided derivative is the limit −c·e^{−kt} (for small λ,
    τ/c = ((1 − e^{−kt})/k − λ·(1 − e^{−t/λ}))/(1 − kλ), whose λ-derivative at 0 is 1 − e^{−kt} − 1), which
    a forward difference from λ = 0 approaches (τ is smooth in λ ≥ 0 up to O(λ²) terms)."""
    w = _wells([1.0])
    plain, dk_plain, _ = curve.effective_time(w, k, None)
    tau, dk, dlag = curve.effective_time(w, k, 0.0)
    np.testing.assert_allclose(tau, plain, rtol=1e-15, atol=0)
    if k is not None:
        np.testing.assert_allclose(dk, dk_plain, rtol=1e-15, atol=0)
    h = 1e-6
    forward = (curve.effective_time(w, k, h)[0] - tau) / h
    late = T > 1.0  # where e^{−t/h} is 0: the forward difference is exact up to O(k·h)
    np.testing.assert_allclose(dlag[0, late], forward[0, late], rtol=1e-5)
    np.testing.assert_allclose(dlag[0, late], -SCALE * np.exp(-(k or 0.0) * T[late]), rtol=1e-12)
    assert dlag[0, 0] == 0.0  # at t = 0 nothing has been integrated, whatever λ


def _scheme_radau(k: float, lam: float, time: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """τ/c, ∂τ/∂k/c and ∂τ/∂λ/c by scipy's solve_ivp (Radau, rtol 1e-10) on the scheme's equations
    dp/dt = −p/λ, da/dt = p/λ − k·a, dτ/dt = a and their forward sensitivities in λ and k."""

    # state: p, a, τ, ∂p/∂λ, ∂a/∂λ, ∂τ/∂λ, ∂a/∂k, ∂τ/∂k; the system is linear, z′ = J·z
    u = 1 / lam
    jac = np.zeros((8, 8))
    jac[0, 0], jac[1, 0], jac[1, 1], jac[2, 1] = -u, u, -k, 1.0
    jac[3, 0], jac[3, 3] = u * u, -u
    jac[4, 0], jac[4, 3], jac[4, 4], jac[5, 4] = -u * u, u, -k, 1.0
    jac[6, 1], jac[6, 6], jac[7, 6] = -1.0, -k, 1.0

    sol = solve_ivp(lambda _t, z: jac @ z, (0.0, time[-1]), [1.0, 0, 0, 0, 0, 0, 0, 0], method="Radau",
                    rtol=1e-10, atol=1e-14, t_eval=time, jac=jac)
    assert sol.success
    return sol.y[2], sol.y[7], sol.y[5]


@pytest.mark.parametrize(("k", "lam"), [(8e-4, 60.0), (1 / 60, 60.0), (1 / 60 * (1 + 1e-9), 60.0),
                                        (0.05, 60.0), (0.0, 60.0), (0.05, 5e3), (2e-3, 500.0)])
def test_sequential_clock_and_its_derivatives_match_radau(k: float, lam: float) -> None:
    """τ, ∂τ/∂k and ∂τ/∂λ of the lag-then-inactivation clock, including kλ = 1 (where the closed form's
    1/(1 − kλ) is a removable singularity) and next to it."""
    tau, dk, dlag = curve.effective_time(_wells([1.0]), k, lam)
    assert dk is not None and dlag is not None
    ref = _scheme_radau(k, lam, T)
    # reference: scipy solve_ivp Radau rtol 1e-10 on the scheme and its sensitivity equations
    for got, want in zip((tau[0], dk[0], dlag[0]), ref, strict=True):
        np.testing.assert_allclose(got / SCALE, want, rtol=1e-8, atol=1e-10 * np.max(np.abs(want)))


def test_sequential_clock_is_smooth_through_k_lambda_one() -> None:
    """On either side of kλ = 1 (1e-12 to 1e-3 away) τ and its derivatives move smoothly: a form that
    divided by 1 − kλ would lose up to all its digits here."""
    lam = 60.0
    ks = (1 + np.array([-1e-3, -1e-6, -1e-9, -1e-12, 0.0, 1e-12, 1e-9, 1e-6, 1e-3])) / lam
    out = [curve.effective_time(_wells([1.0]), k, lam) for k in ks]
    tau = np.array([o[0][0, -1] for o in out])
    dk = np.array([o[1][0, -1] for o in out])
    dlag = np.array([o[2][0, -1] for o in out])
    # reference: a first-order Taylor step from kλ = 1 with the derivative at kλ = 1 (exact to O(Δk²): 1e-12
    # of τ up to 1e-6 away, 1e-6 at 1e-3)
    np.testing.assert_allclose(tau[1:8], tau[4] + dk[4] * (ks[1:8] - ks[4]), rtol=1e-10)
    np.testing.assert_allclose(tau, tau[4] + dk[4] * (ks - ks[4]), rtol=3e-6)
    assert np.all(np.isfinite(dk)) and np.all(np.isfinite(dlag))
    np.testing.assert_allclose(dk[3:6], dk[4], rtol=1e-9)
    np.testing.assert_allclose(dlag[3:6], dlag[4], rtol=1e-9)


def _radau(model: str, theta: list[float], s0: float, k: float, lam: float, time: np.ndarray) -> np.ndarray:
    """Product by scipy's Radau at rtol 1e-10, the lag and inactivation in the right-hand side."""
    m = BY_NAME[model]

    def rhs(t: float, y: np.ndarray) -> list[float]:
        v = float(m.evaluate(theta, {"substrate": np.array([max(s0 - y[0], 0.0)])})[0])
        # the sequential scheme's active fraction (Bateman), e^{−kt}·(1 − e^{−(1/λ − k)t})/(1 − kλ)
        return [v * SCALE * np.exp(-k * t) * -np.expm1(-(1 / lam - k) * t) / (1 - k * lam)]

    sol = solve_ivp(rhs, (0.0, time[-1]), [0.0], method="Radau", rtol=1e-10, atol=1e-14 * s0, t_eval=time)
    assert sol.success
    return sol.y[0]


@pytest.mark.parametrize(("model", "theta", "route"), [("michaelis-menten", [30.0, 8.0], "closed"),
                                                       ("michaelis-menten", [30.0, 8.0], "ode"),
                                                       ("hill", [30.0, 8.0, 2.4], "closed")])
def test_lag_and_inactivation_curve_matches_radau(model: str, theta: list[float], route: str) -> None:
    s0 = np.array([2.0, 12.0, 80.0])
    time = np.linspace(0.0, 1800.0, 120)
    k, lam = 8e-4, 60.0
    p, grads = curve.progress(BY_NAME[model], theta, _wells(s0, time), kinact=k, route=route, lag=lam)
    assert len(grads) == len(theta) + 2
    for i, s in enumerate(s0):
        ref = _radau(model, theta, float(s), k, lam, time)
        # reference: scipy solve_ivp Radau rtol 1e-10; the curve to 1e-7 of its final product
        np.testing.assert_allclose(p[i], ref, rtol=0, atol=1e-7 * ref[-1])


def test_lag_sensitivity_in_the_curve_matches_finite_differences() -> None:
    model, theta, s0 = BY_NAME["michaelis-menten"], [30.0, 8.0], np.array([2.0, 12.0, 80.0])
    w = _wells(s0, np.linspace(0.0, 1800.0, 120))
    _, grads = curve.progress(model, theta, w, kinact=8e-4, route="closed", lag=60.0)
    h = 1e-4
    up, _ = curve.progress(model, theta, w, kinact=8e-4, route="closed", lag=60.0 + h)
    down, _ = curve.progress(model, theta, w, kinact=8e-4, route="closed", lag=60.0 - h)
    # reference: central finite difference of the whole curve in λ
    np.testing.assert_allclose(grads[-1], (up - down) / (2 * h), rtol=1e-6, atol=1e-9 * np.max(np.abs(grads[-1])))


def _lagged_group(theta: list[float], lam: float, k: float, seed: int) -> CurveGroup:
    """Michaelis-Menten curves with a lag (and inactivation) by Radau, a random baseline per well and
    Gaussian read noise of SD 0.05 uM (invented plate: rates in uM/min, substrate in uM)."""
    rng = np.random.default_rng(seed)
    time = np.arange(0.0, 1200.0, 10.0)
    s0 = np.repeat(np.geomspace(2.0, 200.0, 6), 2)
    y = np.array([_radau("michaelis-menten", theta, float(s), k, lam, time) + rng.uniform(-0.5, 0.5)
                  + 0.05 * rng.standard_normal(time.size) for s in s0])
    rates = BY_NAME["michaelis-menten"].evaluate(theta, {"substrate": s0}) * (1 + 0.2 * rng.standard_normal(s0.size))
    return CurveGroup("g", _wells(s0, time), y, np.ones(y.shape, bool), rates,
                      [("P1", f"A{j + 1}") for j in range(s0.size)])


@pytest.mark.parametrize("k", [0.0, 8e-4])
def test_fit_recovers_the_lag(k: float) -> None:
    theta, lam = [5.0, 20.0], 60.0
    g = _lagged_group(theta, lam, k, seed=11)
    res = fit_groups(BY_NAME["michaelis-menten"], [g], kinact=k > 0, lag=True)[0].result
    assert res.success and res.errorbars
    p = res.params[LAG]
    assert abs(p.value - lam) < 4 * p.stderr and p.stderr < 0.2 * lam, (p.value, p.stderr)
    assert p.ci_method == "profile" and p.ci_low < lam < p.ci_high
    for name, true in zip(("Vmax", "Km"), theta, strict=True):
        q = res.params[name]
        assert abs(q.value - true) < 4.5 * q.stderr, (name, q.value, q.stderr)
    # without the lag the same data give a Vmax off by many standard errors: the lag term is what fits
    plain = fit_groups(BY_NAME["michaelis-menten"], [g], kinact=k > 0, profile=False)[0].result
    assert abs(plain.params["Vmax"].value - theta[0]) > 4.5 * plain.params["Vmax"].stderr


def test_recipe_option_lag_reaches_the_fits_table(tmp_path: Path) -> None:
    """``lag: true`` in a recipe's curves step adds a ``lag_time`` row (unit s) to each group's fit; the demo
    plate (invented, simulated without a lag) gives a lag of a small fraction of its read span."""
    assert main(["demo", "--out", str(tmp_path / "demo"), "-q"]) in (0, 1)
    inputs = tmp_path / "demo" / "inputs"
    text = (inputs / "demo.yaml").read_text("utf-8")
    step = "      models: [michaelis-menten, hill]\n"
    assert step in text
    text = text.replace(step, step + "  - fit:\n      method: curves\n      models: [michaelis-menten]\n"
                        "      lag: true\n")
    (inputs / "lag.yaml").write_text(text, "utf-8")
    assert main(["run", str(inputs / "lag.yaml"), "--out", str(tmp_path / "run"), "-q"]) in (0, 1)
    fits = pd.read_csv(tmp_path / "run" / "fits.csv")
    rows = fits[(fits.route == "curves") & (fits.parameter == LAG)]
    assert len(rows) >= 1 and set(rows.unit) == {"s"}
    curves = pd.read_csv(tmp_path / "run" / "progress_curves.csv")
    span = float(curves["time"].max())
    assert np.all((rows.estimate >= 0) & (rows.estimate < 0.05 * span)), rows.estimate.tolist()


def test_wells_with_a_lag_or_decay_flag_ask_for_the_options():
    """The rates step's lag and decay flags on fitted wells prompt a warning when the curve model lacks them."""
    import pandas as pd
    from vzero.plugins.fit.curves.run import unmodelled_shapes

    flags = pd.Series(["lag", "lag;decay", "", None, "noisy"])
    texts = unmodelled_shapes(flags, lag=False, inactivation=False)
    assert len(texts) == 2 and "2 fitted well(s)" in texts[0] and "'lag: true'" in texts[0]
    assert "1 fitted well(s)" in texts[1] and "'inactivation: true'" in texts[1]
    assert unmodelled_shapes(flags, lag=True, inactivation=True) == []
    assert unmodelled_shapes(pd.Series(["noisy", ""]), lag=False, inactivation=False) == []
