"""``ringgauge simulate``: make a synthetic fringe image with known truth (demo, training, checking a set-up)."""

from __future__ import annotations

import argparse
import json
from dataclasses import replace
from pathlib import Path

from ..errors import InputError
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
    p.add_argument("--out", required=True, metavar="FILE.png", help="image file to write (PNG or TIFF)")
    p.add_argument("--kind", choices=("rings", "test-plate"), default="rings",
                   help="rings: lens on an optical flat (default); test-plate: a few fringes over the part")
    p.add_argument("--source", default="sodium-d", help=f"lamp: {', '.join(SOURCES)}")
    p.add_argument("--pixel-size", type=float, default=8.0, metavar="UM", help="object-space pixel size, µm (default 8)")
    p.add_argument("--width", type=int, default=1280, help="image width, px (default 1280)")
    p.add_argument("--height", type=int, default=1024, help="image height, px (default 1024)")
    p.add_argument("--bits", type=int, choices=(8, 12, 16), default=8, help="bit depth (12-bit data goes in a 16-bit file)")
    p.add_argument("--blur", type=float, default=0.7, metavar="PX", help="Gaussian blur sigma, px (default 0.7)")
    p.add_argument("--full-well", type=float, default=12000, metavar="E", help="electrons at full scale (shot noise)")
    p.add_argument("--no-noise", action="store_true", help="no shot or read noise")
    p.add_argument("--dust", type=int, default=0, metavar="N", help="number of dust specks")
    p.add_argument("--falloff", type=float, default=0.2, help="illumination fall-off toward the corners (0-0.9)")
    p.add_argument("--stray", type=float, default=0.05, help="stray light, fraction of the peak (default 0.05)")
    p.add_argument("--medium-index", type=float, default=1.0, help="gap medium index (default 1.0, air)")
    p.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    g = p.add_argument_group("lens on a flat (--kind rings)")
    g.add_argument("--radius", type=float, default=1000.0, metavar="MM", help="radius of curvature, mm (default 1000)")
    g.add_argument("--centre", type=float, nargs=2, metavar=("X", "Y"), help="contact point, px (default: middle)")
    g.add_argument("--contact-offset", type=float, default=0.0, metavar="NM", help="extra gap at the contact, nm")
    g = p.add_argument_group("against a test plate (--kind test-plate)")
    g.add_argument("--power", type=float, default=2.0, help="power, fringes (sign: + gap grows outward)")
    g.add_argument("--astigmatism", type=float, default=0.0, help="astigmatism, fringes")
    g.add_argument("--astigmatism-axis", type=float, default=0.0, metavar="DEG", help="axis, degrees")
    g.add_argument("--zonal", type=float, default=0.0, help="rotationally symmetric zone, fringes PV")
    g.add_argument("--tilt", type=float, nargs=2, default=(0.0, 0.0), metavar=("X", "Y"), help="tilt, fringes")
    g.add_argument("--piston", type=float, default=0.3, help="gap at the centre, fringes")
    g.add_argument("--aperture", type=float, default=20.0, metavar="MM", help="part diameter, mm (default 20)")
    g.add_argument("--frames", type=int, default=1, help="frames with the gap stepped between them (sign)")
    g.add_argument("--gap-step", type=float, default=0.125, metavar="FRINGES", help="gap step between frames")
    p.set_defaults(func=run)


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
