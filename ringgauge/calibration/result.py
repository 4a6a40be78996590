"""The result of a pixel-scale calibration, and how it is assembled from an image metric with its uncertainty.

Every calibration method ends in the same place: the image metric G (µm²/px²), the 2 x 2 symmetric matrix
that turns a pixel step d = (dx, dy) into an object-space length, |d|_obj² = dᵀ G d. Its parts are

- the scale along x (columns), s_x = sqrt(G_xx), µm per pixel,
- the scale along y (rows),    s_y = sqrt(G_yy),
- the squareness of the pixel axes in object space: psi = asin(G_xy / (s_x s_y)), 0 when a step along x
  and a step along y are perpendicular on the part.

The uncertainty is kept as a GUM budget (JCGM 100:2008) per axis: the certified reference (pitch or
diameter, fully correlated between x and y), the statistical fit term, and for the disc an edge-definition term.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import CalibrationError
from ..serialise import jsonable
from ..uncertainty import Budget, BudgetRow, Quantity, make_budget

#: object-space pixel sizes ringgauge accepts from a calibration, µm per pixel. Below 0.05 µm a pixel is far
#: finer than any visible-light optics resolves; above 250 µm a 1000-pixel frame spans a quarter of a metre.
SCALE_RANGE_UM = (0.05, 250.0)

METHOD_NAMES = {
    "line-scale": "line scale or line grating, one image (x and y assumed equal)",
    "line-scale-pair": "line scale photographed twice, turned by about 90° (x and y measured)",
    "crossed-grid": "crossed line grid (x, y and squareness measured)",
    "square-grid": "square grid of lines or dots (x, y and squareness measured)",
    "dot-grid": "square dot grid (x, y and squareness measured)",
    "disc": "reference disc or ring gauge of certified diameter (x, y and squareness measured)",
}


@dataclass(frozen=True)
class ScaleCalibration:
    """Object-space pixel scale measured from a calibration target.

    Attributes
    ----------
    method : str
        One of :data:`METHOD_NAMES`.
    target : dict
        What the target is: kind, certified pitch (µm) or diameter (mm) and their standard uncertainties,
        identity when given.
    scale_x : Quantity
        Pixel scale along x (image columns), µm per pixel, with its standard uncertainty (k = 1).
    scale_y : Quantity or None
        Along y (rows); None when it was not measured (one line-scale image: x and y assumed equal).
    squareness : Quantity or None
        Deviation of the pixel axes from perpendicular in object space, degrees; None when not measured.
    difference_u_um : float or None
        Standard uncertainty of s_x - s_y (the common reference term mostly cancels in the difference).
    budget_x, budget_y : Budget
        GUM budgets of the two scales.
    images : tuple of dict
        Path, SHA-256, width and height of each image used.
    details : dict
        Periods, directions, points used, residuals: what the fit saw.
    warnings : tuple of str
    """

    method: str
    target: dict
    scale_x: Quantity
    scale_y: Quantity | None
    squareness: Quantity | None
    difference_u_um: float | None
    budget_x: Budget
    budget_y: Budget | None
    images: tuple[dict, ...] = ()
    details: dict = field(default_factory=dict)
    warnings: tuple[str, ...] = ()

    @property
    def anisotropic(self) -> bool:
        """True when x and y differ by more than twice the standard uncertainty of their difference."""
        if self.scale_y is None or self.difference_u_um is None:
            return False
        return abs(self.scale_x.value - self.scale_y.value) > 2.0 * self.difference_u_um

    def to_dict(self) -> dict:
        return {
            "method": self.method,
            "method_text": METHOD_NAMES.get(self.method, self.method),
            "target": dict(self.target),
            "scale_x_um_per_px": self.scale_x.to_dict(),
            "scale_y_um_per_px": None if self.scale_y is None else self.scale_y.to_dict(),
            "squareness_deg": None if self.squareness is None else self.squareness.to_dict(),
            "difference_u_um_per_px": self.difference_u_um,
            "anisotropic": self.anisotropic,
            "budget_x": self.budget_x.to_dict(),
            "budget_y": None if self.budget_y is None else self.budget_y.to_dict(),
            "images": [dict(i) for i in self.images],
            "details": _plain(self.details),
            "warnings": list(self.warnings),
        }


def _plain(x):
    if isinstance(x, dict):
        return {str(k): _plain(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_plain(v) for v in x]
    if isinstance(x, np.ndarray):
        return _plain(x.tolist())
    return jsonable(x)


def derived(G) -> np.ndarray:
    """(s_x, s_y, psi_deg, s_x - s_y) from the metric G given as (G_xx, G_xy, G_yy)."""
    gxx, gxy, gyy = (float(v) for v in G)
    if gxx <= 0 or gyy <= 0:
        raise CalibrationError("the calibration fit gave a non-positive pixel scale; the target was not found")
    sx, sy = math.sqrt(gxx), math.sqrt(gyy)
    c = max(-1.0, min(1.0, gxy / (sx * sy)))
    return np.array([sx, sy, math.degrees(math.asin(c)), sx - sy])


def propagate(fn, p, cov) -> np.ndarray:
    """Standard uncertainties of fn(p) from the covariance of p (first-order, central differences)."""
    p = np.asarray(p, dtype=np.float64)
    f0 = np.asarray(fn(p))
    J = np.zeros((f0.size, p.size))
    for i in range(p.size):
        h = 1e-6 * max(abs(p[i]), 1e-12)
        dp = np.zeros_like(p)
        dp[i] = h
        J[:, i] = (np.asarray(fn(p + dp)) - np.asarray(fn(p - dp))) / (2 * h)
    C = J @ np.asarray(cov) @ J.T
    return np.sqrt(np.clip(np.diag(C), 0, None))


def check_plausible(scale_um: float, what: str) -> None:
    lo, hi = SCALE_RANGE_UM
    if not (lo <= scale_um <= hi):
        raise CalibrationError(
            f"{what} gives {scale_um:.4g} µm per pixel, outside the plausible {lo:g}-{hi:g} µm/px; "
            "check the value and its unit"
        )


def assemble(
    method: str,
    target: dict,
    G,
    fit_u: np.ndarray,
    reference: tuple[str, float, float, str],
    *,
    edge: tuple[np.ndarray, np.ndarray] | None = None,
    extra: tuple = (),
    measured_y: bool = True,
    images=(),
    details=None,
    warnings=(),
    dof: float = math.inf,
) -> ScaleCalibration:
    """Build the result from the metric G = (G_xx, G_xy, G_yy).

    Parameters
    ----------
    fit_u : (4,) array
        Standard uncertainties of (s_x, s_y, psi_deg, s_x - s_y) from the fit alone.
    reference : (name, value, u, unit)
        The certified pitch or diameter; its relative uncertainty scales G by (1 + u/value)^2.
    edge : (G at the 25 % level, G at the 75 % level), optional
        Disc only: the metric with edges read at the 25 % and 75 % levels. Half their difference is taken as
        the half-width of a rectangular distribution (edge-definition term).
    extra : sequence of (quantity, (4,) standard uncertainties of (s_x, s_y, psi, s_x - s_y), note)
        Further rectangular terms (e.g. uneven light seen through the blur).
    measured_y : bool
        False for one line-scale image: only the scale along the grating's normal is known; x and y are
        reported equal and y is not "measured".
    """
    G = np.asarray(G, dtype=np.float64)
    d0 = derived(G)
    check_plausible(d0[0], f"the {reference[0]} ({reference[1]:g} {reference[3]})")
    check_plausible(d0[1], f"the {reference[0]} ({reference[1]:g} {reference[3]})")
    name, value, u_ref, unit = reference
    rel = u_ref / value
    ref_contrib = np.abs(derived(G * (1.0 + rel) ** 2) - d0)
    rows_by_axis = []
    terms = []  # (quantity, u vector, note), rectangular
    if edge is not None:
        terms.append((
            "edge definition", np.abs(derived(edge[0]) - derived(edge[1])) / 2.0 / math.sqrt(3.0),
            "edge read at 25 % and 75 % of the edge step bound where the true edge lies",
        ))
    terms += [(q, np.asarray(u, dtype=np.float64), note) for q, u, note in extra]
    for axis in (0, 1):
        s = d0[axis]
        rows = [
            BudgetRow(
                quantity=f"certified {name}", estimate=value, estimate_unit=unit, u=u_ref,
                distribution="normal (certificate, k = 1)", divisor=1.0, sensitivity=s / value,
                sensitivity_unit=f"µm/px per {unit}", contribution=float(ref_contrib[axis]),
                note="fully correlated between x and y",
            ),
            BudgetRow(
                quantity="fit to the target image", estimate=s, estimate_unit="µm/px", u=float(fit_u[axis]),
                distribution="normal", divisor=1.0, sensitivity=1.0, sensitivity_unit="",
                contribution=float(fit_u[axis]), dof=dof,
                note="covariance scaled by the reduced chi-square and the residuals' spatial correlation",
            ),
        ]
        for q, u, note in terms:
            rows.append(
                BudgetRow(
                    quantity=q, estimate=s, estimate_unit="µm/px", u=float(u[axis]), distribution="rectangular",
                    divisor=math.sqrt(3.0), sensitivity=1.0, sensitivity_unit="", contribution=float(u[axis]),
                    note=note,
                )
            )
        rows_by_axis.append(rows)
    label = "pixel scale" if not measured_y else "pixel scale along x"
    bx = make_budget(label, "µm/px", float(d0[0]), rows_by_axis[0])
    by = make_budget("pixel scale along y", "µm/px", float(d0[1]), rows_by_axis[1]) if measured_y else None
    if measured_y:
        diff_terms = [float(ref_contrib[3]), float(fit_u[3])] + [float(u[3]) for _, u, _ in terms]
        diff_u = math.sqrt(sum(t * t for t in diff_terms))
        psi_terms = [float(fit_u[2])] + [float(u[2]) for _, u, _ in terms]
        psi = Quantity(float(d0[2]), math.sqrt(sum(t * t for t in psi_terms)), "°")
        sy = Quantity(float(d0[1]), by.u_c, "µm/px")
    else:
        diff_u, psi, sy = None, None, None
    return ScaleCalibration(
        method=method,
        target=dict(target),
        scale_x=Quantity(float(d0[0]), bx.u_c, "µm/px"),
        scale_y=sy,
        squareness=psi,
        difference_u_um=diff_u,
        budget_x=bx,
        budget_y=by,
        images=tuple(images),
        details=dict(details or {}),
        warnings=tuple(warnings),
    )
