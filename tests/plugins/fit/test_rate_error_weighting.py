"""``weighting: rate-error``: each rate's sigma from its own standard error combined with 3 % of the rate.

Checked against an independent weighted fit: scipy.optimize.curve_fit with ``sigma`` and
``absolute_sigma=False`` (the fit stage, like curve_fit's default, scales the covariance by the weighted
residual variance). Invented rates: Michaelis–Menten with Km 5 uM, Vmax 10 uM/min, and standard errors that
are small at high substrate (as a whole-curve fit gives) and larger at low substrate.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.optimize import curve_fit
from vzero.data import Table
from vzero.params import validate
from vzero.plugins import fit as fit_plugin
from vzero.plugins.fit.run import RATE_ERROR_SHARE, rate_error_sigma
from vzero.plugins.fit.stage import FitStage
from vzero.registry import Registry
from vzero.stage import StageInput


def _rates() -> pd.DataFrame:
    rng = np.random.default_rng(21)
    s = np.repeat([0.5, 1, 2, 5, 10, 20, 50.0], 2)
    se = 0.05 + 0.02 * 10 * 5 / (5 + s)  # uM/min
    v = 10 * s / (5 + s) + se * rng.standard_normal(s.size)
    return pd.DataFrame({"plate": "P1", "well": [f"A{k + 1}" for k in range(s.size)], "group": "g",
                         "role": "sample", "substrate": s, "inhibitor": np.nan, "rate": v, "rate_stderr": se,
                         "flags": ""})


def _fit(frame: pd.DataFrame, weighting: str) -> tuple[pd.DataFrame, list[str]]:
    reg = Registry()
    fit_plugin.vzero_register(reg)
    values, problems = validate(FitStage.params, {"models": ["michaelis-menten"], "weighting": weighting,
                                                  "profile": False})
    assert not problems, problems
    warnings: list[str] = []
    units = {"rate": "uM/min", "substrate": "uM", "inhibitor": "uM"}
    data = StageInput({"rates": Table(frame, units)}, None, {}, {}, reg, warnings.append)
    fits = FitStage(**values).run(data).artifacts["fits"].frame
    return fits.set_index("parameter"), warnings


def test_rate_error_weighting_matches_scipy_curve_fit() -> None:
    frame = _rates()
    s, v, se = (frame[c].to_numpy(float) for c in ("substrate", "rate", "rate_stderr"))
    sigma = np.sqrt(se**2 + (RATE_ERROR_SHARE * v) ** 2)
    # independent reference: scipy.optimize.curve_fit, relative sigma (absolute_sigma=False)
    ref, cov = curve_fit(lambda x, vm, km: vm * x / (km + x), s, v, p0=[8, 3], sigma=sigma, absolute_sigma=False)
    fits, _ = _fit(frame, "rate-error")
    got = fits.loc[["Vmax", "Km"]]
    np.testing.assert_allclose(got["estimate"], ref, rtol=1e-6)
    np.testing.assert_allclose(got["stderr"], np.sqrt(np.diag(cov)), rtol=1e-4)
    unweighted, _ = _fit(frame, "none")  # the weights matter on these rates: a different answer
    assert abs(unweighted.loc["Km", "estimate"] - ref[1]) > 1e-3 * ref[1]


def test_rates_without_a_standard_error_get_the_median_and_a_note() -> None:
    y = np.array([1.0, 2.0, 4.0, 8.0])
    sig, note = rate_error_sigma(y, np.array([0.1, np.nan, 0.3, 0.0]), share=0.03)
    np.testing.assert_allclose(sig, np.sqrt(np.array([0.1, 0.2, 0.3, 0.2]) ** 2 + (0.03 * y) ** 2))
    assert note.startswith("2 rate(s) without a standard error")
    frame = _rates().assign(rate_stderr=np.nan)
    fits, warnings = _fit(frame, "rate-error")  # no SE at all: the group is fitted unweighted, and says so
    plain, _ = _fit(frame, "none")
    np.testing.assert_allclose(fits.loc["Km", "estimate"], plain.loc["Km", "estimate"], rtol=1e-9)
    assert any("no rate has a standard error" in w for w in warnings)
