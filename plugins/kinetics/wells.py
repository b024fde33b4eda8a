"""Well names and plate geometry for 96-, 384- and 1536-well microplates.

Names follow ANSI/SLAS 4-2004 (Well Positions): a row label and a 1-based column number. Rows run A–H (96
wells, 8 x 12), A–P (384 wells, 16 x 24) and A–Z then AA–AF (1536 wells, 32 x 48). Zero padding and case do
not matter on input: ``"A01" == "A1" == "a1"``; the normal form is ``"A1"``. Row-major order (A1, A2, ...,
A12, B1, ...) is the order used everywhere in vzero.
"""

from __future__ import annotations

import functools
import re
from collections.abc import Iterable
from functools import lru_cache

#: Supported plate sizes and their (rows, columns), ANSI/SLAS 4-2004.
PLATE_SHAPES: dict[int, tuple[int, int]] = {96: (8, 12), 384: (16, 24), 1536: (32, 48)}

_LETTERS = "ABCDEFGHIJKLMNOPQRSTUVWXYZ"
#: Row labels of the largest plate, in order: A..Z, AA..AF.
ROW_LABELS: tuple[str, ...] = tuple(_LETTERS) + tuple("A" + c for c in _LETTERS[:6])
_ROW_INDEX: dict[str, int] = {label: i for i, label in enumerate(ROW_LABELS)}
_WELL_RE = re.compile(r"^\s*([A-Za-z]{1,2})\s*0*([0-9]{1,3})\s*$")


def normalise_well(name: str) -> str:
    """Return ``name`` in the normal ``"A1"`` form.

    Raises ``ValueError`` saying why when ``name`` is not a well of any supported plate (no row letter, no
    column number, a row past AF or a column past 48).
    """
    if not isinstance(name, str):
        raise ValueError(f"well name must be text, got {type(name).__name__}")
    return _normalise(name)


@functools.lru_cache(maxsize=8192)
def _normalise(name: str) -> str:
    m = _WELL_RE.match(name)
    if m is None:
        raise ValueError(f"{name!r} is not a well name: expected a row letter and a column number, like A1")
    row, col = m.group(1).upper(), int(m.group(2))
    if row not in _ROW_INDEX:
        raise ValueError(f"{name!r}: row {row!r} is past the last row (AF) of a 1536-well plate")
    if not 1 <= col <= 48:
        raise ValueError(f"{name!r}: column {col} is outside 1-48")
    return f"{row}{col}"


def is_well(name: object) -> bool:
    """True when ``name`` is text that :func:`normalise_well` accepts."""
    if not isinstance(name, str):
        return False
    try:
        normalise_well(name)
    except ValueError:
        return False
    return True


def plate_shape(n_wells: int) -> tuple[int, int]:
    """(rows, columns) of a plate with ``n_wells`` wells; ``ValueError`` for an unsupported size."""
    try:
        return PLATE_SHAPES[int(n_wells)]
    except (KeyError, TypeError, ValueError):
        sizes = ", ".join(map(str, PLATE_SHAPES))
        raise ValueError(f"unsupported plate size {n_wells!r}: use one of {sizes}") from None


def well_index(name: str, plate_size: int) -> tuple[int, int]:
    """0-based (row, column) of well ``name`` on a plate of ``plate_size`` wells.

    Raises ``ValueError`` when the name is malformed or the well lies outside that plate (e.g. I1 on 96).
    """
    rows, cols = plate_shape(plate_size)
    norm = normalise_well(name)
    m = _WELL_RE.match(norm)
    assert m is not None  # normal form always matches
    r, c = _ROW_INDEX[m.group(1)], int(m.group(2)) - 1
    if r >= rows or c >= cols:
        raise ValueError(
            f"well {norm} is not on a {plate_size}-well plate (rows A-{ROW_LABELS[rows - 1]}, columns 1-{cols})"
        )
    return r, c


@lru_cache(maxsize=8)
def _all_wells(plate_size: int) -> tuple[str, ...]:
    rows, cols = plate_shape(plate_size)
    return tuple(f"{ROW_LABELS[r]}{c + 1}" for r in range(rows) for c in range(cols))


def all_wells(plate_size: int) -> list[str]:
    """Every well of the plate in row-major order (A1, A2, ..., then B1, ...)."""
    return list(_all_wells(plate_size))


def well_from_index(index: int, plate_size: int) -> str:
    """Well name at row-major 0-based ``index`` (96: 0 -> A1, 12 -> B1, 95 -> H12)."""
    wells = _all_wells(plate_size)
    if not 0 <= index < len(wells):
        raise ValueError(f"index {index} is outside a {plate_size}-well plate (0-{len(wells) - 1})")
    return wells[index]


def infer_plate_size(names: Iterable[str]) -> int:
    """Smallest supported plate holding every well in ``names``; ``ValueError`` if a name is malformed."""
    max_r = max_c = -1
    for name in names:
        norm = normalise_well(name)
        m = _WELL_RE.match(norm)
        assert m is not None
        max_r = max(max_r, _ROW_INDEX[m.group(1)])
        max_c = max(max_c, int(m.group(2)) - 1)
    if max_r < 0:
        raise ValueError("no wells given: cannot tell the plate size")
    for size, (rows, cols) in PLATE_SHAPES.items():
        if max_r < rows and max_c < cols:
            return size
    raise AssertionError("unreachable: normalise_well bounds every well to a 1536-well plate")
