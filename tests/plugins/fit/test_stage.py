"""The fit stage end to end on hand-built rates tables (no pipeline run)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from vzero.data import Table
from vzero.errors import FitError
from vzero.params import validate
from vzero.plugins import fit as fit_plugin
from vzero.plugins.fit.stage import FitStage
from vzero.registry import Registry
from vzero.stage import StageInput

DATA = Path(__file__).resolve().parents[2] / "data" / "reference"


def _registry() -> Registry:
    reg = Registry()
    fit_plugin.vzero_register(reg)
    return reg


def _run(frame: pd.DataFrame, units: dict[str, str] | None = None, **settings):
    values, problems = validate(FitStage.params, settings)
    assert not problems, problems
    warnings: list[str] = []
    units = units or {"rate": "uM/min", "substrate": "uM", "inhibitor": "uM", "enzyme": "nM"}
    data = StageInput({"rates": Table(frame, units)}, None, {}, {}, _registry(), warnings.append)
    return FitStage(**values).run(data).artifacts, warnings


def _rows(group: str, s: np.ndarray, v: np.ndarray, **extra) -> list[dict]:
    return [{"plate": "P1", "well": f"A{k + 1}", "group": group, "role": "sample", "substrate": float(a),
             "inhibitor": np.nan, "enzyme": 10.0, "rate": float(b), "rate_stderr": np.nan, "flags": "", **extra}
            for k, (a, b) in enumerate(zip(s, v, strict=True))]


def _simulated() -> pd.DataFrame:
    # invented demo data: known parameters plus Gaussian noise of constant SD (seeded)
    rng = np.random.default_rng(7)
    s = np.repeat([0.5, 1, 2, 5, 10, 20, 50, 100], 3).astype(float)
    mm = 10 * s / (5 + s) + 0.05 * rng.standard_normal(s.size)
    sh = np.repeat(np.geomspace(1, 100, 10), 3)
    hill = 8 * sh**2.5 / (10**2.5 + sh**2.5) + 0.05 * rng.standard_normal(sh.size)
    low = np.array([1, 2, 4, 6, 8, 10.0])
    rows = (_rows("mm", s, mm) + _rows("coop", sh, hill) + _rows("few", [5, 5, 50, 50], [4, 4.1, 9, 9.1])
            + _rows("dead", low, -0.01 * low) + _rows("linear", low, 0.01 * low * (1 + 0.01 * np.sin(low))))
    rows += [{**rows[0], "well": "H1", "rate": 1e6, "flags": "too_few_points"},
             {**rows[0], "well": "H2", "rate": 5e5, "role": "blank"}]
    return pd.DataFrame(rows)


@pytest.fixture(scope="module")
def result():
    return _run(_simulated(), profile=True)


def _param(fits: pd.DataFrame, group: str, model: str, name: str) -> pd.Series:
    row = fits[(fits.group == group) & (fits.model == model) & (fits.parameter == name)]
    assert len(row) == 1, (group, model, name)
    return row.iloc[0]


def test_estimates_units_and_kcat(result) -> None:
    out, _ = result
    fits = out["fits"].frame
    km = _param(fits, "mm", "michaelis-menten", "Km")
    vmax = _param(fits, "mm", "michaelis-menten", "Vmax")
    # simulated truth Km = 5 uM, Vmax = 10 uM/min, noise SD 0.05 -> within 4 standard errors
    assert abs(km.estimate - 5) < 4 * km.stderr and km.unit == "uM" and km.ci_method == "profile"
    assert abs(vmax.estimate - 10) < 4 * vmax.stderr and vmax.unit == "uM/min"
    assert km.ci_low < km.estimate < km.ci_high
    # kcat = Vmax/[E]: 10 uM/min / 10 nM = 1000 /min = 16.67 /s (unit arithmetic)
    kcat = _param(fits, "mm", "michaelis-menten", "kcat")
    assert kcat.unit == "1/s"
    assert kcat.estimate == pytest.approx(vmax.estimate / 10 * 1000 / 60, rel=1e-12)
    assert kcat.stderr == pytest.approx(vmax.stderr / 10 * 1000 / 60, rel=1e-12)
    eff = _param(fits, "mm", "michaelis-menten", "kcat/Km")
    # kcat/Km in 1/(M s): (1/s) / (Km in M)
    assert eff.estimate == pytest.approx(kcat.estimate / (km.estimate * 1e-6), rel=1e-9)
    # the flagged (too few points) well and the blank well were not fitted
    assert _param(fits, "mm", "michaelis-menten", "Km").n_points == 24


def test_comparison_and_cooperativity(result) -> None:
    out, _ = result
    comp = out["model_comparison"].frame
    assert set(comp[comp.group == "mm"].selected_model) == {"michaelis-menten"}
    assert set(comp[comp.group == "coop"].selected_model) == {"hill"}
    hill_row = comp[(comp.group == "coop") & (comp.model == "hill")].iloc[0]
    assert hill_row.f_test_against == "michaelis-menten" and hill_row.p < 1e-6
    w = comp[comp.group == "mm"].akaike_weight
    assert w.sum() == pytest.approx(1.0, rel=1e-12)
    coop = out["cooperativity"].frame.set_index("group")
    # simulated h = 2.5 -> positive; simulated Michaelis-Menten (h = 1) -> none (narrow interval around 1)
    assert coop.loc["coop", "verdict"] == "positive"
    assert coop.loc["coop", "ci_low"] < 2.5 < coop.loc["coop", "ci_high"]
    assert coop.loc["mm", "verdict"] == "none", coop.loc["mm", "reason"]


def test_per_group_trouble_is_reported_not_raised(result) -> None:
    out, warnings = result
    fits = out["fits"].frame
    few = _param(fits, "few", "michaelis-menten", "Km")
    assert not few.success and "too few" in few.note and np.isnan(few.estimate)
    dead = _param(fits, "dead", "michaelis-menten", "Vmax")
    assert not dead.success and "zero or negative" in dead.note
    lin = _param(fits, "linear", "michaelis-menten", "Km")
    assert np.isnan(lin.estimate) and lin.note.startswith("not determined") and "saturation" in lin.note
    assert any("group few" in w for w in warnings)
    assert any("group dead" in w for w in warnings)
    assert any("group linear" in w for w in warnings)
    coop = out["cooperativity"].frame.set_index("group")
    assert coop.loc["few", "verdict"] == "not resolved by these data"


def test_curves_and_correlations(result) -> None:
    out, _ = result
    cur = out["curves"].frame
    c = cur[(cur.group == "mm") & (cur.model == "michaelis-menten")]
    assert len(c) > 50 and (c.lower <= c.y).all() and (c.y <= c.upper).all()
    assert out["curves"].units["y"] == "uM/min"
    cor = out["correlations"].frame
    r = cor[(cor.group == "mm") & (cor.model == "michaelis-menten") & (cor.parameter_a == "Vmax")
            & (cor.parameter_b == "Km")].r.iloc[0]
    assert 0 < r < 1  # Vmax and Km estimates are positively correlated (as in Bates & Watts' Puromycin fit)


def test_puromycin_linear_transforms_in_diagnostics() -> None:
    # Reference pack section 2.3 (computed, unweighted OLS on the treated Puromycin data):
    # LB 195.8027 / 0.048407; EH 193.8677 / 0.043524; HW 216.2169 / 0.067915 (Vmax / Km), rel 1e-6
    raw = pd.read_csv(DATA / "puromycin.csv")
    t = raw[raw.state == "treated"]
    out, _ = _run(pd.DataFrame(_rows("treated", t.conc.to_numpy(), t.rate.to_numpy())),
                  {"rate": "count/min**2", "substrate": "ppm"}, models=["michaelis-menten"], profile=False)
    d = out["diagnostics"].frame

    def est(plot: str, q: str) -> float:
        return float(d[(d["plot"] == plot) & (d.quantity == q)].y.iloc[0])

    np.testing.assert_allclose([est("lineweaver-burk", "Vmax"), est("lineweaver-burk", "Km")],
                               [195.8027, 0.048407], rtol=1e-5)
    np.testing.assert_allclose([est("eadie-hofstee", "Vmax"), est("eadie-hofstee", "Km")],
                               [193.8677, 0.043524], rtol=1e-5)
    np.testing.assert_allclose([est("hanes-woolf", "Vmax"), est("hanes-woolf", "Km")],
                               [216.2169, 0.067915], rtol=1e-5)
    # the NLS fit itself: An Introduction to R, section 11.7.1: Vm 212.68370711, K 0.06412123
    f = out["fits"].frame
    np.testing.assert_allclose(f[f.parameter == "Vmax"].estimate.iloc[0], 212.68370711, rtol=1e-5)
    # no enzyme unit given -> kcat not derived, with the reason
    kcat = f[f.parameter == "kcat"].iloc[0]
    assert np.isnan(kcat.estimate) and "not determined" in kcat.note
    # Hill-plot points exist (Vmax from the MM fit) and extreme points are marked unstable
    hill = d[(d["plot"] == "hill") & (d.quantity == "point")]
    assert len(hill) == 12 and hill.unstable.any() and not hill.unstable.all()


def test_hill_plot_slope_on_exact_hill_data() -> None:
    # Reference pack section 6: log10(v/(Vmax - v)) = h log10 S - h log10 K0.5 for the Hill equation;
    # noise-free data (Vmax 1, K0.5 3, h 2.5) must give slope 2.5 and intercept -2.5 log10 3.
    s = np.geomspace(1, 9, 9)
    v = s**2.5 / (3**2.5 + s**2.5)
    out, _ = _run(pd.DataFrame(_rows("h", s, v)), models=["hill"], profile=False)
    d = out["diagnostics"].frame
    slope = d[(d["plot"] == "hill") & (d.quantity == "slope")].y.iloc[0]
    icpt = d[(d["plot"] == "hill") & (d.quantity == "intercept")].y.iloc[0]
    np.testing.assert_allclose([slope, icpt], [2.5, -2.5 * np.log10(3)], rtol=1e-6)
    # K0.5 = 10^(-intercept/slope) from the same line: 3
    k05 = d[(d["plot"] == "hill") & (d.quantity == "K0.5")].y.iloc[0]
    np.testing.assert_allclose(k05, 3.0, rtol=1e-6)


def test_setup_errors_raise_fit_error() -> None:
    frame = pd.DataFrame(_rows("g", [1, 2, 4, 8], [1, 2, 3, 3.5]))
    with pytest.raises(FitError, match="did you mean 'hill'"):
        _run(frame, models=["hil"])
    with pytest.raises(FitError, match="no column 'inhibitor'"):
        _run(frame.drop(columns="inhibitor"), models=["competitive"])
    with pytest.raises(FitError, match="no parameter 'Kx'"):
        _run(frame, models=["michaelis-menten"], fixed={"michaelis-menten": {"Kx": 1}})


def test_fixed_start_and_weighting_options() -> None:
    rng = np.random.default_rng(3)
    s = np.repeat([1, 2, 5, 10, 20, 50.0], 3)
    v = 10 * s / (5 + s) * (1 + 0.02 * rng.standard_normal(s.size))
    frame = pd.DataFrame(_rows("g", s, v))
    for weighting in ("none", "relative", "replicate"):
        out, _ = _run(frame, models=["michaelis-menten"], weighting=weighting, profile=False)
        km = _param(out["fits"].frame, "g", "michaelis-menten", "Km")
        assert km.success and abs(km.estimate - 5) < 5 * km.stderr, weighting
    out, _ = _run(frame, models=["hill"], fixed={"hill": {"h": 1}}, start={"hill": {"K0.5": 3}}, profile=False)
    h = _param(out["fits"].frame, "g", "hill", "h")
    assert h.fixed and h.estimate == 1 and h.stderr == 0
    # with h fixed at 1 the Hill fit is the Michaelis-Menten fit (same equation)
    out2, _ = _run(frame, models=["michaelis-menten"], profile=False)
    np.testing.assert_allclose(_param(out["fits"].frame, "g", "hill", "K0.5").estimate,
                               _param(out2["fits"].frame, "g", "michaelis-menten", "Km").estimate, rtol=1e-8)


def test_inhibition_matrix_prefers_the_simulated_mechanism() -> None:
    # invented data: competitive inhibition (Vmax 10, Km 4, Kic 2), 6 x 4 matrix in duplicate, noise SD 0.1
    rng = np.random.default_rng(5)
    s, i = (a.ravel().repeat(2) for a in np.meshgrid([1, 2, 5, 10, 20, 50.0], [0, 1, 3, 10.0]))
    v = 10 * s / (4 * (1 + i / 2) + s) + 0.1 * rng.standard_normal(s.size)
    frame = pd.DataFrame(_rows("inh", s, v))
    frame["inhibitor"] = i
    out, _ = _run(frame, models=["competitive", "uncompetitive", "mixed", "noncompetitive"], profile=False)
    comp = out["model_comparison"].frame
    assert set(comp.selected_model) == {"competitive"}, comp[["model", "aicc", "p", "selection_reason"]]
    mixed = comp[comp.model == "mixed"]
    assert set(mixed.f_test_against) == {"competitive", "uncompetitive", "noncompetitive"}
    kic = _param(out["fits"].frame, "inh", "competitive", "Kic")
    assert abs(kic.estimate - 2) < 4 * kic.stderr and kic.unit == "uM"


def test_unknown_flag_names_and_missing_groups_do_not_break_the_fit() -> None:
    """A lab plugin may set flags of its own ('spike'); a group value may be missing: the fit goes on."""
    from vzero.data import Table
    from vzero.manager import make_manager
    from vzero.params import validate
    from vzero.plugins.fit.stage import FitStage
    from vzero.stage import StageInput

    s = np.repeat([1.0, 2.0, 5.0, 10.0, 20.0, 50.0], 2)
    rate = 10.0 * s / (5.0 + s)
    frame = pd.DataFrame({"well": [f"A{i + 1}" for i in range(s.size)], "group": ["g"] * (s.size - 1) + [None],
                          "role": "sample", "substrate": s, "rate": rate, "rate_stderr": 0.1,
                          "flags": ["spike"] + [""] * (s.size - 1)})
    settings, problems = validate(FitStage.params, {"models": ["michaelis-menten"]})
    assert not problems
    said: list[str] = []
    data = StageInput({"rates": Table(frame, {"rate": "uM/min", "substrate": "uM"})}, None, {}, {},
                      make_manager(autoload=False).registry, said.append)
    fits = FitStage(**settings).run(data).artifacts["fits"].frame
    assert set(fits["group"]) == {"g"}  # the group "" (one well, no substrate series) is skipped, in one line
    assert said == ["fit: not fitted where the model cannot apply: michaelis-menten on  (no substrate series "
                    "without inhibitor)"]
    assert fits.loc[(fits["group"] == "g") & (fits["parameter"] == "Km"), "n_points"].iloc[0] == s.size - 1


def test_reversed_bounds_are_a_recipe_error() -> None:
    from vzero.params import validate
    from vzero.plugins.fit.stage import FitStage

    _, problems = validate(FitStage.params, {"bounds": {"michaelis-menten": {"Km": [200, 100]}}})
    assert problems and "low < high" in problems[0][1]


def test_plotting_grid_spans_every_observed_concentration() -> None:
    # a fitted curve drawn on the grid must reach past the highest and lowest point it is drawn with: linear
    # from 0 when the concentrations span at most 30-fold, log-spaced beyond that
    from vzero.plugins.fit.diagnostics import grid

    narrow = np.array([2.0, 5.0, 10.0, 20.0, np.nan])
    g = grid(narrow)
    assert g[0] == 0.0 and g[-1] > 20.0 and np.all(np.diff(g) > 0)
    wide = np.array([0.01, 0.1, 1.0, 10.0, 0.0])
    g = grid(wide)
    assert 0 < g[0] < 0.01 and g[-1] > 10.0
    assert np.allclose(np.diff(np.log(g)), np.log(g[1] / g[0]))  # evenly spaced in log
