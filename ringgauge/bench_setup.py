"""The bench set-up an analysis runs with: light source, pixel scale, gap medium, and form options."""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from .errors import InputError
from .sources import LightSource, get_source


@dataclass(frozen=True)
class BenchSetup:
    """Everything about the bench that the image itself cannot tell.

    Attributes
    ----------
    source : LightSource
        Lamp or laser; its effective wavelength and standard uncertainty are used.
    pixel_size_um : float
        Object-space pixel size along x (image columns), micrometres per pixel.
    pixel_size_u_um : float
        Its standard uncertainty (k = 1). 0 means "not given" and is flagged in the result.
    pixel_size_y_um, pixel_size_y_u_um : float or None
        Pixel size along y (rows) when the camera's scale is anisotropic; None = same as x.
    medium_index, medium_index_u : float
        Refractive index of the gap medium (1.0 for air) and its standard uncertainty.
    fringe_kind : {"dark", "bright"}
        Which rings are counted as orders: dark rings satisfy r^2 = m lambda R / n, bright ones
        r^2 = (m - 1/2) lambda R / n (reflection). Stored with the result.
    bench : str or None
        Name of the bench profile the pixel scale came from, and its calibration date.
    mode : {"auto", "radius", "form"}
        What to measure: "auto" measures surface form when a form option or several frames are given.
    gap_change : {"increasing", "decreasing"}
        How the gap changed between the frames of a set (gives the power's sign).
    form_route : {"auto", "model"}
        "model" keeps the model fit with piston steps even for three or more frames (no phase map).
    centre_px : (x, y) or None
        Ring centre set by hand, pixels.
    aperture_px : (x, y, radius) or None
        Part edge set by hand, pixels (centre and radius).
    motion_sign : dict or None
        The live view's reading of the power's sign from the rings' motion ({"sign": +1/-1, "detail": ...}).
    operator : str or None
        Who measured.
    inspection : tuple of (name, value) pairs
        The inspection details typed with the measurement (serial, part, lot ...), kept with the record.
    bench_warnings : tuple of str
        The bench profile's warnings when the set-up was made (calibration overdue, anisotropy).
    """

    source: LightSource
    pixel_size_um: float
    pixel_size_u_um: float = 0.0
    pixel_size_y_um: float | None = None
    pixel_size_y_u_um: float | None = None
    medium_index: float = 1.0
    medium_index_u: float = 0.0
    fringe_kind: str = "dark"
    bench: str | None = None
    bench_calibrated: str | None = None
    # surface form against a test plate (issue: surface form); None = not requested
    test_diameter_mm: float | None = None
    tolerance: str | None = None
    test_plate: dict | None = None
    press_test: str | None = None
    decision_rule: str = "simple"
    radius_tolerance: str | None = None  # e.g. "1000 ± 5", "1000 ± 0.5 %", "995..1005" (ringgauge.conformity)
    mode: str = "auto"
    gap_change: str = "increasing"
    form_route: str = "auto"
    centre_px: tuple[float, float] | None = None
    aperture_px: tuple[float, float, float] | None = None
    motion_sign: dict | None = None
    operator: str | None = None
    inspection: tuple[tuple[str, str], ...] = ()
    bench_warnings: tuple[str, ...] = ()

    def __post_init__(self):
        for name, n in (("centre_px", 2), ("aperture_px", 3)):
            v = getattr(self, name)
            if v is not None:
                object.__setattr__(self, name, tuple(float(x) for x in v))
                if len(getattr(self, name)) != n:
                    raise InputError(f"{name.replace('_px', '')} set by hand needs {n} numbers, got {len(v)}")
        if isinstance(self.inspection, dict):
            object.__setattr__(self, "inspection", tuple((str(k), str(v)) for k, v in self.inspection.items()))
        object.__setattr__(self, "bench_warnings", tuple(self.bench_warnings))
        if self.mode not in ("auto", "radius", "form"):
            raise InputError(f"mode must be auto, radius or form, got {self.mode!r}")
        if self.gap_change not in ("increasing", "decreasing"):
            raise InputError(f"gap change must be 'increasing' or 'decreasing', got {self.gap_change!r}")
        check_positive("pixel size", self.pixel_size_um, "µm")
        if self.pixel_size_y_um is not None:
            check_positive("pixel size along y", self.pixel_size_y_um, "µm")
        # "not (u >= 0)" also refuses NaN, which slips through "u < 0"
        if not (self.pixel_size_u_um >= 0) or not ((self.pixel_size_y_u_um or 0) >= 0):
            raise InputError("pixel size uncertainty must be a finite number, not negative")
        if not (self.pixel_size_u_um <= 0.2 * self.pixel_size_um) or not (
                (self.pixel_size_y_u_um or 0) <= 0.2 * (self.pixel_size_y_um or self.pixel_size_um)):
            raise InputError(
                f"pixel size uncertainty {self.pixel_size_u_um} µm is over 20 % of the pixel size; recalibrate"
            )
        check_positive("medium index", self.medium_index, "")
        if not 1.0 <= self.medium_index <= 2.5:
            raise InputError(f"gap medium index {self.medium_index} is outside 1.0-2.5 (air is 1.0, water 1.333)")
        if not (0 <= self.medium_index_u <= 0.5):
            raise InputError(f"medium index uncertainty must be a finite number from 0 to 0.5, got {self.medium_index_u}")
        u_wl = self.source.wavelength_u_nm
        if u_wl is not None and not (0 <= u_wl <= 0.1 * self.source.wavelength_nm):
            raise InputError(f"wavelength uncertainty must be a finite number from 0 to 10 % of the wavelength, got "
                             f"{u_wl} nm")
        fwhm = getattr(self.source, "fwhm_nm", 0.0) or 0.0
        if not (0 <= fwhm <= 0.5 * self.source.wavelength_nm):
            raise InputError(f"source bandwidth (FWHM) must be a finite number from 0 to half the wavelength, got "
                             f"{fwhm} nm")
        if self.fringe_kind not in ("dark", "bright"):
            raise InputError("fringe kind must be 'dark' or 'bright'")
        if self.test_diameter_mm is not None:
            check_positive("test diameter", self.test_diameter_mm, "mm")
        if self.radius_tolerance is not None:
            from .conformity import normalise_rule, parse_radius_tolerance

            parse_radius_tolerance(self.radius_tolerance)  # a pointed error now rather than after the analysis
            normalise_rule(self.decision_rule)

    @property
    def wavelength_nm(self) -> float:
        return self.source.wavelength_nm

    @property
    def pixel_size_xy_um(self) -> tuple[float, float]:
        return (self.pixel_size_um, self.pixel_size_y_um or self.pixel_size_um)

    @property
    def pixel_size_xy_u_um(self) -> tuple[float, float]:
        uy = self.pixel_size_y_u_um if self.pixel_size_y_um is not None else self.pixel_size_u_um
        return (self.pixel_size_u_um, uy if uy is not None else self.pixel_size_u_um)

    def with_(self, **changes) -> "BenchSetup":
        return replace(self, **changes)

    def to_dict(self) -> dict:
        return {
            "source": self.source.to_dict(),
            "wavelength_nm": self.wavelength_nm,
            "wavelength_u_nm": self.source.wavelength_u_nm,
            "pixel_size_um": list(self.pixel_size_xy_um),
            "pixel_size_u_um": list(self.pixel_size_xy_u_um),
            "medium_index": self.medium_index,
            "medium_index_u": self.medium_index_u,
            "fringe_kind": self.fringe_kind,
            "bench": self.bench,
            "bench_calibrated": self.bench_calibrated,
            "test_diameter_mm": self.test_diameter_mm,
            "tolerance": self.tolerance,
            "test_plate": self.test_plate,
            "press_test": self.press_test,
            "decision_rule": self.decision_rule,
            "radius_tolerance": self.radius_tolerance,
            # what else shaped the result, written only when it differs from the default
            **{k: v for k, v in self._shaping().items() if v != _DEFAULTS[k]},
        }

    def _shaping(self) -> dict:
        return {
            "mode": self.mode, "gap_change": self.gap_change, "form_route": self.form_route,
            "centre_px": None if self.centre_px is None else list(self.centre_px),
            "aperture_px": None if self.aperture_px is None else list(self.aperture_px),
            "motion_sign": self.motion_sign, "operator": self.operator,
            "inspection": {k: v for k, v in self.inspection} if self.inspection else None,
            "bench_warnings": list(self.bench_warnings) or None,
        }

    @classmethod
    def from_dict(cls, s: dict) -> "BenchSetup":
        """The set-up a result or record stores (``to_dict()``), read back."""
        from .sources import custom_source, get_source

        if not isinstance(s, dict) or not s.get("wavelength_nm") or not s.get("pixel_size_um"):
            raise InputError("the stored result keeps no usable bench set-up (wavelength and pixel size)")
        src = s.get("source") or {}
        source = None
        if src.get("key"):
            try:
                source = get_source(src["key"])
            except InputError:
                source = None
        lam = float(s["wavelength_nm"])
        if source is None or abs(source.wavelength_nm - lam) > 1e-9:
            source = custom_source(lam, s.get("wavelength_u_nm"), float(src.get("fwhm_nm") or 0.0))
        pix = s["pixel_size_um"] if isinstance(s["pixel_size_um"], list) else [s["pixel_size_um"]] * 2
        pixu = s.get("pixel_size_u_um") or [0.0, 0.0]
        pixu = pixu if isinstance(pixu, list) else [pixu] * 2
        kw = dict(
            source=source, pixel_size_um=float(pix[0]), pixel_size_u_um=float(pixu[0] or 0.0),
            medium_index=float(s.get("medium_index") or 1.0), medium_index_u=float(s.get("medium_index_u") or 0.0),
            fringe_kind=s.get("fringe_kind") or "dark", bench=s.get("bench"),
            bench_calibrated=s.get("bench_calibrated"), test_diameter_mm=s.get("test_diameter_mm"),
            tolerance=s.get("tolerance"), test_plate=s.get("test_plate"), press_test=s.get("press_test"),
            decision_rule=s.get("decision_rule") or "simple", radius_tolerance=s.get("radius_tolerance"),
        )
        if len(pix) > 1 and pix[1] != pix[0]:
            kw["pixel_size_y_um"] = float(pix[1])
            kw["pixel_size_y_u_um"] = float(pixu[1] or 0.0) if len(pixu) > 1 else None
        for k, default in _DEFAULTS.items():
            v = s.get(k, default)
            if k == "inspection":
                v = tuple((str(a), str(b)) for a, b in (v or {}).items())
            elif k == "bench_warnings":
                v = tuple(v or ())
            kw[k] = v
        return cls(**kw)


#: the stored default of each option that shaped a result (``to_dict`` writes only those that differ)
_DEFAULTS = {"mode": "auto", "gap_change": "increasing", "form_route": "auto", "centre_px": None,
             "aperture_px": None, "motion_sign": None, "operator": None, "inspection": None, "bench_warnings": None}

def check_positive(what: str, value, unit: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what} must be a number, got {value!r}") from None
    if not math.isfinite(v) or v <= 0:
        raise InputError(f"{what} must be a positive number{(' of ' + unit) if unit else ''}, got {value}")
    return v


def default_setup(pixel_size_um: float, source: str = "sodium-d", **kw) -> BenchSetup:
    return BenchSetup(source=get_source(source), pixel_size_um=pixel_size_um, **kw)
