"""What the window draws, worked out in plain Python from a typed result (no Qt, no computing of measurements:
only the geometry, text and arrays the widgets paint). The results table renders :mod:`ringgauge.presentation`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
import numpy as np

from .. import presentation
from ..form.result import FormResult
from ..result import AnalysisResult
from ..uncertainty import round_uncertainty
from .model import Overrides


# -- the photograph -------------------------------------------------------------------------------------------
def image_to_u8(data: np.ndarray, *, stretch: bool = True) -> np.ndarray:
    """Intensity in [0, 1] (or any range) to 8-bit grey for display; ``stretch`` maps the 0.5-99.5 %
    percentiles to black and white so dim fringes are visible."""
    a = np.asarray(data, dtype=np.float32)
    if a.ndim != 2 or a.size == 0:
        raise ValueError("expected a non-empty 2-D image")
    if stretch:
        sub = a[:: max(1, a.shape[0] // 512), :: max(1, a.shape[1] // 512)]
        lo, hi = np.percentile(sub, [0.5, 99.5])
    else:
        lo, hi = 0.0, 1.0
    if not hi > lo:
        lo, hi = float(a.min()), float(a.max()) + 1e-6
    out = np.clip((a - lo) * (255.0 / (hi - lo)), 0, 255)
    return np.ascontiguousarray(out.astype(np.uint8))


def signed_to_rgb(values: np.ndarray, *, limit: float | None = None) -> np.ndarray:
    """A signed array (e.g. fit minus image) as an RGB image: blue below zero, white at zero, orange above.

    Blue/orange is a diverging pair that stays distinct for the common colour-vision deficiencies
    (Okabe & Ito, "Color Universal Design", 2008). NaN is drawn mid grey.
    """
    v = np.asarray(values, dtype=np.float64)
    finite = np.isfinite(v)
    if limit is None:
        limit = float(np.percentile(np.abs(v[finite]), 99)) if finite.any() else 1.0
    limit = limit if limit > 0 else 1.0
    t = np.clip(np.where(finite, v, 0.0) / limit, -1, 1)[..., None]
    white = np.array([255, 255, 255], dtype=np.float64)
    blue = np.array([0, 114, 178], dtype=np.float64)
    orange = np.array([230, 159, 0], dtype=np.float64)
    rgb = np.where(t < 0, white + (-t) * (blue - white), white + t * (orange - white))
    rgb[~finite] = (128, 128, 128)
    return np.ascontiguousarray(rgb.astype(np.uint8))


# -- overlay geometry ----------------------------------------------------------------------------------------
@dataclass
class RingShape:
    rx: float
    ry: float
    kind: str
    order: float
    used: bool


@dataclass
class Overlay:
    """Shapes drawn over the photograph, in image pixels (x = column, y = row)."""

    centre: tuple[float, float] | None = None
    centre_by_hand: bool = False
    rings: list[RingShape] = field(default_factory=list)
    aperture: tuple[float, float, float, float] | None = None  # cx, cy, rx, ry
    aperture_by_hand: bool = False
    masks: list[tuple[float, float, float]] = field(default_factory=list)  # circles: x, y, r
    mask_image: np.ndarray | None = None  # bool (H, W), when the result carries a pixel mask
    meridians: list[tuple[float, str]] = field(default_factory=list)  # angle in degrees from +x, label
    test_circle: tuple[float, float, float, float] | None = None  # the evaluated test diameter: cx, cy, rx, ry
    test_diameter_mm: float | None = None


def _num(v) -> float | None:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def _aspect(result: AnalysisResult) -> float:
    """Pixel size along y over pixel size along x (1 for square pixels)."""
    px, py = result.setup.pixel_size_xy_um
    return float(py) / float(px) if px else 1.0


def overlay_from(result: AnalysisResult | None, overrides: Overrides | None = None) -> Overlay:
    """Overlay shapes from a result and the manual overrides."""
    ov = Overlay()
    if result is not None:
        aspect = _aspect(result)
        c = result.centre_px
        if c is not None and _num(c[0]) is not None and _num(c[1]) is not None:
            ov.centre = (float(c[0]), float(c[1]))
        for r in () if result.fit is None else result.fit.rings:
            rp = _num(r.radius_px)
            if rp is None:
                continue
            ov.rings.append(RingShape(rp, rp / aspect, r.kind, _num(r.order) or 0.0, r.used))
        form = result.form
        if form is not None:
            ap = form.aperture
            ov.aperture = (float(ap.centre_px[0]), float(ap.centre_px[1]), float(ap.radius_px),
                           float(ap.radius_px) / aspect)
            for m in form.masks:
                if m.area_px:
                    ov.masks.append((float(m.centre_px[0]), float(m.centre_px[1]),
                                     max(2.0, math.sqrt(float(m.area_px) / math.pi))))
            td = _num(form.test_diameter_mm)
            px, py = result.setup.pixel_size_xy_um
            if td and px and py:
                # the test diameter about the aperture's centre, in pixels along x and y
                cx, cy = ov.aperture[0], ov.aperture[1]
                ov.test_circle = (cx, cy, td / 2 * 1e3 / float(px), td / 2 * 1e3 / float(py))
                ov.test_diameter_mm = td
            axis = _num(form.astigmatism_axis.value)
            try:
                astig = form.term("astigmatism").fringes.value
            except KeyError:
                astig = 0.0
            if axis is not None and astig > 0:
                # the form evaluation counts the axis from +x toward +y (rows, down): clockwise on screen
                ov.meridians = [(axis, "stronger meridian"), (axis + 90.0, "weaker meridian")]
    if overrides is None:
        return ov
    if overrides.centre_px is not None:
        ov.centre = tuple(float(v) for v in overrides.centre_px)  # type: ignore[assignment]
        ov.centre_by_hand = True
    if overrides.aperture_px is not None:
        x, y, r = (float(v) for v in overrides.aperture_px)
        aspect = _aspect(result) if result is not None else 1.0
        ov.aperture = (x, y, r, r / aspect)
        ov.aperture_by_hand = True
    return ov


def overrides_ignored(result: AnalysisResult | None, overrides: Overrides | None, *,
                      tol_px: float = 3.0) -> list[str]:
    """Which hand settings the result does not reflect (the engine found its own centre or aperture).

    The window passes a hand-set centre and aperture to the engine in the set-up; an engine that does not
    read them finds its own. The operator must know when that happened."""
    out: list[str] = []
    if result is None or overrides is None:
        return out
    c = overrides.centre_px
    rc = result.centre_px
    if c is not None and rc is not None and math.hypot(float(rc[0]) - c[0], float(rc[1]) - c[1]) > tol_px:
        out.append(f"centre (the result's centre is at {float(rc[0]):.1f}, {float(rc[1]):.1f} px)")
    a = overrides.aperture_px
    if a is not None and result.form is not None:
        ap = result.form.aperture
        off = math.hypot(ap.centre_px[0] - a[0], ap.centre_px[1] - a[1])
        if off > tol_px or abs(float(ap.radius_px) - a[2]) > tol_px:
            out.append(f"aperture (the result's aperture is {2 * float(ap.radius_px):.0f} px across)")
    return out


# -- the results table ----------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ValueRow:
    label: str
    value: str
    uncertainty: str
    unit: str
    group: str = ""


def _fmt(v: float | None, digits: int = 6) -> str:
    if v is None:
        return "—"
    return f"{v:.{digits}g}"


def table_rows(rows: list[presentation.Row]) -> list[ValueRow]:
    """Presentation rows as the window's table shows them: value, "± U" (or why there is none), unit. A form
    term's value in nm gets a row of its own for power and irregularity."""
    out = []
    for r in rows:
        out.append(_table_row(r.label, r, r.value))
        if r.alt is not None and r.key.removeprefix("form.") in presentation.NM_ROWS:
            out.append(_table_row(r.label + " in nm", r, r.alt))
    return out


