"""What the window draws, worked out in plain Python from a result's ``to_dict()`` (no Qt, no computing of
measurements: only the geometry, text and arrays the widgets paint).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..report.labels import term_label
from ..uncertainty import format_value, round_uncertainty


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


def _aspect(d: dict) -> float:
    """Pixel size along y over pixel size along x (1 for square pixels)."""
    try:
        px, py = d["setup"]["pixel_size_um"]
        return float(py) / float(px)
    except (KeyError, TypeError, ValueError, ZeroDivisionError):
        return 1.0


def _find(d: Any, *keys: str):
    """First value found under any of ``keys`` in a nested dict (depth-first)."""
    if isinstance(d, dict):
        for k in keys:
            if k in d and d[k] is not None:
                return d[k]
        for v in d.values():
            got = _find(v, *keys)
            if got is not None:
                return got
    return None


def overlay_from(d: dict | None, overrides: dict | None = None) -> Overlay:
    """Overlay shapes from a result dict (``AnalysisResult.to_dict()``) and the manual overrides."""
    ov = Overlay()
    overrides = overrides or {}
    if d:
        aspect = _aspect(d)
        c = d.get("centre_px")
        if c and _num(c[0]) is not None and _num(c[1]) is not None:
            ov.centre = (float(c[0]), float(c[1]))
        for r in (d.get("fringes") or {}).get("rings", []) or []:
            rp = _num(r.get("radius_px"))
            if rp is None:
                continue
            ov.rings.append(RingShape(rp, rp / aspect, str(r.get("kind", "dark")), _num(r.get("order")) or 0.0,
                                      bool(r.get("used", True))))
        ap = _find(d.get("form"), "aperture") or _find(d.get("fullfield"), "aperture")
        if isinstance(ap, dict):
            cc = ap.get("centre_px")
            dia = _num(ap.get("diameter_px"))
            rad = _num(ap.get("radius_px")) or (dia / 2 if dia else None)
            if cc and rad:
                ov.aperture = (float(cc[0]), float(cc[1]), rad, rad / aspect)
        masks = (d.get("form") or {}).get("masks") if isinstance(d.get("form"), dict) else None
        if isinstance(masks, list):
            for m in masks:
                if isinstance(m, dict) and m.get("centre_px") and _num(m.get("area_px")):
                    x, y = float(m["centre_px"][0]), float(m["centre_px"][1])
                    ov.masks.append((x, y, max(2.0, math.sqrt(float(m["area_px"]) / math.pi))))
        form = d.get("form") if isinstance(d.get("form"), dict) else {}
        td = _num(form.get("test_diameter_mm"))
        px = (d.get("setup") or {}).get("pixel_size_um") or []
        if td and ov.aperture is not None and len(px) >= 2 and _num(px[0]) and _num(px[1]):
            # the test diameter about the aperture's centre, in pixels along x and y
            cx, cy = ov.aperture[0], ov.aperture[1]
            ov.test_circle = (cx, cy, td / 2 * 1e3 / float(px[0]), td / 2 * 1e3 / float(px[1]))
            ov.test_diameter_mm = td
        axis = _num(form.get("astigmatism_axis_deg"))
        if axis is not None and (_num(form.get("astigmatism_fringes")) or 0) > 0:
            # the form evaluation counts the axis from +x toward +y (rows, down): clockwise on screen
            ov.meridians = [(axis, "stronger meridian"), (axis + 90.0, "weaker meridian")]
    if overrides.get("centre_px") is not None:
        ov.centre = tuple(float(v) for v in overrides["centre_px"])  # type: ignore[assignment]
        ov.centre_by_hand = True
    if overrides.get("aperture_px") is not None:
        x, y, r = (float(v) for v in overrides["aperture_px"])
        aspect = _aspect(d) if d else 1.0
        ov.aperture = (x, y, r, r / aspect)
        ov.aperture_by_hand = True
    return ov


def overrides_ignored(d: dict | None, overrides: dict | None, *, tol_px: float = 3.0) -> list[str]:
    """Which hand settings the result does not reflect (the engine found its own centre or aperture).

    The window passes a hand-set centre and aperture to the engine in ``setup.extras``; an engine that does not
    read them finds its own. The operator must know when that happened."""
    out: list[str] = []
    if not d or not overrides:
        return out
    c = overrides.get("centre_px")
    rc = d.get("centre_px")
    if c is not None and rc and math.hypot(float(rc[0]) - c[0], float(rc[1]) - c[1]) > tol_px:
        out.append(f"centre (the result's centre is at {float(rc[0]):.1f}, {float(rc[1]):.1f} px)")
    a = overrides.get("aperture_px")
    ap = ((d.get("form") or {}).get("aperture") or {}) if isinstance(d.get("form"), dict) else {}
    if a is not None and ap.get("centre_px") and _num(ap.get("diameter_px")):
        off = math.hypot(ap["centre_px"][0] - a[0], ap["centre_px"][1] - a[1])
        if off > tol_px or abs(float(ap["diameter_px"]) / 2 - a[2]) > tol_px:
            out.append(f"aperture (the result's aperture is {float(ap['diameter_px']):.0f} px across)")
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


def _fmt_pair(value: float | None, U: float | None) -> tuple[str, str]:  # noqa: N803
    """Value and expanded uncertainty rounded together (U to two significant digits)."""
    if value is None:
        return "—", "—"
    if U is None or not math.isfinite(U) or U <= 0:
        return f"{value:.6g}", "not available"
    text = format_value(value, U, "").strip()
    val, _, unc = text.partition(" ± ")
    return val, "± " + unc.strip()


_SKIP = {"k", "U", "u", "unit", "value"}


def _quantity_rows(d: dict, group: str, prefix: str = "") -> list[ValueRow]:
    """Rows for every ``{"value", "unit", ...}`` entry in a nested dict (form results, fringes)."""
    rows = []
    for key, v in d.items():
        if not isinstance(v, dict):
            continue
        if "value" in v and "unit" in v:
            val = _num(v.get("value"))
            U = _num(v.get("U"))
            if U is None and _num(v.get("u")) is not None:
                U = _num(v.get("u")) * (_num(v.get("k")) or 2.0)
            a, b = _fmt_pair(val, U)
            label = (prefix + key).replace("_", " ")
            rows.append(ValueRow(label[:1].upper() + label[1:], a, b, str(v.get("unit", "")), group))
        elif key not in ("setup", "budget", "aperture", "rings"):
            rows.extend(_quantity_rows(v, group, prefix=f"{key} "))
    return rows


def value_rows(d: dict | None) -> list[ValueRow]:
    """Every value the result carries, with unit and expanded uncertainty (k as stated in the result)."""
    if not d:
        return []
    rows: list[ValueRow] = []
    k = _num(d.get("k")) or 2.0
    R, U = _num(d.get("radius_mm")), _num(d.get("radius_U_mm"))
    if R is not None:
        a, b = _fmt_pair(R, U)
        rows.append(ValueRow("Radius of curvature R", a, b, "mm", "Radius"))
        if U is not None and R:
            rel = 100 * U / abs(R)
            rows.append(ValueRow("Relative U", f"{rel:.2g}" if rel >= 0.01 else f"{1e4 * rel:.2g}",
                                 "—", "%" if rel >= 0.01 else "ppm", "Radius"))
        rows.append(ValueRow("Coverage factor k", f"{k:g}", "—", "", "Radius"))
        budget = d.get("budget") or {}
        dof = _num(budget.get("dof_eff"))
        dof_text = "∞" if dof is None else ("> 1000" if dof > 1000 else f"{dof:.0f}")
        rows.append(ValueRow("Degrees of freedom", dof_text, "—", "", "Radius"))
    c, cu = d.get("centre_px"), d.get("centre_u_px")
    if c:
        for i, axis in enumerate("xy"):
            v = _num(c[i])
            u = _num(cu[i]) if cu else None
            a, b = _fmt_pair(v, None if u is None else k * u)
            rows.append(ValueRow(f"Ring centre {axis}", a, b, "px", "Rings"))
    fr = d.get("fringes") or {}
    if fr:
        s, su = _num(fr.get("slope_mm2_per_fringe")), _num(fr.get("slope_u_mm2_per_fringe"))
        a, b = _fmt_pair(s, None if su is None else k * su)
        rows.append(ValueRow("Slope of r²", a, b, "mm²/fringe", "Rings"))
        off = _num(fr.get("contact_offset_fringes"))
        if off is not None:
            rows.append(ValueRow("Contact offset", f"{off:.3f}", "—", "fringes", "Rings"))
        rows.append(ValueRow("Rings used", str(fr.get("rings_used", "—")), "—", "", "Rings"))
        rmin, rmax = _num(fr.get("r_min_mm")), _num(fr.get("r_max_mm"))
        if rmin is not None and rmax is not None:
            rows.append(ValueRow("Ring radii used", f"{rmin:.3f} – {rmax:.3f}", "—", "mm", "Rings"))
        redchi = _num(fr.get("redchi"))
        if redchi is not None:
            rows.append(ValueRow("Reduced chi-square", f"{redchi:.3g}", "—", "", "Rings"))
    form = d.get("form")
    if isinstance(form, dict):
        rows.extend(form_rows(form))
    setup = d.get("setup") or {}
    if setup:
        lam, lamu = _num(setup.get("wavelength_nm")), _num(setup.get("wavelength_u_nm"))
        a, b = _fmt_pair(lam, None if lamu is None else k * lamu)
        rows.append(ValueRow("Wavelength λ", a, b, "nm", "Set-up"))
        px = setup.get("pixel_size_um") or []
        pu = setup.get("pixel_size_u_um") or []
        for i, axis in enumerate("xy"[: len(px)]):
            a, b = _fmt_pair(_num(px[i]), None if i >= len(pu) or _num(pu[i]) is None else k * _num(pu[i]))
            rows.append(ValueRow(f"Pixel size {axis}", a, b, "µm", "Set-up"))
        n, nu = _num(setup.get("medium_index")), _num(setup.get("medium_index_u"))
        a, b = _fmt_pair(n, None if not nu else k * nu)
        rows.append(ValueRow("Gap medium index n", a, b if nu else "exact (air)", "", "Set-up"))
    el = _num(d.get("elapsed_s"))
    if el is not None:
        rows.append(ValueRow("Analysis time", f"{el:.2f}", "—", "s", "Run"))
    return rows


#: form terms as the form evaluation names them, with the labels the table shows (ISO 10110-5 letters)
FORM_LABELS = (
    ("power_fringes", "Power (A)"),
    ("astigmatism_fringes", "Astigmatism"),
    ("irregularity_fringes", "Irregularity (B)"),
    ("rot_sym_irregularity_fringes", "Rot. symmetric irregularity (C)"),
    ("rms_total_fringes", "RMSt"),
    ("rms_irregularity_fringes", "RMSi"),
    ("rms_asymmetric_fringes", "RMSa"),
    ("pv_total_fringes", "PV after piston and tilt"),
)


def form_rows(form: dict) -> list[ValueRow]:
    """Rows for a form result's ``to_dict()``: terms in fringes (U = k·u), power in nm, axis, sign, aperture,
    masks and the radius deviation against the plate."""
    g = "Surface form"
    k = _num(form.get("k")) or 2.0
    rows: list[ValueRow] = []
    fr_nm = _num(form.get("fringe_nm"))
    if fr_nm is not None:
        rows.append(ValueRow("One fringe (λ/2n)", f"{fr_nm:.2f}", "—", "nm", g))
    for key, label in FORM_LABELS:
        v = _num(form.get(key))
        if v is None:
            continue
        u = _num(form.get(key.replace("_fringes", "_u_fringes")))
        a, b = _fmt_pair(v, None if u is None else k * u)
        rows.append(ValueRow(label, a, b, "fringes", g))
        if key in ("power_fringes", "irregularity_fringes"):
            vn = _num(form.get(key.replace("_fringes", "_nm")))
            un = _num(form.get(key.replace("_fringes", "_u_nm")))
            if vn is not None:
                a, b = _fmt_pair(vn, None if un is None else k * un)
                rows.append(ValueRow(label + " in nm", a, b, "nm", g))
    sign = form.get("sign") or {}
    if sign:
        rows.append(ValueRow("Power sign", str(sign.get("sign", "unknown")), "—", "", g))
    ax = _num(form.get("astigmatism_axis_deg"))
    if ax is not None:
        au = _num(form.get("astigmatism_axis_u_deg"))
        a, b = _fmt_pair(ax, None if au is None else k * au)
        rows.append(ValueRow("Astigmatism axis", a, b, "°", g))
    td = _num(form.get("test_diameter_mm"))
    if td is not None:
        rows.append(ValueRow("Test diameter", f"{td:g}", "—", "mm", g))
    ap = form.get("aperture") or {}
    ad, adu = _num(ap.get("diameter_mm")), _num(ap.get("diameter_u_mm"))
    if ad is not None:
        a, b = _fmt_pair(ad, None if adu is None else k * adu)
        rows.append(ValueRow("Aperture diameter", a, b, "mm", g))
    mf = _num(form.get("masked_fraction"))
    if mf is not None:
        rows.append(ValueRow("Masked (dust, glare)", f"{100 * mf:.1f}", "—", "%", g))
    rad = form.get("radius") or {}
    if rad:
        gr = "Against the test plate"
        plate = rad.get("plate") or {}
        if plate.get("id"):
            rows.append(ValueRow("Test plate", str(plate["id"]), "—", "", gr))
        v, U = _num(rad.get("delta_r_mm")), _num(rad.get("delta_r_U_mm"))
        if v is not None:
            a, b = _fmt_pair(v, U)
            rows.append(ValueRow("Radius deviation ΔR", a, b, "mm", gr))
        v, U = _num(rad.get("surface_radius_mm")), _num(rad.get("surface_radius_U_mm"))
        if v is not None:
            a, b = _fmt_pair(v, U)
            rows.append(ValueRow("Surface radius", a, b, "mm", gr))
        elif rad.get("surface_radius_candidates_mm"):
            c = rad["surface_radius_candidates_mm"]
            rows.append(ValueRow("Surface radius (sign unknown)", f"{c[0]:.4f} or {c[1]:.4f}", "—", "mm", gr))
    return rows


def budget_rows(d: dict | None) -> list[list[str]]:
    """The uncertainty budget as table rows: quantity, estimate, u, distribution, c_i, contribution, share."""
    b = (d or {}).get("budget") or {}
    if not b:
        rad = (((d or {}).get("form") or {}).get("radius") or {})
        b = rad.get("budget_surface_radius") or rad.get("budget_delta_r") or {}
    out = []
    unit = b.get("unit", "")
    for r in b.get("rows", []) or []:
        out.append([
            str(r.get("quantity", "")),
            f"{_fmt(_num(r.get('estimate')))} {r.get('estimate_unit', '')}".strip(),
            _fmt(_num(r.get("u")), 3),
            str(r.get("distribution", "")),
            f"{_fmt(_num(r.get('sensitivity')), 3)} {r.get('sensitivity_unit', '')}".strip(),
            f"{_fmt(_num(r.get('contribution')), 3)} {unit}".strip(),
            f"{100 * (_num(r.get('share')) or 0):.1f} %",
        ])
    return out


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


def headline(d: dict | None) -> str:
    """The values an inspector reads first: R ± U, or power and irregularity ± U in fringes."""
    if not d:
        return ""
    k = _num(d.get("k")) or 2.0
    R, U = _num(d.get("radius_mm")), _num(d.get("radius_U_mm"))
    if R is not None:
        a, b = _fmt_pair(R, U)
        return f"R = {a} {b if b.startswith('±') else ''} mm".replace("  ", " ") + f"  (k = {k:g})"
    form = d.get("form") if isinstance(d.get("form"), dict) else None
    if form:
        kf = _num(form.get("k")) or 2.0
        parts = []
        for key, label in (("power_fringes", "Power"), ("irregularity_fringes", "Irregularity")):
            v, u = _num(form.get(key)), _num(form.get(key.replace("_fringes", "_u_fringes")))
            if v is not None:
                a, b = _fmt_pair(v, None if u is None else kf * u)
                parts.append(f"{label} {a} {b if b.startswith('±') else ''}".rstrip())
        if parts:
            return " · ".join(parts) + f" fringes  (k = {kf:g})"
    return ""


_VERDICTS = {
    "pass": ("PASS", "✔", "pass", "every specified term is within its tolerance"),
    "fail": ("FAIL", "✖", "fail", "at least one term is outside its tolerance"),
    "conditional pass": ("CONDITIONAL PASS", "◐", "conditional",
                         "within tolerance, but the uncertainty reaches past a limit"),
    "conditional fail": ("CONDITIONAL FAIL", "◑", "conditional",
                         "outside tolerance by less than the uncertainty"),
    "not evaluated": ("NOT EVALUATED", "–", "none", "no tolerance was evaluated"),
}


def verdict_view(d: dict | None) -> VerdictView:
    v = (d or {}).get("verdict")
    head = headline(d)
    if not isinstance(v, dict):
        if d and d.get("radius_mm") is not None:
            return VerdictView("MEASURED", "•", "none", "radius measured; no tolerance given, so no pass/fail", "",
                               headline=head)
        return VerdictView("NO RESULT", "–", "none", "open an image and analyse it", "")
    overall = str(v.get("overall", "not evaluated")).lower()
    word, sym, tone, expl = _VERDICTS.get(overall, (overall.upper(), "?", "none", ""))
    terms = []
    for t in v.get("terms", []) or []:
        if isinstance(t, dict):
            name = term_label(str(t.get("term") or t.get("name") or "term"))  # the trade's name, not the key
            status = str(t.get("status") or t.get("verdict") or "").upper()
            val = _num(t.get("value", t.get("value_fringes")))
            lim = _num(t.get("limit", t.get("limit_fringes")))
            U = _num(t.get("U", t.get("U_fringes")))
            unit = t.get("unit") or ("fringes" if "value_fringes" in t else "")
            txt = f"{name}: {status}".strip(": ")
            if val is not None and lim is not None:
                a, b = _fmt_pair(val, U) if U is not None else (f"{val:.3g}", "")
                pm = f" {b}" if b.startswith("±") else ""
                txt += f" ({a}{pm} {unit}, limit {lim:g} {unit})".replace("  ", " ")
            terms.append(txt)
        else:
            terms.append(str(t))
    if v.get("meaning"):
        expl = str(v["meaning"])
    elif overall == "not evaluated" and v.get("reason"):
        expl = str(v["reason"])
    # with a term-by-term verdict the terms themselves carry the values; the headline would repeat them
    return VerdictView(word, sym, tone, expl, str(v.get("decision_rule", "")), tuple(terms),
                       "" if terms else head)


# -- plots ----------------------------------------------------------------------------------------------------
def ring_plot_data(d: dict | None) -> dict | None:
    """r² against fringe order with the fitted line and the residuals (mm², µm² for residuals)."""
    fr = (d or {}).get("fringes") or {}
    rings = fr.get("rings") or []
    if not rings:
        return None
    order = np.array([_num(r.get("order")) or 0.0 for r in rings])
    r2 = np.array([_num(r.get("r2_mm2")) or 0.0 for r in rings])
    u = np.array([_num(r.get("u_r2_mm2")) or 0.0 for r in rings])
    res = np.array([_num(r.get("residual_mm2")) or 0.0 for r in rings])
    used = np.array([bool(r.get("used", True)) for r in rings])
    slope, icpt = _num(fr.get("slope_mm2_per_fringe")), _num(fr.get("intercept_mm2"))
    return {"order": order, "r2_mm2": r2, "u_r2_mm2": u, "residual_um2": res * 1e6, "used": used,
            "slope_mm2": slope, "intercept_mm2": icpt}


def profile_plot_data(d: dict | None) -> dict | None:
    ff = (d or {}).get("fullfield") or {}
    i = ff.get("profile_i")
    if not i:
        return None
    if ff.get("profile_r_px"):
        x = np.asarray(ff["profile_r_px"], dtype=float)
        xlabel = "radius r / px"
    elif ff.get("profile_s_px2"):
        x = np.sqrt(np.clip(np.asarray(ff["profile_s_px2"], dtype=float), 0, None))
        xlabel = "radius r / px"
    else:
        return None
    extrema = np.asarray(ff.get("extrema_r_px") or [], dtype=float)
    iv = np.asarray(i, dtype=float)
    n = min(len(x), len(iv))
    return {"r_px": x[:n], "intensity": iv[:n], "extrema_r_px": extrema, "xlabel": xlabel}


def ring_gap_map(d: dict | None, shape: tuple[int, int], *, step: int = 4) -> dict | None:
    """The fitted gap (nm) over the field from the ring fit: gap = (r² - c) / slope fringes of λ/(2n).

    Returned on a grid subsampled by ``step`` (x, y extents in pixels). Used when the result carries no form
    map of its own (a lens on an optical flat).
    """
    if not d:
        return None
    fr = d.get("fringes") or {}
    slope, icpt = _num(fr.get("slope_mm2_per_fringe")), _num(fr.get("intercept_mm2"))
    c = d.get("centre_px")
    setup = d.get("setup") or {}
    lam, n = _num(setup.get("wavelength_nm")), _num(setup.get("medium_index")) or 1.0
    px = setup.get("pixel_size_um") or []
    if None in (slope, icpt, lam) or not c or len(px) < 2 or not slope:
        return None
    H, W = shape
    ys = np.arange(0, H, step, dtype=float)
    xs = np.arange(0, W, step, dtype=float)
    dx = (xs - float(c[0])) * float(px[0]) * 1e-3
    dy = (ys - float(c[1])) * float(px[1]) * 1e-3
    r2 = dx[None, :] ** 2 + dy[:, None] ** 2
    fringes = (r2 - icpt) / slope
    gap_nm = fringes * lam / (2 * n)
    rmax = _num(fr.get("r_max_mm"))
    if rmax is not None:
        gap_nm = np.where(r2 <= rmax * rmax, gap_nm, np.nan)
    return {"gap_nm": gap_nm, "extent_px": (0.0, float(W), float(H), 0.0), "title": "Fitted gap from the ring fit"}


def form_map(d: dict | None, form_obj=None, shape: tuple[int, int] | None = None) -> dict | None:
    """The surface-form map: the form result's own map when it has one, else the ring fit's gap.

    ``extent_px`` is (left, right, bottom, top) in image pixels; ``extent_mm`` the same in millimetres on the
    part, measured from the aperture's (or the rings') centre, when the pixel size is known."""
    m = _form_map(d, form_obj, shape)
    if m is None:
        return None
    px = ((d or {}).get("setup") or {}).get("pixel_size_um") or []
    centre = m.get("centre_px") or (d or {}).get("centre_px")
    if len(px) >= 2 and _num(px[0]) and _num(px[1]) and centre:
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


def _form_map(d: dict | None, form_obj=None, shape: tuple[int, int] | None = None) -> dict | None:
    """The form result's own height map (the engine makes it, from the phase map or the gap fit, with the sign
    applied when known); without a form result, the ring fit's gap."""
    m = getattr(form_obj, "height_map_nm", None) if form_obj is not None else None
    if m is not None and np.ndim(m) == 2:
        arr = np.asarray(m, dtype=float)
        ext = getattr(form_obj, "map_extent_px", None)
        extent = tuple(ext) if ext is not None else (0.0, float(arr.shape[1]), float(arr.shape[0]), 0.0)
        ap = getattr(form_obj, "aperture", None)
        out = {"gap_nm": arr, "extent_px": extent, "title": "Surface form less piston and tilt"}
        if ap is not None:
            out["centre_px"] = (float(ap.centre_px[0]), float(ap.centre_px[1]))
        return out
    if shape is None:
        return None
    return ring_gap_map(d, shape)


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


