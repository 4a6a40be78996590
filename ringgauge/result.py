"""Frozen result types of an analysis.

Each stage's own result type lives with the stage (:mod:`ringgauge.fit.result` the ring fit,
:mod:`ringgauge.form.result` the surface form, :mod:`ringgauge.calibration.result` a pixel-scale calibration);
this module assembles the whole analysis. Every result type has ``to_dict()``, returning plain JSON-able objects (what ``--json`` prints, what the records
store keeps and what certificates are made from), and ``from_dict()``, its inverse, so a stored result reads back
as the same typed result: ``AnalysisResult.from_dict(r.to_dict()) == r``. ``to_dict`` only serialises; values
are worked out when the result is made. The JSON carries ``schema_version`` (:data:`SCHEMA_VERSION`); results
stored before it was written read as version 1, which has the same fields.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

from . import __version__
from .bench_setup import BenchSetup
from .conformity import Verdict
from .errors import InputError
from .fit.result import RingFit, Sectors
from .serialise import build, convert, finite_or_none
from .serialise import jsonable as _f
from .uncertainty import Budget, Quantity

if TYPE_CHECKING:  # pragma: no cover
    from .form.result import FormResult

#: version of the result JSON: 2 added ``schema_version`` itself (version 1 had the same fields)
SCHEMA_VERSION = 2
#: the JSON's statement of the image coordinates
COORDINATES = "x = column, y = row, pixel centres at integers, origin at the top-left pixel"


@dataclass(frozen=True)
class ImageInfo:
    """One analysed image file: where it came from and what it holds."""

    path: str | None
    sha256: str
    width: int
    height: int
    bit_depth: int
    channel: str
    saturated_fraction: float

    def to_dict(self) -> dict:
        return {k: _f(v) for k, v in self.__dict__.items()}

    @classmethod
    def from_dict(cls, d: dict) -> "ImageInfo":
        return build(cls, d)


@dataclass(frozen=True)
class FullField:
    """The cross-check of the ring fit: one least-squares fit of the ring model to all pixels, and what the
    rings' extraction saw (profile, extrema, sectors)."""

    method: str
    radius_mm: float
    blur_sigma_px: float
    blur_correction_ppm: float
    centre_px: tuple[float, float]
    centre_u_px: tuple[float, float]
    period_px2_per_fringe: float
    fringe_contrast: float
    modulation: float
    background: float
    residual_rms: float
    pixels_used: int
    r_max_px: float
    r_max_mm: float
    coarse_centre_px: tuple[float, float]
    gradient_centre_px: tuple[float, float]
    profile_r_px: tuple[float, ...]
    profile_i: tuple[float, ...]
    extrema_r_px: tuple[float, ...]
    extrema_kind: tuple[str, ...]
    sectors: Sectors | None

    def __post_init__(self):
        for f in ("radius_mm", "blur_sigma_px", "blur_correction_ppm", "period_px2_per_fringe", "fringe_contrast",
                  "modulation", "background", "residual_rms", "r_max_px", "r_max_mm"):
            object.__setattr__(self, f, finite_or_none(getattr(self, f)))

    def to_dict(self) -> dict:
        d = {}
        for k, v in self.__dict__.items():
            if k == "sectors":
                d[k] = None if v is None else v.to_dict()
            else:
                d[k] = list(v) if isinstance(v, tuple) else _f(v)
        return d

    @classmethod
    def from_dict(cls, d: dict | None) -> "FullField | None":
        return build(cls, d) if d else None