def _table_row(label: str, r: presentation.Row, q) -> ValueRow:
    if q is None or r.value is None or (r.kind not in (presentation.MEASURED, presentation.SETTING)
                                        and q.U is None):
        return ValueRow(label, presentation.figure_text(r), presentation.no_U_text(r), r.shown_unit, r.section)
    a, b = presentation.value_and_U(q.value, q.U, decimals=r.decimals)
    return ValueRow(label, a, presentation.no_U_text(r) if b is None else "± " + b, q.unit, r.section)


def value_rows(result: AnalysisResult | None) -> list[ValueRow]:
    """Every value the result carries, with unit and expanded uncertainty (k as stated in the result)."""
    return table_rows(presentation.rows(result))


def form_rows(form: FormResult) -> list[ValueRow]:
    """Rows of a form result: terms in fringes (U = k·u), power and irregularity in nm, sign, axis, test
    diameter, aperture, masks, and the radius against the test plate."""
    return table_rows(presentation.form_rows(form) + presentation.plate_rows(form))


def budget_rows(result: AnalysisResult | None) -> list[list[str]]:
    """The uncertainty budget as table rows: quantity, estimate, u, distribution, c_i, contribution, share."""
    if result is None:
        return []
    b = result.budget
    if b is None and result.form is not None and result.form.radius is not None:
        rad = result.form.radius
        b = rad.budget_surface_radius or rad.budget_delta_r
    if b is None:
        return []
    return [[
        r.quantity,
        f"{_fmt(_num(r.estimate))} {r.estimate_unit}".strip(),
        _fmt(_num(r.u), 3),
        r.distribution,
        f"{_fmt(_num(r.sensitivity), 3)} {r.sensitivity_unit}".strip(),
        f"{_fmt(_num(r.contribution), 3)} {b.output_unit}".strip(),
        f"{100 * (_num(r.share) or 0):.1f} %",
    ] for r in b.rows]


