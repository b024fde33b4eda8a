"""The Python interface for notebooks and scripts: run a recipe, read a finished run's tables.

Everything here does what the command line does (``vzero run``, ``vzero check``, ``vzero verify``) and returns
Python objects instead of printing. The heavy modules are imported when a function is called, so that
``import vzero`` stays quick.

Example::

    import vzero

    result = vzero.run("configs/demo.yaml", out="runs/today")
    result.rates          # a pandas DataFrame: one row per well, units in rates.attrs["units"]
    fits = vzero.read_table("runs/today/run.h5", "fits")
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pandas as pd
    from vzero.audit.verify import Report
    from vzero.recipe import Recipe
    from vzero.run.runner import RunResult


def run(recipe: str | Path, out: str | Path, *, force: bool = False, jobs: int = 1) -> RunResult:
    """Run ``recipe`` (a YAML file) into the folder ``out`` and return the result.

    The folder receives ``run.h5`` (the audit file) and one CSV per final table. ``result.rates`` and
    ``result.fits`` are pandas DataFrames; ``result.exit_code`` is 1 when some wells or plates failed.
    An existing run at ``out`` is replaced only with ``force=True``. Raises :class:`vzero.errors.VzeroError`
    (with what to do) for a bad recipe or input.
    """
    from vzero.run.runner import run as run_recipe

    return run_recipe(recipe, out, force=force, jobs=jobs)


def check(recipe: str | Path) -> Recipe:
    """Validate ``recipe`` in full without running it; raises :class:`vzero.errors.RecipeError` listing
    every problem."""
    from vzero.run.runner import check_recipe

    return check_recipe(recipe)


def read_table(audit: str | Path, name: str, *, verify: bool = True) -> pd.DataFrame:
    """One final table (``"rates"``, ``"fits"``, ...) of the audit file ``audit`` as a DataFrame, with each
    column's unit in ``frame.attrs["units"]``. Raises :class:`KeyError` when the run has no such table.

    The file's digests are checked first, as the commands do: a damaged or changed file raises
    :class:`vzero.errors.AuditFileError`. ``verify=False`` skips the check (and warns that it did)."""
    import warnings

    from vzero.audit.reader import read_result
    from vzero.audit.verify import check_intact

    check_intact(audit, check=verify, say=lambda text: warnings.warn(text, stacklevel=3))

    table = read_result(audit, name)
    if table is None:
        raise KeyError(f"{audit} has no table {name!r}")
    frame = table.frame.copy()
    frame.attrs["units"] = dict(table.units)
    return frame


def verify(audit: str | Path) -> Report:
    """Recompute every hash in ``audit``; ``report.ok`` is False when anything was changed or damaged."""
    from vzero.audit.verify import verify as verify_file

    return verify_file(audit)
