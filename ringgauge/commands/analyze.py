"""``ringgauge analyze``: measure one lens from its fringe image(s)."""

from __future__ import annotations

import argparse
import sys

from ._options import add_max_megapixels, number
from ..sources import SOURCES
from ._help import ExampleFormatter
from ._setup import add_form_arguments, setup_from_args  # noqa: F401 - batch, watch and tests take it from here


def add_setup_arguments(p: argparse.ArgumentParser) -> None:
    """Bench set-up options shared by ``analyze`` and ``batch``."""
    add_max_megapixels(p)
    g = p.add_argument_group("light source (one of)")
    g.add_argument("--source", metavar="NAME", help=f"built-in lamp: {', '.join(SOURCES)} (see 'ringgauge sources')")
    g.add_argument("--wavelength", type=number("--wavelength", lo=200, hi=2000, unit="nm"), metavar="NM", help="wavelength in nm (standard air), e.g. 589.29")
    g.add_argument("--wavelength-u", type=number("--wavelength-u", lo=0, hi=50, unit="nm"), metavar="NM", help="its standard uncertainty in nm")
    g.add_argument("--bandwidth", type=number("--bandwidth", lo=0, hi=500, unit="nm"), default=0.0, metavar="NM", help="FWHM of a broadband (LED) source, nm")
    g = p.add_argument_group("pixel scale (one of)")
    g.add_argument("--pixel-size", type=number("--pixel-size", lo=0, hi=1e4, lo_open=True, unit="µm"), metavar="UM", help="object-space pixel size, µm per pixel")
    g.add_argument("--pixel-size-u", type=number("--pixel-size-u", lo=0, hi=1e3, unit="µm"), default=0.0, metavar="UM", help="its standard uncertainty (k = 1), µm")
    g.add_argument("--pixel-size-y", type=number("--pixel-size-y", lo=0, hi=1e4, lo_open=True, unit="µm"), metavar="UM", help="pixel size along rows if it differs from x, µm")
    g.add_argument("--pixel-size-y-u", type=number("--pixel-size-y-u", lo=0, hi=1e3, unit="µm"), metavar="UM", help="its standard uncertainty, µm")
    g.add_argument("--bench", metavar="NAME", help="use a calibrated bench profile (see 'ringgauge calibrate')")
    g = p.add_argument_group("gap and fringes")
    g.add_argument("--medium-index", type=number("--medium-index", lo=1, hi=2.5), default=1.0, metavar="N", help="refractive index of the gap (air 1.0)")
    g.add_argument("--medium-index-u", type=number("--medium-index-u", lo=0, hi=0.5), default=0.0, metavar="U", help="its standard uncertainty")
    g.add_argument(
        "--fringe-kind", choices=("dark", "bright"), default="dark",
        help="rings counted as orders: dark (r² = mλR/n, default) or bright (r² = (m − ½)λR/n)",
    )
    g.add_argument(
        "--mode", choices=("auto", "radius", "form"), default="auto",
        help="radius: Newton's rings on an optical flat; form: against a test plate; auto (default) picks form "
        "when a form option or several frames are given",
    )
    add_form_arguments(p)
    g = p.add_argument_group("radius tolerance (one of; judged under --decision-rule)")
    g.add_argument("--radius-tolerance", metavar="TEXT",
                   help="radius of curvature tolerance in mm: '1000 ± 5', '1000 +/- 5', '1000 ± 0.5 %%', "
                        "'995..1005' or '1000 +5/-3'; each part gets pass / fail / conditional")
    g.add_argument("--radius-limits", nargs=2, type=number("--radius-limits", lo=-1e7, hi=1e7, unit="mm"),
                   metavar=("LO_MM", "HI_MM"),
                   help="the same as lower and upper limits in mm")


def register(sub) -> None:
    p = sub.add_parser(
        "analyze",
        help="measure a lens from its fringe image(s)",
        description=(
            "Measure a lens from a camera image of its interference rings. One image of a lens on an optical flat "
            "gives the radius of curvature with its uncertainty budget; with a test diameter, tolerance or test "
            "plate (or several frames with a changed gap) the surface form against a test plate is evaluated."
        ),
        formatter_class=ExampleFormatter,
        epilog="Example: ringgauge analyze lens.png --source sodium-d --pixel-size 10 --pixel-size-u 0.01",
    )
    p.add_argument("images", nargs="+", metavar="IMAGE", help="image file(s): PNG, TIFF or JPEG, 8 or 16 bit")
    add_setup_arguments(p)
    o = p.add_argument_group("output")
    o.add_argument("--json", action="store_true", help="print the full result as JSON instead of the text report")
    o.add_argument("--out", metavar="FILE", help="also write the JSON result to FILE")
    o.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    from . import _records_common as rc

    r = p.add_argument_group("keeping the result")
    r.add_argument(
        "--record", action="store_true",
        help="keep this analysis as an inspection record in the records store (see 'ringgauge records')",
    )
    rc.add_db_argument(r)
    rc.add_meta_arguments(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from ..pipeline import analyse_files
    from ..report.text import format_result

    from ..settings import check_target, dumps_json, write_text_atomic

    if args.out:
        check_target(args.out, "--out")  # before the analysis, not after it
    from ..imaging import check_image_path

    for image in args.images:
        check_image_path(image)  # a pipe or device is refused before anything opens it (option checks peek)
    setup, warnings = setup_from_args(args)
    progress = None
    if not args.quiet and sys.stderr.isatty():
        def progress(frac: float, msg: str) -> None:
            print(f"\r  {100 * frac:3.0f}%  {msg:<50s}", end="", file=sys.stderr, flush=True)
    result = analyse_files(args.images, setup, progress=progress)
    if progress:
        print("\r" + " " * 60 + "\r", end="", file=sys.stderr)
    d = result.to_dict()
    d["warnings"] = warnings + d["warnings"]
    text = dumps_json(d, what="the result") if (args.out or args.json) else None  # never NaN/Infinity
    if args.out:
        from ..records.keys import seal_result  # sealed: 'records supersede --result' takes it as measured

        write_text_atomic(args.out, dumps_json(seal_result(d), what="the result") + "\n", lock=False)
    if args.json:
        print(text)
    else:
        print(format_result(result, warnings=d["warnings"]))
    if getattr(args, "record", False):
        _keep(args, result, d)
    return 0


def _keep(args: argparse.Namespace, result, d: dict) -> None:
    """Append the result to the records store, one transaction; say where it went (on stderr with --json)."""
    from . import _records_common as rc

    meta = rc.meta_from_args(args)
    with rc.open_from_args(args) as store:
        rec = store.add(meta, d, image_path=result.image.path, image_sha256=result.image.sha256, setup=d["setup"])
        where = store.where
    print(f"kept as inspection record {rec.id} in {where}", file=sys.stderr if args.json else sys.stdout)