# -- the verdict --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class VerdictView:
    word: str  # PASS, FAIL, CONDITIONAL PASS, CONDITIONAL FAIL, NOT EVALUATED
    symbol: str
    tone: str  # "pass", "fail", "conditional", "none" — the widget maps tones to colours
    explanation: str
    decision_rule: str
    terms: tuple[str, ...] = ()
    headline: str = ""  # the key values, large enough to read from a step back


headline = presentation.headline


_VERDICTS = {
    "pass": ("PASS", "✔", "pass", "every specified term is within its tolerance"),
    "fail": ("FAIL", "✖", "fail", "at least one term is outside its tolerance"),
    "conditional pass": ("CONDITIONAL PASS", "◐", "conditional",
                         "within tolerance, but the uncertainty reaches past a limit"),
    "conditional fail": ("CONDITIONAL FAIL", "◑", "conditional",
                         "outside tolerance by less than the uncertainty"),
    "not evaluated": ("NOT EVALUATED", "–", "none", "no tolerance was evaluated"),
}


def verdict_view(result: AnalysisResult | None) -> VerdictView:
    v = None if result is None else result.verdict
    head = headline(result)
    if v is None:
        if result is not None and result.radius is not None:
            return VerdictView("MEASURED", "•", "none", "radius measured; no tolerance given, so no pass/fail", "",
                               headline=head)
        return VerdictView("NO RESULT", "–", "none", "open an image and analyse it", "")
    overall = str(v.overall or "not evaluated").lower()
    word, sym, tone, expl = _VERDICTS.get(overall, (overall.upper(), "?", "none", ""))
    terms = []
    for t in v.terms:
        name = presentation.term_label(t.term)  # the trade's name, not the key
        txt = f"{name}: {str(t.verdict).upper()}".strip(": ")
        val, lim = _num(t.value), _num(t.limit)
        if val is not None and lim is not None:
            a, b = presentation.value_and_U(val, _num(t.U))
            if b is None:
                a = f"{val:.3g}"
            pm = "" if b is None else f" ± {b}"
            txt += f" ({a}{pm} {t.unit}, limit {lim:g} {t.unit})".replace("  ", " ")
        terms.append(txt)
    if v.meaning:
        expl = str(v.meaning)
    elif overall == "not evaluated" and v.reason:
        expl = str(v.reason)
    # with a term-by-term verdict the terms themselves carry the values; the headline would repeat them
    return VerdictView(word, sym, tone, expl, str(v.decision_rule or ""), tuple(terms), "" if terms else head)


