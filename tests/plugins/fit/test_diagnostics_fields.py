"""The diagnostics' numbers against hand calculations: each linear transform's points and the estimates
its line implies on exact Michaelis–Menten data (Vmax = 10, Km = 2: every transform returns them exactly),
the usable range of the Hill plot, the confidence band by the delta method with scipy.stats.t and a
finite-difference gradient, and the plotting grid's rule."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy import stats
from vzero.plugins.fit import diagnostics as dg

from tests.plugins.fit.test_statistics import MM, _fit, _puromycin

S = np.array([0.0, 0.1, 0.5, 1.0, 2.0, 4.0, 8.0, 50.0])
V = 10.0 * S / (2.0 + S)


def _rows(table: dict, plot: str) -> tuple[dict, dict]:
    sel = table["plot"] == plot
    q, x, y, bad = table["quantity"][sel], table["x"][sel], table["y"][sel], table["unstable"][sel]
    points = {"x": x[q == "point"], "y": y[q == "point"], "unstable": bad[q == "point"]}
    return points, {str(k): float(v) for k, v in zip(q[q != "point"], y[q != "point"], strict=True)}


def test_each_transform_returns_vmax_and_km_of_exact_data() -> None:
    ids = [("p", f"A{i + 1}") for i in range(S.size)]
    table = dg.transforms("g", S, V, 10.0, ids, "uM", "uM/s")
    assert list(table) == dg.TRANSFORM_COLUMNS
    for plot in ("lineweaver-burk", "eadie-hofstee", "hanes-woolf"):
        _, est = _rows(table, plot)
        assert est["Vmax"] == pytest.approx(10.0, rel=1e-9) and est["Km"] == pytest.approx(2.0, rel=1e-9), plot
    pts, est = _rows(table, "lineweaver-burk")
    np.testing.assert_allclose(pts["x"][1:], 1 / S[1:])
    np.testing.assert_allclose(pts["y"][1:], 1 / V[1:])
    assert est["slope"] == pytest.approx(0.2) and est["intercept"] == pytest.approx(0.1)  # Km/Vmax, 1/Vmax
    assert list(pts["unstable"]) == [True] + [False] * 7  # S = 0 has no reciprocal
    pts, est = _rows(table, "eadie-hofstee")
    np.testing.assert_allclose(pts["x"][1:], V[1:] / S[1:])
    assert est["slope"] == pytest.approx(-2.0) and est["intercept"] == pytest.approx(10.0)
    pts, est = _rows(table, "hanes-woolf")
    np.testing.assert_allclose(pts["y"][1:], S[1:] / V[1:])
    assert est["slope"] == pytest.approx(0.1) and est["intercept"] == pytest.approx(0.2)
    # Hill plot: log10(v/(Vmax − v)) = log10(S) − log10(Km) for h = 1; usable only for 0.1 < v/Vmax < 0.9
    pts, est = _rows(table, "hill")
    frac = V / 10.0
    assert list(pts["unstable"]) == list(~((frac > 0.1) & (frac < 0.9)))
    np.testing.assert_allclose(pts["y"][1:-1], np.log10(S[1:-1] / 2.0), rtol=1e-9)
    assert est["h"] == pytest.approx(1.0) and est["K0.5"] == pytest.approx(2.0)
    assert list(table["well"][: S.size]) == [i[1] for i in ids]


def test_no_hill_plot_without_a_positive_vmax_and_no_line_through_one_x() -> None:
    ids = [("p", "A1")] * S.size
    for vmax in (np.nan, 0.0, -1.0):
        assert "hill" not in set(dg.transforms("g", S, V, vmax, ids, "uM", "uM/s")["plot"])
    assert np.isnan(dg._ols(np.array([1.0, 1.0, np.nan]), np.array([1.0, 2.0, 3.0]))).all()
    ref = stats.linregress([1.0, 2.0, 4.0], [3.0, 2.0, 7.0])
    assert dg._ols(np.array([1.0, 2.0, 4.0, np.nan]), np.array([3.0, 2.0, 7.0, 1.0])) == pytest.approx(
        (ref.slope, ref.intercept))
    # two distinct x (each twice) is enough for a line: slope 2 and intercept -1 by hand
    assert dg._ols(np.array([1.0, 1.0, 2.0, 2.0]), np.array([0.9, 1.1, 2.9, 3.1])) == pytest.approx((2.0, -1.0))


@pytest.mark.parametrize("scale", [1.0, 1e-3])
def test_band_is_the_delta_method_with_students_t(scale: float) -> None:
    # scale 1e-3: rates in thousandths, so the band's variance is far below 1 (the clip at zero must not
    # become a floor)
    s, v = _puromycin()
    v = v * scale
    res = _fit(MM, s, v)
    x = {"substrate": np.array([0.02, 0.2, 1.0])}
    y, lo, hi = dg.band(MM, res, x, 0.90)
    p = np.array(res.values, float)
    grad = np.empty((3, p.size))
    for k in range(p.size):
        h = 1e-6 * abs(p[k])
        up, dn = p.copy(), p.copy()
        up[k] += h
        dn[k] -= h
        grad[:, k] = (MM.evaluate(list(up), x) - MM.evaluate(list(dn), x)) / (2 * h)
    half = stats.t.ppf(0.95, res.dof) * np.sqrt(np.einsum("ni,ij,nj->n", grad, res.covariance, grad))
    np.testing.assert_allclose(y, MM.evaluate(list(p), x), rtol=1e-12)
    np.testing.assert_allclose(hi - y, half, rtol=1e-5)
    np.testing.assert_allclose(y - lo, half, rtol=1e-5)
    y2, lo2, hi2 = dg.band(MM, dataclasses.replace(res, errorbars=False), x, 0.90)
    np.testing.assert_allclose(y2, y)
    assert np.isnan(lo2).all() and np.isnan(hi2).all()


@pytest.mark.parametrize(("values", "log"), [([1.0, 30.0], False), ([1.0, 30.5], True), ([0.5, 2.0], False)])
def test_grid_is_log_spaced_only_beyond_a_thirty_fold_span(values: list[float], log: bool) -> None:
    g = dg.grid(np.array([np.nan, -1.0, *values]), n=5)
    lo, hi = min(values), max(values)
    want = np.geomspace(lo / 2, hi * 1.5, 5) if log else np.linspace(0.0, hi * 1.1, 5)
    np.testing.assert_allclose(g, want)
    np.testing.assert_allclose(dg.grid(np.array([0.0, -2.0])), np.linspace(0.0, 1.0, 101))


def test_a_point_at_zero_substrate_is_left_out_of_the_reciprocal_plots() -> None:
    # 1/S and S/v need S > 0: a well at S = 0 (v > 0 from a background rate) is marked unstable in the
    # Lineweaver-Burk and Hanes-Woolf plots and left out of their lines; the Hanes-Woolf line is then the
    # least-squares line of the other points (scipy.stats.linregress)
    s = np.array([0.0, 0.5, 1.0, 2.0, 4.0, 8.0])
    v = np.array([0.3, 3.4, 5.1, 6.6, 8.1, 8.9])
    out = dg.transforms("g", s, v, np.nan, [("P1", f"A{i + 1}") for i in range(6)], "uM", "uM/s")
    for plot in ("lineweaver-burk", "hanes-woolf"):
        pts = (out["plot"] == plot) & (out["quantity"] == "point")
        assert out["unstable"][pts].tolist() == [True] + [False] * 5
    ref = stats.linregress(s[1:], s[1:] / v[1:])
    hw = out["plot"] == "hanes-woolf"
    assert out["y"][hw & (out["quantity"] == "slope")][0] == pytest.approx(ref.slope, rel=1e-10)
    assert out["y"][hw & (out["quantity"] == "intercept")][0] == pytest.approx(ref.intercept, rel=1e-10)


def test_hill_plot_of_exact_cooperative_data() -> None:
    # Hill equation with h = 2.5, K0.5 = 3, Vmax = 10: log10(v/(Vmax − v)) = h·log10(S) − h·log10(K0.5), so the
    # line's slope is h and K0.5 = 10^(−intercept/slope) (Hill 1910; any textbook linearisation)
    s = np.array([1.5, 2.0, 3.0, 4.0, 5.0])
    v = 10.0 * s**2.5 / (3.0**2.5 + s**2.5)
    out = dg.transforms("g", s, v, 10.0, [(f"P{i + 1}", f"B{i + 1}") for i in range(5)], "mM", "mM/min")
    hill = out["plot"] == "hill"
    # each point keeps its plate and well; the line's rows have neither
    assert out["plate"][hill].tolist() == [f"P{i + 1}" for i in range(5)] + [""] * 4
    assert out["well"][hill].tolist() == [f"B{i + 1}" for i in range(5)] + [""] * 4
    pts, est = _rows(out, "hill")
    np.testing.assert_allclose(pts["x"], np.log10(s), rtol=1e-12)
    np.testing.assert_allclose(pts["y"], np.log10(v / (10.0 - v)), rtol=1e-12)
    assert est["h"] == pytest.approx(2.5, rel=1e-9) and est["K0.5"] == pytest.approx(3.0, rel=1e-9)
    assert est["intercept"] == pytest.approx(-2.5 * np.log10(3.0), rel=1e-9)
    hill = out["plot"] == "hill"
    assert set(out["x_label"][hill]) == {"log10(S/mM)"} and set(out["y_label"][hill]) == {"log10(v/(Vmax − v))"}
    lb = out["plot"] == "lineweaver-burk"
    assert set(out["x_label"][lb]) == {"1/S (1/mM)"} and set(out["y_label"][lb]) == {"1/v (1/(mM/min))"}


def test_hill_plot_usable_range_is_open_at_both_ends() -> None:
    # v/Vmax exactly 0.1 and 0.9 lie on HILL_STABLE's ends and are not usable (the range is open); just
    # inside they are; S = 0 never is
    assert dg.HILL_STABLE == (0.1, 0.9)
    s = np.array([0.5, 1.0, 2.0, 3.0, 4.0, 0.0])
    v = np.array([1.0, 1.001, 5.0, 8.999, 9.0, 5.0])
    out = dg.transforms("g", s, v, 10.0, [("P1", f"C{i + 1}") for i in range(6)], "uM", "uM/s")
    pts, est = _rows(out, "hill")
    assert pts["unstable"].tolist() == [True, False, False, False, True, True]
    # the line goes through the three usable points only (scipy.stats.linregress)
    ref = stats.linregress(np.log10(s[1:4]), np.log10(v[1:4] / (10.0 - v[1:4])))
    assert est["h"] == pytest.approx(ref.slope, rel=1e-10)
    assert est["intercept"] == pytest.approx(ref.intercept, rel=1e-10)


def test_non_positive_rates_are_left_out_of_the_reciprocal_plots() -> None:
    # a negative or zero rate has no meaningful 1/v or S/v: unstable there and not in the line; Eadie-Hofstee
    # (v against v/S) keeps it (it needs only S > 0)
    s = np.array([0.5, 1.0, 2.0, 4.0, 8.0])
    v = np.array([-0.2, 0.0, 5.0, 6.7, 8.0])
    out = dg.transforms("g", s, v, np.nan, [("P1", f"D{i + 1}") for i in range(5)], "uM", "uM/s")
    for plot in ("lineweaver-burk", "hanes-woolf"):
        assert _rows(out, plot)[0]["unstable"].tolist() == [True, True, False, False, False], plot
    pts, est = _rows(out, "eadie-hofstee")
    assert pts["unstable"].tolist() == [False] * 5
    ref = stats.linregress(v / s, v)
    assert est["Vmax"] == pytest.approx(ref.intercept, rel=1e-10) and est["Km"] == pytest.approx(-ref.slope, rel=1e-10)
    _, lb = _rows(out, "lineweaver-burk")
    ref = stats.linregress(1 / s[2:], 1 / v[2:])
    assert lb["Vmax"] == pytest.approx(1 / ref.intercept, rel=1e-10)
    assert lb["Km"] == pytest.approx(ref.slope / ref.intercept, rel=1e-10)


def test_grid_default_size_and_ends() -> None:
    g = dg.grid(np.array([2.0, 10.0]))
    assert g.size == 101 and g[0] == 0.0 and g[-1] == pytest.approx(11.0)
    g = dg.grid(np.array([0.1, 100.0]))
    assert g.size == 101 and g[0] == pytest.approx(0.05) and g[-1] == pytest.approx(150.0)
