"""Text section for a surface-form result (from ``FormResult.to_dict()``). Formats, never computes."""

from __future__ import annotations

from ..uncertainty import format_value
from .labels import term_label

_ROWS = (
    ("power_fringes", "power (sagitta deviation, A)"),
    ("astigmatism_fringes", "astigmatism"),
    ("irregularity_fringes", "irregularity (B)"),
    ("rot_sym_irregularity_fringes", "rot. symmetric irregularity (C)"),
    ("rms_total_fringes", "RMSt (total, after tilt)"),
    ("rms_irregularity_fringes", "RMSi (irregularity)"),
    ("rms_asymmetric_fringes", "RMSa (asymmetric)"),
    ("pv_total_fringes", "PV after tilt removal"),
)

_WORDS = {
    "pass": "PASS — every specified term is within its limit",
    "fail": "FAIL — at least one term is beyond its limit by more than its uncertainty",
    "conditional pass": "CONDITIONAL PASS — within the limits, but a term lies within its expanded uncertainty "
    "of the limit",
    "conditional fail": "CONDITIONAL FAIL — a term is beyond its limit, but by less than its expanded uncertainty",
    "not evaluated": "not evaluated — no tolerance was given",
}


def _pm(v, u, unit, k):
    if v is None:
        return "n/a"
    return format_value(v, None if u is None else k * u, unit)


def format_form(d: dict, *, skip_warnings=()) -> str:
    """The fixed sections of the form report: set-up, aperture, form terms, sign, radius, verdict.

    ``skip_warnings``: warnings the caller prints itself (the whole result's list), left out here so that
    none is printed twice."""
    k = d.get("k", 2.0)
    lam = d["wavelength_nm"]
    out = ["Surface form against a test plate (ISO 10110-5 terms)"]
    out.append(
        f"  λ = {lam:.3f} nm; one fringe = λ/(2n) = {d['fringe_nm']:.2f} nm of surface height; "
        f"values ± U with U = {k:g}·u (about 95 %)"
    )
    ap = d["aperture"]
    out.append(
        f"  clear aperture: Ø {ap.get('diameter_mm', float('nan')):.3f} mm "
        f"(± {k * ap.get('diameter_u_mm', 0):.3f} mm), centre ({ap['centre_px'][0]:.1f}, {ap['centre_px'][1]:.1f}) px"
    )
    out.append(f"  test diameter evaluated: Ø {d['test_diameter_mm']:.3f} mm ({d['test_diameter_source']})")
    if d.get("route"):
        out.append(f"  measured by: {d['route']}")
    pmap = d.get("phase_map")
    if pmap:
        steps = ", ".join(f"{x:+.3f}" for x in pmap.get("steps_fringes", [])[1:])
        out.append(f"  frame steps from frame 1: {steps} fringe; fringe visibility {pmap.get('fringe_visibility', 0):.2f}")
    nmask = len(d.get("masks") or [])
    out.append(
        f"  left out: {nmask} region(s) of dust, defects or glare, {100 * d.get('masked_fraction', 0):.2f} % of the "
        "aperture" if nmask else "  left out: no dust, defects or glare found"
    )
    out.append("")
    out.append(f"  {'term':34s} {'fringes':>22s} {'nm':>24s}")
    for key, label in _ROWS:
        v = d.get(key)
        u = d.get(key.replace("_fringes", "_u_fringes"))
        vn = d.get(key.replace("_fringes", "_nm"))
        un = d.get(key.replace("_fringes", "_u_nm"))
        out.append(f"  {label:34s} {_pm(v, u, 'fr', k):>22s} {_pm(vn, un, 'nm', k):>24s}")
    ax = d.get("astigmatism_axis_deg")
    axu = d.get("astigmatism_axis_u_deg")
    out.append(f"  astigmatism axis: {_pm(ax, axu, '°', k)} ({d.get('astigmatism_axis_convention', '')})")
    out.append(f"  flatness deviation (for a flat on a reference flat): {_pm(d.get('flatness_pv_nm'), d.get('flatness_pv_u_nm'), 'nm', k)} PV")
    s = d["sign"]
    out.append("")
    if s["sign"] == "unknown":
        out.append(f"  power sign: unknown — {s['detail']}; power is given as a magnitude")
    else:
        conf = "" if s["confidence"] is None else f", confidence {100 * s['confidence']:.1f} %"
        out.append(f"  power sign: {s['sign']} = {s['meaning']} (from {s['method']}{conf}); {s['detail']}")
    r = d.get("radius")
    if r:
        pl = r["plate"]
        out.append("")
        name = pl.get("id") or "given by hand"
        out.append(
            f"Radius against test plate {name}: R_plate = {pl['radius_mm']:.4f} mm (u {pl.get('radius_u_mm') or 0:.4f} mm), "
            f"{pl.get('kind') or 'kind not given'}"
        )
        out.append(
            f"  ΔR over Ø {r['test_diameter_mm']:.3f} mm (h/R = {r['h_over_r']:.3f}): "
            f"{format_value(r['delta_r_mm'] * 1e3, r['delta_r_U_mm'] * 1e3, 'µm')} (exact, gap along the axis)"
        )
        out.append(
            f"  beside it: paraxial shop formula {1e3 * r['delta_r_paraxial_mm']:.3f} µm, exact along the normal "
            f"{1e3 * r['delta_r_normal_mm']:.3f} µm (magnitudes)"
        )
        if r.get("steep"):
            out.append("  ! steep part: the paraxial formula is measurably wrong here")
        if r.get("surface_radius_mm") is not None:
            out.append(f"  surface radius R = {format_value(r['surface_radius_mm'], r['surface_radius_U_mm'], 'mm')}")
        else:
            c = r.get("surface_radius_candidates_mm") or []
            if c:
                out.append(f"  surface radius: {c[0]:.4f} mm or {c[1]:.4f} mm — {r.get('surface_radius_note', '')}")
    v = d.get("verdict") or {}
    out.append("")
    tol = d.get("tolerance")
    if tol:
        out.append(f"Tolerance {tol['text']} (fringes of λ = {tol['wavelength_nm']:g} nm"
                   f"{'' if tol['wavelength_stated'] else ', λ not stated: default'}; U = expanded uncertainty, "
                   f"k = {k:g})")
        for t in v.get("terms", []):
            U = "n/a" if t["U_fringes"] is None else f"{t['U_fringes']:.3f}"
            out.append(
                f"  {term_label(t['term']):40s} measured {t['value_fringes']:.3f} fr (U {U}) vs limit "
                f"{t['limit_fringes']:g} fr: {t['verdict']}"
            )
    out.append(f"  verdict: {_WORDS.get(v.get('overall'), v.get('overall'))}")
    if v.get("meaning"):
        out.append(f"  {v['meaning']}")
    if v.get("power_note"):
        out.append(f"  {v['power_note']}")
    out.append(f"  decision rule: {v.get('decision_rule', 'n/a')}")
    if d.get("notes"):
        out.append("")
        out.extend(f"  note: {n}" for n in d["notes"])
    skip = set(skip_warnings)
    own = [w for w in d.get("warnings") or [] if w not in skip]
    if own:
        out.append("")
        out.extend(f"  ! {w}" for w in own)
    return "\n".join(out)