# -- plots ----------------------------------------------------------------------------------------------------
def ring_plot_data(result: AnalysisResult | None) -> dict | None:
    """r² against fringe order with the fitted line and the residuals (mm², µm² for residuals)."""
    fit = None if result is None else result.fit
    if fit is None or not fit.rings:
        return None
    rings = fit.rings
    order = np.array([_num(r.order) or 0.0 for r in rings])
    r2 = np.array([_num(r.r2_mm2) or 0.0 for r in rings])
    u = np.array([_num(r.u_r2_mm2) or 0.0 for r in rings])
    res = np.array([_num(r.residual_mm2) or 0.0 for r in rings])
    used = np.array([bool(r.used) for r in rings])
    return {"order": order, "r2_mm2": r2, "u_r2_mm2": u, "residual_um2": res * 1e6, "used": used,
            "slope_mm2": _num(fit.slope_mm2), "intercept_mm2": _num(fit.intercept_mm2)}


def profile_plot_data(result: AnalysisResult | None) -> dict | None:
    ff = None if result is None else result.fullfield
    if ff is None or not ff.profile_i or not ff.profile_r_px:
        return None
    x = np.asarray(ff.profile_r_px, dtype=float)
    iv = np.asarray(ff.profile_i, dtype=float)
    n = min(len(x), len(iv))
    return {"r_px": x[:n], "intensity": iv[:n], "extrema_r_px": np.asarray(ff.extrema_r_px or (), dtype=float),
            "xlabel": "radius r / px"}


def _ring_model(result: AnalysisResult | None):
    """(slope mm²/fringe, intercept mm², centre px, pixel size µm (x, y), r_max mm) of the ring fit, or None."""
    fit = None if result is None else result.fit
    if fit is None or result.centre_px is None:
        return None
    slope, icpt = _num(fit.slope_mm2), _num(fit.intercept_mm2)
    if slope is None or icpt is None or not slope:
        return None
    return slope, icpt, result.centre_px, result.setup.pixel_size_xy_um, _num(fit.r_max_mm)


def ring_gap_map(result: AnalysisResult | None, shape: tuple[int, int], *, step: int = 4) -> dict | None:
    """The fitted gap (nm) over the field from the ring fit: gap = (r² - c) / slope fringes of λ/(2n).

    Returned on a grid subsampled by ``step`` (x, y extents in pixels). Used when the result carries no form
    map of its own (a lens on an optical flat).
    """
    model = _ring_model(result)
    if model is None:
        return None
    slope, icpt, c, px, rmax = model
    lam, n = result.setup.wavelength_nm, result.setup.medium_index or 1.0
    H, W = shape
    ys = np.arange(0, H, step, dtype=float)
    xs = np.arange(0, W, step, dtype=float)
    dx = (xs - float(c[0])) * float(px[0]) * 1e-3
    dy = (ys - float(c[1])) * float(px[1]) * 1e-3
    r2 = dx[None, :] ** 2 + dy[:, None] ** 2
    fringes = (r2 - icpt) / slope
    gap_nm = fringes * lam / (2 * n)
    if rmax is not None:
        gap_nm = np.where(r2 <= rmax * rmax, gap_nm, np.nan)
    return {"gap_nm": gap_nm, "extent_px": (0.0, float(W), float(H), 0.0), "title": "Fitted gap from the ring fit"}


