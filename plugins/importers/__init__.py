"""Built-in import stage: a plate's time courses and its layout, from the files the runner hands over.

Kept light at import time (the command line imports every plugin); the readers are imported in ``run``.
"""

from __future__ import annotations

from typing import Any

from vzero import hookimpl
from vzero.errors import InputFileError, LayoutError
from vzero.params import Param
from vzero.plugins.kinetics.methods import ImportMethod
from vzero.stage import StageInput, StageOutput


class TableImport(ImportMethod):
    """Read a wide table (time column, then one column per well) or a long table (well, time, signal), in
    CSV, TSV, semicolon/decimal-comma text or xlsx, and join it with the plate layout.

    Partial plates are normal: wells in the data but not in the layout are named in a warning and not
    analysed; wells of the layout that the data lacks keep a row (flag ``excluded``, the reason in ``note``,
    no rate). Saturated reads (overflow tokens, or reads at or above ``ceiling``) are kept in the audit file
    but masked; single missing reads are named (well and file row) in a warning.
    """

    method = "table"
    version = "1.0"
    summary = "wide or long plate-reader tables (CSV/TSV/xlsx) joined with a plate layout"
    params = {
        "shape": Param.choice(("auto", "wide", "long"), "auto", "table shape; auto detects it"),
        "signal_unit": Param("unit", None, "unit of the reads (AU, RFU, RLU, ...); default RFU when the recipe's "
                             "assay.detection says fluorescence, RLU for luminescence, else AU", nullable=True),
        "time_unit": Param.choice(("s", "min", "h"), None, "unit of a numeric time column (default: from the "
                                  "header, else seconds, stated in the run's warnings)", nullable=True),
        "time_column": Param("str", None, "name of the time column (default: detected)", nullable=True),
        "temperature_column": Param("str", None, "name of a temperature column (°C)", nullable=True),
        "delimiter": Param.choice((",", ";", "\t"), None, "field separator (default: detected)", nullable=True),
        "decimal": Param.choice((".", ","), None, "decimal mark (default: detected)", nullable=True),
        "encoding": Param("str", None, "text encoding (default: UTF-8, else Latin-1)", nullable=True),
        "sheet": Param("any", None, "xlsx sheet by name or 0-based position", nullable=True),
        "skip_rows": Param("int", None, "rows above the header to skip (default: detected)", nullable=True, low=0),
        "block": Param("any", None, "which block of a multi-block file (name or 0-based position)", nullable=True),
        "overflow_tokens": Param("list", None, "text that marks a saturated read (default: a built-in list)",
                                 nullable=True),
        "ceiling": Param("float", None, "reads at or above this value count as saturated", nullable=True),
        "substrate_unit": Param("unit", None, "unit of the layout's substrate column, if its header has none",
                                like="M", nullable=True),
        "enzyme_unit": Param("unit", None, "unit of the layout's enzyme column, if its header has none",
                             like="M", nullable=True),
        "layout": Param("mapping", None, "a layout declared here instead of a file: dilution series, replicate "
                        "groups, blank and standard wells (schema in docs/inputs.md)", nullable=True),
        "inhibitor_unit": Param("unit", None, "unit of the layout's inhibitor column, if its header has none",
                                like="M", nullable=True),
    }

    @classmethod
    def check_settings(cls, settings: dict[str, Any]) -> list[tuple[str, str]]:
        """A layout declared in the recipe is checked with the recipe, so its problems carry the recipe's
        file and line (on the largest plate: whether a well exists on the plate itself is checked with the
        data, by the preflight)."""
        declared = settings.get("layout")
        if not declared:
            return []
        from vzero.plugins.importers.layouts import expand_declared_layout

        try:
            expand_declared_layout(declared, 1536)
        except LayoutError as exc:
            return [("layout", exc.message)]
        return []

    def preflight(self, data: StageInput) -> StageOutput:
        """Read the data and the layout and check them against each other and the recipe, as :meth:`run`
        does first; return the layout (``layout``, one row per analysed well) and its units (``well_units``)
        for the later steps' checks. Warnings go to ``data.warn``; nothing is written."""
        from vzero.plugins.importers.plate import read_plate

        plate = read_plate(data, self.settings)
        for note in plate.notes:
            data.warn(note)
        return StageOutput(artifacts={"layout": plate.wells, "well_units": dict(plate.units)})

    def read(self, data: StageInput) -> StageOutput:
        import numpy as np
        from vzero.data import Traces
        from vzero.plugins.importers.plate import read_plate

        s = self.settings
        plate = read_plate(data, s)
        for note in plate.notes:
            data.warn(note)
        block, n_missing = plate.block, len(plate.not_read)
        n_time = len(block.time_s)
        signal = np.vstack([np.asarray(block.signal, dtype=float)[plate.rows], np.full((n_missing, n_time), np.nan)])
        saturated = np.vstack([np.asarray(block.saturated, dtype=bool)[plate.rows],
                               np.zeros((n_missing, n_time), dtype=bool)])
        wells = plate.wells
        check_time_axis(np.asarray(block.time_s, dtype=float), data.inputs["data"].name)
        far = far_outside(signal)
        if far.any():
            saturated = saturated | far
            for i in np.flatnonzero(far.any(axis=1)):
                reads = ", ".join(f"{signal[i, j]:g}" for j in np.flatnonzero(far[i])[:3])
                data.warn(f"well {wells['well'].iloc[i]}: {int(far[i].sum())} read(s) far outside the plate's "
                          f"range ({reads}) masked and counted as saturated; check the data file")
        traces = Traces(
            plate=str(data.plate["name"]) if data.plate else "plate",
            time=np.asarray(block.time_s, dtype=float),
            signal=signal,
            mask=np.isfinite(signal) & ~saturated,
            saturated=saturated,
            wells=wells,
            signal_unit=s["signal_unit"] or _default_signal_unit(data.recipe),
            well_units={k: v for k, v in plate.units.items() if k in wells.columns and v},
            temperature=None if block.temperature is None else np.asarray(block.temperature),
        )
        if plate.not_read:
            traces = _mark_not_read(traces, plate.not_read, plate.source)
        return StageOutput(artifacts={"traces": traces}, record={"layout": traces.wells})


