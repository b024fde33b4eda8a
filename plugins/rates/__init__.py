"""Built-in rates stage methods: initial rates (v0, signal per second) from each well's progress curve.

Each method is a small :class:`~vzero.plugins.kinetics.methods.RateMethod` whose ``kernel`` calls a vectorised
function (imported on first use, to keep this module light); the base class builds the standard rates table
and applies the recipe's exclusions and overrides.
The methods, their assumptions and which to choose when are described in docs/rates.md.

Methods that judge substrate conversion (``auto``, ``polynomial``, ``progress``, ``lag-decay``) need the
signal change per unit of product concentration: give ``signal_per_conc`` (for example ``"3.42 AU/mM"``) or
``epsilon`` and ``pathlength``; the substrate per well comes from the layout.
"""

from __future__ import annotations

from typing import Any, ClassVar

from vzero import hookimpl
from vzero.errors import StageError
from vzero.params import Param
from vzero.plugins.kinetics.methods import PlateView, RateMethod

CONVERSION_PARAMS = {
    "signal_per_conc": Param.quantity("1/M", None, "signal change per unit product concentration, e.g. "
                                      '"3.42 AU/mM"; enables the conversion checks', nullable=True),
    "epsilon": Param.quantity("M^-1 cm^-1", None, "molar absorption coefficient (with pathlength, instead of "
                              "signal_per_conc)", nullable=True),
    "pathlength": Param.quantity("cm", None, "optical pathlength (with epsilon)", nullable=True),
    "direction": Param.choice(("increase", "decrease"), "increase", "whether the signal rises or falls as "
                              "product forms"),
    "standards": Param("str", None, "layout column of the product concentrations in the plate's standard wells: "
                       "signal_per_conc from the plate's own standard curve, fitted before the rates",
                       nullable=True),
}
MAX_CONVERSION = Param("float", 0.10, "largest fraction of substrate converted inside the rate window "
                       "(10 %: common practice)", low=0.001, high=1.0)


def conversion(traces: Any, settings: dict[str, Any], warn: Any) -> tuple[Any, float | None]:
    """Substrate per well (layout unit) and signed signal per unit concentration in that unit, or Nones."""
    import numpy as np

    sub_unit = traces.well_units.get("substrate")
    if "substrate" not in traces.wells.columns or not sub_unit:
        return None, None
    per = settings.get("signal_per_conc")
    if per is None and settings.get("epsilon") is not None and settings.get("pathlength") is not None:
        per = settings["epsilon"] * settings["pathlength"]
    elif per is None and (settings.get("epsilon") is not None or settings.get("pathlength") is not None):
        raise StageError("give both epsilon and pathlength (or signal_per_conc) for the conversion checks")
    if per is None:
        warn("no signal_per_conc (or epsilon and pathlength) given: substrate conversion is not checked")
        return None, None
    value = float(per.m_as(f"1/{sub_unit}"))
    sign = -1.0 if settings.get("direction") == "decrease" else 1.0
    return traces.wells["substrate"].to_numpy(dtype=float), sign * value if np.isfinite(value) else None


def own_calibration(plate: PlateView, signal: Any, settings: dict[str, Any]) -> dict[str, Any]:
    """With ``standards`` set (and no signal_per_conc, epsilon or pathlength): the plate's own standard curve
    is fitted first and its slope becomes ``signal_per_conc``; its tables go to the audit file through
    ``plate.record``. Returns the settings to use."""
    column = settings.get("standards")
    if not column:
        return settings
    if any(settings.get(k) is not None for k in ("signal_per_conc", "epsilon", "pathlength")):
        raise StageError("give either standards or signal_per_conc (or epsilon and pathlength), not both")
    from types import SimpleNamespace

    from vzero import units
    from vzero.data import Table
    from vzero.plugins.convert.standard_curve import plate_standard_curve

    reads = SimpleNamespace(wells=plate.wells, well_units=plate.well_units, masked_signal=lambda: signal)
    cal = plate_standard_curve(reads, column, None, True)
    curve = cal.curve
    lo, hi = curve.conc_range
    plate.warn(f"standard curve (before the rates): slope {curve.slope:.5g} {plate.signal_unit}/{cal.conc_unit} "
               f"± {curve.slope_se:.2g}, R² {curve.r2:.4f}, linear range {lo:g}-{hi:g} {cal.conc_unit}"
               + (f"; dropped {', '.join(f'{d:g}' for d in curve.dropped_levels)}" if curve.dropped_levels else ""))
    per = units.registry().Quantity(abs(curve.slope), f"1/{cal.conc_unit}")
    direction = "decrease" if curve.slope < 0 else "increase"
    plate.record["standard_curve_points"] = Table(cal.points, {"concentration": cal.conc_unit,
                                                               "signal": plate.signal_unit})
    units_of = {"slope": f"{plate.signal_unit}/{cal.conc_unit}", "intercept": plate.signal_unit, "r_squared": ""}
    summary = cal.summary.copy()
    summary.insert(2, "unit", [units_of.get(q, cal.conc_unit) for q in summary["quantity"]])
    plate.record["standard_curve"] = plate.outputs["standard_curve"] = Table(summary)  # standard_curve.csv
    return {**settings, "signal_per_conc": per, "direction": direction}


