"""The fit models as registry components: what each model is, without importing numpy.

A model is a component of kind ``"model"`` (``registry.add(model)`` from a plugin's ``vzero_register``).
Its parameters carry a unit *role*: ``"rate"`` (the unit of the fitted rates), ``"substrate"``,
``"inhibitor"``, ``"enzyme"`` or ``""`` (dimensionless); the fit stage turns roles into the units of the
data. ``variables`` names the independent variables it needs (columns of the rates table).

``func``, ``jac`` and ``guess`` are callables or ``"module:name"`` strings resolved on first use (so the
command line can list models quickly). A third party builds a :class:`Model` with its own callables:

* ``func(params, x) -> v``: ``params`` a sequence (one array or scalar per parameter, broadcastable against
  the arrays in the mapping ``x``), vectorised over points and groups;
* ``jac(params, x) -> [dv/dp_1, ...]``: analytic partial derivatives, one per parameter;
* ``guess(x, y) -> [p_1, ...]``: start values from the data of one group (1-D arrays).
"""

from __future__ import annotations

import functools
import importlib
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

INF = float("inf")


@functools.cache
def _load(ref: str) -> Callable[..., Any]:
    module, _, name = ref.partition(":")
    return getattr(importlib.import_module(module), name)


def _resolve(obj: Callable[..., Any] | str) -> Callable[..., Any]:
    return _load(obj) if isinstance(obj, str) else obj


@dataclass(frozen=True)
class Model:
    """A rate law the fit stage can fit, with everything the fit and report code need to know about it.

    ``units`` maps each parameter to its unit role; ``bounds`` gives default (low, high) per parameter
    (the recipe may override); ``profile`` lists the parameters whose intervals are computed by profile
    likelihood (the ones with skewed sampling distributions); ``nests`` names simpler models this one
    contains as a special case (for the extra-sum-of-squares F-test), with the constraint in words.

    The remaining fields say what the parameters *mean*, so that the fit and report code never test a
    model's name (a plugin's model gets exactly the treatment of a built-in one); each is empty when it does
    not apply:

    * ``title``: the name as printed in reports ("Michaelis–Menten"); the name itself when empty;
    * ``limiting_rate``: the parameter that is the limiting rate Vmax (turnover kcat = Vmax/[E]);
    * ``michaelis_constant``: the parameter that is a Michaelis constant Km (specificity kcat/Km);
    * ``half_saturation``: the substrate level of half the limiting rate (Km, K0.5): a substrate-only fit
      whose value lies above the highest substrate level tested has not determined it nor the limiting rate;
    * ``cooperativity``: the cooperativity coefficient (the Hill h): the model forms the cooperativity test,
      the interval of that parameter against 1 with the F-test against the nested model where it is 1
      (:meth:`cooperativity_reference`);
    * ``ki_from``: the fitted constant (IC50, Ki_app) that converts to an inhibition constant Ki once the
      mechanism is known, by the published conversion named in ``ki_conversion``; ``ki_assumes`` states
      what that conversion takes for granted, in words.

    Three optional callables (or ``"module:name"`` strings) serve the progress-curve fit
    (:mod:`vzero.plugins.fit.curves`); the curve fit asks the model for them and never looks at its name, so
    a plugin that declares one gets the matching treatment and one that merely reuses a built-in's name
    does not:

    * ``apparent(params, x) -> (V', K', [dV'/dp ...], [dK'/dp ...])``: the law is Michaelis–Menten with
      apparent constants, v = V'·S/(K' + S), K' proportional to ``half_saturation`` (the integrated curve
      then has a closed form through Lambert's W, with or without competitive product inhibition);
    * ``integrated(params, s0, tau) -> (S, [dS/dp ...])``: another closed-form progress curve (substrate
      left after effective time ``tau``, in the rate's time unit), with its exact parameter sensitivities;
    * ``rate_slope(params, x) -> dv/dS``: the analytic derivative of the rate in the substrate (a central
      difference is used otherwise).
    """

    name: str
    params: tuple[str, ...]
    units: Mapping[str, str]
    variables: tuple[str, ...]
    func: Callable[..., Any] | str
    jac: Callable[..., Any] | str
    guess: Callable[..., Any] | str
    equation: str
    summary: str = ""
    bounds: Mapping[str, tuple[float, float]] = field(default_factory=dict)
    profile: tuple[str, ...] = ()
    nests: Mapping[str, str] = field(default_factory=dict)
    title: str = ""
    limiting_rate: str = ""
    michaelis_constant: str = ""
    half_saturation: str = ""
    cooperativity: str = ""
    ki_from: str = ""
    ki_conversion: str = ""
    ki_assumes: str = ""
    apparent: Callable[..., Any] | str = ""
    integrated: Callable[..., Any] | str = ""
    rate_slope: Callable[..., Any] | str = ""
    kind: str = "model"

    @property
    def display(self) -> str:
        """The model's name as printed (``title``, or the name when it has none)."""
        return self.title or self.name

    def cooperativity_reference(self) -> str:
        """The nested model where the cooperativity coefficient is 1 (``nests`` entry ``"h = 1"``), or ''."""
        if not self.cooperativity:
            return ""
        return next((m for m, rule in self.nests.items() if rule.replace(" ", "") == f"{self.cooperativity}=1"), "")

    def evaluate(self, params: Sequence[Any], x: Mapping[str, Any]) -> Any:
        """Predicted rates (same unit as the data's rates)."""
        return _resolve(self.func)(params, x)

    def jacobian(self, params: Sequence[Any], x: Mapping[str, Any]) -> list[Any]:
        """Partial derivatives of the rate with respect to each parameter, in ``params`` order."""
        return list(_resolve(self.jac)(params, x))

    def declared(self, part: str) -> Callable[..., Any] | None:
        """The callable the model declares as ``part`` (``"apparent"``, ``"integrated"``, ``"rate_slope"``),
        or None when it declares none."""
        value = getattr(self, part)
        return _resolve(value) if value else None

    def start(self, x: Mapping[str, Any], y: Any) -> list[float]:
        """Start values estimated from one group's data."""
        return [float(v) for v in _resolve(self.guess)(x, y)]


