"""Spies for the default method's step tests: which wells a step handed to a fit, and the early quadratic
the steps saw (the real functions run; the spies only record)."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
from vzero.plugins.rates import choice


def rows_of(y: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """The indices in the plate ``y`` of the reads ``rows`` a step passed on (each row is one well's reads)."""
    return np.array([int(np.flatnonzero((y == row).all(axis=1))[0]) for row in rows])


def spy_quadratic(seen: dict[str, Any]) -> Callable[..., Any]:
    """``choice.early_quadratic`` that keeps its latest result in ``seen['q']``."""
    real = choice.early_quadratic

    def quadratic(*a: Any, **k: Any) -> Any:
        seen["q"] = real(*a, **k)
        return seen["q"]

    return quadratic
