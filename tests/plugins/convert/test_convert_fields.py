"""The convert stage's outputs and checks against hand calculations: the standard error of a converted rate
in another output unit, the edge of the "beyond the top standard" warning, the water-peak pathlength per
well (Beer–Lambert, rate / (ε · l)) and the checks on its file."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from vzero.data import Table, Traces
from vzero.errors import InputFileError
from vzero.params import validate
from vzero.plugins.convert import BeerLambert, StandardCurveConvert
from vzero.stage import StageInput

T = np.arange(0.0, 60.0, 10.0)
LEVELS = np.array([0.0, 1.0, 2.0, 4.0])  # µM of product; read flat at 120 RFU/µM + 50 (top standard 530 RFU)


def _stage(cls, **written):
    settings, problems = validate(cls.params, written)
    assert not problems
    return cls(**settings)


def _input(artifacts, warnings=None, inputs=None):
    return StageInput(artifacts=artifacts, plate={"name": "p"}, inputs=inputs or {}, recipe={}, registry=None,
                      warn=(warnings if warnings is not None else []).append)


def _standard_plate(samples: np.ndarray) -> Traces:
    signal = np.vstack([50.0 + 120.0 * LEVELS[:, None] + 0.0 * T, samples])
    n = len(samples)
    wells = pd.DataFrame({"well": ["A1", "A2", "A3", "A4", *[f"B{i + 1}" for i in range(n)]],
                          "role": ["standard"] * 4 + ["sample"] * n, "product": [*LEVELS, *[np.nan] * n]})
    return Traces("p", T, signal, np.isfinite(signal), np.zeros_like(signal, bool), wells, "RFU", {"product": "uM"})


def test_standard_curve_rate_and_error_in_another_unit() -> None:
    # exact standards: slope 120 RFU/µM with zero standard error, so SE(conc rate) = SE(rate) / slope;
    # 2.4 RFU/s ± 0.6 → 0.02 µM/s ± 0.005 = 1200 ± 300 nM/min
    traces = _standard_plate(np.atleast_2d(50.0 + 2.4 * T))
    frame = pd.DataFrame({"well": ["B1"], "role": ["sample"], "rate": [2.4], "rate_stderr": [0.6]})
    out = _stage(StandardCurveConvert, output_unit="nM/min").run(
        _input({"traces": traces, "rates": Table(frame, {"rate": "RFU/s"}, {"signal_unit": "RFU"})}))
    got = out.artifacts["rates"].frame
    assert_allclose(got["rate"].iloc[0], 1200.0, rtol=1e-9)
    assert_allclose(got["rate_stderr"].iloc[0], 300.0, rtol=1e-9)


def test_beyond_the_top_standard_by_less_than_one_signal_unit() -> None:
    # peaks 530.5 and 529.5 RFU around the top standard's 530 RFU: only the first is beyond it
    samples = np.vstack([430.5 + 2.0 * T, 429.5 + 2.0 * T])  # T ends at 50 s
    frame = pd.DataFrame({"well": ["B1", "B2"], "role": ["sample"] * 2, "rate": [2.0, 2.0], "rate_stderr": [0.0, 0.0]})
    warnings: list[str] = []
    _stage(StandardCurveConvert).run(_input({"traces": _standard_plate(samples),
                                             "rates": Table(frame, {"rate": "RFU/s"}, {"signal_unit": "RFU"})},
                                            warnings))
    beyond = [w for w in warnings if "beyond the highest standard" in w]
    assert len(beyond) == 1 and "1 sample well(s)" in beyond[0] and "B1" in beyond[0] and "B2" not in beyond[0]


def _absorbance(rate: float) -> Table:
    frame = pd.DataFrame({"well": ["A1", "A2", "A3"], "role": ["sample"] * 3, "rate": [rate] * 3,
                          "rate_stderr": [0.0] * 3, "enzyme": [np.nan] * 3})
    return Table(frame, {"rate": "AU/s"}, {"signal_unit": "AU"})


def test_water_peak_pathlength_per_well() -> None:
    # l = (A977 − A900) / 0.18 cm⁻¹ (water_k, common practice); rate = (dA/dt) / (ε l)
    csv = b"well,a977,a900\nA1,0.108,0.018\nA2,0.117,0.018\n"
    stage = _stage(BeerLambert, epsilon="6220 M^-1 cm^-1", water_peak=True, output_unit="uM/min")
    warnings: list[str] = []
    out = stage.run(_input({"rates": _absorbance(0.0622 / 60.0)}, warnings,
                           {"water_peak_reads": SimpleNamespace(name="wp.csv", data=csv)})).artifacts["rates"]
    path = np.array([0.09 / 0.18, 0.099 / 0.18])
    assert_allclose(out.frame["pathlength_cm"].to_numpy()[:2], path, rtol=1e-9)
    assert_allclose(out.frame["rate"].to_numpy()[:2], 10.0 / path, rtol=1e-9)
    assert np.isnan(out.frame["rate"].iloc[2])
    assert any("1 well(s) (A3)" in w for w in warnings)


def test_water_peak_file_checks() -> None:
    stage = _stage(BeerLambert, epsilon="6220 M^-1 cm^-1", water_peak=True)
    with pytest.raises(InputFileError, match="names no water_peak_reads file"):
        stage.preflight(_input({}))
    with pytest.raises(InputFileError, match="well A2 has two rows"):
        stage.run(_input({"rates": _absorbance(1e-3)}, inputs={"water_peak_reads": SimpleNamespace(
            name="wp.csv", data=b"well,a977,a900\nA1,0.1,0.01\nA2,0.1,0.01\nA02,0.1,0.01\n")}))
    with pytest.raises(InputFileError, match="columns well, a977, a900"):
        stage.run(_input({"rates": _absorbance(1e-3)}, inputs={"water_peak_reads": SimpleNamespace(
            name="wp.csv", data=b"well,peak\nA1,0.1\n")}))
    # a given pathlength needs no file
    assert _stage(BeerLambert, epsilon="6220 M^-1 cm^-1", pathlength="1 cm").preflight(_input({})) is None


def test_straight_walled_well_holds_area_times_height() -> None:
    # V = A·h for a cylinder or a square prism (no taper): 1 cm² = 100 mm² holds 100 µL per mm of height
    from vzero.plugins.convert.pathlength import WellGeometry, volume_to_height_inverse

    cyl = WellGeometry("cyl", "round", np.sqrt(400 / np.pi), np.sqrt(400 / np.pi), 20.0, "test shape")
    box = WellGeometry("box", "square", 10.0, 10.0, 20.0, "test shape")
    for g in (cyl, box):
        assert_allclose(volume_to_height_inverse(g, np.array([1.0, 2.5])), [100.0, 250.0], rtol=1e-12)
        assert g.capacity_ul == pytest.approx(2000.0, rel=1e-12)
