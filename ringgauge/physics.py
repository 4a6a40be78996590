"""Newton's-rings relations, in one place: the engine, the synthetic images' fringe-rate check, the training
exercises and the documents use these rather than writing a formula again.

Reflection, gap medium index n, lens radius R resting on a flat:
dark rings r_m^2 = m lambda R / n, bright rings r_m^2 = (m - 1/2) lambda R / n. A least-squares line
r^2 = slope * m + intercept over all rings gives R = n * slope / lambda; the intercept absorbs the contact offset
that dust or pressure adds to every order (the difference method D_{m+p}^2 - D_m^2 = 4 p lambda R / n is the
two-ring case of the same line).

References
----------
E. Hecht, *Optics*, Newton's rings in the section on amplitude-splitting interferometers (r_m^2 = m lambda_f R,
from memory as to the edition's equation number). NPTEL Physical Optics, module 11 (least-squares fit of D^2
against ring number): https://archive.nptel.ac.in/content/storage2/courses/122103011/md06_physical_optics/
Amrita Virtual Lab, Newton's rings: http://vlab.amrita.edu/?sub=1&brch=189&sim=335
"""

from __future__ import annotations

import numpy as np


def order_value(order, kind: str = "dark"):
    """The factor multiplying lambda R / n in r^2 for ring number ``order``: m (dark) or m - 1/2 (bright)."""
    if kind == "dark":
        return order
    if kind == "bright":
        return order - 0.5
    raise ValueError(f"ring kind must be 'dark' or 'bright', not {kind!r}")


def label_orders(phase_orders, kind: str = "dark") -> np.ndarray:
    """Ring numbers from phase-frame orders (0 = first dark ring outside the contact).

    Dark rings get integers m >= 1, bright rings m - 1/2, so a missing ring leaves a gap in the labels.
    """
    m = np.asarray(phase_orders, dtype=np.float64) + 1.0
    if kind == "dark":
        return np.rint(m)
    return np.rint(order_value(m, kind)) + 0.5


def sphere_r2_correction(r2_mm2, radius_mm: float):
    """r^2 of the paraxial relation from a measured r^2 on a sphere: r^2 = 2 R t - t^2, t = gap, so add t^2."""
    t = np.asarray(r2_mm2, dtype=np.float64) / (2 * radius_mm)
    return r2_mm2 + t * t


def radius_from_slope(slope_mm2: float, wavelength_nm: float, medium_index: float = 1.0) -> float:
    """Radius of curvature (mm) from the slope of r^2 (mm^2) against fringe order: R = n * slope / lambda."""
    return medium_index * slope_mm2 / (wavelength_nm * 1e-6)


def slope_from_radius(radius_mm: float, wavelength_nm: float, medium_index: float = 1.0) -> float:
    """Slope of r^2 (mm^2 per fringe) that a radius gives: lambda R / n."""
    return wavelength_nm * 1e-6 * radius_mm / medium_index


def part_radius_mm(plate_radius_mm: float, power_fringes: float, diameter_mm: float, wavelength_nm: float) -> float:
    """Radius of a convex part on a concave plate that shows ``power_fringes`` (> 0: contact at the centre).

    Gap at the edge h = D/2 of the paraxial surfaces: P lambda/2 = h^2/2 (1/R_part - 1/R_plate), hence
    1/R_part = 1/R_plate + 4 P lambda / D^2; to first order the shop formula dR = -4 N lambda R^2 / D^2.
    """
    lam_mm = wavelength_nm * 1e-6
    return 1.0 / (1.0 / plate_radius_mm + 4.0 * power_fringes * lam_mm / diameter_mm**2)


def power_from_radius(r_part_mm: float, plate_radius_mm: float, diameter_mm: float, wavelength_nm: float) -> float:
    """Inverse of :func:`part_radius_mm`: the power in fringes a part of radius ``r_part_mm`` shows."""
    lam_mm = wavelength_nm * 1e-6
    return (1.0 / r_part_mm - 1.0 / plate_radius_mm) * diameter_mm**2 / (4.0 * lam_mm)



def fringe_height_nm(wavelength_nm: float, medium_index: float = 1.0) -> float:
    """Change of gap (nm) between neighbouring fringes in reflection: lambda / (2 n)."""
    return wavelength_nm / (2.0 * medium_index)


def fringes_at(fringes: float, from_wavelength_nm: float, to_wavelength_nm: float) -> float:
    """A height given in fringes of one wavelength, in fringes of another: N * lambda_from / lambda_to (the
    height N lambda_from / 2 is the same)."""
    return fringes * (from_wavelength_nm / to_wavelength_nm)


def fringe_frequency_per_mm(r_mm, radius_mm: float, wavelength_nm: float, medium_index: float = 1.0):
    """Fringes per mm at radius r of Newton's rings: d(n r^2 / (lambda R))/dr = 2 n r / (lambda R)."""
    return 2.0 * medium_index * r_mm / (radius_mm * wavelength_nm * 1e-6)
