"""Which optional terms of the curve model, the hysteretic lag and enzyme inactivation, each group gets.

The recipe's ``lag`` and ``inactivation`` are ``true``, ``false`` or ``auto`` (the default); ``true`` and
``false`` are obeyed for every group. On ``auto`` the decision is made per group and model, in two steps:

1. **Candidates from the rates step's flags.** A term is a candidate only when the rates step flagged its
   shape on at least one of the group's fitted wells (``lag`` for the lag, ``decay`` for inactivation). The
   rates step looks at each well's curve on its own with tests made for these shapes; a group nobody
   flagged is fitted once, as before, at no extra cost.
2. **Evidence from the curves.** A group with candidates is fitted with every combination of them, and a
   combination with more terms replaces one with fewer only when it lowers the AICc by more than
   :data:`EVIDENCE` per added term: the combination with the smallest AICc + 10 × (terms added on auto)
   is kept. Ten AICc units is the difference beyond which the worse model has essentially no support
   (Burnham & Anderson 2002, *Model Selection and Multimodel Inference*, 2nd ed., section 2.6); the margin,
   rather than the plain AICc minimum, keeps a stray flag on a well or two from buying a parameter that the
   noise alone pays for (with thousands of reads a useless parameter lowers the AICc by up to a few units).
   A combination whose fit did not converge is not a candidate.

The first model of the recipe that fits a group decides; the group's other models are fitted with the same
terms, so that their AICc and F-test comparisons compare rate laws, not terms. What was decided, and why (the
flags counted, each combination's AICc against the plainest), is a note on the group's rows of the fits
table (:func:`note`) and a row of the step's ``curve_terms`` record.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from vzero.plugins.fit.curves.fit import CurveFit, CurveGroup, fit_groups

AUTO = "auto"
"""The setting that lets each group's flags and curves decide."""

EVIDENCE = 10.0
"""AICc units a term chosen on ``auto`` must bring (see the module text)."""

Combo = tuple[bool, bool]
"""(lag, inactivation)."""


@dataclass(frozen=True)
class Marks:
    """A group's fitted wells and how many of them the rates step flagged ``lag`` and ``decay``."""

    wells: int
    lag: int
    decay: int


@dataclass(frozen=True)
class Choice:
    """The terms a group was fitted with, and the note saying why."""

    lag: bool
    inactivation: bool
    note: str


def marks(flags: Sequence[Any]) -> Marks:
    """:class:`Marks` of one group from its fitted wells' flags (the rates table's text, ``lag;decay``)."""
    sets = [set(filter(None, str(f).split(";"))) if isinstance(f, str) else set() for f in flags]
    return Marks(len(sets), sum("lag" in s for s in sets), sum("decay" in s for s in sets))


def _options(setting: Any, flagged: int) -> tuple[bool, ...]:
    if setting == AUTO:
        return (False, True) if flagged else (False,)
    return (bool(setting),)


def candidates(lag: Any, inactivation: Any, m: Marks) -> list[Combo]:
    """The (lag, inactivation) combinations to fit for a group, plainest first."""
    return [(a, b) for a in _options(lag, m.lag) for b in _options(inactivation, m.decay)]


def _label(combo: Combo) -> str:
    names = [n for n, on in zip(("lag", "inactivation"), combo, strict=True) if on]
    return " and ".join(names) if names else "neither"


def choose(fits: Mapping[Combo, CurveFit], lag: Any, inactivation: Any, m: Marks) -> Choice:
    """The combination kept among a group's fitted ``fits`` (keys as :func:`candidates`), with its note."""
    combos = list(fits)
    plain = combos[0]

    def added(c: Combo) -> int:
        return sum(on and not base for on, base in zip(c, plain, strict=True))

    aicc = {c: fits[c].result.aicc for c in combos}
    usable = [c for c in combos if fits[c].result.success and np.isfinite(aicc[c])]
    best = min(usable, key=lambda c: (aicc[c] + EVIDENCE * added(c), added(c))) if usable else plain
    return Choice(best[0], best[1], note(best, aicc, usable, lag, inactivation, m))


def note(best: Combo, aicc: Mapping[Combo, float], usable: Sequence[Combo], lag: Any, inactivation: Any,
         m: Marks) -> str:
    """The fits table's note on the terms of a group: empty when neither setting is ``auto``."""
    auto = [n for n, s in (("lag", lag), ("inactivation", inactivation)) if s == AUTO]
    if not auto:
        return ""
    flagged = f"rates step flagged lag on {m.lag} and decay on {m.decay} of {m.wells} fitted wells"
    kept = [n for n, on in zip(("lag", "inactivation"), best, strict=True) if on and n in auto]
    head = f"curve terms ({', '.join(auto)}: auto): {' and '.join(kept) if kept else 'none'} fitted; {flagged}"
    combos = list(aicc)
    if len(combos) == 1:
        return head
    plain = combos[0]
    parts = [f"{_label(c)} {aicc[c] - aicc[plain]:+.1f}" if c in usable else f"{_label(c)} did not converge"
             for c in combos[1:]]
    return (f"{head}; AICc against {_label(plain)}: {', '.join(parts)} (a term is kept when it lowers the AICc "
            f"by more than {EVIDENCE:g})")


def fit_with_terms(model: Any, groups: Sequence[CurveGroup], group_marks: Sequence[Marks],
                   settings: Sequence[tuple[Any, Any]], **options: Any) -> list[tuple[CurveFit, Choice]]:
    """Fit ``model`` to ``groups`` (same lots), each with the terms :func:`candidates` allows it under its
    (lag, inactivation) ``settings``, and keep one combination per group by :func:`choose`; ``options`` go
    to :func:`.fit.fit_groups` unchanged.

    Each combination is one batched fit over the groups that have it as a candidate, so groups nobody
    flagged cost one fit, as with both terms off."""
    cands = [candidates(lag, kin, m) for (lag, kin), m in zip(settings, group_marks, strict=True)]
    done: dict[tuple[int, Combo], CurveFit] = {}
    for combo in sorted({c for cs in cands for c in cs}):
        members = [i for i, cs in enumerate(cands) if combo in cs]
        fits = fit_groups(model, [groups[i] for i in members], lag=combo[0], kinact=combo[1], **options)
        done.update({(i, combo): f for i, f in zip(members, fits, strict=True)})
    out = []
    for i, cs in enumerate(cands):
        choice = choose({c: done[(i, c)] for c in cs}, *settings[i], group_marks[i])
        out.append((done[(i, (choice.lag, choice.inactivation))], choice))
    return out
