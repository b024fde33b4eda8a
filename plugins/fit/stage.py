"""Declaration of the fit stage (method ``nls``): its parameters and a light ``run`` that delegates.

The work is in :mod:`vzero.plugins.fit.run`, imported on first use so that listing plugins stays quick.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, ClassVar

from vzero.params import Param
from vzero.plugins.kinetics import flags
from vzero.stage import Stage, StageInput, StageOutput

DEFAULT_EXCLUDE = list(flags.names_of(flags.NOT_FITTED))
FLAG_CHOICES = flags.NAMES


def _numbers_by_model(value: Any) -> str | None:
    """Check a mapping model -> parameter -> number (or -> [low, high] for bounds)."""
    for model, params in value.items():
        if not isinstance(params, Mapping):
            return f"expected a mapping of parameter names under {model!r}, got {params!r}"
        for name, v in params.items():
            ok = isinstance(v, int | float) and not isinstance(v, bool)
            pair = isinstance(v, list | tuple) and len(v) == 2 and all(
                isinstance(u, int | float) and not isinstance(u, bool) for u in v)
            if not (ok or pair):
                return f"{model}.{name}: expected a number (or [low, high] for bounds), got {v!r}"
            if pair and not v[0] < v[1]:
                return f"{model}.{name}: the bounds [low, high] must have low < high, got {list(v)!r}"
    return None


SELECT_KEYS = ("groups", "inhibitor")


def _check_select(value: Any) -> str | None:
    """Check ``select``: ``groups`` a name or glob pattern (or a list of them), ``inhibitor`` true or false."""
    from vzero.params import closest

    for key in value:
        if key not in SELECT_KEYS:
            hit = closest(str(key), SELECT_KEYS)
            return (f"unknown key {key!r}" + (f" (did you mean {hit!r}?)" if hit else "")
                    + f"; valid: {', '.join(SELECT_KEYS)}")
    groups = value.get("groups")
    if groups is not None:
        items = [groups] if isinstance(groups, str) else groups
        if not isinstance(items, list) or not items or not all(isinstance(g, str) and g for g in items):
            return f"groups: expected a group name or pattern (VZ-*) or a list of them, got {groups!r}"
    if "inhibitor" in value and not isinstance(value["inhibitor"], bool):
        return f"inhibitor: expected true (groups with an inhibitor series) or false, got {value['inhibitor']!r}"
    return None


class FitStage(Stage):
    """Pooled nonlinear least-squares fit of rate laws to initial rates, one fit per group and model."""

    kind = "fit"
    method = "nls"
    #: 1.1: default weighting rate-error (was none); 1.2: imprecise among the default exclusions; 1.3: a
    #: four-parameter logistic rising with the compound is fitted when a zero-concentration well is present;
    #: 1.4: with rate-error weighting, uncertainties widened for errors wells share through common blanks
    version = "1.4"
    scope = "pooled"
    summary = ("Nonlinear least squares of rate laws (Michaelis-Menten, Hill, inhibition, ...) on untransformed "
               "initial rates, per group; standard errors, t and profile-likelihood intervals, AICc and F-test "
               "model comparison, cooperativity verdict.")
    params: ClassVar[Mapping[str, Param]] = {
        "models": Param("list", ["michaelis-menten", "hill"],
                        "rate laws to fit (names of registered models, see `vzero plugins`)", names="model"),
        "select": Param("mapping", {}, "which groups this step fits: groups (a name or glob pattern such as "
                        "VZ-*, or a list of them) and/or inhibitor (true: only groups with an inhibitor series, "
                        "false: only groups without); empty: every group. Several fit steps add up",
                        check=_check_select),
        "x": Param("str", "substrate", "column of the rates table holding substrate concentration"),
        "inhibitor": Param("str", "inhibitor", "column holding inhibitor concentration"),
        "group_by": Param("str", "group", "column whose values define the groups fitted separately"),
        "exclude_flags": Param("list", list(DEFAULT_EXCLUDE), "wells carrying any of these flags are not fitted",
                               choices=FLAG_CHOICES),
        "weighting": Param.choice(("none", "relative", "replicate", "rate-error"), "rate-error",
                                  "rate-error (the default, measured best on the realistic benchmark): sigma "
                                  "from each rate's own standard error combined with rate_error_share of the "
                                  "rate; none: equal weights; relative: sigma proportional to the rate; "
                                  "replicate: sigma from the scatter of replicate wells at each level"),
        "rate_error_share": Param("float", 0.01, "with weighting: rate-error, the share of each rate added (in "
                                  "quadrature) to its standard error: errors the read noise does not show, such as "
                                  "pipetting (0: weights 1/SE²)", low=0.0, high=1.0),
        "shared_blanks": Param("bool", True, "with weighting: rate-error, widen standard errors and intervals "
                               "for the error that wells corrected by the same blank wells share (the rates "
                               "table's blanks and blank_share columns); false: rates taken as independent"),
        "fixed": Param("mapping", {}, "model -> parameter -> value held fixed", check=_numbers_by_model),
        "bounds": Param("mapping", {}, "model -> parameter -> [low, high]", check=_numbers_by_model),
        "start": Param("mapping", {}, "model -> parameter -> start value (default: estimated from the data)",
                       check=_numbers_by_model),
        "confidence": Param("float", 0.95, "confidence level of intervals and bands", low=0.5, high=0.9999),
        "profile": Param("bool", True, "profile-likelihood intervals for Km, K0.5, h, Ki (slower, asymmetric)"),
        "enzyme": Param("bool", True, "derive kcat and kcat/Km from the per-well enzyme column when present"),
        "mechanism": Param.choice(("none", "competitive", "uncompetitive", "noncompetitive"), "none",
                                  "inhibition mechanism assumed when converting IC50 (logistic-4p, Cheng-Prusoff) "
                                  "or Ki_app (morrison) to Ki; none: no conversion"),
        "km": Param.quantity("M", None, "Km of the substrate, for the Ki conversion (competitive, uncompetitive)",
                             nullable=True),
        "km_stderr": Param.quantity("M", None, "standard error of km, propagated into Ki (omit: km taken as exact)",
                                    nullable=True),
        "alpha": Param("float", 0.05, "significance level of the F-tests in model comparison", low=1e-6, high=0.5),
    }

    def run(self, data: StageInput) -> StageOutput:
        from vzero.plugins.fit.run import run_fit

        return run_fit({k: p.default for k, p in self.params.items()} | self.settings, data)
