"""Framework-owned base classes of the import, blank and rates stage methods.

Each base owns ``run`` (sealed: a subclass that overrides it is refused when it is defined and again when it
is registered, see :attr:`vzero.stage.Stage.sealed`) and asks its subclass for the one thing that differs
between methods. What every method of a kind must do with the recipe happens here, once, so that no plugin
can forget it:

* :class:`ImportMethod`: the subclass reads the plate (:meth:`ImportMethod.read`); the base applies the
  recipe's ``exclusions`` (masked reads, excluded wells, notes) to the traces it returns.
* :class:`BlankMethod`: the subclass returns the corrected signal (:meth:`BlankMethod.correct`); the base
  keeps the well table (exclusion notes included) and the mask, which a correction may narrow, never widen.
* :class:`ConvertMethod`: the subclass computes a conversion factor (:meth:`ConvertMethod.conversion`); the
  base applies it to the rates table, keeping every row, flag and note, and adds the turnover.
* :class:`RateMethod`: the subclass computes per-well rates (:meth:`RateMethod.kernel`: time, signal and
  settings in, a :class:`~vzero.plugins.kinetics.rate_result.RateResult` out); the base hands it the signal
  with excluded and saturated reads already missing, builds the standard rates table, applies the recipe's
  ``overrides`` and excluded wells, and reports the wells with a failure flag.

The schemas registered in :mod:`vzero.plugins.kinetics.schemas` name these bases, so the registry refuses a
stage method of these kinds (import, blank, rates, convert) that does not derive from them (docs/schemas.md,
docs/plugins.md).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any, ClassVar, final

from vzero.errors import StageError
from vzero.plugins.kinetics import flags
from vzero.stage import Stage, StageInput, StageOutput


@dataclass(frozen=True)
class PlateView:
    """What a kernel may know about the plate besides its reads: the plate name, the well table (one row per
    signal row; columns ``well``, ``role`` and the layout's, such as ``substrate``), the units of those
    columns, the unit of the signal, and ``warn`` to record a run warning. A kernel that fits something the
    audit file should keep puts it in ``record`` (name -> table or array), which the framework stores with the
    step; a table the run's output folder should hold as well (the plate's own standard curve, say) goes in
    ``outputs`` (name -> Table): it joins the step's artifacts, so it is stored with the step, stacked over
    the plates and written as ``<name>.csv`` beside rates.csv."""

    name: str
    wells: Any
    well_units: Mapping[str, str]
    signal_unit: str
    warn: Callable[[str], None]
    record: dict[str, Any] = dataclasses.field(default_factory=dict)
    outputs: dict[str, Any] = dataclasses.field(default_factory=dict)


def _traces(data: StageInput, kind: str) -> Any:
    from vzero.data import Traces

    traces = data.artifacts.get("traces")
    if not isinstance(traces, Traces):
        raise StageError(f"a {kind} step needs the plate's traces; put an import step before it")
    return traces


class ImportMethod(Stage):
    """Base of the import methods. Implement :meth:`read`; ``run`` is the framework's."""

    kind: ClassVar[str] = "import"
    sealed: ClassVar[tuple[str, ...]] = ("run",)

    def read(self, data: StageInput) -> StageOutput:  # pragma: no cover - abstract
        """Read the plate's raw files (``data.inputs``) into ``traces`` (or a ``rates`` table)."""
        raise NotImplementedError

    @final
    def run(self, data: StageInput) -> StageOutput:
        from vzero.data import Traces
        from vzero.plugins.kinetics.exclusions import apply_exclusions

        out = self.read(data)
        traces = out.artifacts.get("traces")
        if isinstance(traces, Traces):
            out = dataclasses.replace(out, artifacts={**out.artifacts,
                                                      "traces": apply_exclusions(traces, data.recipe)})
        return out


