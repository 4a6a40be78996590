"""``ringgauge simulate``: make a synthetic fringe image with known truth (demo, training, checking a set-up)."""

from __future__ import annotations

import argparse
import json
import sys
from dataclasses import replace
from pathlib import Path

from ..errors import InputError
from ._options import integer, number
from ._help import ExampleFormatter
from ..sources import SOURCES, get_source


def register(sub) -> None:
    p = sub.add_parser(
        "simulate",
        help="make a synthetic fringe image with known truth",
        description=(
            "Render a physically based interferogram (Airy reflectance of the gap, spectral lines, pixel "
            "integration, blur, uneven light, stray light, shot and read noise, quantisation, dust) and write it "
            "with a JSON file of the truth beside it."
        ),
        formatter_class=ExampleFormatter,
        epilog="Example: ringgauge simulate --radius 1500 --source sodium-d --pixel-size 8 --out lens.png",
    )
    p.add_argument("--out", required=True, metavar="FILE.png", help="image file to write (PNG or TIFF); with --sequence a .avi video or a folder")
    p.add_argument("--kind", choices=("rings", "test-plate"), default="rings",
                   help="rings: lens on an optical flat (default); test-plate: a few fringes over the part")
    p.add_argument("--source", default="sodium-d", help=f"lamp: {', '.join(SOURCES)}")
    p.add_argument("--pixel-size", type=number("--pixel-size", lo=0, hi=1e4, lo_open=True, unit="µm"), default=8.0, metavar="UM", help="object-space pixel size, µm (default 8)")
    p.add_argument("--width", type=integer("--width", lo=32, hi=20000), default=1280, help="image width, px (default 1280)")
    p.add_argument("--height", type=integer("--height", lo=32, hi=20000), default=1024, help="image height, px (default 1024)")
    p.add_argument("--bits", type=int, choices=(8, 12, 16), default=8, help="bit depth (12-bit data goes in a 16-bit file)")
    p.add_argument("--blur", type=number("--blur", lo=0, hi=50), default=0.7, metavar="PX", help="Gaussian blur sigma, px (default 0.7)")
    p.add_argument("--full-well", type=number("--full-well", lo=0, hi=1e7, lo_open=True), default=12000, metavar="E", help="electrons at full scale (shot noise)")
    p.add_argument("--no-noise", action="store_true", help="no shot or read noise")
    p.add_argument("--dust", type=integer("--dust", lo=0, hi=10000), default=0, metavar="N", help="number of dust specks")
    p.add_argument("--falloff", type=number("--falloff", lo=0, hi=0.9), default=0.2, help="illumination fall-off toward the corners (0-0.9)")
    p.add_argument("--stray", type=number("--stray", lo=0, hi=1), default=0.05, help="stray light, fraction of the peak (default 0.05)")
    p.add_argument("--medium-index", type=number("--medium-index", lo=1, hi=2.5), default=1.0, help="gap medium index (default 1.0, air)")
    p.add_argument("--seed", type=integer("--seed", lo=0, hi=2**32 - 1), default=0, help="random seed (default 0)")
    g = p.add_argument_group("lens on a flat (--kind rings)")
    g.add_argument("--radius", type=number("--radius", lo=-1e7, hi=1e7, unit="mm"), default=1000.0, metavar="MM", help="radius of curvature, mm (default 1000)")
    g.add_argument("--centre", type=number("--centre", lo=-1e6, hi=1e6), nargs=2, metavar=("X", "Y"), help="contact point, px (default: middle)")
    g.add_argument("--contact-offset", type=number("--contact-offset", lo=-1e5, hi=1e5, unit="nm"), default=0.0, metavar="NM", help="extra gap at the contact, nm")
    g = p.add_argument_group("against a test plate (--kind test-plate)")
    g.add_argument("--power", type=number("--power", lo=-1e3, hi=1e3), default=2.0, help="power, fringes (sign: + gap grows outward)")
    g.add_argument("--astigmatism", type=number("--astigmatism", lo=-1e3, hi=1e3), default=0.0, help="astigmatism, fringes")
    g.add_argument("--astigmatism-axis", type=number("--astigmatism-axis", lo=-360, hi=360), default=0.0, metavar="DEG", help="axis, degrees")
    g.add_argument("--zonal", type=number("--zonal", lo=-1e3, hi=1e3), default=0.0, help="rotationally symmetric zone, fringes PV")
    g.add_argument("--tilt", type=number("--tilt", lo=-1e3, hi=1e3), nargs=2, default=(0.0, 0.0), metavar=("X", "Y"), help="tilt, fringes")
    g.add_argument("--piston", type=number("--piston", lo=-1e3, hi=1e3), default=0.3, help="gap at the centre, fringes")
    g.add_argument("--aperture", type=number("--aperture", lo=0, hi=1e3, lo_open=True, unit="mm"), default=20.0, metavar="MM", help="part diameter, mm (default 20)")
    g.add_argument("--frames", type=integer("--frames", lo=1, hi=64), default=1, help="frames with the gap stepped between them (sign)")
    g.add_argument("--gap-step", type=number("--gap-step", lo=-10, hi=10), default=0.125, metavar="FRINGES", help="gap step between frames")
    g = p.add_argument_group(
        "a bench sequence (--sequence): the part settling, resting, pressed gently and released",
        "Writes a video (--out NAME.avi, MJPG) or numbered frames (--out FOLDER) with NAME.truth.json / "
        "FOLDER/truth.json: the gap of every frame, the events and the sign a correct reading gives. Uses "
        "--radius, --source, --pixel-size, --width/--height, --blur, --falloff, --stray, --seed. With --kind "
        "test-plate the part has --power (its size; --contact gives its sign), --astigmatism, --astigmatism-axis "
        "and --aperture, and the gaps move its piston.",
    )
    g.add_argument("--sequence", action="store_true", help="write a sequence instead of one image")
    g.add_argument("--contact", choices=("centre", "edge"), default="centre",
                   help="centre contact (the gap grows outward, power +) or edge contact (gap widest in the "
                   "middle, power −)")
    g.add_argument("--fps", type=number("--fps", lo=0, hi=1000, lo_open=True), default=25.0, help="frame rate of the video, frames/s (default 25)")
    g.add_argument("--settle-frames", type=integer("--settle-frames", lo=0, hi=10000), default=40, metavar="N", help="frames of settling (default 40)")
    g.add_argument("--rest-frames", type=integer("--rest-frames", lo=0, hi=10000), default=15, metavar="N", help="still frames after settling (15)")
    g.add_argument("--press-frames", type=integer("--press-frames", lo=0, hi=10000), default=16, metavar="N", help="frames of the press and release (16)")
    g.add_argument("--after-frames", type=integer("--after-frames", lo=0, hi=10000), default=12, metavar="N", help="still frames at the end (12)")
    g.add_argument("--start-gap", type=number("--start-gap", lo=0, hi=1e5, unit="nm"), default=1200.0, metavar="NM", help="uniform gap at the start, nm")
    g.add_argument("--rest-gap", type=number("--rest-gap", lo=0, hi=1e5, unit="nm"), default=300.0, metavar="NM", help="uniform gap once settled, nm")
    g.add_argument("--press-depth", type=number("--press-depth", lo=0, hi=1e5, unit="nm"), default=250.0, metavar="NM", help="gap closed by the press, nm")
    p.set_defaults(func=run)


