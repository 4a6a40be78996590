"""Command-line options of ``ringgauge analyze`` for the surface form against a test plate.

``add_arguments(parser)`` adds them; ``setup_kwargs(args)`` turns them into BenchSetup keyword arguments and
warnings (an overdue or retired plate). Any of them being given (or several frames) asks for a form result.
"""

from __future__ import annotations

import argparse

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


def add_arguments(parser: argparse.ArgumentParser) -> None:
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
    if getattr(args, "mode", None) is not None:
        extras["mode"] = args.mode
    kw["extras"] = extras
    return kw, warnings
