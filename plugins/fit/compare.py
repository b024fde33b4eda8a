"""Model comparison (AICc, Akaike weights, extra-sum-of-squares F-test) and the cooperativity verdict.

Only fits to the same points are compared (a model that needs an inhibitor column is fitted to different
points than one that does not). Within such a set the selected model is the one with the lowest AICc,
unless it contains a simpler fitted model as a special case (``Model.nests``) and the F-test does not
support the extra parameters at level ``alpha``: then the simpler model is selected (parsimony).

Cooperativity verdict (from the fit of a model that declares a cooperativity coefficient, the Hill equation's
h among the built-ins, and its comparison with the nested model where that coefficient is 1), in this order:

1. no usable Hill fit or no interval for h                          -> "not resolved by these data"
2. interval of h excludes 1 and the F-test agrees (p < alpha)       -> "positive" (h > 1) / "negative" (h < 1)
3. interval of h contains 1, the F-test does not support Hill, and the interval lies within
   [1/1.25, 1.25] (an equivalence margin of our own choosing, in the spirit of the 80-125 % rule used in
   equivalence testing; common practice there, a convention here)  -> "none"
4. anything else (wide interval, or interval and F-test disagree)   -> "not resolved by these data"

With profile-likelihood intervals (the default) steps 2 and 3 cannot disagree except at a parameter bound,
because the profile interval of h is the set of h values the F-test at the same level does not reject.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special  # t and F quantiles: what scipy.stats uses, without its import cost
from vzero.plugins.fit.engine import FitResult

EQUIVALENCE = (0.8, 1.25)
"""An interval of h inside this range counts as "no cooperativity of practical size"."""


@dataclass(frozen=True)
class FTest:
    simple: str
    complex: str
    f: float
    p: float
    df1: int
    df2: int


def f_test(simple: FitResult, complex_: FitResult, names: tuple[str, str]) -> FTest | None:
    """Extra-sum-of-squares F-test of a simpler nested model against a more complex one (same points)."""
    if not (simple.success and complex_.success) or simple.n_points != complex_.n_points:
        return None
    df1 = simple.dof - complex_.dof
    df2 = complex_.dof
    if df1 <= 0 or df2 <= 0 or not (complex_.rss > 0):
        return None
    f = max((simple.rss - complex_.rss) / df1, 0.0) / (complex_.rss / df2)
    return FTest(names[0], names[1], float(f), float(special.fdtrc(df1, df2, f)), df1, df2)


def compare_set(
    fits: Mapping[str, FitResult], nests: Mapping[str, Mapping[str, str]], alpha: float = 0.05
) -> tuple[list[dict[str, Any]], str, str]:
    """Compare models fitted to the same points. Returns (rows, selected model, reason for the selection).

    Each row carries ``selected_model`` (the set's selected model), ``selected`` (whether it is this row's
    model) and ``selection_reason``."""
    ok = {m: f for m, f in fits.items() if f.success and np.isfinite(f.rss)}
    aicc = {m: f.aicc for m, f in ok.items() if np.isfinite(f.aicc)}
    best_aicc = min(aicc.values()) if aicc else np.nan
    delta = {m: a - best_aicc for m, a in aicc.items()}
    wsum = sum(np.exp(-d / 2) for d in delta.values())
    weight = {m: float(np.exp(-d / 2) / wsum) for m, d in delta.items()} if wsum > 0 else {}
    tests: dict[tuple[str, str], FTest] = {}
    for cplx, simpler in nests.items():
        for simple in simpler:
            if cplx in ok and simple in ok:
                t = f_test(ok[simple], ok[cplx], (simple, cplx))
                if t is not None:
                    tests[(simple, cplx)] = t

    chosen, reason = "", "no model could be fitted"
    if aicc:
        chosen = min(aicc, key=lambda m: aicc[m])
        others = sorted(d for m, d in delta.items() if m != chosen)
        reason = f"lowest AICc (next best {others[0]:.2g} higher)" if others else "lowest AICc (only model fitted)"
    elif ok:
        chosen = min(ok, key=lambda m: len(ok[m].names))
        reason = "too few points for AICc; simplest model that could be fitted"
    seen = set()
    while chosen and chosen not in seen:
        seen.add(chosen)
        for (simple, cplx), t in tests.items():
            if cplx == chosen and t.p >= alpha:
                reason = (f"{simple}: the extra parameter(s) of {cplx} are not supported "
                          f"(F = {t.f:.3g}, p = {t.p:.3g} ≥ {alpha:g})")
                chosen = simple
                break
            if cplx == chosen and t.p < alpha:
                reason += f"; F-test against {simple}: p = {t.p:.3g}"
    rows = []
    for m, f in fits.items():
        base = {
            "model": m, "success": bool(f.success), "n_points": f.n_points, "n_params": int(f.free.sum()),
            "rss": f.rss, "dof": f.dof, "aicc": aicc.get(m, np.nan), "delta_aicc": delta.get(m, np.nan),
            "akaike_weight": weight.get(m, np.nan), "selected_model": chosen, "selected": m == chosen,
            "selection_reason": reason,
        }
        against: list[FTest | None] = [t for (_, c), t in tests.items() if c == m]
        for t in against or [None]:
            rows.append({**base, "f_test_against": t.simple if t else "", "F": t.f if t else np.nan,
                         "p": t.p if t else np.nan})
    return rows, chosen, reason


def cooperativity(
    fit: FitResult | None, ci: tuple[float, float, str], p_vs_reference: float, alpha: float = 0.05,
    *, names: tuple[str, str, str],
) -> tuple[str, str]:
    """The verdict on the cooperativity coefficient and the reason in words (rule in the module docstring).

    ``ci`` is (low, high, method) of the coefficient; ``p_vs_reference`` the F-test p-value against the
    nested model where the coefficient is 1; ``names`` are the printed names of the model (``Hill``), of
    that reference model (``Michaelis–Menten``) and of the coefficient (``h``), as the model declares them.
    """
    title, reference, h = names
    low, high, method = ci
    if fit is None or not fit.success:
        return "not resolved by these data", f"the {title} equation could not be fitted"
    if not (np.isfinite(low) and np.isfinite(high)):
        return "not resolved by these data", f"no {method} interval for {h} (open or undetermined)"
    f_known = np.isfinite(p_vs_reference)
    f_txt = (f"F-test against {reference} p = {p_vs_reference:.3g}" if f_known
             else f"no F-test against {reference}")
    if low > 1 or high < 1:
        side = "positive" if low > 1 else "negative"
        if f_known and p_vs_reference >= alpha:
            return "not resolved by these data", (f"the {method} interval of {h} excludes 1 but the {f_txt} "
                                                  f"does not support {title}")
        return side, f"{method} interval of {h} [{low:.3g}, {high:.3g}] excludes 1; {f_txt}"
    if f_known and p_vs_reference < alpha:
        return "not resolved by these data", f"interval of {h} contains 1 but the {f_txt} supports {title}"
    if EQUIVALENCE[0] <= low and high <= EQUIVALENCE[1]:
        return "none", (f"{method} interval of {h} [{low:.3g}, {high:.3g}] contains 1 and lies within "
                        f"[{EQUIVALENCE[0]:g}, {EQUIVALENCE[1]:g}]; {f_txt}")
    return "not resolved by these data", (f"{method} interval of {h} [{low:.3g}, {high:.3g}] contains 1 but is "
                                          f"too wide to rule out cooperativity; {f_txt}")
