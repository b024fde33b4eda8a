"""vzero's name, version and the hook marker: the leaf every other module may import.

Kept out of the package's ``__init__`` so that importing one part of vzero never drags in the rest, and so
that no core module needs to import the package that re-exports it.
"""

from __future__ import annotations

import pluggy

__version__ = "0.1.0"
PROJECT = "vzero"

hookimpl = pluggy.HookimplMarker(PROJECT)
"""Marker for hook implementations in plugins (``@hookimpl``)."""

hookspec = pluggy.HookspecMarker(PROJECT)
"""Marker for the hook specifications in :mod:`vzero.hookspecs`."""
