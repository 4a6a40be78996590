"""The typed result of a surface-form evaluation against a test plate, and the one list of form terms.

Every measured value is a :class:`~ringgauge.uncertainty.Quantity`; ``to_dict()`` writes the JSON the tool prints
and keeps, ``from_dict()`` reads it back (``FormResult.from_dict(f.to_dict(), pixel_size_um=...) == f``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..conformity import Verdict
from ..serialise import build, convert
from ..uncertainty import Budget, Quantity
from .aperture import Aperture
from .sign import SignResult
from .terms import FORM_TERMS, TermSpec, term_spec  # noqa: F401 - TermSpec: the result's vocabulary
from .tolerance import Tolerance, parse_tolerance


def u_nm(value_fr: float, u_fr: float, fringe_nm: float, u_lam: float, lam: float) -> float:
    """Standard uncertainty in nm of a term of ``value_fr`` ± ``u_fr`` fringes: the fit's and the wavelength's."""
    return math.hypot(u_fr * fringe_nm, value_fr * fringe_nm * (u_lam / lam))


@dataclass(frozen=True)
class FormTerm:
    """One measured form term, in fringes (one fringe = λ/(2n) of surface height) and in nm."""

    name: str
    fringes: Quantity
    nm: Quantity

    @property
    def spec(self) -> TermSpec:
        return term_spec(self.name)


@dataclass(frozen=True)
class Mask:
    """A region left out of the fit: dust, a defect or glare."""

    kind: str
    frame: int
    centre_px: tuple[float, float]
    area_px: int
    area_mm2: float

    def to_dict(self) -> dict:
        return {"kind": self.kind, "frame": self.frame, "centre_px": list(self.centre_px), "area_px": self.area_px,
                "area_mm2": self.area_mm2}

    @classmethod
    def from_dict(cls, d: dict) -> "Mask":
        return build(cls, d)


@dataclass(frozen=True)
class FitSummary:
    """What a result keeps of one frame's gap fit (the engine's fit object stays in memory only)."""

    terms: tuple[str, ...]
    coefficients_fringes: tuple[float, ...]
    coefficients_u_fringes: tuple[float, ...] | None
    covariance_fringes2: tuple[tuple[float, ...], ...] | None
    correlation_factor: float
    ndata: int
    nvarys: int
    chisqr: float
    redchi: float
    residual_rms: float
    modulation: float
    success: bool
    message: str
    centre_px: tuple[float, float]
    radius_px: float
    aspect_y_over_x: float
    notes: tuple[str, ...] = ()

    COVARIANCE_SCALING = "reduced chi-square times a pixel-correlation factor"

    @classmethod
    def of(cls, f) -> "FitSummary":
        """The summary of an engine gap fit (:class:`ringgauge.form.fit.GapFit`)."""
        cov = None if f.covariance is None else np.asarray(f.covariance, dtype=float)
        u = None if cov is None else tuple(float(x) for x in np.sqrt(np.clip(np.diag(cov), 0, None)))
        return cls(
            terms=tuple(f.names), coefficients_fringes=tuple(float(c) for c in f.coeffs), coefficients_u_fringes=u,
            covariance_fringes2=None if cov is None else tuple(tuple(float(x) for x in row) for row in cov),
            correlation_factor=float(f.correlation_factor), ndata=int(f.ndata), nvarys=int(f.nvarys),
            chisqr=float(f.chisqr), redchi=float(f.redchi), residual_rms=float(f.residual_rms),
            modulation=float(f.contrast), success=bool(f.success), message=str(f.message),
            centre_px=(float(f.centre_px[0]), float(f.centre_px[1])), radius_px=float(f.radius_px),
            aspect_y_over_x=float(f.aspect), notes=tuple(f.notes),
        )

    def to_dict(self) -> dict:
        return {
            "terms": list(self.terms),
            "coefficients_fringes": list(self.coefficients_fringes),
            "coefficients_u_fringes": None if self.coefficients_u_fringes is None else list(self.coefficients_u_fringes),
            "covariance_fringes2": None if self.covariance_fringes2 is None else [list(r) for r in self.covariance_fringes2],
            "covariance_scaling": self.COVARIANCE_SCALING,
            "correlation_factor": self.correlation_factor,
            "ndata": self.ndata,
            "nvarys": self.nvarys,
            "chisqr": self.chisqr,
            "redchi": self.redchi,
            "residual_rms": self.residual_rms,
            "modulation": self.modulation,
            "success": self.success,
            "message": self.message,
            "normalisation": {"centre_px": list(self.centre_px), "radius_px": self.radius_px,
                              "aspect_y_over_x": self.aspect_y_over_x},
            "notes": list(self.notes),
        }

    @classmethod
    def from_dict(cls, d: dict) -> "FitSummary":
        return build(cls, {**d, **d.get("normalisation", {})})


@dataclass(frozen=True)
class SurfaceRadius:
    """The part's radius against the test plate: ΔR from the power over the test diameter, and the surface
    radius (plate radius ± ΔR) when the sign and the plate's kind are known."""

    plate: dict  # id, radius_mm, radius_u_mm, kind, calibrated, due
    power_fringes_used: float
    test_diameter_mm: float
    h_over_r: float
    steep: bool
    delta_r_paraxial_mm: float
    delta_r_normal_mm: float
    delta_r_axial_mm: float
    formula_used: str
    delta_r: Quantity  # mm, k of the budget
    budget_delta_r: Budget
    surface_radius: Quantity | None = None  # mm
    budget_surface_radius: Budget | None = None
    surface_radius_candidates_mm: tuple[float, float] | None = None
    surface_radius_note: str | None = None

    @property
    def surface_radius_mm(self) -> float | None:
        return None if self.surface_radius is None else self.surface_radius.value

    @property
    def surface_radius_U_mm(self) -> float | None:  # noqa: N802
        return None if self.surface_radius is None else self.surface_radius.U

    def to_dict(self) -> dict:
        d = {
            "plate": self.plate, "power_fringes_used": self.power_fringes_used,
            "test_diameter_mm": self.test_diameter_mm, "h_over_r": self.h_over_r, "steep": self.steep,
            "delta_r_paraxial_mm": self.delta_r_paraxial_mm, "delta_r_normal_mm": self.delta_r_normal_mm,
            "delta_r_axial_mm": self.delta_r_axial_mm, "formula_used": self.formula_used,
            "delta_r_mm": self.delta_r.value, "delta_r_u_mm": self.delta_r.u, "delta_r_U_mm": self.delta_r.U,
            "budget_delta_r": self.budget_delta_r.to_dict(), "k": self.delta_r.k,
        }
        if self.surface_radius is not None:
            d.update(surface_radius_mm=self.surface_radius.value, surface_radius_u_mm=self.surface_radius.u,
                     surface_radius_U_mm=self.surface_radius.U,
                     budget_surface_radius=None if self.budget_surface_radius is None else
                     self.budget_surface_radius.to_dict())
        else:
            d["surface_radius_mm"] = None
            if self.surface_radius_candidates_mm is not None:
                d["surface_radius_candidates_mm"] = list(self.surface_radius_candidates_mm)
            if self.surface_radius_note is not None:
                d["surface_radius_note"] = self.surface_radius_note
        return d

    @classmethod
    def from_dict(cls, d: dict | None) -> "SurfaceRadius | None":
        if d is None:
            return None
        k = float(d.get("k") or 2.0)
        sr = None
        if d.get("surface_radius_mm") is not None:
            sr = Quantity(float(d["surface_radius_mm"]), float(d["surface_radius_u_mm"]), "mm", k)
        return build(cls, d, delta_r=Quantity(float(d["delta_r_mm"]), float(d["delta_r_u_mm"]), "mm", k),
                     surface_radius=sr)


