"""Plain-text report of a typed analysis result. Formats, never computes."""

from __future__ import annotations

import math
from dataclasses import replace

from ..presentation import quantity_text, typed_result
from ..result import AnalysisResult
from ..uncertainty import Budget, Quantity, round_uncertainty


def local_time(iso: str | None, *, seconds: bool = False) -> str:
    """A stored UTC time stamp ("2026-12-02T13:05:09Z", "…+00:00") as local time a person reads:
    "2026-12-02 14:05 CET". Anything that is not a time stamp comes back unchanged (never raises)."""
    from datetime import datetime, timezone

    if not iso:
        return "—"
    try:
        t = datetime.fromisoformat(str(iso).strip().replace("Z", "+00:00"))
    except ValueError:
        return str(iso)
    if t.tzinfo is None:
        t = t.replace(tzinfo=timezone.utc)
    t = t.astimezone()
    return t.strftime("%Y-%m-%d %H:%M" + (":%S" if seconds else "") + " %Z").strip()


def format_budget(b: Budget) -> str:
    lines = [
        f"Uncertainty budget for {b.output} ({b.output_unit}), GUM (JCGM 100:2008), uncorrelated inputs",
        f"  {'quantity':46s} {'estimate':>16s} {'u(x_i)':>11s} {'distribution':22s} {'c_i':>11s} "
        f"{'c_i·u(x_i)':>11s} {'share':>6s}",
    ]
    for r in b.rows:
        est = f"{r.estimate:.6g} {r.estimate_unit}".strip()
        lines.append(
            f"  {r.quantity[:46]:46s} {est:>16s} {r.u:>11.3g} {r.distribution[:22]:22s} "
            f"{r.sensitivity:>11.3g} {r.contribution:>11.3g} {100 * r.share:>5.1f}%"
        )
    dof = b.dof_eff
    dof_text = "∞" if not math.isfinite(dof) else ("over 1000" if dof > 1000 else f"{dof:.0f}")
    lines.append(
        f"  combined standard uncertainty u_c = {b.u_c:.3g} {b.output_unit} (k = 1); effective degrees of freedom "
        f"{dof_text}; expanded uncertainty U = {round_uncertainty(b.U):.2g} {b.output_unit} (k = {b.k:.2f}, "
        f"{b.coverage})"
    )
    return "\n".join(lines)