def sample_wells(plate: PlateView) -> Any:
    """Bool per signal row: the plate's sample wells (its well table's ``role``; every well when the table has
    no role column). Flags that judge a rate (IMPRECISE) are set on these only."""
    if "role" not in plate.wells.columns:
        return None
    return (plate.wells["role"].astype(str) == "sample").to_numpy()


def pool_groups(plate: PlateView) -> Any:
    """An integer per signal row: sample wells with the same layout ``group`` and ``inhibitor`` share a
    number (one enzyme at one inhibitor level, so one rate-law shape); other wells (blanks, standards, empty)
    get -1. A layout without those columns makes one group of its sample wells (every well without a role
    column)."""
    import numpy as np
    import pandas as pd

    wells = plate.wells
    n = len(wells)
    sample = sample_wells(plate)
    keys = [c for c in ("group", "inhibitor") if c in wells.columns]
    if keys:
        frame = pd.DataFrame({c: wells[c].astype(str).to_numpy() for c in keys})
        number = frame.groupby(keys, sort=True, dropna=False).ngroup().to_numpy()
    else:
        number = np.zeros(n, dtype=np.int64)
    return np.where(np.ones(n, dtype=bool) if sample is None else sample, number, -1).astype(np.int64)


def blank_sets(plate: PlateView) -> dict[str, Any]:
    """``blank_sets`` (an integer per signal row, the same for wells corrected by the same blank wells, -1 for
    wells without a blank) and ``blank_share`` from the blank stage's ``blanks`` and ``blank_share`` columns;
    empty where the plate has no such columns (no blank step)."""
    import numpy as np

    wells = plate.wells
    if "blanks" not in wells.columns or "blank_share" not in wells.columns:
        return {}
    from vzero.plugins.kinetics.rates_table import blank_set_ids

    text = wells["blanks"].fillna("").astype(str).to_numpy()
    return {"blank_sets": blank_set_ids(np.zeros(len(text), dtype=str), text),
            "blank_share": wells["blank_share"].to_numpy(dtype=float)}


class KernelRates(RateMethod):
    """Shared kernel for methods that call a function ``f(time, signal, s0=, signal_per_conc=, **kw)`` named by
    ``function`` (``"module:name"``, imported on first use)."""

    function: ClassVar[str] = ""
    kernel_params: ClassVar[tuple[str, ...]] = ()

    def kernel(self, time: Any, signal: Any, plate: PlateView) -> Any:
        import importlib

        settings = own_calibration(plate, signal, self.settings)
        s0, per = conversion(plate, settings, plate.warn)
        module, name = self.function.split(":")
        func = getattr(importlib.import_module(module), name)
        kwargs = {k: self._value(k) for k in self.kernel_params}
        result = func(time, signal, s0=s0, signal_per_conc=per, **kwargs, **self.plate_kwargs(plate))
        from vzero.plugins.rates.checks import shared_checks

        return shared_checks(time, signal, result, s0=s0, signal_per_conc=per, finds_lags=self.finds_lags(),
                             models_decay=self.models_decay(), min_points=int(self.settings.get("min_points", 8)),
                             compares_model_free=self.compares_model_free(), samples=sample_wells(plate))

    def plate_kwargs(self, plate: PlateView) -> dict[str, Any]:
        """Further keyword arguments the kernel function takes from the plate's layout (none by default)."""
        return {}

    def finds_lags(self) -> bool:
        """Whether the kernel looks for lags itself and models the wells that have one (then it sets LAG; else
        :func:`vzero.plugins.rates.lagdecay.mark_lags` flags them LAG and UNMODELLED after the kernel)."""
        return False

    def models_decay(self) -> bool:
        """Whether the kernel models a loss of activity itself (then it sets DECAY; else
        :func:`vzero.plugins.rates.checks.mark_decay` flags such wells DECAY and UNMODELLED after the kernel)."""
        return False

    def compares_model_free(self) -> bool:
        """Whether the kernel compares its v0 with the model-free early quadratic itself (else
        :func:`vzero.plugins.rates.checks.mark_disagreement` flags the wells where they disagree)."""
        return False

    def _value(self, key: str) -> Any:
        v = self.settings[key]
        return v.m_as("s") if hasattr(v, "m_as") else v


