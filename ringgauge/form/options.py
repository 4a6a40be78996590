"""Command-line options of ``ringgauge analyze`` for the surface form against a test plate.

``add_arguments(parser)`` adds them; ``setup_kwargs(args)`` turns them into BenchSetup keyword arguments and
warnings (an overdue or retired plate). Any of them being given (or several frames) asks for a form result.
"""

from __future__ import annotations

import argparse
import math

from ..errors import InputError
from .sign import GAP_CHANGES, PRESS_CHOICES

FORM_DESTS = ("test_diameter", "tolerance", "test_plate", "test_plate_radius", "test_plate_kind", "press_test")


def _pos_float(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a number") from None
    if not v > 0:
        raise argparse.ArgumentTypeError(f"'{text}' must be positive")
    return v


def _nonneg_float(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a number") from None
    if v < 0:
        raise argparse.ArgumentTypeError(f"'{text}' cannot be negative")
    return v


def _finite_float(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a number") from None
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"'{text}' is not a finite number")
    return v


def add_arguments(parser: argparse.ArgumentParser) -> None:
    m = parser.add_argument_group(
        "manual settings (the same as setting them by hand in the window)",
        "Pixel coordinates of the first image: x = column, y = row, origin at the top-left pixel's centre.",
    )
    m.add_argument("--aperture", nargs=3, type=_finite_float, metavar=("X", "Y", "DIAMETER"),
                   help="the part's clear aperture as a circle: centre x, y and diameter, pixels; replaces the "
                   "edge search (use it when the rim is hidden or the part fills the frame)")
    m.add_argument("--centre", nargs=2, type=_finite_float, metavar=("X", "Y"),
                   help="the ring centre, pixels: a starting point for the ring search of a radius measurement")
    g = parser.add_argument_group(
        "surface form against a test plate (ISO 10110-5)",
        "Power, astigmatism and irregularity in fringes (one fringe = λ/2) over the test diameter.",
    )
    g.add_argument("--test-diameter", type=_pos_float, metavar="MM",
                   help="diameter to evaluate, mm (default: the tolerance's, else the clear aperture found)")
    g.add_argument("--tolerance", metavar="TEXT",
                   help="drawing tolerance, e.g. \"3/2(0.5)\", \"3/1(0.5/0.2) RMSi < 0.05; λ = 632.8\"; "
                   "gives a verdict per term")
    g.add_argument("--decision-rule", choices=("simple", "guard-banded"), default="simple",
                   help="simple acceptance (default) or guard-banded by the expanded uncertainty U")
    g.add_argument("--test-plate", metavar="ID", help="a plate from the register (see 'ringgauge plates list')")
    g.add_argument("--test-plate-radius", type=_pos_float, metavar="MM",
                   help="the plate's certified radius, mm, when it is not in the register")
    g.add_argument("--test-plate-radius-u", type=_nonneg_float, metavar="MM", default=None,
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


def wants_form(args) -> bool:
    """True when any form option is given or several frames are passed."""
    if any(getattr(args, d, None) is not None for d in FORM_DESTS):
        return True
    return len(getattr(args, "images", []) or []) > 1


def setup_kwargs(args) -> tuple[dict, list[str]]:
    """BenchSetup keyword arguments from parsed options, and warnings."""
    from .plates import get_plate, plate_warnings
    from .tolerance import parse_tolerance

    kw: dict = {}
    warnings: list[str] = []
    if getattr(args, "test_diameter", None) is not None:
        kw["test_diameter_mm"] = float(args.test_diameter)
    tol = getattr(args, "tolerance", None)
    if tol is not None:
        parse_tolerance(tol)  # a malformed string stops here with a message pointing at the bad part
        kw["tolerance"] = tol
    kw["decision_rule"] = getattr(args, "decision_rule", None) or "simple"
    plate_id = getattr(args, "test_plate", None)
    radius = getattr(args, "test_plate_radius", None)
    if plate_id and radius is not None:
        raise InputError("give either --test-plate ID or --test-plate-radius MM, not both")
    if plate_id:
        pl = get_plate(plate_id)
        kw["test_plate"] = pl.setup_dict()
        warnings += plate_warnings(pl)
    elif radius is not None:
        if getattr(args, "test_plate_kind", None) == "flat":
            raise InputError("a flat test plate has no radius: drop --test-plate-radius, or give "
                             "--test-plate-kind convex or concave")
        u = getattr(args, "test_plate_radius_u", None)
        if u is None:
            warnings.append("test plate radius given without its certified uncertainty (--test-plate-radius-u): "
                            "the radius budget omits it")
            u = 0.0
        kw["test_plate"] = {"id": None, "radius_mm": float(radius), "radius_u_mm": float(u),
                            "kind": getattr(args, "test_plate_kind", None), "calibrated": None, "due": None}
    elif getattr(args, "test_plate_radius_u", None) is not None:
        raise InputError("--test-plate-radius-u needs --test-plate-radius")
    elif getattr(args, "test_plate_kind", None) == "flat":
        # a reference flat: form (power, irregularity) against it, no radius to compare
        kw["test_plate"] = {"id": None, "radius_mm": None, "radius_u_mm": None, "kind": "flat",
                            "calibrated": None, "due": None}
    if getattr(args, "press_test", None):
        kw["press_test"] = args.press_test
    extras = {"gap_change": getattr(args, "gap_change", None) or "increasing"}
    manual, mw = manual_extras(args)
    extras.update(manual)
    warnings += mw
    if getattr(args, "mode", None) is not None:
        extras["mode"] = args.mode
    kw["extras"] = extras
    return kw, warnings


def manual_extras(args) -> tuple[dict, list[str]]:
    """``--aperture X Y DIAMETER`` and ``--centre X Y`` as the set-up extras the window passes for its hand-set
    aperture and centre: ``aperture_px = (x, y, radius)``, ``centre_px = (x, y)``; checked against the first
    image's size when it can be read. Raises InputError with a one-line message for unusable values."""
    extras: dict = {}
    warnings: list[str] = []
    ap = getattr(args, "aperture", None)
    ce = getattr(args, "centre", None)
    if ap is None and ce is None:
        return extras, warnings
    size = _image_size((getattr(args, "images", None) or [None])[0])
    if ap is not None:
        x, y, d = (float(v) for v in ap)
        if not d > 0:
            raise InputError(f"--aperture: the diameter must be positive, got {d:g} px")
        if size is not None:
            w, h = size
            if not (-0.5 <= x <= w - 0.5 and -0.5 <= y <= h - 0.5):
                raise InputError(f"--aperture: the centre ({x:g}, {y:g}) px lies outside the image ({w} x {h} px)")
            if d < 8:
                raise InputError(f"--aperture: a diameter of {d:g} px is too small to evaluate (at least 8 px)")
        extras["aperture_px"] = (x, y, d / 2)
    if ce is not None:
        x, y = (float(v) for v in ce)
        if size is not None:
            w, h = size
            if not (-0.5 <= x <= w - 0.5 and -0.5 <= y <= h - 0.5):
                raise InputError(f"--centre: ({x:g}, {y:g}) px lies outside the image ({w} x {h} px)")
        extras["centre_px"] = (x, y)
        if wants_form(args) or getattr(args, "mode", None) == "form":
            warnings.append("--centre is used by the radius measurement only: the form fit needs no ring centre "
                            "(give the part's edge with --aperture X Y DIAMETER)")
    return extras, warnings


def _image_size(path) -> tuple[int, int] | None:
    """(width, height) from the image header, or None when it cannot be read here (the loader then reports)."""
    if not path:
        return None
    try:
        from PIL import Image

        with Image.open(path) as im:
            return int(im.size[0]), int(im.size[1])
    except Exception:  # noqa: BLE001 - any failure is reported by the image loader with its own message
        return None