def format_result(result: AnalysisResult | dict, *, warnings=None) -> str:
    """The text report printed by ``ringgauge analyze``: fixed sections, units and uncertainties throughout.

    ``result`` is the typed result; a stored result's JSON (``to_dict()``) is read back first. ``warnings``
    replaces the result's own list (the command puts the set-up's warnings in front of them)."""
    r = typed_result(result)
    if warnings is not None:
        r = replace(r, warnings=tuple(warnings))
    out: list[str] = []
    img = r.image
    st = r.setup
    out.append(f"ringgauge {r.version} — {img.path or '(image in memory)'}")
    out.append(
        f"  image {img.width}×{img.height} px, {img.bit_depth}-bit, {img.channel}, "
        f"SHA-256 {img.sha256[:16]}…"
    )
    px, py = st.pixel_size_xy_um
    ux, uy = st.pixel_size_xy_u_um
    k_hdr = 2.0  # the set-up values in this header are printed as ± U with k = 2, as 'ringgauge calibrate' does

    def _scale(v, u):
        return quantity_text(Quantity(v, u, "µm/px", k_hdr)) if u else f"{v:g} µm/px (no uncertainty given)"

    scale = (
        _scale(px, ux)
        if px == py
        else f"x {_scale(px, ux)}, y {_scale(py, uy)}"
    )
    bench = f" (bench profile '{st.bench}', calibrated {st.bench_calibrated})" if st.bench else ""
    out.append(
        f"  source {st.source.name}: λ = {st.wavelength_nm:.4f} nm (U {k_hdr * st.source.wavelength_u_nm:.2g} nm); "
        f"pixel scale {scale}{bench}; gap medium n = {st.medium_index:g}"
    )
    fit = r.fit
    lam_f = None if fit is None else fit.fringe_wavelength_nm
    if lam_f is not None and abs(lam_f - st.wavelength_nm) > 5e-4:
        out.append(f"  the fringes follow λ = {lam_f:.4f} nm, the reciprocal of the lamp's intensity-weighted mean "
                   "wavenumber (used for R)")
    out.append(f"  (± and U here are expanded uncertainties, k = {k_hdr:g}; u is a standard uncertainty, k = 1)")
    R = r.radius
    if R is not None and fit is not None:
        out.append("")
        out.append("Radius of curvature (lens on optical flat, Newton's rings)")
        out.append(
            f"  R = {quantity_text(R)}  (± expanded uncertainty U, "
            f"k = {r.k:.2f}); standard uncertainty u = {R.u:.3g} mm (k = 1, "
            f"{1e6 * R.u / R.value:.0f} ppm)"
        )
        cx, cy = r.centre_px
        ux_, uy_ = r.centre_u_px
        out.append(
            f"  ring centre (x, y) = ({cx:.3f} ± {r.k * ux_:.1g}, {cy:.3f} ± {r.k * uy_:.1g}) px  "
            f"[x = column, y = row; ± U, k = {r.k:g}]"
        )
        out.append("")
        out.append(
            f"Fringe data: {len(fit.rings_used)} {st.fringe_kind} rings from r = {fit.r_min_mm:.4f} to "
            f"{fit.r_max_mm:.4f} mm"
        )
        conv = "r² = m·λR/n" if st.fringe_kind == "dark" else "r² = (m − ½)·λR/n"
        out.append(f"  convention: {st.fringe_kind} rings in reflection, {conv}")
        out.append(
            f"  slope {fit.slope_mm2:.6g} mm²/fringe (u {fit.slope_u_mm2:.2g}); intercept "
            f"{fit.intercept_mm2:.4g} mm² (u {fit.intercept_u_mm2:.2g}) (contact offset "
            f"{fit.intercept_fringes:.2f} fringe, modulo whole fringes; u = standard uncertainty, k = 1)"
        )
        out.append(f"  reduced chi-square {fit.redchi:.3g} ({fit.ndata} rings, 2 parameters)")
        rings = list(fit.rings)
        show = rings if len(rings) <= 12 else rings[:6] + [None] + rings[-5:]
        out.append(f"  {'order':>7s} {'r / mm':>10s} {'r / px':>10s} {'r² / mm²':>12s} {'residual / mm²':>15s}")
        for ring in show:
            if ring is None:
                out.append(f"  {'…':>7s}")
                continue
            out.append(
                f"  {ring.order:>7g} {ring.radius_mm:>10.5f} {ring.radius_px:>10.2f} {ring.r2_mm2:>12.6g} "
                f"{ring.residual_mm2:>15.2e}"
            )
        ff = r.fullfield
        if ff is not None and ff.radius_mm:
            out.append(
                f"  cross-check: full-field model fit gives R = {ff.radius_mm:.6g} mm over r ≤ "
                f"{ff.r_max_mm:.3f} mm (fringe contrast {ff.fringe_contrast:.2f})"
            )
        if r.budget is not None:
            out.append("")
            out.append(format_budget(r.budget))
    if r.form is not None:
        from .form_text import format_form

        out.append("")
        # the form's warnings are among the result's own, printed once under "Warnings" below
        out.append(format_form(r.form, skip_warnings=r.warnings))
    if r.verdict is not None and r.verdict.radius is not None:
        from ..conformity import verdict_lines

        out += [""] + verdict_lines(r.verdict.radius.to_dict())
    if r.warnings:
        out.append("")
        out.append("Warnings")
        out.extend(f"  ! {w}" for w in r.warnings)
    el = r.elapsed_s
    if el is not None and math.isfinite(el):
        out.append("")
        out.append(f"analysed in {el:.2f} s")
    return "\n".join(out)