def form_map(result: AnalysisResult | None, shape: tuple[int, int] | None = None) -> dict | None:
    """The surface-form map: the form result's own map when it has one, else the ring fit's gap.

    ``extent_px`` is (left, right, bottom, top) in image pixels; ``extent_mm`` the same in millimetres on the
    part, measured from the aperture's (or the rings') centre, when the pixel size is known."""
    m = _form_map(result, shape)
    if m is None:
        return None
    px = result.setup.pixel_size_xy_um
    centre = m.get("centre_px") or result.centre_px
    if _num(px[0]) and _num(px[1]) and centre:
        x0, x1, y0, y1 = m["extent_px"]
        sx, sy = float(px[0]) * 1e-3, float(px[1]) * 1e-3
        cx, cy = float(centre[0]), float(centre[1])
        # image rows run down; on the plot +y is up, so the mm axis is flipped to keep the picture upright
        m["extent_mm"] = ((x0 - cx) * sx, (x1 - cx) * sx, (cy - y0) * sy, (cy - y1) * sy)
    return m


def form_profile(m: dict | None, *, bins: int = 40) -> dict | None:
    """The form map along the radius: mean, lowest and highest gap (nm) in rings of equal width, radius in mm.

    For a form result the r²-against-order plot has no rings to show; this is what a rotationally symmetric
    error (a zone, power) looks like along the radius."""
    if not m or "extent_mm" not in m:
        return None
    g = np.asarray(m["gap_nm"], dtype=float)
    x0, x1, y0, y1 = m["extent_mm"]
    ny, nx = g.shape
    xs = np.linspace(x0, x1, nx)
    ys = np.linspace(y1, y0, ny)  # first row is the top of the picture
    r = np.hypot(xs[None, :], ys[:, None])
    ok = np.isfinite(g)
    if ok.sum() < 10:
        return None
    rmax = float(r[ok].max())
    edges = np.linspace(0.0, rmax, bins + 1)
    idx = np.clip(np.digitize(r[ok], edges) - 1, 0, bins - 1)
    vals = g[ok]
    cnt = np.bincount(idx, minlength=bins)
    keep = cnt > 0
    mean = np.bincount(idx, vals, bins)[keep] / cnt[keep]
    lo = np.full(bins, np.inf)
    hi = np.full(bins, -np.inf)
    np.minimum.at(lo, idx, vals)
    np.maximum.at(hi, idx, vals)
    mid = 0.5 * (edges[1:] + edges[:-1])
    return {"r_mm": mid[keep], "mean_nm": mean, "lo_nm": lo[keep], "hi_nm": hi[keep]}


def _form_map(result: AnalysisResult | None, shape: tuple[int, int] | None = None) -> dict | None:
    """The form result's own height map (the engine makes it, from the phase map or the gap fit, with the sign
    applied when known); without a form result, the ring fit's gap."""
    if result is None:
        return None
    form = result.form
    m = None if form is None else form.height_map_nm
    if m is not None and np.ndim(m) == 2:
        arr = np.asarray(m, dtype=float)
        ext = form.map_extent_px
        extent = tuple(ext) if ext is not None else (0.0, float(arr.shape[1]), float(arr.shape[0]), 0.0)
        ap = form.aperture
        return {"gap_nm": arr, "extent_px": extent, "title": "Surface form less piston and tilt",
                "centre_px": (float(ap.centre_px[0]), float(ap.centre_px[1]))}
    if shape is None:
        return None
    return ring_gap_map(result, shape)