@dataclass(frozen=True)
class ZernikeTerm:
    j: int
    n: int
    m: int
    nm: float

    @classmethod
    def from_dict(cls, d: dict) -> "ZernikeTerm":
        return build(cls, d)


@dataclass(frozen=True)
class ZernikeSet:
    """The form as ANSI Z80.28 / ISO 24157 Zernike coefficients over the test diameter (nm of surface height)."""

    diameter_mm: float
    terms: tuple[ZernikeTerm, ...]

    ORDERING = "ANSI Z80.28 / ISO 24157 single index j = (n(n+2)+m)/2"
    NORMALISATION = "orthonormal over the unit disc: N = sqrt(2(n+1)/(1+δm0)); cos for m > 0, sin for m < 0"
    ANGLE = "from the image x axis (columns) toward y (rows, down)"
    ORIENTATION = "power >= 0 (apply power_sign for the surface's sense)"

    def to_dict(self) -> dict:
        return {"ordering": self.ORDERING, "normalisation": self.NORMALISATION, "angle": self.ANGLE,
                "diameter_mm": self.diameter_mm, "orientation": self.ORIENTATION,
                "terms": [dict(t.__dict__) for t in self.terms]}

    @classmethod
    def from_dict(cls, d: dict | None) -> "ZernikeSet | None":
        return None if d is None else build(cls, d)


