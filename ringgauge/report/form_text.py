"""Text section for a typed surface-form result (:class:`~ringgauge.form.result.FormResult`). Formats, never
computes; the table of form terms is the presentation's (:func:`ringgauge.presentation.form_term_rows`)."""

from __future__ import annotations

from typing import TYPE_CHECKING

from ..presentation import form_term_rows, lower_first, quantity_text, term_label
from ..uncertainty import format_value

if TYPE_CHECKING:  # pragma: no cover
    from ..form.result import FormResult

_WORDS = {
    "pass": "PASS — every specified term is within its limit",
    "fail": "FAIL — at least one term is beyond its limit by more than its uncertainty",
    "conditional pass": "CONDITIONAL PASS — within the limits, but a term lies within its expanded uncertainty "
    "of the limit",
    "conditional fail": "CONDITIONAL FAIL — a term is beyond its limit, but by less than its expanded uncertainty",
    "not evaluated": "not evaluated — no tolerance was given",
}


def format_form(form: "FormResult", *, skip_warnings=()) -> str:
    """The fixed sections of the form report: set-up, aperture, form terms, sign, radius, verdict.

    ``skip_warnings``: warnings the caller prints itself (the whole result's list), left out here so that
    none is printed twice."""
    k = form.k
    out = ["Surface form against a test plate (ISO 10110-5 terms)"]
    out.append(
        f"  λ = {form.wavelength_nm:.3f} nm; one fringe = λ/(2n) = {form.fringe_nm:.2f} nm of surface height; "
        f"values ± U with U = {k:g}·u (about 95 %)"
    )
    ap = form.aperture
    dia = form.aperture_diameter
    out.append(
        f"  clear aperture: Ø {dia.value:.3f} mm (± {dia.U or 0:.3f} mm), "
        f"centre ({ap.centre_px[0]:.1f}, {ap.centre_px[1]:.1f}) px"
    )
    out.append(f"  test diameter evaluated: Ø {form.test_diameter_mm:.3f} mm ({form.test_diameter_source})")
    if form.route:
        out.append(f"  measured by: {form.route}")
    if form.phase is not None:
        steps = ", ".join(f"{x:+.3f}" for x in form.phase.steps_fringes[1:])
        out.append(f"  frame steps from frame 1: {steps} fringe; fringe visibility {form.phase.fringe_visibility:.2f}")
    nmask = len(form.masks)
    out.append(
        f"  left out: {nmask} region(s) of dust, defects or glare, {100 * form.masked_fraction:.2f} % of the "
        "aperture" if nmask else "  left out: no dust, defects or glare found"
    )
    out.append("")
    out.append(f"  {'term':40s} {'fringes':>22s} {'nm':>24s}")
    for row in form_term_rows(form):
        out.append(f"  {lower_first(row.document_label):40s} {quantity_text(row.value, unit='fr'):>22s} "
                   f"{quantity_text(row.alt):>24s}")
    out.append(f"  astigmatism axis: {quantity_text(form.astigmatism_axis)} ({form.AXIS_CONVENTION})")
    try:
        pv = quantity_text(form.term("pv_total").nm)
    except KeyError:
        pv = "n/a"
    out.append(f"  flatness deviation (for a flat on a reference flat): {pv} PV")
    s = form.sign
    out.append("")
    if s.sign == 0:
        out.append(f"  power sign: unknown — {s.detail}; power is given as a magnitude")
    else:
        conf = "" if s.confidence is None else f", confidence {100 * s.confidence:.1f} %"
        out.append(f"  power sign: {'+' if s.sign > 0 else '-'} = {s.label} (from {s.method}{conf}); {s.detail}")
    r = form.radius
    if r is not None:
        pl = r.plate or {}
        out.append("")
        name = pl.get("id") or "given by hand"
        out.append(
            f"Radius against test plate {name}: R_plate = {pl['radius_mm']:.4f} mm (u {pl.get('radius_u_mm') or 0:.4f} mm), "
            f"{pl.get('kind') or 'kind not given'}"
        )
        out.append(
            f"  ΔR over Ø {r.test_diameter_mm:.3f} mm (h/R = {r.h_over_r:.3f}): "
            f"{format_value(r.delta_r.value * 1e3, r.delta_r.U * 1e3, 'µm')} (exact, gap along the axis)"
        )
        out.append(
            f"  beside it: paraxial shop formula {1e3 * r.delta_r_paraxial_mm:.3f} µm, exact along the normal "
            f"{1e3 * r.delta_r_normal_mm:.3f} µm (magnitudes)"
        )
        if r.steep:
            out.append("  ! steep part: the paraxial formula is measurably wrong here")
        if r.surface_radius is not None:
            out.append(f"  surface radius R = {quantity_text(r.surface_radius)}")
        elif r.surface_radius_candidates_mm:
            c = r.surface_radius_candidates_mm
            out.append(f"  surface radius: {c[0]:.4f} mm or {c[1]:.4f} mm — {r.surface_radius_note or ''}")
    v = form.verdict
    out.append("")
    tol = form.tolerance
    if tol is not None:
        out.append(f"Tolerance {tol.text} (fringes of λ = {tol.wavelength_nm:g} nm"
                   f"{'' if tol.wavelength_stated else ', λ not stated: default'}; U = expanded uncertainty, "
                   f"k = {k:g})")
        for t in v.terms:
            U = "n/a" if t.U_fringes is None else f"{t.U_fringes:.3f}"
            out.append(
                f"  {term_label(t.term):40s} measured {t.value_fringes:.3f} fr (U {U}) vs limit "
                f"{t.limit_fringes:g} fr: {t.verdict}"
            )
    out.append(f"  verdict: {_WORDS.get(v.overall, v.overall)}")
    if v.meaning:
        out.append(f"  {v.meaning}")
    if v.power_note:
        out.append(f"  {v.power_note}")
    out.append(f"  decision rule: {v.decision_rule or 'n/a'}")
    if form.notes:
        out.append("")
        out.extend(f"  note: {n}" for n in form.notes)
    skip = set(skip_warnings)
    own = [w for w in form.warnings if w not in skip]
    if own:
        out.append("")
        out.extend(f"  ! {w}" for w in own)
    return "\n".join(out)