def _cell_residual(img, m, rn, theta, *, annuli: int, sectors: int) -> np.ndarray:
    """Model minus image with the model a − b·cos 2πm, a and b fitted per cell of ``annuli`` rings in the
    normalised radius ``rn`` (< 1 inside) and ``sectors`` angular sectors; NaN outside."""
    H, W = img.shape
    ring = np.floor(rn * annuli).astype(np.int64)
    sector = np.floor((theta + np.pi) / (2 * np.pi) * sectors).astype(np.int64) % sectors
    inside = (rn >= 0) & (ring < annuli)
    cell = np.where(inside, ring * sectors + sector, -1).ravel()
    v = img.ravel()
    cm = -np.cos(2 * np.pi * m).ravel()
    ncell = annuli * sectors
    sel = cell >= 0
    # per-cell least squares of v on [1, cm]: the normal equations, summed with bincount
    w = np.bincount(cell[sel], minlength=ncell).astype(np.float64)
    sx = np.bincount(cell[sel], cm[sel], ncell)
    sxx = np.bincount(cell[sel], cm[sel] ** 2, ncell)
    sy = np.bincount(cell[sel], v[sel], ncell)
    sxy = np.bincount(cell[sel], cm[sel] * v[sel], ncell)
    det = w * sxx - sx * sx
    ok = (w >= 12) & (det > 1e-9 * np.maximum(w * sxx, 1e-300))
    b = np.where(ok, (w * sxy - sx * sy) / np.where(ok, det, 1.0), np.nan)
    a = np.where(ok, (sy - b * sx) / np.where(w > 0, w, 1.0), np.nan)
    out = np.full(v.shape, np.nan)
    out[sel] = a[cell[sel]] + b[cell[sel]] * cm[sel] - v[sel]
    return out.reshape(H, W)


def residual_image(data: np.ndarray, result: AnalysisResult | None, *, form_obj=None, annuli: int = 24,
                   sectors: int = 12) -> np.ndarray | None:
    """Fit minus image, NaN where nothing was fitted.

    Rings on a flat: the fitted orders put dark rings at whole m = (r² − c) / slope. Form against a test plate:
    the gap fit gives m = gap in fringes (dark at whole fringes). The model is I = a − b cos 2πm; only the
    background a and the fringe amplitude b are taken from the image, cell by cell of annuli and angular sectors
    (uneven lighting); the phase is the fit's own, so a wrong centre, slope or form shows as residual fringes.
    ``form_obj`` (default: the result's form) holds the engine's gap fits while the result is in memory."""
    img = np.asarray(data, dtype=np.float64)
    H, W = img.shape
    yy, xx = np.mgrid[0:H, 0:W]
    if form_obj is None and result is not None:
        form_obj = result.form
    if form_obj is not None and getattr(form_obj, "engine_fits", None):
        try:
            from ..form.fit import gap_basis
        except ImportError:
            return None
        f = form_obj.engine_fits[0]
        cx, cy = f.centre_px
        r, aspect = float(f.radius_px), float(f.aspect or 1.0)
        u, v = (xx - cx) / r, (yy - cy) * aspect / r
        rn = np.sqrt(u * u + v * v)
        inside = rn <= 1.0
        coeffs = np.asarray(f.coeffs, dtype=float)
        m = np.zeros(img.shape)
        m[inside] = coeffs @ gap_basis(u[inside], v[inside], len(coeffs))
        return _cell_residual(img, m, np.where(inside, rn, 2.0), np.arctan2(v, u), annuli=annuli // 2,
                              sectors=sectors)
    model = _ring_model(result)
    if model is None or model[4] is None:
        return None
    slope, icpt, c, px, rmax = model
    dx = (xx - float(c[0])) * float(px[0]) * 1e-3
    dy = (yy - float(c[1])) * float(px[1]) * 1e-3
    r2 = dx * dx + dy * dy
    return _cell_residual(img, (r2 - icpt) / slope, r2 / (rmax * rmax), np.arctan2(dy, dx), annuli=annuli,
                          sectors=sectors)


def rounded_u(u: float | None) -> str:
    return "—" if u is None else f"{round_uncertainty(u):.2g}"