def _impl(name: str) -> str:
    return f"vzero.plugins.fit.models:{name}"


POS = (0.0, INF)


def _m(name: str, params: str, roles: str, variables: str, impl: str, guess: str, equation: str, summary: str,
       bounds: Mapping[str, tuple[float, float]], profile: str, nests: Mapping[str, str] | None = None,
       **facts: str) -> Model:
    """Compact constructor for the built-ins: ``params``/``roles``/``variables``/``profile`` are
    space-separated (role ``-`` means dimensionless); ``impl`` is the stem of the function names; ``facts``
    are the meaning fields of :class:`Model` (``title``, ``limiting_rate``, ...)."""
    names = tuple(params.split())
    units = {n: ("" if r == "-" else r) for n, r in zip(names, roles.split(), strict=True)}
    return Model(name, names, units, tuple(variables.split()), _impl(f"_{impl}"), _impl(f"_{impl}_jac"),
                 _impl(f"_{guess}_guess"), equation, summary, bounds, tuple(profile.split()), nests or {}, **facts)


_MICHAELIS = {"limiting_rate": "Vmax", "michaelis_constant": "Km", "half_saturation": "Km"}
"""The meaning of Vmax and Km in every Michaelis–Menten-type rate law."""


def _family(stem: str) -> dict[str, str]:
    """Curve-fit declarations of a Michaelis–Menten-type law: its apparent constants and dv/dS."""
    return {"apparent": f"vzero.plugins.fit.curves.laws:apparent_{stem}",
            "rate_slope": f"vzero.plugins.fit.curves.laws:slope_{stem}"}


def _closed(stem: str) -> dict[str, str]:
    """Curve-fit declarations of a law with its own closed-form progress curve, and its dv/dS."""
    return {"integrated": f"vzero.plugins.fit.curves.closed:{stem.replace('-', '_')}",
            "rate_slope": f"vzero.plugins.fit.curves.laws:slope_{stem.replace('-', '_')}"}