class AutoRates(KernelRates):
    """Automatic linear range: per well, the longest early window that is straight within the read noise
    (curvature judged by the t statistic of a quadratic term), starting after any lag and ending before
    ``max_conversion``; v0 is the slope at the window start (curvature-aware)."""

    method, version = "auto", "1.1"  # 1.1: the shared checks add IMPRECISE and judge DISAGREES at 3 SE (was 4)
    summary = "automatic early window, curvature judged against read noise; slope at the window start"
    function = "vzero.plugins.rates.auto:auto"
    kernel_params = ("max_conversion", "max_rate_drop", "t_crit", "min_points", "find_lag", "estimate")
    params = {
        **CONVERSION_PARAMS,
        "max_conversion": MAX_CONVERSION,
        "max_rate_drop": Param("float", 0.10, "largest relative fall of the slope across a curved window",
                               low=0.0, high=1.0),
        "t_crit": Param("float", 3.0, "|t| of the quadratic term above which curvature is significant", low=1.0),
        "min_points": Param("int", 6, "reads in the shortest window", low=4),
        "find_lag": Param("bool", True, "start the window after a detected lag phase"),
        "estimate": Param.choice(("quadratic", "select"), "quadratic",
                                 "v0 from the window's quadratic (no low bias from curvature), or 'select': the "
                                 "straight line where curvature is not significant (smaller scatter on noisy wells)"),
    }

    def finds_lags(self) -> bool:
        """The window starts after a detected lag (LAG) unless ``find_lag`` is off."""
        return bool(self.settings["find_lag"])