@dataclass(frozen=True)
class HeightMap:
    """The surface departure less piston and tilt on a grid (nm, 0.01 nm steps; None outside the aperture)."""

    values: tuple[tuple[float | None, ...], ...]
    extent_px: tuple[float, float, float, float] | None  # (x_left, x_right, y_bottom, y_top) in frame pixels
    sign_known: bool

    UNIT = "nm of surface height, less piston and tilt; null outside the aperture"

    @classmethod
    def of(cls, m: np.ndarray, extent, sign_known: bool) -> "HeightMap":
        vals = tuple(tuple(None if not np.isfinite(x) else round(float(x), 2) for x in row) for row in m)
        return cls(vals, None if extent is None else tuple(float(e) for e in extent), bool(sign_known))

    def array(self) -> np.ndarray:
        """The map as a float array, NaN outside the aperture."""
        return np.array([[np.nan if x is None else x for x in row] for row in self.values], dtype=float)

    def to_dict(self) -> dict:
        return {
            "unit": self.UNIT,
            "sign": "gap as measured (positive = gap grows)" if self.sign_known else
                    "orientation with power >= 0 (sign unknown)",
            "rows": len(self.values), "cols": len(self.values[0]) if self.values else 0,
            "extent_px": None if self.extent_px is None else list(self.extent_px),
            "values": [list(r) for r in self.values],
        }

    @classmethod
    def from_dict(cls, d: dict | None) -> "HeightMap | None":
        if d is None:
            return None
        # row by row, not through the generic converter: a map has up to 96 x 96 cells
        values = tuple(tuple(None if x is None else float(x) for x in row) for row in d["values"])
        return cls(values,
                   convert(tuple[float, float, float, float], d.get("extent_px")),
                   str(d.get("sign", "")).startswith("gap as measured"))


@dataclass(frozen=True)
class PhaseSummary:
    """How the phase map from several frames was made (when that route was used)."""

    frames: int
    steps_fringes: tuple[float, ...]
    tilt_changes_fringes_per_radius: tuple[tuple[float, float], ...]
    orientation_from_steps: str
    orientation_detail: str
    fringe_visibility: float
    phase_noise_fringes: float | None
    iterations: int
    converged: bool

    METHOD = ("advanced iterative algorithm (Wang & Han, Opt. Lett. 29, 1671, 2004) with per-frame piston "
              "and tilt, started by principal components (Vargas et al., Opt. Lett. 36, 1326, 2011); "
              "unwrapped with skimage.restoration.unwrap_phase")

    @classmethod
    def of(cls, pm) -> "PhaseSummary":
        return cls(
            frames=int(pm.n_frames), steps_fringes=tuple(float(s) for s in pm.steps_fringes),
            tilt_changes_fringes_per_radius=tuple((float(a), float(b)) for a, b in pm.tilts_fringes),
            orientation_from_steps={1: "as stated gap change", -1: "reversed", 0: "undecided"}[pm.orientation],
            orientation_detail=pm.orientation_detail, fringe_visibility=float(pm.modulation),
            phase_noise_fringes=None if not math.isfinite(pm.phase_noise_fringes) else float(pm.phase_noise_fringes),
            iterations=int(pm.iterations), converged=bool(pm.converged),
        )

    def to_dict(self) -> dict:
        return {"method": self.METHOD, "frames": self.frames, "steps_fringes": list(self.steps_fringes),
                "tilt_changes_fringes_per_radius": [list(t) for t in self.tilt_changes_fringes_per_radius],
                "orientation_from_steps": self.orientation_from_steps, "orientation_detail": self.orientation_detail,
                "fringe_visibility": self.fringe_visibility, "phase_noise_fringes": self.phase_noise_fringes,
                "iterations": self.iterations, "converged": self.converged}

    @classmethod
    def from_dict(cls, d: dict | None) -> "PhaseSummary | None":
        return None if d is None else build(cls, d, {"frames": "frames"})