MODELS: tuple[Model, ...] = (
    _m("michaelis-menten", "Vmax Km", "rate substrate", "substrate", "mm", "mm", "v = Vmax·S/(Km + S)",
       "Michaelis-Menten rate law", {"Km": POS}, "Km", title="Michaelis–Menten",
       **_MICHAELIS, **_family("mm")),
    _m("hill", "Vmax K0.5 h", "rate substrate -", "substrate", "hill", "hill", "v = Vmax·S^h/(K0.5^h + S^h)",
       "Hill equation (cooperativity)", {"K0.5": POS, "h": (0.05, 20.0)}, "K0.5 h", {"michaelis-menten": "h = 1"},
       title="Hill", limiting_rate="Vmax", half_saturation="K0.5", cooperativity="h", **_closed("hill")),
    _m("substrate-inhibition", "Vmax Km Ksi", "rate substrate substrate", "substrate", "si", "si",
       "v = Vmax·S/(Km + S + S²/Ksi)", "Haldane substrate inhibition", {"Km": POS, "Ksi": POS}, "Km Ksi",
       {"michaelis-menten": "Ksi → ∞"}, title="substrate inhibition", **_MICHAELIS, **_closed("substrate-inhibition")),
    _m("competitive", "Vmax Km Kic", "rate substrate inhibitor", "substrate inhibitor", "competitive", "inhib1",
       "v = Vmax·S/(Km(1 + I/Kic) + S)", "competitive inhibition", {"Km": POS, "Kic": POS}, "Km Kic",
       title="competitive inhibition", **_MICHAELIS, **_family("competitive")),
    _m("uncompetitive", "Vmax Km Kiu", "rate substrate inhibitor", "substrate inhibitor", "uncompetitive",
       "inhib1", "v = Vmax·S/(Km + S(1 + I/Kiu))", "uncompetitive inhibition", {"Km": POS, "Kiu": POS}, "Km Kiu",
       title="uncompetitive inhibition", **_MICHAELIS, **_family("uncompetitive")),
    _m("mixed", "Vmax Km Kic Kiu", "rate substrate inhibitor inhibitor", "substrate inhibitor", "mixed", "inhib2",
       "v = Vmax·S/(Km(1 + I/Kic) + S(1 + I/Kiu))", "mixed inhibition", {"Km": POS, "Kic": POS, "Kiu": POS},
       "Km Kic Kiu", {"competitive": "Kiu → ∞", "uncompetitive": "Kic → ∞", "noncompetitive": "Kic = Kiu"},
       title="mixed inhibition", **_MICHAELIS, **_family("mixed")),
    _m("noncompetitive", "Vmax Km Ki", "rate substrate inhibitor", "substrate inhibitor", "noncompetitive",
       "inhib1", "v = Vmax·S/((Km + S)(1 + I/Ki))", "pure noncompetitive inhibition", {"Km": POS, "Ki": POS},
       "Km Ki", title="noncompetitive inhibition", **_MICHAELIS, **_family("noncompetitive")),
    _m("morrison", "v0 Ki_app", "rate inhibitor", "inhibitor enzyme", "morrison", "morrison",
       "v = v0·(1 − ((E + I + Ki_app) − √((E + I + Ki_app)² − 4EI))/(2E))",
       "Morrison tight-binding inhibition (enzyme converted to the inhibitor's unit)", {"Ki_app": POS}, "Ki_app",
       title="Morrison tight binding", ki_from="Ki_app", ki_conversion="Morrison Ki_app"),
    _m("logistic-4p", "v_uninhibited v_residual IC50 n", "rate rate inhibitor -", "inhibitor", "logistic",
       "logistic", "v = v_residual + (v_uninhibited − v_residual)/(1 + (I/IC50)^n)",
       "four-parameter logistic dose-response (v_uninhibited: rate without inhibitor; v_residual: rate left at "
       "saturating inhibitor; n: steepness)",
       {"IC50": POS}, "IC50", title="four-parameter logistic", ki_from="IC50", ki_conversion="Cheng-Prusoff",
       ki_assumes="assumes enzyme well below IC50 (no tight binding; fit morrison otherwise)"),
)

BY_NAME = {m.name: m for m in MODELS}