#: A read is "far outside" the plate when it lies further from the plate's median read than this many times
#: the plate's spread (the 1st to 99th percentile of its reads, or the median itself if larger), or beyond
#: ``ABSURD_READ`` in any unit. No reader's range comes near either: such a read is a typo, a transfer error
#: or a probe, and fitting it costs the fit its convergence. (Thresholds chosen here; a rule of thumb.)
FAR_FACTOR = 1000.0
ABSURD_READ = 1e12


def far_outside(signal: Any) -> Any:
    """Boolean mask [n_wells, n_time] of reads far outside the plate's range (see ``FAR_FACTOR``)."""
    import numpy as np

    finite = np.isfinite(signal)
    far = np.zeros(signal.shape, dtype=bool)
    if not finite.any():
        return far
    values = signal[finite]
    far[finite] = np.abs(values) > ABSURD_READ
    usable = values[np.abs(values) <= ABSURD_READ]
    if usable.size:
        low, mid, high = np.percentile(usable, [1, 50, 99])
        scale = max(high - low, abs(mid), 1e-9)
        far[finite] |= np.abs(values - mid) > FAR_FACTOR * scale
    return far


#: The span of a plate's time axis that a kinetic read can have, in seconds (a millisecond to a year).
TIME_SPAN_S = (1e-3, 3.2e7)


def check_time_axis(time_s: Any, source: str) -> None:
    """A time axis must be finite and span between ``TIME_SPAN_S`` (a unit mix-up or a scaled column
    otherwise gives rates off by hundreds of orders of magnitude)."""
    import numpy as np

    if time_s.size == 0:
        return
    if not np.isfinite(time_s).all():
        raise InputFileError("the time column holds a value that is not a finite number", path=source,
                             column="time", hint="Fix the time column.")
    span = float(time_s.max() - time_s.min())
    low, high = TIME_SPAN_S
    if time_s.size > 1 and not low <= span <= high:
        raise InputFileError(
            f"the reads span {span:g} s; a kinetic read spans between {low:g} s and {high:g} s", path=source,
            column="time", hint="Check the time column and its unit (time_unit in the import step).")


