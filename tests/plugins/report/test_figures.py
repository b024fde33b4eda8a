"""Figure helpers: the rate lines drawn over progress curves, big plates, number formatting."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from vzero.data import Traces
from vzero.plugins.report import content, figures


def _traces(signal: np.ndarray, time: np.ndarray, wells: list[str]) -> Traces:
    return Traces("p", time, signal, np.isfinite(signal), np.zeros_like(signal, bool),
                  pd.DataFrame({"well": wells}), "AU")


def test_window_line_is_the_least_squares_line_for_the_window_method():
    """Reference: numpy.polyfit (an independent least-squares solver) on the reads inside each window."""
    rng = np.random.default_rng(7)
    t = np.arange(0.0, 300.0, 10.0)
    y = 0.1 + np.array([[1e-3], [2e-3], [5e-4]]) * t + rng.normal(0, 2e-3, (3, t.size))
    y[1, 4] = np.nan  # a missing read inside the window is skipped
    ws, we = np.array([0.0, 30.0, 50.0]), np.array([120.0, 200.0, 290.0])
    ref = []
    for i in range(3):
        keep = (t >= ws[i]) & (t <= we[i]) & np.isfinite(y[i])
        slope, icpt = np.polyfit(t[keep], y[i, keep], 1)
        ref.append((slope, icpt + slope * ws[i], icpt + slope * we[i]))
    ref_arr = np.array(ref)
    rates = pd.DataFrame({"well": ["A1", "A2", "A3"], "window_start_s": ws, "window_end_s": we,
                          "method": "window"})
    start, end = figures.window_lines(_traces(y, t, ["A1", "A2", "A3"]), rates, ref_arr[:, 0])
    assert_allclose(start, ref_arr[:, 1], rtol=1e-9)
    assert_allclose(end, ref_arr[:, 2], rtol=1e-9)


def test_tangent_for_methods_that_report_the_slope_at_the_window_start():
    """For a noise-free quadratic y = a + b·t + c·t² the slope at ts is b + 2c·ts (calculus) and the tangent
    starts at y(ts); the line drawn must be exactly that tangent."""
    t = np.arange(0.0, 400.0, 10.0)
    a, b, c = 0.05, 2e-3, -2e-6
    y = (a + b * t + c * t**2)[None, :]
    ts, te = 40.0, 300.0
    slope = np.array([b + 2 * c * ts])
    rates = pd.DataFrame({"well": ["B2"], "window_start_s": [ts], "window_end_s": [te], "method": ["auto"]})
    start, end = figures.window_lines(_traces(y, t, ["B2"]), rates, slope)
    assert_allclose(start, a + b * ts + c * ts**2, rtol=1e-9)
    assert_allclose(end, start + slope * (te - ts), rtol=1e-12)


def test_no_line_without_a_rate():
    t = np.arange(0.0, 100.0, 10.0)
    y = np.vstack([t * 1e-3, np.full(t.size, np.nan)])
    rates = pd.DataFrame({"well": ["A1", "A2"], "window_start_s": [0.0, np.nan], "window_end_s": [90.0, np.nan],
                          "method": "window"})
    start, end = figures.window_lines(_traces(y, t, ["A1", "A2"]), rates, np.array([np.nan, np.nan]))
    assert np.isnan(start).all() and np.isnan(end).all()


def test_1536_wells_are_subsampled_with_flagged_wells_first():
    from vzero.plugins.kinetics.wells import all_wells

    wells = all_wells(1536)
    t = np.arange(0.0, 60.0, 10.0)
    y = np.outer(np.linspace(0, 1e-3, 1536), t)
    flags = np.full(1536, "", dtype=object)
    flags[[5, 700, 1500]] = "noisy"
    rates = pd.DataFrame({"well": wells, "window_start_s": 0.0, "window_end_s": 50.0, "method": "window",
                          "flags": flags, "rate": 1.0})
    fig, note = figures.progress_grid(_traces(y, t, wells), rates, np.linspace(0, 1e-3, 1536), max_panels=200)
    assert note.startswith("200 of 1536 wells drawn")
    texts = {tx.get_text() for tx in fig.axes[0].texts}
    assert {wells[5], wells[700], wells[1500]} <= texts
    png, svg = figures.render(fig)
    assert png[:4] == b"\x89PNG" and b"<svg" in svg[:400]


def test_plate_map_places_wells_in_plate_geometry():
    """Well P24 of a 384-well plate is row 16, column 24 (ANSI/SLAS 4-2004 layout: 16 × 24)."""
    from vzero.plugins.kinetics.wells import all_wells

    wells = all_wells(384)
    rates = pd.DataFrame({"well": wells, "rate": np.arange(384.0), "role": "sample", "flags": ""})
    fig = figures.plate_map("big", rates, np.ones(384, bool), "µM/min")
    offsets = fig.axes[0].collections[0].get_offsets()
    assert_allclose(offsets[-1], [23, 15])
    assert_allclose(offsets[0], [0, 0])
    figures.render(fig)


@pytest.mark.parametrize(("value", "stderr", "text"), [
    (7.734365, 0.259343, "7.73 ± 0.26"),
    (209.5468, 18.2547, "210 ± 18"),
    (123033.2, 7277.69, "(1.230 ± 0.073) × 10⁵"),
    (2.348150, np.nan, "2.348"),
    (np.nan, 0.1, "—"),
])
def test_value_with_error_keeps_two_significant_figures_of_the_error(value, stderr, text):
    # convention of reporting an uncertainty to two significant figures and the value to the same decimal
    # place (common practice; e.g. the GUM, JCGM 100:2008, section 7.2.6)
    assert content.with_error(value, stderr) == text


def test_slug_and_units():
    assert figures.slug("VZ-7 wild type") == "vz-7-wild-type"
    assert figures.slug("***") == "unnamed"
    assert content.pretty_unit("uM/min") == "µM/min"
    assert content.pretty_unit("AU/s") == "AU/s"


def test_residuals_use_the_fitted_model_exactly(report_input):
    """The residual panel evaluates the fit plugin's model at each well; for Michaelis-Menten that must be the
    textbook v = Vmax·S/(Km + S) (Michaelis & Menten 1913; any biochemistry text)."""
    pytest.importorskip("vzero.plugins.fit.catalog")
    from vzero.plugins.fit.catalog import BY_NAME
    from vzero.plugins.report.build import _evaluators

    from .conftest import GROUP, KM, VMAX

    ev = _evaluators(report_input.tables["fits"].frame, GROUP, "substrate", BY_NAME)
    s = np.array([0.0, 10.0, 100.0, 1000.0])
    assert_allclose(ev["michaelis-menten"](s), VMAX * s / (KM + s), rtol=1e-12)


def test_wells_used_follow_the_fit_stages_rule_per_model() -> None:
    """A well holding inhibitor is fitted only by a model with an inhibitor variable (the fit stage's rule,
    plugins/fit/run.py); the report must not mark it as used when only substrate models were fitted."""
    import numpy as np
    import pandas as pd

    rates = pd.DataFrame({
        "well": ["A1", "A2", "A3", "A4"], "role": ["sample", "sample", "sample", "blank"],
        "substrate": [10.0, 10.0, np.nan, 10.0], "inhibitor": [0.0, 5.0, 0.0, 0.0],
        "rate": [1.0, 0.5, 0.7, 0.0], "flags": ["", "", "", ""],
    })
    from vzero.plugins.fit.catalog import BY_NAME

    substrate_only = {"models": ["michaelis-menten", "hill"]}
    used, why = content.fit_use(rates, substrate_only, BY_NAME)
    assert used.tolist() == [True, False, False, False]
    assert "inhibitor" in why[1] and "no substrate concentration" in why[2] and "blank" in why[3]
    with_inhibition = {"models": ["michaelis-menten", "competitive"]}
    used, _ = content.fit_use(rates, with_inhibition, BY_NAME)
    assert used.tolist() == [True, True, False, False]
    # a model unknown to the report: any well with a rate
    used, _ = content.fit_use(rates, {"models": ["a-lab-model"]}, BY_NAME)
    assert used.tolist() == [True, True, True, False]
