"""Declaration of the fit stage method ``curves``: rate laws fitted to the progress curves themselves.

The work is in :mod:`vzero.plugins.fit.curves.run`, imported on first use so that listing plugins stays quick.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import ClassVar

from vzero.params import Param
from vzero.plugins.fit.stage import FLAG_CHOICES, FitStage
from vzero.stage import Stage, StageInput, StageOutput

CURVE_EXCLUDE = ["saturated", "all_missing", "no_signal", "too_few_points", "excluded"]
"""Wells left out by default: flags that say the reads themselves are unusable. Curvature, high conversion
and lag are what a curve fit models, so they do not exclude a well here."""

_SHARED = ("models", "x", "inhibitor", "group_by", "fixed", "bounds", "start", "confidence", "profile", "enzyme",
           "alpha")


class CurveFitStage(Stage):
    """Pooled fit of rate laws to every read of each group's progress curves at once (integrated rate laws)."""

    kind = "fit"
    method = "curves"
    version = "1.2"
    scope = "pooled"
    summary = ("Rate laws integrated and fitted to all progress curves of a group at once: shared kinetic "
               "parameters, a baseline per well, optional enzyme inactivation, a hysteretic lag, product inhibition "
               "and activity "
               "factors per enzyme lot; standard errors, profile intervals, AICc and F-tests, cooperativity "
               "verdict, Selwyn's test of enzyme stability.")
    params: ClassVar[Mapping[str, Param]] = {
        **{k: FitStage.params[k] for k in _SHARED},
        "exclude_flags": Param("list", list(CURVE_EXCLUDE), "wells carrying any of these flags are not fitted",
                               choices=FLAG_CHOICES),
        "inactivation": Param.choice(("auto", True, False), "auto",
                                     "fit a first-order enzyme inactivation constant kinact (1/s) shared by the "
                                     "group's wells; auto: only where the rates step flagged decay on a fitted well "
                                     "and the curves bear it out (AICc lower by more than 10)"),
        "lag": Param.choice(("auto", True, False), "auto",
                            "fit a hysteretic lag shared by the group's wells: the enzyme turns active with time "
                            "constant lag_time (s; 0: no lag), and with inactivation only its active form is lost; "
                            "auto: only where the rates step flagged lag on a fitted well and the curves bear it out"),
        "product_inhibition": Param("bool", False, "fit competitive inhibition by the reaction's product: the "
                                    "half-saturation constant (Km, K0.5) grows by 1 + P/Kp as product P accumulates; "
                                    "Kp in the substrate's unit"),
        "lots": Param("bool", False, "fit one relative activity factor per enzyme lot (layout column 'lot'); the "
                      "reference lot's factor is 1 and the limiting rate refers to it"),
        "reference_lot": Param("str", None, "the lot whose activity factor is 1 (default: each group's first lot in "
                               "layout order; a group without this lot uses its own first)"),
        "route": Param.choice(("auto", "closed", "ode"), "auto",
                              "auto: closed forms where they exist, numerical integration otherwise; ode: always "
                              "integrate numerically"),
        "selwyn": Param("bool", True, "check enzyme stability by Selwyn's test where a group holds the same "
                        "reaction at two or more enzyme concentrations"),
    }

    def run(self, data: StageInput) -> StageOutput:
        from vzero.plugins.fit.curves.run import run_curves

        return run_curves({k: p.default for k, p in self.params.items()} | self.settings, data)