class RatesTableImport(ImportMethod):
    """Read initial rates measured elsewhere (one row per well or measurement) to fit them directly.

    For rates that come from another instrument or an older analysis: a CSV with a substrate column, a rate
    column and optionally group, inhibitor and enzyme columns. Units come from the headers
    (``substrate (uM)``) or from the parameters. Each row is a point of its own (replicates are not averaged).
    """

    method = "rates-table"
    version = "1.0"
    summary = "initial rates already measured (substrate, rate, group) for fitting only"
    params = {
        "substrate_column": Param("str", "substrate", "column of substrate concentrations"),
        "rate_column": Param("str", "rate", "column of initial rates"),
        "group_column": Param("str", None, "column naming the group each row belongs to", nullable=True),
        "inhibitor_column": Param("str", None, "column of inhibitor concentrations", nullable=True),
        "enzyme_column": Param("str", None, "column of enzyme concentrations", nullable=True),
        "substrate_unit": Param("unit", None, "unit of substrate, if its header has none", nullable=True),
        "rate_unit": Param("unit", None, "unit of the rates, if its header has none", nullable=True),
        "inhibitor_unit": Param("unit", None, "unit of inhibitor, if its header has none", nullable=True),
        "enzyme_unit": Param("unit", None, "unit of enzyme, if its header has none", nullable=True),
    }

    def read(self, data: StageInput) -> StageOutput:
        import numpy as np
        import pandas as pd
        from vzero.data import Table
        from vzero.plugins.importers import readers

        s = self.settings
        raw = data.inputs.get("data")
        if raw is None:
            raise InputFileError("the plate has no 'data' file in the recipe", hint="Add data: FILE to the plate.")
        grid = readers.load_grid(raw.data, source=raw.name, options=readers.ReadOptions())
        header, body = grid.rows[0], grid.rows[1:]
        names: dict[str, tuple[int, str]] = {}
        for i, label in enumerate(header):
            name, unit = _split_unit(label)
            names[name] = (i, unit)
        out: dict[str, Any] = {}
        units: dict[str, str] = {}
        for role, key in (("substrate", "substrate_column"), ("rate", "rate_column"),
                          ("inhibitor", "inhibitor_column"), ("enzyme", "enzyme_column"), ("group", "group_column")):
            col = s[key]
            if col is None:
                continue
            if col not in names:
                raise InputFileError(f"no column {col!r}; the header has {', '.join(names)}", path=raw.name, row=1,
                                     hint=f"Set {key} in the import step.")
            idx, unit = names[col]
            values = [row[idx] if idx < len(row) else "" for row in body]
            if role == "group":
                out[role] = np.array(values, dtype=object)
                continue
            numbers = np.empty(len(values))
            for r, text in enumerate(values):
                try:
                    numbers[r] = float(text.replace(grid.decimal, ".") if grid.decimal == "," else text)
                except ValueError:
                    raise InputFileError(f"{text!r} is not a number", path=raw.name, row=grid.lines[r + 1],
                                         column=col, hint="Fix or remove that row.") from None
            out[role] = numbers
            given = unit or s[f"{role}_unit"]
            if not given:
                raise InputFileError(f"the {role} column has no unit", path=raw.name, column=col,
                                     hint=f'Write it in the header, like "{col} (uM)", or set {role}_unit.')
            units[role] = given
        n = len(body)
        frame = pd.DataFrame({
            "well": [f"row{grid.lines[r + 1]}" for r in range(n)],
            "group": out.get("group", np.full(n, "all", dtype=object)),
            "role": np.full(n, "sample", dtype=object),
            "substrate": out["substrate"],
            "substrate_unit": units["substrate"],
            "inhibitor": out.get("inhibitor", np.full(n, np.nan)),
            "enzyme": out.get("enzyme", np.full(n, np.nan)),
            "rate": out["rate"],
            "rate_stderr": np.full(n, np.nan),
            "rate_unit": units["rate"],
            "method": np.full(n, "imported", dtype=object),
            "flags": np.full(n, "", dtype=object),
        })
        units.update(rate_stderr=units["rate"])
        return StageOutput(artifacts={"rates": Table(frame, units, {"signal_unit": ""})})


def _split_unit(label: str) -> tuple[str, str]:
    """``"substrate (uM)"`` or ``"substrate [uM]"`` -> ``("substrate", "uM")``; no unit -> ``(label, "")``."""
    import re

    m = re.fullmatch(r"\s*(.*?)\s*[\(\[]\s*(.+?)\s*[\)\]]\s*", label)
    return (m.group(1), m.group(2)) if m else (label.strip(), "")


def _default_signal_unit(recipe: Any) -> str:
    """The unit of the reads when the import step does not say: RFU for fluorescence, RLU for luminescence
    (from the recipe's ``assay.detection``), else AU (absorbance)."""
    assay = recipe.get("assay") if isinstance(recipe, dict) else None
    detection = str(assay.get("detection", "")).lower() if isinstance(assay, dict) else ""
    if "fluoresc" in detection:
        return "RFU"
    if "lumines" in detection:
        return "RLU"
    return "AU"


def _mark_not_read(traces: Any, wells: list[str], source: str) -> Any:
    """Mark layout wells without reads: ``excluded`` (so they get no rate and no failure) with the reason in
    ``note``, which the rates table carries."""
    import numpy as np

    table = traces.wells.copy()
    missing = table["well"].astype(str).isin(set(wells)).to_numpy()
    excluded = table["excluded"].to_numpy(dtype=bool) if "excluded" in table.columns else np.zeros(len(table), bool)
    notes = table["note"].astype(str).to_numpy(dtype=object) if "note" in table.columns else \
        np.full(len(table), "", dtype=object)
    reason = f"not read: in the layout {source} but not in the data file"
    notes = np.where(missing, np.where(notes == "", reason, notes + "; " + reason), notes).astype(object)
    table["excluded"] = excluded | missing
    table["note"] = notes
    return traces.evolve(wells=table)


@hookimpl
def vzero_check_recipe(recipe: Any, where: Any, plates: Any) -> list[str]:
    """The recipe's ``exclusions`` and ``overrides`` (applied by the import and rates stages)."""
    from vzero.plugins.kinetics.exclusions import check_items

    return check_items(recipe, where, plates)


@hookimpl
def vzero_register(registry: Any) -> None:
    registry.add(TableImport)
    registry.add(RatesTableImport)
