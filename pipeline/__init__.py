"""vzero: initial rates and kinetic parameters from plate-reader time courses, as an auditable pipeline.

The core (this package) knows recipes, stages, data containers, the audit file, execution and the command
line, and no chemistry; the stages live in :mod:`vzero.plugins` and are found through entry points. A plugin
module marks its hook implementations with :data:`hookimpl`::

    from vzero import hookimpl

    @hookimpl
    def vzero_register(registry):
        registry.add(MyRates)

From a notebook, :func:`run` runs a recipe and :func:`read_table` reads a finished run's tables
(:mod:`vzero.api`).
"""

from __future__ import annotations

from vzero.api import check, read_table, run, verify
from vzero.meta import PROJECT, __version__, hookimpl

__all__ = ["PROJECT", "__version__", "check", "hookimpl", "read_table", "run", "verify"]