class BlankMethod(Stage):
    """Base of the blank methods. Implement :meth:`correct`; ``run`` is the framework's."""

    kind: ClassVar[str] = "blank"
    sealed: ClassVar[tuple[str, ...]] = ("run",)

    def correct(self, traces: Any, warn: Callable[[str], None]) -> Any:  # pragma: no cover - abstract
        """The corrected signal, shape ``[n_wells, n_time]`` like ``traces.signal`` (NaN where a read cannot
        be corrected), or ``None`` to leave the traces as they are. A method that wants to say per well which
        blanks it used returns ``(signal, columns)``: ``columns`` maps new well-table column names to one value
        per well (they travel on to the rates table); existing columns cannot be replaced."""
        raise NotImplementedError

    @final
    def run(self, data: StageInput) -> StageOutput:
        import numpy as np

        traces = _traces(data, "blank")
        result = self.correct(traces, data.warn)
        if result is None:
            return StageOutput(artifacts={"traces": traces})
        columns: Mapping[str, Any] = {}
        if isinstance(result, tuple):
            result, columns = result
        corrected = np.asarray(result, dtype=float)
        if corrected.shape != traces.signal.shape:
            raise StageError(f"blank method {self.method!r} returned a signal of shape {corrected.shape}, "
                             f"not {traces.signal.shape} like the plate's")
        wells = traces.wells
        if columns:
            taken = sorted(set(columns) & set(wells.columns))
            if taken:
                raise StageError(f"blank method {self.method!r} tried to replace the well column(s) "
                                 f"{', '.join(taken)}; a blank method may only add columns")
            wells = wells.copy()
            for name, values in columns.items():
                values = list(values)
                if len(values) != len(wells):
                    raise StageError(f"blank method {self.method!r} gave {len(values)} values for the well column "
                                     f"{name!r}, not one per well ({len(wells)})")
                wells[name] = values
        mask = traces.mask & np.isfinite(corrected)  # a read masked before stays masked
        return StageOutput(artifacts={"traces": traces.evolve(signal=corrected, mask=mask, wells=wells)})


class RateMethod(Stage):
    """Base of the rates methods. Implement :meth:`kernel`; ``run`` is the framework's.

    Example (a complete method)::

        class FirstReads(RateMethod):
            method, version = "first-reads", "1.0"
            params = {"reads": Param("int", 5, "reads from the start", low=2)}

            def kernel(self, time, signal, plate):
                n = self.settings["reads"]
                return RateResult(v0=(signal[:, n - 1] - signal[:, 0]) / (time[n - 1] - time[0]))
    """

    kind: ClassVar[str] = "rates"
    sealed: ClassVar[tuple[str, ...]] = ("run",)

    def kernel(self, time: Any, signal: Any, plate: PlateView) -> Any:  # pragma: no cover - abstract
        """Per-well rates in signal units per second as a :class:`RateResult`, one value per row of ``signal``.

        ``time`` [n_time] s; ``signal`` [n_wells, n_time] with NaN where a read is missing, saturated or
        excluded by the recipe (both arrays are copies); settings in ``self.settings``.
        """
        raise NotImplementedError

    @final
    def run(self, data: StageInput) -> StageOutput:
        from vzero.plugins.kinetics.exclusions import apply_overrides
        from vzero.plugins.kinetics.rate_result import RateResult
        from vzero.plugins.kinetics.rates_table import rates_table

        traces = _traces(data, "rates")
        plate = PlateView(traces.plate, traces.wells.copy(), dict(traces.well_units), traces.signal_unit, data.warn)
        result = self.kernel(traces.time.copy(), traces.masked_signal(), plate)
        if not isinstance(result, RateResult):
            raise StageError(f"rates method {self.method!r} returned {type(result).__name__} from its kernel, "
                             "not a RateResult")
        problems = result.problems(len(traces.wells))
        if problems:
            raise StageError(f"rates method {self.method!r} returned a RateResult that does not fit the plate: "
                             + "; ".join(problems))
        table = rates_table(traces, result, self.method)
        table = apply_overrides(traces, table, data.recipe.get("overrides") or [])
        return StageOutput(artifacts={**plate.outputs, "rates": table}, failed=failed_wells(table.frame),
                           record=dict(plate.record))


@dataclass(frozen=True)
class Conversion:
    """What a convert method computes: rates in signal units per second times ``factor`` (a number or one per
    row of the rates table) give rates in ``unit``. ``stderr``: the converted standard errors, when they are
    not simply ``rate_stderr · |factor|`` (for example with the calibration's own uncertainty propagated).
    ``columns`` (name -> one value per row) and their ``units`` are added to the table; ``record`` holds extra
    datasets for the audit file (as :attr:`vzero.stage.StageOutput.record`)."""

    factor: Any
    unit: str
    stderr: Any = None
    columns: Mapping[str, Any] = dataclasses.field(default_factory=dict)
    units: Mapping[str, str] = dataclasses.field(default_factory=dict)
    record: Mapping[str, Any] = dataclasses.field(default_factory=dict)


