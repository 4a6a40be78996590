"""``ringgauge plates``: the shop's register of test plates (add, list, show, retire)."""

from __future__ import annotations

import argparse
import datetime as _dt

from ..errors import InputError
from ._options import integer, number
from ._help import ExampleFormatter


def _float(text: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a number") from None


def register(sub) -> None:
    p = sub.add_parser(
        "plates",
        help="keep the register of test plates (add, list, show, retire)",
        description="The register of the shop's test plates: identifier, certified radius and its uncertainty, "
        "convex or concave, calibration date. Analyses refer to a plate by identifier (--test-plate ID). The "
        "register is a plain JSON file in the ringgauge folder; it may also be edited by hand.",
    )
    act = p.add_subparsers(dest="plates_action", metavar="ACTION")
    a = act.add_parser("add", help="add a plate", description="Add a test plate to the register.",
                       formatter_class=ExampleFormatter,
                       epilog="Example: ringgauge plates add TP-0412 --radius 51.68 --radius-u 0.002 --kind "
                       "concave --calibrated 2026-03-14 --diameter 40")
    a.add_argument("id", help="identifier engraved on the plate, e.g. TP-0412")
    a.add_argument("--radius", type=number("--radius", lo=-1e7, hi=1e7, unit="mm"), required=True, metavar="MM", help="certified radius, mm")
    a.add_argument("--radius-u", type=number("--radius-u", lo=0, hi=1e3, unit="mm"), required=True, metavar="MM",
                   help="certified standard uncertainty of the radius (k = 1), mm")
    a.add_argument("--kind", choices=("convex", "concave", "flat"), required=True,
                   help="the plate's working surface (a convex plate tests concave parts)")
    a.add_argument("--calibrated", required=True, metavar="YYYY-MM-DD", help="date of the radius certificate")
    a.add_argument("--recal-months", dest="interval", type=integer("--recal-months", lo=1, hi=240), default=24, metavar="MONTHS",
                   help="re-calibration interval, months (default 24), as for bench profiles")
    a.add_argument("--interval", dest="interval", type=integer("--interval", lo=1, hi=240), help=argparse.SUPPRESS)  # older name, kept working
    a.add_argument("--diameter", type=number("--diameter", lo=0, hi=1e4, lo_open=True, unit="mm"), metavar="MM", help="plate diameter, mm")
    a.add_argument("--notes", dest="note", default="", metavar="TEXT",
                   help="free text (certificate number, storage place)")
    a.add_argument("--note", dest="note", help=argparse.SUPPRESS)  # older spelling, kept working
    ls = act.add_parser("list", help="list the plates", description="List the plates in the register.")
    ls.add_argument("--all", action="store_true", help="include retired plates")
    sh = act.add_parser("show", help="show one plate", description="Show one plate and its calibration state.")
    sh.add_argument("id")
    rt = act.add_parser("retire", help="retire a plate (kept in the register, no longer offered)",
                        description="Mark a plate as retired (damaged, lost, replaced). It stays in the register.")
    rt.add_argument("id")
    rt.add_argument("--date", metavar="YYYY-MM-DD", help="retirement date (default today)")
    p.set_defaults(func=run, _parser=p)


def _line(pl, today) -> str:
    r = "flat" if pl.kind == "flat" else f"{pl.radius_mm:.4f} ± {pl.radius_u_mm:.4f} mm"
    state = "retired " + pl.retired if pl.retired else ("CALIBRATION OVERDUE" if pl.overdue(today) else "in date")
    return f"{pl.id:14s} {pl.kind:8s} {r:28s} cal. {pl.calibrated}  due {pl.due().isoformat()}  {state}"


def run(args) -> int:
    from ..form import plates as reg

    today = _dt.date.today()
    action = getattr(args, "plates_action", None)
    if action is None:
        args._parser.print_help()
        return 2
    if action == "add":
        pl = reg.add_plate({
            "id": args.id, "radius_mm": args.radius, "radius_u_mm": args.radius_u, "kind": args.kind,
            "calibrated": args.calibrated, "interval_months": args.interval, "diameter_mm": args.diameter,
            "note": args.note,
        })
        print(f"added: {_line(pl, today)}")
        print(f"register: {reg.register_path()}")
        for w in reg.plate_warnings(pl, today):
            print(f"warning: {w}")
        return 0
    if action == "list":
        every = reg.load_register()
        plates = [p for p in every if args.all or not p.retired]
        if not plates:
            print("no test plates in service (retired ones: 'ringgauge plates list --all')" if every else
                  "no test plates in the register yet; add one with 'ringgauge plates add ID --radius ... '")
            return 0
        print(f"{'id':14s} {'kind':8s} {'radius (u, k = 1)':28s} calibration")
        for pl in plates:
            print(_line(pl, today))
        return 0
    if action == "show":
        pl = reg.get_plate(args.id)
        for k, v in pl.to_dict().items():
            unit = " mm" if k.endswith("_mm") and v is not None else ""
            print(f"{k:16s} {v}{unit}")
        for w in reg.plate_warnings(pl, today):
            print(f"warning: {w}")
        return 0
    if action == "retire":
        if args.date:
            try:
                _dt.date.fromisoformat(args.date)
            except ValueError:
                raise InputError(f"retirement date {args.date!r} is not a date like 2026-03-14") from None
        pl = reg.retire_plate(args.id, args.date)
        print(f"retired: {_line(pl, today)}")
        return 0
    raise InputError(f"unknown action {action!r}")