@dataclass(frozen=True)
class AnalysisResult:
    """What one analysis of one frame (or a frame set) found.

    ``radius`` is the radius of curvature from Newton's rings (mm, standard uncertainty, coverage factor ``k``);
    ``form`` the surface form against a test plate when that was evaluated; ``verdict`` the conformity
    verdicts (form terms and/or radius) under the set-up's tolerances.
    """

    image: ImageInfo
    setup: BenchSetup
    centre_px: tuple[float, float] | None
    centre_u_px: tuple[float, float] | None
    radius: Quantity | None
    k: float
    budget: Budget | None
    fit: RingFit | None
    fullfield: FullField | None = None
    form: "FormResult | None" = None
    verdict: Verdict | None = None
    warnings: tuple[str, ...] = ()
    elapsed_s: float = 0.0
    frames: tuple[ImageInfo, ...] = ()
    version: str = __version__

    @property
    def radius_mm(self) -> float | None:
        return None if self.radius is None else self.radius.value

    @property
    def radius_u_mm(self) -> float | None:
        return None if self.radius is None else self.radius.u

    @property
    def radius_U_mm(self) -> float | None:  # noqa: N802
        return None if self.radius is None else self.radius.U

    def to_dict(self) -> dict:
        return {
            "schema_version": SCHEMA_VERSION,
            "ringgauge_version": self.version,
            "image": self.image.to_dict(),
            "frames": [f.to_dict() for f in self.frames],
            "setup": self.setup.to_dict(),
            "coordinates": COORDINATES,
            "centre_px": None if self.centre_px is None else [_f(v) for v in self.centre_px],
            "centre_u_px": None if self.centre_u_px is None else [_f(v) for v in self.centre_u_px],
            "radius_mm": _f(self.radius_mm),
            "radius_u_mm": _f(self.radius_u_mm),
            "radius_U_mm": _f(self.radius_U_mm),
            "k": self.k,
            "budget": None if self.budget is None else self.budget.to_dict(),
            "fringes": None if self.fit is None else self.fit.to_dict(),
            "fullfield": {} if self.fullfield is None else self.fullfield.to_dict(),
            "form": None if self.form is None else self.form.to_dict(),
            "verdict": None if self.verdict is None else self.verdict.to_dict(),
            "warnings": list(self.warnings),
            "elapsed_s": _f(self.elapsed_s),
        }

    @classmethod
    def from_dict(cls, d: dict) -> "AnalysisResult":
        """A result as ``to_dict()`` wrote it (any schema version up to :data:`SCHEMA_VERSION`)."""
        from .form.result import FormResult

        if not isinstance(d, dict) or "setup" not in d or "image" not in d:
            raise InputError("not a ringgauge result (no image and set-up)")
        version = int(d.get("schema_version") or 1)
        if version > SCHEMA_VERSION:
            raise InputError(f"the result was written by a newer ringgauge (schema {version}; this one reads up to "
                             f"{SCHEMA_VERSION}): update ringgauge to read it")
        k = float(d.get("k") or 2.0)
        setup = BenchSetup.from_dict(d["setup"])
        radius = None
        if d.get("radius_mm") is not None:
            radius = Quantity(float(d["radius_mm"]), finite_or_none(d.get("radius_u_mm")), "mm", k)
        return cls(
            image=ImageInfo.from_dict(d["image"]),
            setup=setup,
            centre_px=convert(tuple[float, float], d.get("centre_px")),
            centre_u_px=convert(tuple[float, float], d.get("centre_u_px")),
            radius=radius,
            k=k,
            budget=None if d.get("budget") is None else Budget.from_dict(d["budget"]),
            fit=None if d.get("fringes") is None else RingFit.from_dict(d["fringes"]),
            fullfield=FullField.from_dict(d.get("fullfield")),
            form=None if d.get("form") is None else FormResult.from_dict(d["form"], pixel_size_um=setup.pixel_size_xy_um),
            verdict=None if d.get("verdict") is None else Verdict.from_dict(d["verdict"]),
            warnings=tuple(d.get("warnings") or ()),
            elapsed_s=float(d.get("elapsed_s") or 0.0),
            frames=tuple(ImageInfo.from_dict(f) for f in d.get("frames") or ()),
            version=str(d.get("ringgauge_version") or ""),
        )
