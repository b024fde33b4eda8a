"""vzero's core: recipes, stages, data containers, the audit store, execution and the command line.

The core knows no chemistry. Stage methods (import, blank, rates, convert, fit, report and any a lab adds)
are plugins; a plugin module marks its hook implementations with :data:`hookimpl`::

    from vzero import hookimpl

    @hookimpl
    def vzero_register(registry):
        registry.add(MyRates)
"""

from __future__ import annotations

import pluggy

__version__ = "0.1.0"
PROJECT = "vzero"

hookimpl = pluggy.HookimplMarker(PROJECT)
"""Marker for hook implementations in plugins (``@hookimpl``)."""

__all__ = ["PROJECT", "__version__", "hookimpl"]
