"""Both fit routes in one run: the rows of each route's tables say where they came from (``route``:
``rates`` for the two-step route through initial rates, ``curves`` for the joint progress-curve fit), and a
fit step keeps the rows an earlier step of the other route produced, so fits.csv holds both side by side."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

ROUTE_TABLES = ("fits", "model_comparison", "cooperativity", "correlations")
"""Tables that carry a ``route`` column and are merged across the routes."""


def merge(earlier: Mapping[str, Any], new: dict[str, Any], route: str) -> dict[str, Any]:
    """``new`` tables with a ``route`` column, preceded by the rows of the other routes in ``earlier``."""
    import pandas as pd
    from vzero.data import Table

    out = dict(new)
    for name in ROUTE_TABLES:
        table = out.get(name)
        if table is None:
            continue
        frame = table.frame.copy()
        frame.insert(0, "route", route)
        before = earlier.get(name)
        if isinstance(before, Table) and len(before.frame):
            old = before.frame
            old = old if "route" in old.columns else old.assign(route="rates")[["route", *old.columns]]
            old = old[old["route"].astype(str) != route]
            if len(old):
                frame = pd.concat([old, frame], ignore_index=True)
        out[name] = Table(frame, {**dict(getattr(before, "units", {}) or {}), **dict(table.units)}, dict(table.meta))
    return out