class ConvertMethod(Stage):
    """Base of the convert methods. Implement :meth:`conversion`; ``run`` is the framework's: it applies the
    factor, keeps every row and column of the rates table (flags and the recipe's notes included), keeps the
    unconverted rate as ``signal_rate``, and adds the turnover (rate / [E], 1/s) where the enzyme is known."""

    kind: ClassVar[str] = "convert"
    sealed: ClassVar[tuple[str, ...]] = ("run",)

    def conversion(self, rates: Any, data: StageInput) -> Conversion:  # pragma: no cover - abstract
        """The :class:`Conversion` for the plate's ``rates`` table (``data`` holds the traces and raw files)."""
        raise NotImplementedError

    @final
    def run(self, data: StageInput) -> StageOutput:
        import numpy as np

        table = data.artifacts.get("rates")
        if table is None:
            raise StageError("a convert step needs a rates table; put a rates step before it")
        conv = self.conversion(table, data)
        if not isinstance(conv, Conversion):
            raise StageError(f"convert method {self.method!r} returned {type(conv).__name__}, not a Conversion")
        frame = table.frame.copy()
        for name, values in conv.columns.items():
            frame[name] = np.broadcast_to(np.asarray(values, dtype=float), len(frame)).copy()
        traces = data.artifacts.get("traces")
        signal_unit = str(table.meta.get("signal_unit") or getattr(traces, "signal_unit", "") or "AU")
        out = _convert(table.with_frame(frame, **conv.units), frame, conv, signal_unit, data.warn)
        return StageOutput(artifacts={"rates": out}, record=dict(conv.record))


def _convert(table: Any, frame: Any, conv: Conversion, signal_unit: str, warn: Callable[[str], None]) -> Any:
    """Apply ``conv`` to ``frame`` (a copy of the table's), add the turnover, return the new table."""
    from vzero import units

    frame["signal_rate"] = frame["rate"]
    frame["rate"] = frame["signal_rate"] * conv.factor
    frame["rate_stderr"] = conv.stderr if conv.stderr is not None else frame["rate_stderr"] * abs(conv.factor)
    frame["rate_unit"] = conv.unit
    new_units = {"rate": conv.unit, "rate_stderr": conv.unit, "signal_rate": f"{signal_unit}/s"}
    _warn_sign(frame, warn)
    if "enzyme" in frame and frame["enzyme"].notna().any() and table.units.get("enzyme"):
        kt = units.factor(f"({conv.unit})/({table.units['enzyme']})", "1/s")
        with_enzyme = frame["enzyme"].where(frame["enzyme"] > 0)
        frame["turnover"] = frame["rate"] / with_enzyme * kt
        frame["turnover_stderr"] = frame["rate_stderr"] / with_enzyme * kt
        frame["turnover_unit"] = "1/s"
        new_units.update(turnover="1/s", turnover_stderr="1/s")
    return table.with_frame(frame, **new_units)


def _warn_sign(frame: Any, warn: Callable[[str], None]) -> None:
    import numpy as np

    rates = frame["rate"].to_numpy(dtype=float)
    if "role" in frame:
        rates = rates[(frame["role"] == "sample").to_numpy()]
    rates = rates[np.isfinite(rates)]
    negative = int((rates < 0).sum())
    if rates.size and negative > 0.5 * rates.size:
        warn(f"{negative} of {rates.size} sample rates are negative after conversion: "
             "check 'direction' (increase when the product absorbs, decrease when the substrate does)")


FAILURE_NAMES = frozenset(flags.names_of(flags.FAILURE))


def failed_wells(frame: Any) -> list[str]:
    """``"C7: fit_failed"`` for each sample well carrying a failure flag (the run's exit code becomes 1)."""
    if "flags" not in frame or "role" not in frame:
        return []
    texts = frame["flags"].astype(str).tolist()
    failing = {text: bad for text in set(texts) if (bad := [f for f in text.split(";") if f in FAILURE_NAMES])}
    if not failing:  # each distinct flag text is read once: most wells share a few
        return []
    return [f"{well}: {', '.join(failing[text])}"
            for well, role, text in zip(frame["well"].tolist(), frame["role"].tolist(), texts, strict=True)
            if role == "sample" and text in failing]
