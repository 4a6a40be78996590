"""``ringgauge calibrate``: measure the pixel scale from a calibration target and keep it as a bench profile."""

from __future__ import annotations

import argparse
import json
import sys
import textwrap

from ..errors import InputError
from ._options import integer, number
from ..report.calibration_text import format_calibration

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
    from ._options import add_max_megapixels

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