def _aperture_dict(ap: Aperture) -> dict:
    return {"centre_px": [float(v) for v in ap.centre_px], "centre_u_px": [float(v) for v in ap.centre_u_px],
            "diameter_px": 2 * float(ap.radius_px), "diameter_u_px": 2 * float(ap.radius_u_px),
            "edge_rms_px": float(ap.edge_rms_px), "notes": list(ap.notes),
            "source": "set by hand" if ap.manual else "found from the image"}


def _aperture_from(d: dict) -> Aperture:
    return Aperture(convert(tuple[float, float], d["centre_px"]), float(d["diameter_px"]) / 2,
                    convert(tuple[float, float], d["centre_u_px"]), float(d["diameter_u_px"]) / 2,
                    float(d["edge_rms_px"]), tuple(d.get("notes") or ()), d.get("source") == "set by hand")


@dataclass(frozen=True)
class FormResult:
    """Surface form of one part against a test plate. ``to_dict()`` is the JSON the tool prints and keeps."""

    wavelength_nm: float
    wavelength_u_nm: float
    medium_index: float
    fringe_nm: float
    quantities: tuple[FormTerm, ...]  # in FORM_TERMS order; power signed when the sign is known
    astigmatism_axis: Quantity  # degrees from the image x axis toward y; u None when not known
    test_diameter_mm: float
    test_diameter_source: str
    aperture: Aperture
    aperture_diameter: Quantity  # mm
    masks: tuple[Mask, ...]
    masked_fraction: float
    sign: SignResult
    fits: tuple[FitSummary, ...]
    radius: SurfaceRadius | None
    tolerance: Tolerance | None
    verdict: Verdict
    warnings: tuple[str, ...]
    pixel_size_um: tuple[float, float]
    elapsed_s: float
    k: float = 2.0
    notes: tuple[str, ...] = ()
    budget_rows: dict = field(default_factory=dict)  # term key -> ((source, u in fringes), ...)
    route: str = "one-frame fit"  # one-frame fit, model fit with piston steps, phase map
    zernike_ansi: ZernikeSet | None = None
    height_map: HeightMap | None = None
    phase: PhaseSummary | None = None
    #: the engine's own fits (with their model state) while the result is in memory; not stored
    engine_fits: tuple = field(default=(), compare=False, repr=False)

    METHOD = ("full-aperture fit of a gap model (Zernike terms, OSA/ANSI order, unnormalised) with "
              "illumination and modulation terms; form terms per ISO 10110-5 over the test diameter")
    AXIS_CONVENTION = "meridian of larger power magnitude, degrees from the image x axis (columns) toward y (rows, down)"

    # -- access ------------------------------------------------------------------------------------------
    def term(self, name: str) -> FormTerm:
        """The measured term by name or key ("power" or "power_fringes")."""
        spec = term_spec(name)
        for t in self.quantities:
            if spec is not None and t.name == spec.name:
                return t
        raise KeyError(name)

    @property
    def terms(self) -> dict[str, float]:
        """Term key -> value in fringes (power signed when the sign is known)."""
        return {t.spec.key: t.fringes.value for t in self.quantities}

    @property
    def terms_u(self) -> dict[str, float | None]:
        """Term key -> standard uncertainty in fringes."""
        return {t.spec.key: t.fringes.u for t in self.quantities}

    def value(self, name: str) -> float:
        return self.term(name).fringes.value

    @property
    def astigmatism_axis_deg(self) -> float:
        return self.astigmatism_axis.value

    @property
    def height_map_nm(self) -> np.ndarray | None:
        return None if self.height_map is None else self.height_map.array()

    @property
    def map_extent_px(self):
        return None if self.height_map is None else self.height_map.extent_px

    # -- JSON --------------------------------------------------------------------------------------------
    def to_dict(self) -> dict:
        d: dict = {
            "method": self.METHOD,
            "wavelength_nm": self.wavelength_nm,
            "wavelength_u_nm": self.wavelength_u_nm,
            "medium_index": self.medium_index,
            "fringe_nm": self.fringe_nm,
            "fringe_definition": "one fringe = λ/(2n) of surface height",
            "k": self.k,
            "uncertainty_note": "u = standard uncertainty (k = 1); U = k·u",
        }
        for t in self.quantities:
            d[f"{t.name}_fringes"] = t.fringes.value
            d[f"{t.name}_u_fringes"] = t.fringes.u
            d[f"{t.name}_nm"] = t.nm.value
            d[f"{t.name}_u_nm"] = t.nm.u
        d["power_sign"] = self.sign.to_dict()["sign"]
        d["astigmatism_axis_deg"] = self.astigmatism_axis.value
        d["astigmatism_axis_u_deg"] = self.astigmatism_axis.u
        d["astigmatism_axis_convention"] = self.AXIS_CONVENTION
        pv = self.term("pv_total").nm
        d["flatness_pv_nm"] = pv.value
        d["flatness_pv_u_nm"] = pv.u
        d["test_diameter_mm"] = self.test_diameter_mm
        d["test_diameter_source"] = self.test_diameter_source
        d["aperture"] = {**_aperture_dict(self.aperture), "diameter_mm": self.aperture_diameter.value,
                         "diameter_u_mm": self.aperture_diameter.u}
        d["uncertainty_budget"] = {
            name: [{"source": src, "u_fringes": u, "u_nm": u * self.fringe_nm} for src, u in rows]
            for name, rows in self.budget_rows.items()
        }
        d["masks"] = [m.to_dict() for m in self.masks]
        d["masked_fraction"] = self.masked_fraction
        d["sign"] = self.sign.to_dict()
        d["fit"] = [f.to_dict() for f in self.fits]
        d["radius"] = None if self.radius is None else self.radius.to_dict()
        d["tolerance"] = None if self.tolerance is None else self.tolerance.to_dict()
        d["verdict"] = self.verdict.to_dict()
        d["warnings"] = list(self.warnings)
        d["notes"] = list(self.notes)
        d["elapsed_s"] = self.elapsed_s
        d["route"] = self.route
        d["zernike_ansi"] = None if self.zernike_ansi is None else self.zernike_ansi.to_dict()
        if self.phase is not None:
            d["phase_map"] = self.phase.to_dict()
        if self.height_map is not None:
            d["height_map"] = self.height_map.to_dict()
        return d

    @classmethod
    def from_dict(cls, d: dict, *, pixel_size_um: tuple[float, float]) -> "FormResult":
        """A form result as ``to_dict()`` wrote it; ``pixel_size_um`` (x, y) is the set-up's."""
        k = float(d.get("k") or 2.0)
        quantities = tuple(
            FormTerm(t.name, Quantity(float(d[f"{t.name}_fringes"]), convert(float, d.get(f"{t.name}_u_fringes")),
                                      "fringes", k),
                     Quantity(float(d[f"{t.name}_nm"]), convert(float, d.get(f"{t.name}_u_nm")), "nm", k))
            for t in FORM_TERMS if d.get(f"{t.name}_fringes") is not None
        )
        ap = d["aperture"]
        tol = d.get("tolerance")
        return cls(
            wavelength_nm=float(d["wavelength_nm"]), wavelength_u_nm=float(d["wavelength_u_nm"]),
            medium_index=float(d["medium_index"]), fringe_nm=float(d["fringe_nm"]), quantities=quantities,
            astigmatism_axis=Quantity(float(d["astigmatism_axis_deg"]), convert(float, d.get("astigmatism_axis_u_deg")),
                                      "°", k),
            test_diameter_mm=float(d["test_diameter_mm"]), test_diameter_source=str(d["test_diameter_source"]),
            aperture=_aperture_from(ap),
            aperture_diameter=Quantity(float(ap["diameter_mm"]), convert(float, ap.get("diameter_u_mm")), "mm", k),
            masks=tuple(Mask.from_dict(m) for m in d.get("masks") or ()),
            masked_fraction=float(d.get("masked_fraction") or 0.0),
            sign=SignResult.from_dict(d["sign"]),
            fits=tuple(FitSummary.from_dict(f) for f in d.get("fit") or ()),
            radius=SurfaceRadius.from_dict(d.get("radius")),
            tolerance=None if tol is None else parse_tolerance(tol["text"]),
            verdict=Verdict.from_dict(d["verdict"]),
            warnings=tuple(d.get("warnings") or ()), pixel_size_um=tuple(float(p) for p in pixel_size_um),
            elapsed_s=float(d.get("elapsed_s") or 0.0), k=k, notes=tuple(d.get("notes") or ()),
            budget_rows={name: tuple((r["source"], float(r["u_fringes"])) for r in rows)
                         for name, rows in (d.get("uncertainty_budget") or {}).items()},
            route=str(d.get("route") or "one-frame fit"),
            zernike_ansi=ZernikeSet.from_dict(d.get("zernike_ansi")),
            height_map=HeightMap.from_dict(d.get("height_map")),
            phase=PhaseSummary.from_dict(d.get("phase_map")),
        )
