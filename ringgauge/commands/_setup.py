"""The command line's side of the bench set-up: the form and hand-setting options, and parsed options turned into
:class:`~ringgauge.setup_options.SetupOptions` for the one set-up builder (:func:`ringgauge.setup_options.build_setup`).

Only the command modules read an argparse namespace; everything past :func:`options_from_args` is typed.
"""

from __future__ import annotations

import argparse

from ..bench_setup import BenchSetup
from ..form.sign import GAP_CHANGES, PRESS_CHOICES
from ..setup_options import INSPECTION_FIELDS, SetupOptions, build_setup
from ._options import number


def add_form_arguments(parser: argparse.ArgumentParser) -> None:
    """The hand settings (aperture, centre) and the surface-form options against a test plate."""
    m = parser.add_argument_group(
        "manual settings (the same as setting them by hand in the window)",
        "Pixel coordinates of the first image: x = column, y = row, origin at the top-left pixel's centre.",
    )
    m.add_argument("--aperture", nargs=3, type=number("--aperture"), metavar=("X", "Y", "DIAMETER"),
                   help="the part's clear aperture as a circle: centre x, y and diameter, pixels; replaces the "
                   "edge search (use it when the rim is hidden or the part fills the frame)")
    m.add_argument("--centre", nargs=2, type=number("--centre"), metavar=("X", "Y"),
                   help="the ring centre, pixels: a starting point for the ring search of a radius measurement")
    g = parser.add_argument_group(
        "surface form against a test plate (ISO 10110-5)",
        "Power, astigmatism and irregularity in fringes (one fringe = λ/2) over the test diameter.",
    )
    g.add_argument("--test-diameter", type=number("--test-diameter", lo=0, lo_open=True, unit="mm"), metavar="MM",
                   help="diameter to evaluate, mm (default: the tolerance's, else the clear aperture found)")
    g.add_argument("--tolerance", metavar="TEXT",
                   help="drawing tolerance, e.g. \"3/2(0.5)\", \"3/1(0.5/0.2) RMSi < 0.05; λ = 632.8\"; "
                   "gives a verdict per term")
    g.add_argument("--decision-rule", choices=("simple", "guard-banded"), default="simple",
                   help="simple acceptance (default) or guard-banded by the expanded uncertainty U")
    g.add_argument("--test-plate", metavar="ID", help="a plate from the register (see 'ringgauge plates list')")
    g.add_argument("--test-plate-radius", type=number("--test-plate-radius", lo=0, lo_open=True, unit="mm"), metavar="MM",
                   help="the plate's certified radius, mm, when it is not in the register")
    g.add_argument("--test-plate-radius-u", type=number("--test-plate-radius-u", lo=0, unit="mm"), metavar="MM", default=None,
                   help="its certified standard uncertainty (k = 1), mm")
    g.add_argument("--test-plate-kind", choices=("convex", "concave", "flat"),
                   help="the plate's working surface (a convex plate tests concave parts; a flat one tests "
                   "flats, and needs no radius); needed for the surface radius from a hand-given plate radius")
    g.add_argument("--press-test", choices=PRESS_CHOICES,
                   help="what the rings did when the part was pressed gently at its centre: rings-spread "
                   "(outward: centre contact) or rings-shrink (inward: edge contact); gives the power's sign")
    g.add_argument("--gap-change", choices=GAP_CHANGES, default="increasing",
                   help="with several frames: how the gap changed from each frame to the next (default "
                   "increasing); the fringes' motion then gives the power's sign")


def _numbers(v) -> tuple[float, ...] | None:
    return None if v is None else tuple(float(x) for x in v)