def _run_sequence(args: argparse.Namespace, src, cam, light) -> int:
    from ..live.sequence import SequencePlan, write_sequence

    counts = (args.settle_frames, args.rest_frames, args.press_frames, args.after_frames)
    if min(counts) < 0 or args.settle_frames < 2 or sum(counts) > 5000:
        raise InputError("frame counts must be non-negative, settling at least 2 frames, at most 5000 in all")
    if not 0 < args.fps <= 1000:
        raise InputError("--fps must lie between 0 and 1000 frames/s")
    if args.start_gap < args.rest_gap or args.rest_gap < 0 or not 0 <= args.press_depth <= args.rest_gap:
        raise InputError("gaps must satisfy start ≥ rest ≥ press depth ≥ 0 (nm): the part never touches harder "
                         "than the rest gap allows")
    if args.bits != 8:
        raise InputError("sequences are written with 8-bit frames (drop --bits)")
    plan = SequencePlan(
        radius_mm=args.radius, contact=args.contact, settle_frames=args.settle_frames, rest_frames=args.rest_frames,
        press_frames=args.press_frames, after_frames=args.after_frames, start_gap_nm=args.start_gap,
        rest_gap_nm=args.rest_gap, press_depth_nm=args.press_depth, fps=args.fps,
    )
    progress = None
    if sys.stderr.isatty():
        def progress(frac: float, msg: str) -> None:
            print(f"\r  {100 * frac:3.0f}%  {msg:<30s}", end="", file=sys.stderr, flush=True)
    if args.kind == "test-plate":
        from ..live.form_sequence import FormPlan, write_form_sequence

        fplan = FormPlan(power_fringes=abs(args.power), astigmatism_fringes=abs(args.astigmatism),
                         axis_deg=args.astigmatism_axis, contact=args.contact, aperture_diameter_mm=args.aperture,
                         base=plan)
        out, truth = write_form_sequence(args.out, fplan, source=src, camera=cam, lighting=light,
                                         medium_index=args.medium_index, noise=not args.no_noise, rng=args.seed,
                                         progress=progress)
        if progress:
            print("\r" + " " * 40 + "\r", end="", file=sys.stderr)
        print(f"wrote {out} (a part on a test plate, {plan.n_frames} frames at {plan.fps:g} frames/s; truth in "
              f"{truth})")
        return 0
    out, truth = write_sequence(args.out, plan, source=src, camera=cam, lighting=light,
                                medium_index=args.medium_index, noise=not args.no_noise, rng=args.seed,
                                progress=progress)
    if progress:
        print("\r" + " " * 40 + "\r", end="", file=sys.stderr)
    print(f"wrote {out} ({plan.n_frames} frames at {plan.fps:g} frames/s; truth in {truth})")
    return 0