class ModelChoiceRates(KernelRates):
    """Per well, the rate model the well's own reads support: the integrated Michaelis–Menten or power-law
    curve when it describes the reads within the noise (and, for the power law, agrees at t = 0 with a
    model-free quadratic), the integrated Hill curve where the power law's order exceeds 1 and an F-test
    supports the extra parameter, the integrated substrate-inhibition curve where the power law's order is
    near or below zero and an F-test against Michaelis–Menten supports it, else the slope at t = 0 of a
    quadratic through the reads up to 20 % conversion; no curve is fitted where the quadratic already holds
    every read and its third-order bias is negligible, and a power-law curve on the quadratic's own reads
    gives way to the quadratic unless its expected error is the smaller; wells with a lag get the lag/decay
    model. Where wells show a Hill or substrate-inhibition shape, one shape is fitted per layout group and
    inhibitor level and given to the wells it describes. Single-read spikes are masked first (docs/rates.md)."""

    #: 1.2: steps 6d (power law on the quadratic's own reads) and 6e (substrate-inhibition curve); without
    #: s0 its curves' standard errors follow `progress` 1.1. 1.3: step 9, a Hill or substrate-inhibition
    #: shape fitted jointly over the wells of each layout group and inhibitor level (models 6 and 7;
    #: `pool_shape`); step 8's shared lag and decay constant per such pool, no longer per plate; without s0,
    #: curve SEs from `progress` 1.2's profile over the shape. 1.4: without s0, curve SEs from `progress` 1.3
    #: and a fallback quadratic's SE scaled up to the rejected curve's residual RMS; v0 unchanged. 1.5: with
    #: s0, a quadratic kept because neither curve fits within lof_ratio gets its SE scaled as without s0, and
    #: the curves' start-rate floor of `progress` 1.4 (curves whose first reads are missing are fitted).
    #: 1.6: step 9 also tries the Hill shape where the pool's own rates show cooperativity (no well need keep
    #: the Hill curve alone; poolshape.RATES_HILL_Z). 1.7: the columns shape_pool, shape_load_1 and
    #: shape_load_2 (the error wells share through the plate's shape, for the fit), and step 9's shape
    #: covariance includes the read noise wells share through a common blank (SEs of model 6 and 7 wells)
    method, version = "model-choice", "1.7"
    default = True  # a rates step without 'method' gets this one (measured: docs/rates.md)
    summary = ("per well: whole-curve model (Michaelis–Menten, power law, Hill, substrate inhibition) if it fits "
               "within the noise, else early quadratic; spikes masked")
    function = "vzero.plugins.rates.choice:model_choice"
    kernel_params = ("min_points", "lof_ratio", "agree_z", "window_conversion", "find_lag", "pool_shape")
    params = {
        **CONVERSION_PARAMS,
        "min_points": Param("int", 8, "reads needed for any estimate", low=4),
        "lof_ratio": Param("float", 1.4, "residual RMS over read noise up to which a whole-curve model is "
                           "taken to describe the well", low=1.0),
        "agree_z": Param("float", 2.0, "standard errors within which a whole-curve v0 must agree with the early "
                         "quadratic's (a power-law curve is kept only then; a Michaelis-Menten curve beyond it is "
                         "checked against the power law)", low=0.5),
        "window_conversion": Param("float", 0.20, "fraction of substrate converted up to which the fallback "
                                   "quadratic is fitted", low=0.01, high=1.0),
        "find_lag": Param("bool", True, "use the lag/decay model on wells with a detected lag"),
        "pool_shape": Param("bool", True, "where wells show a Hill or substrate-inhibition shape, fit one shape "
                            "per layout group and inhibitor level (one enzyme each) and give it to the wells it "
                            "describes; false when a group mixes enzymes"),
    }

    def plate_kwargs(self, plate: PlateView) -> dict[str, Any]:
        """``pool_groups``: the wells that may share one shape (step 9), from the layout (:func:`pool_groups`);
        ``blank_sets`` and ``blank_share``: which wells share a blank's read noise, from the blank stage's
        columns (:func:`blank_sets`), for step 9's shape covariance."""
        return {"pool_groups": pool_groups(plate), **blank_sets(plate)}

    def finds_lags(self) -> bool:
        """Wells with a detected lag get the lag model (LAG) unless ``find_lag`` is off."""
        return bool(self.settings["find_lag"])

    def models_decay(self) -> bool:
        """Wells whose rate falls faster than depletion explains get the first-order decay model (DECAY)."""
        return True

    def compares_model_free(self) -> bool:
        """The model choice starts from the model-free quadratic and keeps a curve only where it agrees with
        it (or describes the reads within the noise), so the shared comparison would repeat that work."""
        return True


class PolynomialRates(KernelRates):
    """A low-order polynomial over the early curve; v0 is its derivative at the window start."""

    method, version = "polynomial", "1.1"  # 1.1: the shared checks add IMPRECISE and judge DISAGREES at 3 SE (was 4)
    summary = "low-order polynomial over the early curve; derivative at the start"
    function = "vzero.plugins.rates.polynomial:polynomial"
    kernel_params = ("degree", "window_s", "min_points", "max_conversion")
    params = {
        **CONVERSION_PARAMS,
        "max_conversion": MAX_CONVERSION,
        "degree": Param("int", 2, "polynomial order (1 = straight line)", low=1, high=4),
        "window": Param.quantity("s", None, "window length from the first read (default: all reads)",
                                 nullable=True),
        "min_points": Param("int", 5, "reads needed in the window", low=3),
    }

    def _value(self, key: str) -> Any:
        if key == "window_s":
            w = self.settings["window"]
            return None if w is None else float(w.m_as("s"))
        return super()._value(key)


