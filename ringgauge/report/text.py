"""Plain-text report of an analysis result (from its ``to_dict()``). Formats, never computes."""

from __future__ import annotations

import math

from ..uncertainty import format_value, round_uncertainty


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


def _num(v, fmt="{:.4g}"):
    return "n/a" if v is None else fmt.format(v)


def format_budget(b: dict) -> str:
    lines = [
        f"Uncertainty budget for {b['output']} ({b['unit']}), GUM (JCGM 100:2008), uncorrelated inputs",
        f"  {'quantity':46s} {'estimate':>16s} {'u(x_i)':>11s} {'distribution':22s} {'c_i':>11s} "
        f"{'c_i·u(x_i)':>11s} {'share':>6s}",
    ]
    for r in b["rows"]:
        est = f"{r['estimate']:.6g} {r['estimate_unit']}".strip()
        lines.append(
            f"  {r['quantity'][:46]:46s} {est:>16s} {r['u']:>11.3g} {r['distribution'][:22]:22s} "
            f"{r['sensitivity']:>11.3g} {r['contribution']:>11.3g} {100 * r['share']:>5.1f}%"
        )
    dof = "∞" if b["dof_eff"] is None else ("over 1000" if b["dof_eff"] > 1000 else f"{b['dof_eff']:.0f}")
    lines.append(
        f"  combined standard uncertainty u_c = {b['u_c']:.3g} {b['unit']} (k = 1); effective degrees of freedom "
        f"{dof}; expanded uncertainty U = {round_uncertainty(b['U']):.2g} {b['unit']} (k = {b['k']:.2f}, "
        f"{b['coverage']})"
    )
    return "\n".join(lines)


def format_result(d: dict) -> str:
    """The text report printed by ``ringgauge analyze``: fixed sections, units and uncertainties throughout."""
    out: list[str] = []
    img = d["image"]
    st = d["setup"]
    out.append(f"ringgauge {d['ringgauge_version']} — {img['path'] or '(image in memory)'}")
    out.append(
        f"  image {img['width']}×{img['height']} px, {img['bit_depth']}-bit, {img['channel']}, "
        f"SHA-256 {img['sha256'][:16]}…"
    )
    px, py = st["pixel_size_um"]
    ux, uy = st["pixel_size_u_um"]
    k_hdr = 2.0  # the set-up values in this header are printed as ± U with k = 2, as 'ringgauge calibrate' does

    def _scale(v, u):
        return format_value(v, k_hdr * u, "µm/px") if u else f"{v:g} µm/px (no uncertainty given)"

    scale = (
        _scale(px, ux)
        if px == py
        else f"x {_scale(px, ux)}, y {_scale(py, uy)}"
    )
    bench = f" (bench profile '{st['bench']}', calibrated {st['bench_calibrated']})" if st.get("bench") else ""
    out.append(
        f"  source {st['source']['name']}: λ = {st['wavelength_nm']:.4f} nm (U {k_hdr * st['wavelength_u_nm']:.2g} nm); "
        f"pixel scale {scale}{bench}; gap medium n = {st['medium_index']:g}"
    )
    lam_f = (d.get("fringes") or {}).get("fringe_wavelength_nm")
    if lam_f is not None and abs(lam_f - st["wavelength_nm"]) > 5e-4:
        out.append(f"  the fringes follow λ = {lam_f:.4f} nm, the reciprocal of the lamp's intensity-weighted mean "
                   "wavenumber (used for R)")
    out.append(f"  (± and U here are expanded uncertainties, k = {k_hdr:g}; u is a standard uncertainty, k = 1)")
    if d.get("radius_mm") is not None:
        fr = d["fringes"]
        out.append("")
        out.append("Radius of curvature (lens on optical flat, Newton's rings)")
        out.append(
            f"  R = {format_value(d['radius_mm'], d['radius_U_mm'], 'mm')}  (± expanded uncertainty U, "
            f"k = {d['k']:.2f}); standard uncertainty u = {d['radius_u_mm']:.3g} mm (k = 1, "
            f"{1e6 * d['radius_u_mm'] / d['radius_mm']:.0f} ppm)"
        )
        cx, cy = d["centre_px"]
        ux_, uy_ = d["centre_u_px"]
        out.append(
            f"  ring centre (x, y) = ({cx:.3f} ± {d['k'] * ux_:.1g}, {cy:.3f} ± {d['k'] * uy_:.1g}) px  "
            f"[x = column, y = row; ± U, k = {d['k']:g}]"
        )
        out.append("")
        out.append(
            f"Fringe data: {fr['rings_used']} {st['fringe_kind']} rings from r = {fr['r_min_mm']:.4f} to "
            f"{fr['r_max_mm']:.4f} mm"
        )
        conv = "r² = m·λR/n" if st["fringe_kind"] == "dark" else "r² = (m − ½)·λR/n"
        out.append(f"  convention: {st['fringe_kind']} rings in reflection, {conv}")
        out.append(
            f"  slope {fr['slope_mm2_per_fringe']:.6g} mm²/fringe (u {fr['slope_u_mm2_per_fringe']:.2g}); intercept "
            f"{fr['intercept_mm2']:.4g} mm² (u {fr['intercept_u_mm2']:.2g}) (contact offset "
            f"{fr['contact_offset_fringes']:.2f} fringe, modulo whole fringes; u = standard uncertainty, k = 1)"
        )
        out.append(f"  reduced chi-square {fr['redchi']:.3g} ({fr['ndata']} rings, 2 parameters)")
        rings = fr["rings"]
        show = rings if len(rings) <= 12 else rings[:6] + [None] + rings[-5:]
        out.append(f"  {'order':>7s} {'r / mm':>10s} {'r / px':>10s} {'r² / mm²':>12s} {'residual / mm²':>15s}")
        for r in show:
            if r is None:
                out.append(f"  {'…':>7s}")
                continue
            out.append(
                f"  {r['order']:>7g} {r['radius_mm']:>10.5f} {r['radius_px']:>10.2f} {r['r2_mm2']:>12.6g} "
                f"{r['residual_mm2']:>15.2e}"
            )
        ff = d.get("fullfield") or {}
        if ff.get("radius_mm"):
            out.append(
                f"  cross-check: full-field model fit gives R = {ff['radius_mm']:.6g} mm over r ≤ "
                f"{ff['r_max_mm']:.3f} mm (fringe contrast {ff['fringe_contrast']:.2f})"
            )
        out.append("")
        out.append(format_budget(d["budget"]))
    if d.get("form"):
        try:
            from .form_text import format_form
        except ImportError:  # pragma: no cover - form report not installed
            import json

            out.append(json.dumps(d["form"], indent=2))
        else:
            out.append("")
            # the form's warnings are among the result's own, printed once under "Warnings" below
            out.append(format_form(d["form"], skip_warnings=d.get("warnings") or ()))
    if isinstance(d.get("verdict"), dict) and isinstance(d["verdict"].get("radius"), dict):
        from ..conformity import verdict_lines

        out += [""] + verdict_lines(d["verdict"]["radius"])
    if d.get("warnings"):
        out.append("")
        out.append("Warnings")
        out.extend(f"  ! {w}" for w in d["warnings"])
    el = d.get("elapsed_s")
    if el is not None and math.isfinite(el):
        out.append("")
        out.append(f"analysed in {el:.2f} s")
    return "\n".join(out)