def residual_image(data: np.ndarray, d: dict | None, *, form_obj=None, annuli: int = 24,
                   sectors: int = 12) -> np.ndarray | None:
    """Fit minus image, NaN where nothing was fitted.

    Rings on a flat: the fitted orders put dark rings at whole m = (r² − c) / slope. Form against a test plate:
    the gap fit gives m = gap in fringes (dark at whole fringes). The model is I = a − b cos 2πm; only the
    background a and the fringe amplitude b are taken from the image, cell by cell of annuli and angular sectors
    (uneven lighting); the phase is the fit's own, so a wrong centre, slope or form shows as residual fringes."""
    img = np.asarray(data, dtype=np.float64)
    H, W = img.shape
    yy, xx = np.mgrid[0:H, 0:W]
    if form_obj is not None and getattr(form_obj, "fits", None):
        try:
            from ..form.fit import gap_basis
        except ImportError:
            return None
        f = form_obj.fits[0]
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
    if not d:
        return None
    fr = d.get("fringes") or {}
    slope, icpt = _num(fr.get("slope_mm2_per_fringe")), _num(fr.get("intercept_mm2"))
    c = d.get("centre_px")
    px = (d.get("setup") or {}).get("pixel_size_um") or []
    rmax = _num(fr.get("r_max_mm"))
    if None in (slope, icpt, rmax) or not c or len(px) < 2 or not slope:
        return None
    dx = (xx - float(c[0])) * float(px[0]) * 1e-3
    dy = (yy - float(c[1])) * float(px[1]) * 1e-3
    r2 = dx * dx + dy * dy
    return _cell_residual(img, (r2 - icpt) / slope, r2 / (rmax * rmax), np.arctan2(dy, dx), annuli=annuli,
                          sectors=sectors)


def rounded_u(u: float | None) -> str:
    return "—" if u is None else f"{round_uncertainty(u):.2g}"
