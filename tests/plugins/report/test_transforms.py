"""The transforms of a group stand on its selected fit: its wells, its model's curve, its Vmax."""

from __future__ import annotations

import html
import re
from pathlib import Path

import numpy as np
import pandas as pd
from numpy.testing import assert_allclose
from vzero.plugins.report import transform_figures as tf


def test_a_substrate_inhibition_curve_in_double_reciprocal_form():
    """Reference: the reciprocal of the substrate-inhibition (Haldane) rate law, 1/v = 1/Vmax + Km/(Vmax·S) +
    S/(Vmax·Ksi) (A. Cornish-Bowden, Fundamentals of Enzyme Kinetics, 4th ed., 2012, section 5.9): a straight
    line in 1/S only when Ksi is infinite, so the curve must bend up at high S (small 1/S)."""
    vmax, km, ksi = 2.0, 30.0, 400.0
    s = np.geomspace(1.0, 5000.0, 50)
    curves = tf.model_curves(lambda x: vmax * x / (km + x + x**2 / ksi), s, np.nan,
                             ["lineweaver-burk", "hanes-woolf", "eadie-hofstee"])
    x, y = curves["lineweaver-burk"]
    assert_allclose(y, 1 / vmax + km / (vmax / x) + (1 / x) / (vmax * ksi), rtol=1e-12)
    x, y = curves["hanes-woolf"]  # S/v = Km/Vmax + S/Vmax + S²/(Vmax·Ksi): the same law multiplied by S
    assert_allclose(y, km / vmax + x / vmax + x**2 / (vmax * ksi), rtol=1e-12)
    assert np.all(np.diff(curves["eadie-hofstee"][0]) != 0)


def test_the_points_are_the_wells_of_the_selected_fit():
    rates = pd.DataFrame({"well": ["A1", "A2", "A3", "A4", "A5"], "rate": [1.0, 2.0, np.nan, 3.0, 4.0],
                          "substrate": [1.0, 2.0, 3.0, 4.0, 5.0], "inhibitor": [0.0, 0.0, 0.0, 5.0, np.nan]})
    in_group = np.array([True, True, True, True, False])
    used = np.array([False, True, True, True, True])
    mask = tf.selected_points(rates, in_group, used, "substrate", "inhibitor")
    assert mask.tolist() == [False, True, False, False, False]  # not fitted; no rate; inhibited; other group


def test_the_report_of_a_substrate_inhibition_group_says_what_its_transforms_stand_on(fluor_run: Path):
    page = html.unescape((fluor_run / "report" / "report.html").read_text("utf-8"))
    caption = re.search(r'<figure id="fig-transforms_[^"]+">.*?<figcaption>(.*?)</figcaption>', page, re.S)
    assert caption is not None
    text = caption.group(1)
    n = int(re.search(r"Drawn from the (\d+) wells the group's selected fit \(([^)]+)\) used", text).group(1))
    fits = pd.read_csv(fluor_run / "fits.csv")
    chosen = pd.read_csv(fluor_run / "model_comparison.csv")
    pick = str(chosen.loc[chosen["selected"].astype(str).str.lower() == "true", "model"].iloc[0])
    assert pick == "substrate-inhibition" and "(substrate inhibition)" in text  # the model's printed title
    assert n == int(fits.loc[fits["model"] == pick, "n_points"].iloc[0])  # the same wells as the fit
    assert "Michaelis–Menten diagnostics" not in text and "No Hill plot" in text
