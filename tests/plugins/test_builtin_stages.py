"""Each backbone stage on its own: blank subtraction, fixed-window slopes, Beer–Lambert conversion."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from vzero.data import Table, Traces
from vzero.params import validate
from vzero.plugins.blank import MeanBlank
from vzero.plugins.convert import BeerLambert
from vzero.plugins.rates import WindowRates
from vzero.plugins.rates.window import window_slopes
from vzero.stage import StageInput


def _input(artifacts, warnings=None):
    return StageInput(artifacts=artifacts, plate={"name": "p"}, inputs={}, recipe={}, registry=None,
                      warn=(warnings if warnings is not None else []).append)


def _stage(cls, **written):
    settings, problems = validate(cls.params, written)
    assert not problems
    return cls(**settings)


def _traces(signal, roles, time=None, **well_cols):
    n, m = signal.shape
    time = np.arange(m, dtype=float) * 10.0 if time is None else time
    wells = pd.DataFrame({"well": [f"A{i + 1}" for i in range(n)], "role": roles, **well_cols})
    return Traces("p", time, signal, np.isfinite(signal), np.zeros_like(signal, bool), wells, "AU",
                  {"substrate": "uM", "enzyme": "nM"} if "substrate" in well_cols else {})


def test_window_slopes_match_numpy_polyfit():
    # Reference: numpy.polyfit (an independent least-squares line) on each well's window.
    rng = np.random.default_rng(1)
    t = np.arange(0.0, 200.0, 5.0)
    y = 0.1 + rng.uniform(-1e-3, 1e-3, (7, 1)) * t + rng.normal(0, 1e-3, (7, t.size))
    y[2, 3] = np.nan
    res = window_slopes(t, y, 20.0, 150.0)
    for i in range(7):
        sel = (t >= 20) & (t <= 150) & np.isfinite(y[i])
        (slope, _), cov = np.polyfit(t[sel], y[i, sel], 1, cov=True)
        assert_allclose(res.v0[i], slope, rtol=1e-10)
        assert_allclose(res.stderr[i], np.sqrt(cov[0, 0]), rtol=1e-8)
        assert res.n_points[i] == sel.sum()
    assert res.window_start_s[0] == 20 and res.window_end_s[0] == 150


def test_window_flags_bad_wells_without_raising():
    t = np.arange(0.0, 60.0, 10.0)
    y = np.vstack([np.full(t.size, np.nan), np.where(t < 10, 1.0, np.nan), np.full(t.size, 0.3), 0.01 * t])
    res = window_slopes(t, y, 0, 60)
    assert np.isnan(res.v0[:3]).all() and res.v0[3] == pytest.approx(0.01)
    assert res.flags[0] & 128 and res.flags[1] & 64  # all missing, too few points
    assert res.flags[2] & 256  # constant well: no signal


def test_blank_subtracts_matching_mean():
    t = np.arange(5.0)
    drift = 0.01 * t
    signal = np.vstack([0.5 + 0.02 * t + drift, 0.2 + 0.05 * t + drift, 0.5 + drift, 0.2 + drift])
    traces = _traces(signal, ["sample", "sample", "blank", "blank"], time=t, substrate=[5.0, 1.0, 5.0, 1.0],
                     enzyme=[1.0, 1.0, 0.0, 0.0])
    out = _stage(MeanBlank, match="substrate").run(_input({"traces": traces})).artifacts["traces"]
    assert_allclose(out.signal[0], 0.02 * t, atol=1e-12)
    assert_allclose(out.signal[1], 0.05 * t, atol=1e-12)
    assert out is not traces and traces.signal[0, 1] == signal[0, 1]  # input not mutated
    pooled = _stage(MeanBlank, match="none").run(_input({"traces": traces})).artifacts["traces"]
    assert_allclose(pooled.signal[0], 0.5 + 0.02 * t - 0.35, atol=1e-12)


def test_blank_constant_minus_constant_is_zero():
    signal = np.full((3, 6), 0.42)
    traces = _traces(signal, ["sample", "blank", "blank"])
    out = _stage(MeanBlank).run(_input({"traces": traces})).artifacts["traces"]
    assert_allclose(out.signal, 0.0, atol=0)


def test_window_stage_builds_rates_table():
    t = np.arange(0.0, 100.0, 10.0)
    traces = _traces(np.vstack([0.001 * t, 0.002 * t]), ["sample", "sample"], time=t, substrate=[1.0, 2.0],
                     enzyme=[1.0, 1.0])
    table = _stage(WindowRates, start="0 s", end="50 s").run(_input({"traces": traces})).artifacts["rates"]
    f = table.frame
    assert list(f["rate"]) == pytest.approx([0.001, 0.002])
    assert set(f["rate_unit"]) == {"AU/s"} and table.units["substrate"] == "uM"
    assert list(f["window_end_s"]) == [50.0, 50.0]


def _rates(rate_au_per_s):
    frame = pd.DataFrame({"well": ["A1"], "role": ["sample"], "rate": [rate_au_per_s], "rate_stderr": [0.0],
                          "enzyme": [np.nan]})
    return Table(frame, {"rate": "AU/s"}, {"signal_unit": "AU"})


@pytest.mark.parametrize(("path", "expected"), [("1 cm", -10.0), ("0.55 cm", -10.0 / 0.55)])
def test_beer_lambert_nadh_worked_example(path, expected):
    # Worked conversion from the reference pack (REFERENCES.md section 4, computed, exact arithmetic):
    # dA340/dt = -0.0622 per min with ε(NADH, 340 nm) = 6220 M^-1 cm^-1 (Horecker & Kornberg 1948)
    # gives -10.0 µM/min in a 1 cm cuvette and -18.18 µM/min at l = 0.55 cm.
    stage = _stage(BeerLambert, epsilon="6220 M^-1 cm^-1", pathlength=path, output_unit="uM/min")
    out = stage.run(_input({"rates": _rates(-0.0622 / 60.0)})).artifacts["rates"]
    assert_allclose(out.frame["rate"].iloc[0], expected, rtol=1e-12)
    assert out.units["rate"] == "uM/min"


def test_beer_lambert_turnover_and_direction():
    frame = pd.DataFrame({"well": ["A1"], "role": ["sample"], "rate": [-0.0622 / 60.0], "rate_stderr": [1e-6],
                          "enzyme": [10.0]})
    table = Table(frame, {"rate": "AU/s", "enzyme": "nM"}, {"signal_unit": "AU"})
    stage = _stage(BeerLambert, epsilon="6220 M^-1 cm^-1", pathlength="1 cm", direction="decrease",
                   output_unit="uM/min")
    out = stage.run(_input({"rates": table})).artifacts["rates"].frame
    assert_allclose(out["rate"].iloc[0], 10.0, rtol=1e-12)
    # 10 µM/min over 10 nM enzyme = 1000 per min = 16.67 per second
    assert_allclose(out["turnover"].iloc[0], 1000.0 / 60.0, rtol=1e-12)


def test_beer_lambert_needs_exactly_one_pathlength_source():
    settings, _ = validate(BeerLambert.params, {"epsilon": "6220 M^-1 cm^-1"})
    assert BeerLambert.check_settings(settings)[0][0] == "pathlength"
    settings, _ = validate(BeerLambert.params, {"epsilon": "6220 M^-1 cm^-1", "pathlength": "1 cm",
                                                "fill_volume": "200 uL", "plate_type": "96-flat"})
    assert BeerLambert.check_settings(settings)
    settings, _ = validate(BeerLambert.params, {"epsilon": "6220 M^-1 cm^-1", "fill_volume": "200 uL",
                                                "plate_type": "96-flat"})
    assert BeerLambert.check_settings(settings) == []
    # a plate type or a fill volume alone is one (incomplete) source: said as such, not as a missing source
    settings, _ = validate(BeerLambert.params, {"epsilon": "6220 M^-1 cm^-1", "fill_volume": "200 uL"})
    assert [f for f, _ in BeerLambert.check_settings(settings)] == ["fill_volume"]
    settings, _ = validate(BeerLambert.params, {"epsilon": "6220 M^-1 cm^-1", "pathlength": "1 cm",
                                                "plate_type": "96-flat"})
    assert [f for f, _ in BeerLambert.check_settings(settings)] == ["pathlength"]


def test_beer_lambert_pathlength_from_fill_volume():
    from vzero.plugins.convert.pathlength import pathlength_from_volume

    stage = _stage(BeerLambert, epsilon="6220 M^-1 cm^-1", fill_volume="200 uL", plate_type="96-flat",
                   output_unit="uM/min")
    warnings: list[str] = []
    out = stage.run(_input({"rates": _rates(0.0622 / 60.0)}, warnings)).artifacts["rates"].frame
    cm = float(pathlength_from_volume(200.0, "96-flat"))
    assert 0.5 < cm < 0.7  # 200 µL in a standard 96-well (REFERENCES section 7: about 0.6 cm)
    assert_allclose(out["rate"].iloc[0], 10.0 / cm, rtol=1e-12)
    assert any("flat meniscus" in w for w in warnings)


def test_standard_curve_converts_fluorescence_rates():
    from vzero.plugins.convert import StandardCurveConvert

    # 4 standards of product (µM) read flat at 120 RFU/µM + 50; one sample well rising 2.4 RFU/s.
    t = np.arange(0.0, 60.0, 10.0)
    levels = np.array([0.0, 1.0, 2.0, 4.0])
    std = 50.0 + 120.0 * levels[:, None] + 0.0 * t
    sample = 50.0 + 2.4 * t
    signal = np.vstack([std, sample])
    wells = pd.DataFrame({"well": ["A1", "A2", "A3", "A4", "B1"], "role": ["standard"] * 4 + ["sample"],
                          "product": [*levels, np.nan]})
    traces = Traces("p", t, signal, np.isfinite(signal), np.zeros_like(signal, bool), wells, "RFU",
                    {"product": "uM"})
    frame = pd.DataFrame({"well": ["B1"], "role": ["sample"], "rate": [2.4], "rate_stderr": [0.0]})
    rates = Table(frame, {"rate": "RFU/s"}, {"signal_unit": "RFU"})
    stage = _stage(StandardCurveConvert, output_unit="uM/min")
    out = stage.run(_input({"traces": traces, "rates": rates}))
    assert_allclose(out.artifacts["rates"].frame["rate"].iloc[0], 2.4 / 120.0 * 60.0, rtol=1e-9)
    assert "calibration" in out.record


def test_standard_curve_warns_about_wells_beyond_the_top_standard():
    from vzero.plugins.convert import StandardCurveConvert

    t = np.arange(0.0, 60.0, 10.0)
    levels = np.array([0.0, 1.0, 2.0, 4.0])
    signal = np.vstack([50.0 + 120.0 * levels[:, None] + 0.0 * t, 50.0 + 2.4 * t, 400.0 + 5.0 * t])
    wells = pd.DataFrame({"well": ["A1", "A2", "A3", "A4", "B1", "B2"], "role": ["standard"] * 4 + ["sample"] * 2,
                          "product": [*levels, np.nan, np.nan]})
    traces = Traces("p", t, signal, np.isfinite(signal), np.zeros_like(signal, bool), wells, "RFU",
                    {"product": "uM"})
    frame = pd.DataFrame({"well": ["B1", "B2"], "role": ["sample"] * 2, "rate": [2.4, 5.0], "rate_stderr": [0.0, 0.0]})
    warnings: list[str] = []
    _stage(StandardCurveConvert).run(_input({"traces": traces, "rates": Table(frame, {"rate": "RFU/s"},
                                                                               {"signal_unit": "RFU"})}, warnings))
    # B2 reaches 645 RFU, above the top standard's 530 RFU (4 uM); B1 stays below
    assert any("1 sample well(s) read beyond the highest standard" in w and "B2" in w for w in warnings)


def test_window_flags_noisy_slopes_but_keeps_them():
    # SNR = |v0| / SE(v0) below 10 (docs/rates.md): flagged NOISY, rate still reported
    rng = np.random.default_rng(3)
    t = np.arange(0.0, 100.0, 10.0)
    y = np.vstack([1e-3 * t + rng.normal(0, 1e-4, t.size), 1e-6 * t + rng.normal(0, 1e-3, t.size)])
    res = window_slopes(t, y, 0.0, 100.0)
    assert not res.flags[0] & 32 and res.flags[1] & 32  # Flag.NOISY
    assert np.isfinite(res.v0).all()


def test_standard_curve_unit_from_the_header_or_the_step():
    # the standards' concentration unit may come from the layout header or from the step's `unit`; with
    # neither, the step refuses before any work, naming the column
    from vzero.errors import StageError
    from vzero.plugins.convert import StandardCurveConvert

    wells = pd.DataFrame({"well": ["A1", "A2", "B1"], "role": ["standard", "standard", "sample"],
                          "product": [0.0, 2.0, np.nan]})
    header = _input({"layout": wells, "well_units": {"product": "uM"}})
    bare = _input({"layout": wells, "well_units": {}})
    assert _stage(StandardCurveConvert).preflight(header) is None
    assert _stage(StandardCurveConvert, unit="uM").preflight(bare) is None
    with pytest.raises(StageError, match="'product' has no unit"):
        _stage(StandardCurveConvert).preflight(bare)
    samples_only = wells.assign(role="sample")
    with pytest.raises(StageError, match=r"needs wells with role 'standard'.*has 0 standard wells"):
        _stage(StandardCurveConvert).preflight(_input({"layout": samples_only, "well_units": {"product": "uM"}}))
    with pytest.raises(StageError, match="layout column 'substrate'"):
        _stage(StandardCurveConvert, column="substrate").preflight(header)


def test_standard_curve_names_the_standard_wells_it_leaves_out():
    from vzero.plugins.convert import StandardCurveConvert

    t = np.arange(0.0, 60.0, 10.0)
    levels = np.array([0.0, 1.0, 2.0, 4.0, 8.0])
    signal = 50.0 + 120.0 * levels[:, None] + 0.0 * t
    signal[2] = np.nan  # A3 has no usable read
    signal = np.vstack([signal, 50.0 + 2.4 * t])
    wells = pd.DataFrame({"well": ["A1", "A2", "A3", "A4", "A5", "B1"], "role": ["standard"] * 5 + ["sample"],
                          "product": [*levels, np.nan]})
    traces = Traces("p", t, signal, np.isfinite(signal), np.zeros_like(signal, bool), wells, "RFU",
                    {"product": "uM"})
    frame = pd.DataFrame({"well": ["B1"], "role": ["sample"], "rate": [2.4], "rate_stderr": [0.0]})
    warnings: list[str] = []
    out = _stage(StandardCurveConvert, output_unit="uM/min").run(
        _input({"traces": traces, "rates": Table(frame, {"rate": "RFU/s"}, {"signal_unit": "RFU"})}, warnings))
    assert any(w.startswith("1 standard well(s) have no usable read") and w.endswith("curve: A3.") for w in warnings)
    assert_allclose(out.artifacts["rates"].frame["rate"].iloc[0], 2.4 / 120.0 * 60.0, rtol=1e-9)
