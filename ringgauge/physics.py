"""Newton's-rings relations used by the engine, the reports and the training mode.

Reflection, gap medium index n, lens radius R resting on a flat:
dark rings r_m^2 = m lambda R / n, bright rings r_m^2 = (m - 1/2) lambda R / n; the difference method
D_{m+p}^2 - D_m^2 = 4 p lambda R / n removes the contact offset.

References
----------
Standard Newton's-rings laboratory texts (e.g. the IIT Kanpur and Amrita virtual-laboratory procedures).
"""

from __future__ import annotations

import math


def ring_radius_mm(order: float, wavelength_nm: float, radius_mm: float, medium_index: float = 1.0,
                   kind: str = "dark") -> float:
    """Radius (mm) of ring ``order`` for a sphere of ``radius_mm`` on a flat (paraxial)."""
    m = order if kind == "dark" else order - 0.5
    if m < 0:
        raise ValueError("ring order must be >= 0 (dark) or >= 1/2 (bright)")
    return math.sqrt(m * wavelength_nm * 1e-6 * radius_mm / medium_index)


def radius_from_ring(diameter_mm: float, order: float, wavelength_nm: float, medium_index: float = 1.0,
                     kind: str = "dark") -> float:
    """Radius of curvature (mm) from one ring's diameter, assuming perfect contact."""
    m = order if kind == "dark" else order - 0.5
    return (diameter_mm / 2) ** 2 * medium_index / (m * wavelength_nm * 1e-6)


def wavelength_from_diameters(d_outer_mm: float, d_inner_mm: float, p: float, radius_mm: float,
                              medium_index: float = 1.0) -> float:
    """Wavelength (nm) by the difference method: (D_{m+p}^2 - D_m^2) n / (4 p R)."""
    return (d_outer_mm**2 - d_inner_mm**2) * medium_index / (4 * p * radius_mm) * 1e6


def radius_from_diameters(d_outer_mm: float, d_inner_mm: float, p: float, wavelength_nm: float,
                          medium_index: float = 1.0) -> float:
    """Radius of curvature (mm) by the difference method."""
    return (d_outer_mm**2 - d_inner_mm**2) * medium_index / (4 * p * wavelength_nm * 1e-6)


def medium_index_from_diameters(d_air_mm: float, d_liquid_mm: float) -> float:
    """Gap medium index from the same ring's diameter in air and with the liquid: n = (D_air / D_liquid)^2."""
    return (d_air_mm / d_liquid_mm) ** 2