class ProgressRates(KernelRates):
    """The whole curve fitted with the integrated Michaelis–Menten equation (Lambert W closed form);
    v0 = Vmax·S0/(Km + S0). Curves the model does not describe are flagged ``fit_failed``.

    ``model: power`` fits instead a rate that falls as v0·(1 − x)^n with the fraction x of substrate
    converted (closed form; needs substrate and ``epsilon``/``pathlength`` or ``signal_per_conc``): an
    empirical order that follows cooperative enzymes, whose rate falls faster than Michaelis–Menten allows
    (measurements in docs/rates.md)."""

    #: 1.1: bounded-curvature SE, IMPRECISE, DISAGREES at 3 SE; 1.2: the signal-unit SE from a profile over the shape
    #: 1.3: that SE times the measured factor at how clearly the curve bends (shapegrid.BEND_KNOTS); v0 unchanged
    #: 1.4: start-rate floor 1e-3 of the mean rate (was 1e-6: fits failed when the first reads were missing);
    #: with S0 the bounded-curvature SE only where it is within the NOISY limit and u's free optimum within
    #: 2 SE of its bounds
    method, version = "progress", "1.4"
    summary = "integrated Michaelis–Menten fit of the whole curve (Lambert W); v0 at S0"
    function = "vzero.plugins.rates.progress:progress_curve"
    kernel_params = ("min_points", "fail_ratio", "model")
    params = {
        **CONVERSION_PARAMS,
        "model": Param.choice(("michaelis-menten", "power"), "michaelis-menten",
                              "integrated rate law fitted to each curve"),
        "min_points": Param("int", 8, "reads needed for a fit", low=4),
        "fail_ratio": Param("float", 3.0, "residual RMS over read noise above which the fit is refused", low=1.0),
    }


class LagDecayRates(KernelRates):
    """Steady-state rate after a lag phase, extrapolated to its start through first-order inactivation."""

    method, version = "lag-decay", "1.1"  # 1.1: the shared checks add IMPRECISE and judge DISAGREES at 3 SE (was 4)
    summary = "rate after a lag, extrapolated back through first-order inactivation"
    function = "vzero.plugins.rates.lagdecay:lag_decay"
    kernel_params = ("min_points", "fail_ratio")
    params = {
        **CONVERSION_PARAMS,
        "min_points": Param("int", 8, "reads needed for a fit", low=4),
        "fail_ratio": Param("float", 3.0, "residual RMS over read noise above which the fit is refused", low=1.0),
    }

    def finds_lags(self) -> bool:
        """The rate is taken after any detected lag (LAG): always."""
        return True

    def models_decay(self) -> bool:
        """v0 is extrapolated back through first-order decay (DECAY): always."""
        return True


class WindowRates(RateMethod):
    """Least-squares slope over a fixed time window given in the recipe, with its standard error and R².

    Simple and transparent, but a straight line through a curving progress curve underestimates v0: use it
    when the window is known to be within the linear, low-conversion part of every curve. With the substrate
    and ``signal_per_conc`` (or ``standards``) a loss of activity is checked as for every method (DECAY).
    """

    method = "window"
    version = "1.1"  # 1.1: the shared checks add IMPRECISE and judge DISAGREES at 3 SE (was 4)
    summary = "least-squares slope over a fixed window"
    params = {
        **CONVERSION_PARAMS,
        "start": Param.quantity("s", "0 s", "window start"),
        "end": Param.quantity("s", "120 s", "window end"),
    }

    def kernel(self, time: Any, signal: Any, plate: PlateView) -> Any:
        from vzero.plugins.rates.window import window_slopes

        start, end = self.settings["start"].m_as("s"), self.settings["end"].m_as("s")
        if end <= start:
            raise StageError(f"rates window ends ({end} s) before it starts ({start} s); fix start and end")
        from vzero.plugins.rates.checks import shared_checks

        settings = own_calibration(plate, signal, self.settings)
        s0, per = conversion(plate, settings, lambda _m: None)
        if per is None:
            plate.warn("window: no signal_per_conc (or epsilon and pathlength) given: a loss of activity "
                       "(decay) and agreement with the model-free estimate (disagrees) are not checked")
        return shared_checks(time, signal, window_slopes(time, signal, start, end), s0=s0, signal_per_conc=per,
                             finds_lags=False, models_decay=False, samples=sample_wells(plate))


@hookimpl
def vzero_register(registry: Any) -> None:
    for stage in (WindowRates, AutoRates, ModelChoiceRates, PolynomialRates, ProgressRates, LagDecayRates):
        registry.add(stage)
