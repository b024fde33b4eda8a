"""The shared kinetics vocabulary of the built-in stages: what every stage package imports and none owns.

Flags, well names, the rates-table schema, exclusions and overrides, one batched least-squares solver and
one progress-curve simulator live here, so that the stage packages (importers, blank, rates, convert, fit,
report, export) depend on this package and not on each other's insides. Plugin authors may use it too.
"""

from __future__ import annotations

import importlib
from typing import Any

#: The plugin-author surface: names importable from this package, and the module each lives in (imported
#: on first use, so that importing the package stays light for the command line).
PUBLIC = {
    "RateMethod": "methods", "ImportMethod": "methods", "BlankMethod": "methods", "PlateView": "methods",
    "ConvertMethod": "methods", "Conversion": "methods",
    "RateResult": "rate_result", "Flag": "flags",
}

__all__ = sorted(PUBLIC)


def __getattr__(name: str) -> Any:
    module = PUBLIC.get(name)
    if module is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    return getattr(importlib.import_module(f"{__name__}.{module}"), name)
