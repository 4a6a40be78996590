"""The typed result of the ring fit: the rings found and the least-squares line of r² against fringe order."""

from __future__ import annotations

from dataclasses import dataclass, fields

from ..serialise import build
from ..serialise import jsonable as _f
from ..uncertainty import Quantity


@dataclass(frozen=True)
class Ring:
    """One resolved ring: its fringe order, radius and the fit's residual."""

    order: float  # m (dark: r^2 = m lambda R / n; bright: half-integers m - 1/2 are stored as such)
    kind: str  # "dark" or "bright"
    radius_px: float  # in the pixel metric of x (anisotropic y is rescaled to x)
    radius_mm: float
    r2_mm2: float
    u_r2_mm2: float
    residual_mm2: float
    used: bool = True

    def to_dict(self) -> dict:
        return {k: _f(v) for k, v in self.__dict__.items()}

    @classmethod
    def from_dict(cls, d: dict) -> "Ring":
        return build(cls, d)


@dataclass(frozen=True)
class RingFit:
    """Weighted least squares of r^2 against fringe order: r^2 = slope * m + intercept.

    Covariance is scaled by the reduced chi-square (as lmfit does), so the slope's standard error reflects the
    scatter actually seen; with fewer than 5 degrees of freedom it is only ever scaled up.
    """

    slope_mm2: float
    slope_u_mm2: float
    intercept_mm2: float
    intercept_u_mm2: float
    intercept_fringes: float  # contact offset in fringes (intercept / slope, sign kept)
    covariance: tuple[tuple[float, float], tuple[float, float]] | None
    chisqr: float
    redchi: float
    ndata: int
    nvarys: int
    rings: tuple[Ring, ...]
    r_min_mm: float
    r_max_mm: float
    method: str
    success: bool = True
    message: str = ""
    #: the wavelength the fringes follow (a source of several lines or a band: its mean wavenumber's reciprocal)
    fringe_wavelength_nm: float | None = None

    COVARIANCE_SCALING = "reduced chi-square (never scaled down with fewer than 5 degrees of freedom)"
    _KEYS = {"slope_mm2": "slope_mm2_per_fringe", "slope_u_mm2": "slope_u_mm2_per_fringe",
             "intercept_fringes": "contact_offset_fringes"}

    @property
    def slope(self) -> Quantity:
        """The slope of r² against order, mm² per fringe."""
        return Quantity(self.slope_mm2, self.slope_u_mm2, "mm²/fringe")

    @property
    def rings_used(self) -> tuple[Ring, ...]:
        return tuple(r for r in self.rings if r.used)

    def to_dict(self) -> dict:
        return {
            "fringe_wavelength_nm": _f(self.fringe_wavelength_nm),
            "slope_mm2_per_fringe": _f(self.slope_mm2),
            "slope_u_mm2_per_fringe": _f(self.slope_u_mm2),
            "intercept_mm2": _f(self.intercept_mm2),
            "intercept_u_mm2": _f(self.intercept_u_mm2),
            "contact_offset_fringes": _f(self.intercept_fringes),
            "covariance": None if self.covariance is None else [[_f(v) for v in row] for row in self.covariance],
            "covariance_scaling": self.COVARIANCE_SCALING,
            "chisqr": _f(self.chisqr),
            "redchi": _f(self.redchi),
            "ndata": self.ndata,
            "nvarys": self.nvarys,
            "rings_used": len(self.rings_used),
            "r_min_mm": _f(self.r_min_mm),
            "r_max_mm": _f(self.r_max_mm),
            "residuals_mm2": [_f(r.residual_mm2) for r in self.rings_used],
            "rings": [r.to_dict() for r in self.rings],
            "method": self.method,
            "success": self.success,
            "message": self.message,
        }

    @classmethod
    def from_dict(cls, d: dict) -> "RingFit":
        return build(cls, d, cls._KEYS)


@dataclass(frozen=True)
class Sectors:
    """The ring fit repeated in angular sectors: the scatter of their slopes (Type A) and the rings' roundness."""

    n_sectors: int
    angles_deg: tuple[float, ...]  # sector mid-angles, from +x toward +y (image rows down)
    slopes_mm2_per_fringe: tuple[float, ...]
    rings: tuple[int, ...]
    u_mean_slope_mm2: float  # standard uncertainty of the mean slope from the sector scatter
    dof: int
    ellipticity: float  # relative amplitude of the cos 2θ variation of the slope
    ellipticity_u: float
    long_axis_deg: float  # angle of the largest slope (longest ring axis)

    @classmethod
    def of(cls, s: "Sectors") -> "Sectors":
        """The stored part of a sector scatter (the engine's keeps more for the budget)."""
        return cls(**{f.name: getattr(s, f.name) for f in fields(cls)})

    def to_dict(self) -> dict:
        return {f.name: (lambda v: list(v) if isinstance(v, tuple) else v)(getattr(self, f.name)) for f in fields(self)}

    @classmethod
    def from_dict(cls, d: dict) -> "Sectors":
        return build(cls, d)