def options_from_args(args: argparse.Namespace) -> SetupOptions:
    """The parsed set-up options (of ``analyze``, ``batch`` or ``watch``, a lot sheet already applied) as typed
    set-up choices. Options a parser does not define count as not given."""
    def a(name, default=None):
        v = getattr(args, name, default)
        return default if v is None else v

    medium = getattr(args, "medium_index", None)
    limits = getattr(args, "radius_limits", None)
    return SetupOptions(
        source=a("source"), wavelength_nm=a("wavelength"), wavelength_u_nm=a("wavelength_u"),
        bandwidth_nm=a("bandwidth", 0.0),
        pixel_size_um=a("pixel_size"), pixel_size_u_um=a("pixel_size_u", 0.0), pixel_size_y_um=a("pixel_size_y"),
        pixel_size_y_u_um=a("pixel_size_y_u"), bench=a("bench"),
        # air is the option's default: a bench profile's own gap medium then stands
        medium_index=None if medium is None or medium == 1.0 else medium, medium_index_u=a("medium_index_u", 0.0),
        fringe_kind=a("fringe_kind", "dark"), mode=a("mode", "auto"),
        test_diameter_mm=a("test_diameter"), tolerance=a("tolerance"), test_plate=a("test_plate"),
        test_plate_radius_mm=a("test_plate_radius"), test_plate_radius_u_mm=a("test_plate_radius_u"),
        test_plate_kind=a("test_plate_kind"), press_test=a("press_test"),
        decision_rule=a("decision_rule", "simple"), gap_change=a("gap_change", "increasing"),
        radius_tolerance=a("radius_tolerance"), radius_limits_mm=None if limits is None else tuple(limits),
        centre_px=_numbers(a("centre")), aperture_px=_numbers(a("aperture")), aperture_size="diameter",
        operator=a("operator"), inspection=tuple((k, a(k)) for k in INSPECTION_FIELDS if a(k) is not None),
    )


def setup_from_args(args: argparse.Namespace) -> tuple[BenchSetup, list[str]]:
    """Build the bench set-up from parsed options; returns it with any warnings (e.g. an overdue calibration)."""
    opts = options_from_args(args)
    images = list(getattr(args, "images", None) or [])
    size = image_size(images[0]) if images and (opts.aperture_px is not None or opts.centre_px is not None) else None
    return build_setup(opts, image_size=size, frames=max(len(images), 1))


def image_size(path) -> tuple[int, int] | None:
    """(width, height) from the image header, or None when it cannot be read here (the loader then reports)."""
    if not path:
        return None
    try:
        from PIL import Image

        with Image.open(path) as im:
            return int(im.size[0]), int(im.size[1])
    except Exception:  # noqa: BLE001 - any failure is reported by the image loader with its own message
        return None


# -- the lot sheet fills what the command line left out (``ringgauge batch``) ---------------------------------
def apply_sheet(args: argparse.Namespace, sheet: dict, given: set[str]) -> list[str]:
    """Fill ``args`` from the lot sheet (:func:`ringgauge.records.lotsheet.read_sheet`) where the option was not
    given on the command line (``given`` holds the destinations given there). Returns the sheet fields used."""
    from ..records.lotsheet import FIELDS, GROUPS

    blocked = set(given)
    for group in GROUPS:
        if group & given:
            blocked |= group
    used = []
    for key, value in sheet.items():
        dest = FIELDS[key][0]
        if dest is None or dest in blocked or not hasattr(args, dest):
            continue
        setattr(args, dest, value)
        used.append(key)
    return used


def track_given(parser: argparse.ArgumentParser) -> None:
    """Make ``parser`` note the destinations of the options given on the command line in ``args._given``
    (argparse calls an option's action only when the option is given)."""
    for action in parser._actions:
        if isinstance(action, argparse._HelpAction) or getattr(action, "_tracks_given", False):
            continue
        base = type(action)

        def call(self, parser_, namespace, values, option_string=None, _base=base):
            given = getattr(namespace, "_given", None)
            if given is None:
                given = set()
                setattr(namespace, "_given", given)
            given.add(self.dest)
            _base.__call__(self, parser_, namespace, values, option_string)

        action.__class__ = type(f"Given{base.__name__}", (base,), {"__call__": call, "_tracks_given": True})
