"""Puromycin through the whole pipeline: a rates table imported and fitted with Michaelis–Menten.

Source: Treloar (1974) data as printed in Bates & Watts (1988), Appendix A1.3; published fit of the treated
set (R Core Team, *An Introduction to R*, section 11.7.1, R's nls): Vm = 212.68370711, K = 0.06412123,
SE(Vm) = 6.947, SE(K) = 8.281e-03 (printed to 4 significant digits). Untreated set (Bates & Watts; R nls,
figures from memory, confirmed by the reference pack's scipy computation to every printed digit):
Vm = 160.280046, K = 0.0477081845, SE(Vm) = 6.480246, SE(K) = 0.00778188.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pandas as pd
from numpy.testing import assert_allclose
from vzero.run.runner import run

DATA = Path(__file__).parent / "data" / "reference" / "puromycin.csv"

RECIPE = """\
vzero: 1
name: puromycin
plates:
  - name: treloar
    data: puromycin.csv
steps:
  - import:
      method: rates-table
      substrate_column: conc
      group_column: state
      substrate_unit: ppm
      rate_unit: count/min/min
  - fit:
      method: nls
      models: [michaelis-menten]
"""


def test_puromycin_reproduces_published_fit(tmp_path: Path):
    shutil.copy(DATA, tmp_path / "puromycin.csv")
    (tmp_path / "recipe.yaml").write_text(RECIPE, "utf-8")
    fits = run(tmp_path / "recipe.yaml", tmp_path / "out").fits.set_index(["group", "parameter"])
    treated_vm, treated_k = fits.loc[("treated", "Vmax")], fits.loc[("treated", "Km")]
    # rel 1e-5 against R's printed nls estimates (its own convergence tolerance limits the 7th digit)
    assert_allclose(treated_vm["estimate"], 212.68370711, rtol=1e-5)
    assert_allclose(treated_k["estimate"], 0.06412123, rtol=1e-5)
    # standard errors to the printed 4 significant digits
    assert_allclose(treated_vm["stderr"], 6.947, rtol=5e-4)
    assert_allclose(treated_k["stderr"], 8.281e-3, rtol=5e-4)
    assert treated_k["unit"] == "ppm" and treated_vm["n_points"] == 12
    untreated_vm, untreated_k = fits.loc[("untreated", "Vmax")], fits.loc[("untreated", "Km")]
    assert_allclose(untreated_vm["estimate"], 160.280046, rtol=1e-6)
    assert_allclose(untreated_k["estimate"], 0.0477081845, rtol=1e-6)
    assert_allclose(untreated_vm["stderr"], 6.480246, rtol=1e-5)
    assert_allclose(untreated_k["stderr"], 0.00778188, rtol=1e-5)
    rates = pd.read_csv(tmp_path / "out" / "rates.csv")
    assert len(rates) == 23 and set(rates["group"]) == {"treated", "untreated"}
