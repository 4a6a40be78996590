"""Plain-text report of a pixel-scale calibration: what ``ringgauge calibrate`` prints and the window shows."""

from __future__ import annotations

from ..uncertainty import format_value


def format_calibration(cal) -> str:
    """Plain-text report of a ScaleCalibration: value ± U (k) with units, budget rows, warnings."""
    lines = [f"Pixel-scale calibration: {cal.to_dict()['method_text']}"]
    t = cal.target
    if "pitch_um" in t:
        lines.append(f"  target: {t['kind']}, pitch {t['pitch_um']:g} µm (standard uncertainty "
                     f"{t['pitch_u_um']:.2g} µm){', id ' + t['id'] if t.get('id') else ''}")
    else:
        lines.append(f"  target: {t['kind']}, diameter {t['diameter_mm']:g} mm (standard uncertainty "
                     f"{t['diameter_u_mm']:.2g} mm){', id ' + t['id'] if t.get('id') else ''}")
    for im in cal.images:
        lines.append(f"  image: {im['path'] or '(in memory)'} ({im['width']} x {im['height']} px, "
                     f"sha256 {im['sha256'][:16]}…)")
    k = cal.budget_x.k
    if cal.scale_y is None:
        lines.append(f"  pixel scale (x = y assumed): {format_value(cal.scale_x.value, k * cal.scale_x.u, 'µm/px')}"
                     f"  (± U, k = {k:.2g})")
    else:
        lines.append(f"  pixel scale x: {format_value(cal.scale_x.value, k * cal.scale_x.u, 'µm/px')}  (± U, k = {k:.2g})")
        ky = cal.budget_y.k
        lines.append(f"  pixel scale y: {format_value(cal.scale_y.value, ky * cal.scale_y.u, 'µm/px')}  (± U, k = {ky:.2g})")
        d = cal.scale_x.value - cal.scale_y.value
        lines.append(f"  x - y: {format_value(d, 2 * cal.difference_u_um, 'µm/px')}  (k = 2)"
                     + ("  -> anisotropic" if cal.anisotropic else "  -> x and y agree"))
        if cal.squareness is not None:
            lines.append(f"  squareness of the pixel axes: {format_value(cal.squareness.value, 2 * cal.squareness.u, '°')}"
                         "  (k = 2)")
    det = cal.details
    for i, dd in enumerate(det.get("directions", [])):
        lines.append(f"  line set {i + 1}: period {dd['period_px']:.4f} px, normal at {dd['normal_direction_deg']:.2f}°")
    for i, dd in enumerate(det.get("images", [])):
        lines.append(f"  image {i + 1}: period {dd['period_px']:.4f} px, normal at {dd['normal_direction_deg']:.2f}°")
    if "diameter_px" in det:
        lines.append(f"  disc: {det['polarity']}, diameter {det['diameter_px'][0]:.3f} px along x, "
                     f"{det['diameter_px'][1]:.3f} px along y, {det['fit']['points']} edge points")
    for b in (cal.budget_x, cal.budget_y):
        if b is None:
            continue
        lines.append(f"  uncertainty budget, {b.output} (µm/px):")
        lines.append(f"    {'component':30s} {'estimate':>16s} {'u_i':>10s} {'distribution':>28s} "
                     f"{'contribution':>12s} {'share':>6s}")
        for r in b.rows:
            lines.append(f"    {r.quantity:30s} {r.estimate:>12.6g} {r.estimate_unit:>3s} {r.u:>10.3g} "
                         f"{r.distribution:>28s} {r.contribution:>12.3g} {100 * r.share:>5.1f}%")
        lines.append(f"    {'combined standard uncertainty u (k = 1)':40s} {b.u_c:>28.3g} µm/px; expanded "
                     f"U = {b.U:.2g} µm/px (k = {b.k:.2g})")
    for w in cal.warnings:
        lines.append(f"  warning: {w}")
    return "\n".join(lines)
