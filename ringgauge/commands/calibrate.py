"""``ringgauge calibrate``: measure the pixel scale from a calibration target and keep it as a bench profile."""

from __future__ import annotations

import argparse
import json
import sys
import textwrap

from ..errors import InputError
from ..options import integer, number
from ..uncertainty import format_value

TARGET_HELP = (
    "what the image shows: 'lines' (a line scale or grating: one direction, x and y assumed equal), 'grid' "
    "(a square crossed grid: x, y and squareness), 'dots' (a square dot grid) or 'auto' (decide from the image; "
    "default)"
)


def register(sub) -> None:
    p = sub.add_parser(
        "calibrate",
        help="measure the pixel scale (µm per pixel) from a calibration target and save it as a bench profile",
        description=textwrap.fill(
            "Measure the object-space pixel scale from a photograph of a calibration target taken at the same "
            "focus and magnification as the parts: a line scale (stage micrometer) or grating of known pitch, a "
            "crossed grid or dot grid, or a reference disc / ring gauge of certified diameter. Give two images of "
            "a line scale, turned by about 90° in between, to measure x and y separately. With --bench the "
            "result is saved as that bench profile (made if new; the previous calibration is kept in its "
            "history) and 'ringgauge analyze --bench NAME' uses it.", 100
        ),
        epilog=(
            "examples:\n"
            "  ringgauge calibrate micrometer.png --grating-pitch 10 --pitch-u 0.05 --bench 'Bench 2 / 0.5x'\n"
            "  ringgauge calibrate scale_0.png scale_90.png --grating-pitch 100 --bench B2\n"
            "  ringgauge calibrate disc.png --disc-diameter 12.000 --diameter-u 0.002 --bench B2 --json"
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("images", nargs="+", metavar="IMAGE", help="calibration image (two for a line scale turned 90°)")
    from ..options import add_max_megapixels

    add_max_megapixels(p)
    what = p.add_mutually_exclusive_group(required=True)
    what.add_argument("--grating-pitch", type=number("--grating-pitch", lo=0, hi=1e5, lo_open=True, unit="µm"), metavar="UM",
                      help="certified pitch of the line scale, grating or grid, micrometres (e.g. 10)")
    what.add_argument("--disc-diameter", type=number("--disc-diameter", lo=0, hi=1e3, lo_open=True, unit="mm"), metavar="MM",
                      help="certified diameter of the reference disc or ring gauge, millimetres (e.g. 12.000)")
    p.add_argument("--pitch-u", type=number("--pitch-u", lo=0, hi=1e4, unit="µm"), metavar="UM",
                   help="standard uncertainty of the pitch, µm (from the certificate; default ±0.1 %% of the pitch)")
    p.add_argument("--diameter-u", type=number("--diameter-u", lo=0, hi=100, unit="mm"), metavar="MM",
                   help="standard uncertainty of the diameter, mm (from the certificate; default ±0.002 mm)")
    p.add_argument("--target", choices=("auto", "lines", "grid", "dots"), default="auto", help=TARGET_HELP)
    p.add_argument("--target-id", metavar="TEXT", help="identity of the target (serial or certificate number)")
    p.add_argument("--bench", metavar="NAME", help="save the result as this bench profile")
    p.add_argument("--operator", metavar="NAME", default="", help="who took the calibration image")
    p.add_argument("--camera", metavar="TEXT", help="camera description kept with the profile")
    p.add_argument("--lens", metavar="TEXT", help="lens / magnification note kept with the profile")
    p.add_argument("--source", metavar="KEY", help="default light source of this bench (see 'ringgauge sources')")
    p.add_argument("--wavelength", type=number("--wavelength", lo=200, hi=2000, unit="nm"), metavar="NM", help="or a custom default wavelength, nm")
    p.add_argument("--medium-index", type=number("--medium-index", lo=1, hi=2.5), metavar="N", help="default gap medium index of this bench")
    p.add_argument("--recal-months", type=integer("--recal-months", lo=1, hi=120), metavar="MONTHS",
                   help="re-calibration interval of the profile, months (default about 6: 180 days)")
    p.add_argument("--recal-days", type=integer("--recal-days", lo=1, hi=3660), help=argparse.SUPPRESS)  # older name, in days; kept working
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    p.set_defaults(func=run)


def _recal_days(args):
    from .bench import _recal_days as days  # one conversion for 'bench' and 'calibrate'

    return days(args)


def _progress(msg: str, quiet: bool) -> None:
    if not quiet:
        print(f"ringgauge: {msg}", file=sys.stderr, flush=True)


def run(args) -> int:
    from ..calibration import profiles as prof
    from ..calibration.procedure import calibrate  # the window's calibration dialog calls the same

    quiet = False
    done = calibrate(
        args.images, grating_pitch_um=args.grating_pitch, pitch_u_um=args.pitch_u,
        disc_diameter_mm=args.disc_diameter, diameter_u_mm=args.diameter_u, target=args.target,
        target_id=args.target_id, bench=args.bench, operator=args.operator, camera=args.camera, lens=args.lens,
        source=args.source, wavelength_nm=args.wavelength, medium_index=args.medium_index,
        recalibration_days=_recal_days(args), progress=lambda m: _progress(m, quiet),
    )
    cal, saved = done.calibration, done.profile
    if args.json:
        doc = {"calibration": cal.to_dict(), "bench": None if saved is None else saved.to_dict(),
               "saved_to": None if saved is None else str(prof.store_path())}
        from ..settings import dumps_json

        print(dumps_json(doc, what="the calibration result"))
        return 0
    print(format_calibration(cal))
    if saved is not None:
        print(f"\nSaved as bench '{saved.name}' (calibrated {saved.calibrated}; recalibrate within "
              f"{saved.recalibration_days / (365.25 / 12):.0f} months) in {prof.store_path()}")
        src = saved.light_source()
        if src is not None and src.hazard:
            print(f"Safety: {src.hazard}")
    else:
        print("\nNot saved: give --bench NAME to keep this scale as a bench profile.")
    return 0


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
