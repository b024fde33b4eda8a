"""Enzyme lots and product inhibition in a whole run, and the fitted curves in the EnzymeML export.

The plate is invented: Michaelis-Menten with competitive product inhibition, rows A-D made with enzyme lot
"A", rows E-G with lot "B" at 60 % of its activity, row H blanks; the curves are computed with scipy's
Lambert W (scipy.special.lambertw, independent of the code under test) and read as absorbance
(Beer-Lambert, 18000 M^-1 cm^-1, 0.5 cm) with seeded noise. The export is checked against the published
EnzymeML v2 JSON Schema and read back.
"""

from __future__ import annotations

import json
from pathlib import Path

import jsonschema
import numpy as np
import pandas as pd
import pytest
from scipy import special
from vzero.errors import VzeroError
from vzero.plugins.export import export
from vzero.run.runner import run

from tests.plugins.export.test_exports import _schema

VMAX, KM, KP, F_B = 4.0, 30.0, 25.0, 0.6  # uM/min, uM, uM, activity of lot B relative to lot A
AU_PER_UM = 18000e-6 * 0.5
T = np.arange(0.0, 1201.0, 30.0)  # s
WELLS = [f"{r}{c}" for r in "ABCDEFGH" for c in range(1, 13)]


def _product(s0: float, minutes: np.ndarray) -> np.ndarray:
    """P(t) for v = V·S/(Km(1 + P/Kp) + S): with A = Km(1 + S0/Kp), α = 1 − Km/Kp < 0 here, u = α·S/A solves
    u·e^u = (α·S0/A)·exp((α·S0 − V·t)/A) on the principal branch of Lambert's W."""
    a, alpha = KM * (1 + s0 / KP), 1 - KM / KP
    u = special.lambertw(alpha * s0 / a * np.exp((alpha * s0 - VMAX * minutes) / a), 0).real
    return s0 - a * u / alpha


def _plate(folder: Path, *, with_lots: bool) -> Path:
    rng = np.random.default_rng(7)
    folder.mkdir(parents=True, exist_ok=True)
    signal = {}
    rows = []
    for w in WELLS:
        s0 = 10.0 * int(w[1:])
        blank = w.startswith("H")
        lot = "B" if w[0] in "EFG" else "A"
        p = np.zeros_like(T) if blank else _product(s0, T / 60 * (F_B if lot == "B" else 1.0))
        signal[w] = 0.05 + AU_PER_UM * p + rng.normal(0.0, 5e-4, T.size)
        rows.append({"well": w, "role": "blank" if blank else "sample", "substrate (uM)": s0,
                     "enzyme (nM)": 0.0 if blank else 5.0, "group": "blank" if blank else "g1",
                     **({"lot": "" if blank else lot} if with_lots else {})})
    table = pd.DataFrame(signal)
    table.insert(0, "time (s)", T)
    table.to_csv(folder / "plate.csv", index=False)
    pd.DataFrame(rows).to_csv(folder / "layout.csv", index=False)
    recipe = folder / "recipe.yaml"
    recipe.write_text(
        "vzero: 1\nname: lots\nplates:\n  - name: p1\n    data: plate.csv\n    layout: layout.csv\n"
        "steps:\n  - import: {method: table}\n  - blank: {method: mean}\n"
        '  - rates: {method: window, start: "0 s", end: "120 s"}\n'
        '  - convert: {method: beer-lambert, epsilon: "18000 M^-1 cm^-1", pathlength: "0.5 cm", '
        'output_unit: "uM/min"}\n'
        "  - fit: {method: curves, models: [michaelis-menten], product_inhibition: true, lots: true, "
        "profile: false, selwyn: false}\n", "utf-8")
    return recipe


@pytest.fixture(scope="module")
def audit(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("lots")
    return run(_plate(folder / "in", with_lots=True), folder / "out").audit_path


def test_lot_factor_and_kp_recovered(audit: Path) -> None:
    fits = pd.read_csv(audit.parent / "fits.csv")
    rows = fits[(fits.route == "curves") & (fits.model == "michaelis-menten")].set_index("parameter")
    for name, true in (("Vmax", VMAX), ("Km", KM), ("Kp", KP), ("activity[B]", F_B)):
        r = rows.loc[name]
        # the simulation's truth inside the 95 % interval widened by half
        half = 1.5 * (r.ci_high - r.ci_low) / 2
        assert abs((r.ci_high + r.ci_low) / 2 - true) <= half, (name, r.estimate, r.ci_low, r.ci_high)
    assert "relative to enzyme lot A" in str(rows.loc["activity[B]", "note"])
    assert rows.loc["Kp", "unit"] == "uM"


def test_enzymeml_carries_the_fitted_curves(audit: Path, tmp_path: Path) -> None:
    doc = json.loads(export(audit, "enzymeml", tmp_path / "doc.json").read_text("utf-8"))
    errors = sorted(jsonschema.Draft202012Validator(_schema()).iter_errors(doc), key=str)
    assert not errors, [e.message for e in errors[:5]]
    simulated = [m for m in doc["measurements"] if any(d.get("is_simulated") for d in m["species_data"])]
    assert len(simulated) == 84  # one per sample well and fitted model
    curves = pd.read_csv(audit.parent / "progress_curves.csv")
    one = curves[(curves.well == "E4") & (curves.model == "michaelis-menten")].sort_values("time")
    m = next(x for x in simulated if x["name"].startswith("p1 E4: michaelis-menten"))
    series = next(d for d in m["species_data"] if d["species_id"] == "product")
    assert series["data_type"] == "concentration" and series["is_simulated"] is True
    np.testing.assert_allclose(series["time"], one["time"])
    np.testing.assert_allclose(series["data"], one["fitted"], rtol=1e-12)
    assert series["data_unit"]["base_units"][0]["scale"] == -6.0  # uM
    law = next(e for e in doc["equations"] if "_curves" in e["equation"])
    assert "product" in law["equation"] and "Kp_" in law["equation"]


def test_lots_without_a_lot_column_are_refused(tmp_path: Path) -> None:
    with pytest.raises(VzeroError, match="lot"):
        run(_plate(tmp_path / "in", with_lots=False), tmp_path / "out")


def test_rates_table_without_lots_is_refused_by_the_fit() -> None:
    # rates read from a table (no plate layout): the fit step itself names the missing column
    from vzero.errors import FitError
    from vzero.plugins.fit.curves.run import _lot_labels

    frame = pd.DataFrame({"plate": ["p1"], "well": ["A1"], "rate": [1.0]})
    with pytest.raises(FitError, match="no 'lot' column"):
        _lot_labels(frame, np.ones(1, bool), None)  # type: ignore[arg-type]


def test_a_fixed_inactivation_constant_turns_the_auto_term_on(tmp_path: Path) -> None:
    # the recipe gives kinact (held at 0) while inactivation is auto: the term is fitted, held, with a warning,
    # instead of the value being dropped because no well was flagged for decay
    recipe = _plate(tmp_path / "in", with_lots=False)
    text = recipe.read_text("utf-8").replace(
        "product_inhibition: true, lots: true, ", "fixed: {michaelis-menten: {kinact: 0.0}}, ")
    recipe.write_text(text, "utf-8")
    result = run(recipe, tmp_path / "out")
    assert any("gives 'kinact'" in w and "inactivation is auto" in w for w in result.warnings)
    row = result.fits[(result.fits["route"] == "curves") & (result.fits["parameter"] == "kinact")]
    assert len(row) == 1 and row["estimate"].iloc[0] == 0.0 and bool(row["fixed"].iloc[0])
