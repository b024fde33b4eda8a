"""Both fit routes in one run: the rows of each route's tables say where they came from (``route``:
``rates`` for the two-step route through initial rates, ``curves`` for the joint progress-curve fit).

A recipe that runs both has two fit steps; the runner stacks their tables under one another with a ``step``
column (the fit kind's schema says its tables stack), so fits.csv holds both routes side by side and each
step returns only its own rows.
"""

from __future__ import annotations

from typing import Any

ROUTE_TABLES = ("fits", "model_comparison", "cooperativity", "correlations")
"""Tables that carry a ``route`` column."""


def with_route(new: dict[str, Any], route: str) -> dict[str, Any]:
    """``new`` tables, those of :data:`ROUTE_TABLES` with a first column ``route``."""
    from vzero.data import Table

    out = dict(new)
    for name in ROUTE_TABLES:
        table = out.get(name)
        if table is None:
            continue
        frame = table.frame.copy()
        frame.insert(0, "route", route)
        out[name] = Table(frame, dict(table.units), dict(table.meta))
    return out
