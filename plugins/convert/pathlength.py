"""Optical pathlength (cm) of a vertical read through a microplate well.

Beer–Lambert needs the pathlength ``l`` (A = ε c l). In a plate read from above, ``l`` is the liquid height,
which depends on the fill volume and the well's shape; two ways to get it:

* **geometry**: height of ``volume`` in a well modelled as a straight-sided frustum (round or square) from
  its bottom and top size and depth. The meniscus is ignored (a flat liquid surface is assumed); a concave
  meniscus makes the path at the well centre a little shorter, so this estimate runs slightly high.
* **water peak**: liquid water absorbs near 975-977 nm and hardly at 900 nm, so for aqueous samples
  ``l = (A977 - A900) / k`` with ``k`` the same difference measured over 1 cm of the same buffer. The often
  quoted default ``k = 0.18`` per cm is common practice, not a primary-source value; the optical constants of
  water (Segelstein 1981) give 0.163 per cm at room temperature (see :func:`water_absorbance_per_cm`).
  Measure ``k`` for your buffer and temperature where it matters.

Results are estimates for research use; where pathlength matters, use the lab's validated procedure.
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
from vzero.errors import RecipeError

#: Commonly used 1 cm water-peak difference (A977 - A900) per cm; common practice, not a primary value.
WATER_K_FACTOR_COMMON = 0.18


@dataclass(frozen=True)
class WellGeometry:
    """A well as a frustum: ``bottom`` and ``top`` are diameters (round) or side lengths (square), in mm."""

    name: str
    shape: Literal["round", "square"]
    bottom_mm: float
    top_mm: float
    depth_mm: float
    source: str

    def area_mm2(self, size_mm: float) -> float:
        """Cross-section area (mm²) of the well where its diameter or side is ``size_mm``."""
        return math.pi * size_mm**2 / 4 if self.shape == "round" else size_mm**2

    @property
    def capacity_ul(self) -> float:
        """Volume (µL = mm³) of the full well."""
        return float(volume_to_height_inverse(self, self.depth_mm))


#: Typical well shapes. Check the plate maker's drawing and pass your own WellGeometry where it matters.
PLATE_GEOMETRIES: dict[str, WellGeometry] = {
    g.name: g
    for g in (
        WellGeometry(
            "96-flat", "round", 6.35, 6.86, 10.67,
            "standard 96-well flat bottom: manufacturer dimension sheet as quoted in the project's reference "
            "notes (verified secondary): 6.35 mm bottom, 6.86 mm top, 10.67 mm deep, bottom area 0.317 cm²",
        ),
        WellGeometry("96-half-area", "round", 4.5, 5.0, 10.7, "typical half-area 96-well plate; from memory"),
        WellGeometry("384-flat", "square", 3.3, 3.8, 11.5, "typical 384-well square-well plate; from memory"),
        WellGeometry("1536-flat", "square", 1.5, 1.7, 5.0, "typical 1536-well plate; from memory"),
    )
}  # fmt: skip


def _sqrt_area(g: WellGeometry, size_mm: float) -> float:
    return math.sqrt(g.area_mm2(size_mm))


def volume_to_height_inverse(g: WellGeometry, height_mm: float | np.ndarray) -> np.ndarray:
    """Volume (µL) that fills the well to ``height_mm``; the inverse of :func:`pathlength_from_volume`.

    With ``s(z) = sqrt(area)`` growing linearly from bottom to top, ``V(h) = ((s0 + k h)³ - s0³) / (3k)``.
    """
    s0, s1 = _sqrt_area(g, g.bottom_mm), _sqrt_area(g, g.top_mm)
    k = (s1 - s0) / g.depth_mm
    h = np.asarray(height_mm, dtype=float)
    s = s0 + k * h  # a³ - b³ = (a - b)(a² + ab + b²) with a - b = k h: no cancellation, exact for k = 0
    return h * (s * s + s * s0 + s0 * s0) / 3


def geometry(plate_type: str | WellGeometry) -> WellGeometry:
    """Look up a plate type in :data:`PLATE_GEOMETRIES` (or pass a WellGeometry through)."""
    if isinstance(plate_type, WellGeometry):
        return plate_type
    try:
        return PLATE_GEOMETRIES[plate_type]
    except KeyError:
        close = difflib.get_close_matches(str(plate_type), PLATE_GEOMETRIES, n=1)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        raise RecipeError(
            f"unknown plate type {plate_type!r}{hint}; known: {', '.join(PLATE_GEOMETRIES)}",
            hint="Or give the pathlength directly, or measure it from the water peak.",
        ) from None


def pathlength_from_volume(volume_ul: float | np.ndarray, plate_type: str | WellGeometry) -> np.ndarray:
    """Liquid height in cm for fill volume(s) ``volume_ul`` (µL) in wells of ``plate_type``; flat meniscus."""
    g = geometry(plate_type)
    v = np.asarray(volume_ul, dtype=float)
    cap = g.capacity_ul
    if not np.all(np.isfinite(v)) or np.any(v <= 0) or np.any(v > cap):
        raise RecipeError(
            f"fill volume {np.atleast_1d(v).tolist()} µL does not fit a {g.name} well (0 < volume <= {cap:.0f} µL)",
            hint="Check the volume and its unit (µL).",
        )
    s0, s1 = _sqrt_area(g, g.bottom_mm), _sqrt_area(g, g.top_mm)
    k = (s1 - s0) / g.depth_mm
    # the frustum's volume v = ((s0 + k h)^3 - s0^3)/(3k) solved for h, written without the difference of
    # cube roots: h = (s - s0)/k = 3v/(s^2 + s s0 + s0^2), s = cbrt(3kv + s0^3); exact for k = 0 (v/s0^2)
    # and free of cancellation for any taper, so no straight-wall branch is needed
    s = np.cbrt(3 * k * v + s0**3)
    height_mm = 3 * v / (s * s + s * s0 + s0 * s0)
    return height_mm / 10.0


def pathlength_from_water_peak(
    a_peak: float | np.ndarray, a_reference: float | np.ndarray, k_factor: float = WATER_K_FACTOR_COMMON
) -> np.ndarray:
    """Pathlength (cm) per well from water-band reads: ``(A_peak - A_reference) / k_factor``.

    ``a_peak`` near 975-977 nm, ``a_reference`` near 900 nm (blank-free, same wells); ``k_factor`` is the
    same difference for 1 cm of the buffer. Wells whose difference is not positive get NaN (the caller flags
    them) rather than an exception.
    """
    if not (np.isfinite(k_factor) and k_factor > 0):
        raise RecipeError(f"water k-factor must be a positive number per cm, got {k_factor!r}")
    diff = np.asarray(a_peak, dtype=float) - np.asarray(a_reference, dtype=float)
    return np.where(diff > 0, diff / k_factor, np.nan)


def water_absorbance_per_cm(wavelength_nm: float | np.ndarray, k_imag: float | np.ndarray) -> np.ndarray:
    """Decadic absorbance of 1 cm of water from the imaginary refractive index ``k``: 4πk / (λ ln 10).

    λ is converted from nm to cm. Used to derive the water-peak k-factor from tabulated optical constants.
    """
    lam_cm = np.asarray(wavelength_nm, dtype=float) * 1e-7
    return 4 * np.pi * np.asarray(k_imag, dtype=float) / (lam_cm * np.log(10))
