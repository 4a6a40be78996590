"""Radius of a surface from its fringes against a test plate of known radius.

With contact at the vertex and N fringes of power across the test diameter D (semi-diameter h = D / 2), the
surface's radius differs from the plate's by

* paraxial (shop formula):          dR = 4 N lambda R^2 / D^2
* exact, gap along the normal:      dR = N lambda / (2 (1 - cos theta))
* exact, gap along the axis:        dR = N lambda cos theta / (2 (1 - cos theta)),   sin theta = h / R

(lambda / n in a gap medium of index n). On steep parts (h / R above about 0.2) the paraxial form is
measurably off. The "axial" form is what the fringes measure: fringes are contours of the gap along the
viewing direction, i.e. along the optical axis; it is the one used for the reported radius.

References
----------
"Analysis of using Newton's ring to test lens surface radius", Opt. Eng. 61(12) 125107 (2022): exact forms and
the steep-part error. Worked example (computed by hand from those forms): R = 50 mm, D = 25 mm, N = 3,
lambda = 546.07 nm -> 26.21 µm paraxial, 25.80 µm normal, 24.98 µm axial.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..errors import InputError
from ..uncertainty import Budget, BudgetRow, make_budget

STEEP_LIMIT = 0.2  # h / R above which the paraxial shop formula is flagged (Opt. Eng. 61(12) 125107 (2022))


@dataclass(frozen=True)
class RadiusDeviation:
    """dR by the three formulas (mm), for N fringes over D against a plate of radius R."""

    fringes: float
    test_diameter_mm: float
    plate_radius_mm: float
    wavelength_nm: float
    medium_index: float
    paraxial_mm: float
    normal_mm: float
    axial_mm: float
    h_over_r: float

    @property
    def steep(self) -> bool:
        return self.h_over_r > STEEP_LIMIT


def _check(N, D, R, lam, n):
    if not (math.isfinite(R) and R > 0):
        raise InputError(f"test plate radius must be a positive number of mm, got {R}")
    if not (math.isfinite(D) and D > 0):
        raise InputError(f"test diameter must be a positive number of mm, got {D}")
    if D / 2 >= R:
        raise InputError(f"test diameter {D:g} mm is not smaller than twice the plate radius {R:g} mm")
    if lam <= 0 or n <= 0 or not math.isfinite(N):
        raise InputError("wavelength, medium index and fringe count must be finite and positive")


def delta_r_paraxial(N, D, R, lam_nm, n=1.0):
    """Paraxial shop formula dR = 4 N (lambda/n) R^2 / D^2, mm (N signed, fringes)."""
    _check(N, D, R, lam_nm, n)
    return 4 * N * lam_nm * 1e-6 / n * R * R / (D * D)


def delta_r_normal(N, D, R, lam_nm, n=1.0):
    """dR = N (lambda/n) / (2 (1 - cos theta)), sin theta = D / (2R); mm."""
    _check(N, D, R, lam_nm, n)
    s = D / (2 * R)
    one_minus_cos = s * s / (1 + math.sqrt(1 - s * s))  # 1 - cos without cancellation
    return N * lam_nm * 1e-6 / n / (2 * one_minus_cos)


def delta_r_axial(N, D, R, lam_nm, n=1.0):
    """dR = N (lambda/n) cos theta / (2 (1 - cos theta)), sin theta = D / (2R); mm."""
    _check(N, D, R, lam_nm, n)
    s = D / (2 * R)
    cos = math.sqrt(1 - s * s)
    return delta_r_normal(N, D, R, lam_nm, n) * cos


def radius_deviation(N, D, R, lam_nm, n=1.0) -> RadiusDeviation:
    return RadiusDeviation(
        float(N), float(D), float(R), float(lam_nm), float(n),
        delta_r_paraxial(N, D, R, lam_nm, n), delta_r_normal(N, D, R, lam_nm, n),
        delta_r_axial(N, D, R, lam_nm, n), D / (2 * R),
    )


def radius_budget(
    N: float, u_N: float, D: float, u_D: float, R_plate: float, u_R_plate: float, lam_nm: float,
    u_lam_nm: float, *, n: float = 1.0, sign: int = 1, convex_plate: bool = True,
) -> tuple[Budget, Budget, list[str]]:
    """GUM budgets for dR and the surface radius R_s = R_plate + sign · dR (axial formula).

    ``sign`` is +1 when the gap grows toward the edge with the plate on the part (power > 0). The surface is
    flatter than the plate when the gap grows toward the edge on a convex plate... the caller passes the
    geometric sign already resolved: R_surface = R_plate + sign * dR. Sensitivities are numerical central
    differences of the exact axial formula.
    """
    def f(N_, D_, R_, lam_):
        return delta_r_axial(N_, D_, R_, lam_, n)

    base = f(N, D, R_plate, lam_nm)
    rows = []
    specs = [
        ("power N (fringes)", N, "fringe", u_N, "normal (fit)", 1.0, 0),
        ("test diameter D", D, "mm", u_D, "normal (aperture fit, pixel scale)", 1.0, 1),
        ("test plate radius R", R_plate, "mm", u_R_plate, "normal (certificate, k = 1)", 1.0, 2),
        ("wavelength", lam_nm, "nm", u_lam_nm, "rectangular", 1.0, 3),
    ]
    for name, est, unit, u, dist, div, i in specs:
        args = [N, D, R_plate, lam_nm]
        h = max(abs(est) * 1e-6, 1e-9)
        a1 = list(args)
        a2 = list(args)
        a1[i] += h
        a2[i] -= h
        c = (f(*a1) - f(*a2)) / (2 * h)
        rows.append(BudgetRow(name, float(est), unit, float(u), dist, div, float(c), f"mm/{unit}", abs(c) * u))
    warnings = []
    s = D / (2 * R_plate)
    if s > STEEP_LIMIT:
        warnings.append(
            f"steep part (h/R = {s:.2f} > {STEEP_LIMIT}): the paraxial shop formula is off by "
            f"{(delta_r_paraxial(N, D, R_plate, lam_nm, n) / base - 1) * 100 if base else 0:.0f} %; the exact "
            "(axial) form is used"
        )
    b_dr = make_budget("ΔR", "mm", sign * base, [r for r in rows])
    # R_surface = R_plate + sign dR: the plate's radius enters with sensitivity 1 + sign * d(dR)/dR
    rows_rs = []
    for r in rows:
        c = sign * r.sensitivity + (1.0 if r.quantity.startswith("test plate radius") else 0.0)
        rows_rs.append(BudgetRow(r.quantity, r.estimate, r.estimate_unit, r.u, r.distribution, r.divisor, c,
                                 r.sensitivity_unit, abs(c) * r.u))
    b_rs = make_budget("surface radius", "mm", R_plate + sign * base, rows_rs)
    return b_dr, b_rs, warnings