def run(args: argparse.Namespace) -> int:
    from .. import synth
    from ..imaging import save_png  # numpy: loaded only when the command runs, not for --help

    if args.pixel_size <= 0 or args.radius <= 0 or args.width < 32 or args.height < 32:
        raise InputError("pixel size and radius must be positive and the image at least 32×32 px")
    if args.width * args.height > 40e6:
        raise InputError("image larger than 40 megapixels; choose a smaller --width/--height")
    src = get_source(args.source)
    cam = synth.Camera(
        width=args.width, height=args.height, pixel_um=args.pixel_size, bits=args.bits, blur_px=args.blur,
        full_well_e=args.full_well,
    )
    light = synth.Lighting(falloff=args.falloff, stray=args.stray)
    if args.sequence:
        return _run_sequence(args, src, cam, light)
    dust = synth.Dust(count=args.dust)
    out = Path(args.out)
    if not out.parent.exists():
        raise InputError(f"folder {out.parent} does not exist")
    paths = []
    if args.kind == "rings":
        img = synth.newton_rings(
            args.radius, centre_px=tuple(args.centre) if args.centre else None,
            contact_offset_nm=args.contact_offset, source=src, camera=cam, lighting=light, dust=dust,
            medium_index=args.medium_index, noise=not args.no_noise, rng=args.seed,
        )
        frames = [img]
    else:
        form = synth.SurfaceForm(
            power=args.power, astig=args.astigmatism, astig_axis_deg=args.astigmatism_axis, zonal=args.zonal,
            tilt_x=args.tilt[0], tilt_y=args.tilt[1], piston=args.piston,
        )
        frames = []
        for i in range(max(1, args.frames)):
            f_i = replace(form, piston=form.piston + i * args.gap_step)
            frames.append(
                synth.test_plate_fringes(
                    f_i, aperture_diameter_mm=args.aperture, source=src, camera=cam, lighting=light, dust=dust,
                    medium_index=args.medium_index, noise=not args.no_noise, rng=args.seed + i,
                )
            )
    for i, img in enumerate(frames):
        path = out if len(frames) == 1 else out.with_name(f"{out.stem}_{i + 1}{out.suffix}")
        save_png(path, img.image01 if not args.no_noise else img.intensity, bits=args.bits)
        truth = dict(img.truth, image=path.name, bits=args.bits)
        path.with_suffix(".truth.json").write_text(json.dumps(truth, indent=2))
        paths.append(path)
    for pth in paths:
        print(f"wrote {pth} (truth in {pth.with_suffix('.truth.json').name})")
    return 0
