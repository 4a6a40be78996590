"""Frozen result types of an analysis. Every result has ``to_dict()`` returning plain JSON-able objects:
that is what ``--json`` prints, what the records store keeps and what reports and certificates format."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import __version__
from .bench_setup import BenchSetup
from .uncertainty import Budget


def _f(x):
    if x is None:
        return None
    if isinstance(x, (np.floating, float)):
        x = float(x)
        return x if math.isfinite(x) else None
    if isinstance(x, (np.integer,)):
        return int(x)
    return x


@dataclass(frozen=True)
class ImageInfo:
    path: str | None
    sha256: str
    width: int
    height: int
    bit_depth: int
    channel: str
    saturated_fraction: float

    def to_dict(self) -> dict:
        return {k: _f(v) for k, v in self.__dict__.items()}


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

    def to_dict(self) -> dict:
        return {
            "fringe_wavelength_nm": _f(self.fringe_wavelength_nm),
            "slope_mm2_per_fringe": _f(self.slope_mm2),
            "slope_u_mm2_per_fringe": _f(self.slope_u_mm2),
            "intercept_mm2": _f(self.intercept_mm2),
            "intercept_u_mm2": _f(self.intercept_u_mm2),
            "contact_offset_fringes": _f(self.intercept_fringes),
            "covariance": None if self.covariance is None else [[_f(v) for v in row] for row in self.covariance],
            "covariance_scaling": "reduced chi-square (never scaled down with fewer than 5 degrees of freedom)",
            "chisqr": _f(self.chisqr),
            "redchi": _f(self.redchi),
            "ndata": self.ndata,
            "nvarys": self.nvarys,
            "rings_used": sum(1 for r in self.rings if r.used),
            "r_min_mm": _f(self.r_min_mm),
            "r_max_mm": _f(self.r_max_mm),
            "residuals_mm2": [_f(r.residual_mm2) for r in self.rings if r.used],
            "rings": [r.to_dict() for r in self.rings],
            "method": self.method,
            "success": self.success,
            "message": self.message,
        }


@dataclass(frozen=True)
class AnalysisResult:
    """What one analysis of one frame (or a frame set) found."""

    image: ImageInfo
    setup: BenchSetup
    centre_px: tuple[float, float] | None
    centre_u_px: tuple[float, float] | None
    radius_mm: float | None
    radius_u_mm: float | None
    k: float
    budget: Budget | None
    fit: RingFit | None
    fullfield: dict = field(default_factory=dict)
    form: Any = None  # ringgauge.form result, when form against a test plate was evaluated
    verdict: dict | None = None
    warnings: tuple[str, ...] = ()
    elapsed_s: float = 0.0
    frames: tuple[ImageInfo, ...] = ()
    version: str = __version__

    @property
    def radius_U_mm(self) -> float | None:  # noqa: N802
        return None if self.radius_u_mm is None else self.k * self.radius_u_mm

    def to_dict(self) -> dict:
        return {
            "ringgauge_version": self.version,
            "image": self.image.to_dict(),
            "frames": [f.to_dict() for f in self.frames],
            "setup": self.setup.to_dict(),
            "coordinates": "x = column, y = row, pixel centres at integers, origin at the top-left pixel",
            "centre_px": None if self.centre_px is None else [_f(v) for v in self.centre_px],
            "centre_u_px": None if self.centre_u_px is None else [_f(v) for v in self.centre_u_px],
            "radius_mm": _f(self.radius_mm),
            "radius_u_mm": _f(self.radius_u_mm),
            "radius_U_mm": _f(self.radius_U_mm),
            "k": self.k,
            "budget": None if self.budget is None else self.budget.to_dict(),
            "fringes": None if self.fit is None else self.fit.to_dict(),
            "fullfield": {k: _f(v) if not isinstance(v, (list, tuple, dict)) else v for k, v in self.fullfield.items()},
            "form": None if self.form is None else self.form.to_dict(),
            "verdict": self.verdict,
            "warnings": list(self.warnings),
            "elapsed_s": _f(self.elapsed_s),
        }
