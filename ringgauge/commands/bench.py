"""``ringgauge bench``: list, show, enter by hand, edit, rename and remove bench profiles."""

from __future__ import annotations

import argparse
import json

from ._options import integer, number
from ..uncertainty import format_value


def register(sub) -> None:
    p = sub.add_parser(
        "bench",
        help="list, show, enter, edit and remove bench profiles (pixel scale of a camera set-up)",
        description=(
            "Bench profiles keep a camera set-up's pixel scale with its uncertainty and calibration date, plus "
            "its default light source and gap medium. 'ringgauge calibrate ... --bench NAME' measures and saves "
            "one; 'bench add' enters a scale known from elsewhere."
        ),
    )
    bs = p.add_subparsers(dest="bench_action", metavar="ACTION", parser_class=type(p))
    p.set_defaults(func=lambda a: (p.print_help(), 2)[1])

    q = bs.add_parser("list", help="all bench profiles with scale, calibration date and status")
    q.add_argument("--json", action="store_true", help="print as JSON")
    q.set_defaults(func=run_list)

    q = bs.add_parser("show", help="one profile in full, with its calibration history")
    q.add_argument("name", metavar="NAME")
    q.add_argument("--json", action="store_true", help="print as JSON")
    q.set_defaults(func=run_show)

    q = bs.add_parser("add", help="enter a profile by hand (a pixel scale known from elsewhere)")
    q.add_argument("name", metavar="NAME")
    q.add_argument("--pixel-size", type=number("--pixel-size", lo=0, hi=1e4, lo_open=True, unit="µm"), required=True, metavar="UM", help="pixel scale along x, µm per pixel")
    q.add_argument("--pixel-size-u", type=number("--pixel-size-u", lo=0, hi=1e3, unit="µm"), default=0.0, metavar="UM",
                   help="its standard uncertainty, µm per pixel (k = 1)")
    q.add_argument("--pixel-size-y", type=number("--pixel-size-y", lo=0, hi=1e4, lo_open=True, unit="µm"), metavar="UM", help="pixel scale along y when it differs")
    q.add_argument("--pixel-size-y-u", type=number("--pixel-size-y-u", lo=0, hi=1e3, unit="µm"), metavar="UM", help="its standard uncertainty")
    q.add_argument("--calibrated", metavar="YYYY-MM-DD", help="date the scale was determined (default today)")
    # free text is --notes in every command; the older --note still works
    q.add_argument("--notes", dest="note", default="", metavar="TEXT", help="where the value comes from")
    q.add_argument("--note", dest="note", help=argparse.SUPPRESS)
    q.add_argument("--replace", action="store_true", help="replace an existing profile's scale")
    _meta_options(q)
    q.add_argument("--json", action="store_true", help="print the profile as JSON")
    q.set_defaults(func=run_add)

    q = bs.add_parser("edit", help="change a profile's camera / lens notes and defaults (not its scale)")
    q.add_argument("name", metavar="NAME")
    _meta_options(q)
    q.add_argument("--notes", dest="note", metavar="TEXT", help="free notes (replace the profile's notes)")
    q.add_argument("--note", dest="note", help=argparse.SUPPRESS)  # the spelling 'bench add' used
    q.add_argument("--rename", metavar="NEW", help="give the profile a new name")
    q.set_defaults(func=run_edit)

    q = bs.add_parser("remove", help="delete a profile")
    q.add_argument("name", metavar="NAME")
    q.set_defaults(func=run_remove)


def _meta_options(q) -> None:
    q.add_argument("--camera", metavar="TEXT", help="camera description")
    q.add_argument("--lens", metavar="TEXT", help="lens / magnification note")
    q.add_argument("--operator", metavar="NAME", default="", help="who entered or measured it")
    q.add_argument("--source", metavar="KEY", help="default light source (see 'ringgauge sources')")
    q.add_argument("--wavelength", type=number("--wavelength", lo=200, hi=2000, unit="nm"), metavar="NM", help="or a custom default wavelength, nm")
    q.add_argument("--medium-index", type=number("--medium-index", lo=1, hi=2.5), metavar="N", help="default gap medium index")
    # one unit for every calibration interval (test plates too): months; the old --recal-days still works
    q.add_argument("--recal-months", type=integer("--recal-months", lo=1, hi=120), metavar="MONTHS",
                   help="re-calibration interval, months (default about 6: 180 days)")
    q.add_argument("--recal-days", type=integer("--recal-days", lo=1, hi=3660), help=argparse.SUPPRESS)


def _scale_text(prof) -> str:
    sx, ux, sy, uy, du = prof.scales()
    if sx is None:
        return "no scale"
    fx = format_value(sx, 2 * ux if ux else None, "µm/px")
    if sy is None:
        return f"{fx} (x = y)"
    return f"x {fx}, y {format_value(sy, 2 * uy if uy else None, 'µm/px')}"


def _status(prof) -> str:
    age = prof.age_days()
    if age is None:
        return "not calibrated"
    s = f"{age} d old"
    if prof.overdue():
        s += f", OVERDUE (interval {prof.recalibration_days} d)"
    if prof.anisotropic():
        s += ", anisotropic"
    return s


def run_list(args) -> int:
    from ..calibration import profiles as P

    profs = P.load_all()
    if args.json:
        print(json.dumps({"file": str(P.store_path()), "benches": [p.to_dict() for p in profs.values()]},
                         indent=2, ensure_ascii=False))
        return 0
    if not profs:
        print("No bench profiles yet. Measure one with 'ringgauge calibrate IMAGE --grating-pitch UM --bench NAME'.")
        return 0
    print("Scales as value ± U (k = 2).")
    for p in sorted(profs.values(), key=lambda p: p.name.lower()):
        src = p.light_source()
        print(f"{p.name}: {_scale_text(p)}; calibrated {p.calibrated or '-'} ({_status(p)})"
              + (f"; source {src.name}" if src else ""))
    return 0


def run_show(args) -> int:
    from ..calibration import profiles as P

    prof = P.get(args.name)
    if args.json:
        print(json.dumps(prof.to_dict(), indent=2, ensure_ascii=False))
        return 0
    print(format_profile(prof))
    return 0


def format_profile(prof) -> str:
    from ..calibration.profiles import profile_warnings

    c = prof.calibration or {}
    src = prof.light_source()
    lines = [f"Bench profile '{prof.name}'"]
    lines.append(f"  camera: {prof.camera or '-'}")
    lines.append(f"  lens / magnification: {prof.lens or '-'}")
    if prof.notes:
        lines.append(f"  notes: {prof.notes}")
    lines.append(f"  pixel scale: {_scale_text(prof)}  (value ± U, k = 2)")
    if c.get("squareness_deg") is not None:
        lines.append(f"  squareness of the pixel axes: "
                     f"{format_value(c['squareness_deg'], 2 * c['squareness_u_deg'], '°')}  (k = 2)")
    lines.append(f"  calibrated: {c.get('date', '-')} by {c.get('operator') or '-'}; method: {c.get('method_text', '-')}")
    t = c.get("target") or {}
    if t:
        ref = (f"pitch {t['pitch_um']:g} µm (u {t['pitch_u_um']:.2g} µm)" if "pitch_um" in t
               else f"diameter {t['diameter_mm']:g} mm (u {t['diameter_u_mm']:.2g} mm)")
        lines.append(f"  target: {t.get('kind')}, {ref}, id {t.get('id') or '-'}")
    for im in c.get("images", []):
        lines.append(f"  image: {im.get('path') or '(in memory)'} sha256 {str(im.get('sha256'))[:16]}…")
    lines.append(f"  re-calibration interval: {prof.recalibration_days / (365.25 / 12):.0f} months "
                 f"({prof.recalibration_days} days; {_status(prof)})")
    lines.append(f"  default light source: {src.name + f' ({src.wavelength_nm:g} nm)' if src else '-'}")
    lines.append(f"  default gap medium index: {prof.medium_index if prof.medium_index is not None else '-'}")
    if prof.history:
        lines.append("  earlier calibrations:")
        for h in prof.history:
            sy = h.get("scale_y_um")
            ys = "" if sy is None else f", y {sy:.6g} ± {2 * (h.get('scale_y_u_um') or 0):.2g}"
            lines.append(f"    {h.get('date')}: x {h.get('scale_x_um'):.6g} ± {2 * (h.get('scale_x_u_um') or 0):.2g}"
                         f"{ys} µm/px (k = 2), {h.get('method')}")
    for w in profile_warnings(prof):
        lines.append(f"  warning: {w}")
    return "\n".join(lines)


def _meta(args) -> dict:
    return {
        "camera": args.camera, "lens": args.lens, "source": args.source, "wavelength_nm": args.wavelength,
        "medium_index": args.medium_index, "recalibration_days": _recal_days(args),
    }


def _recal_days(args) -> int | None:
    """The interval in days the profile keeps, from --recal-months (a month = 365.25/12 days) or the old
    --recal-days."""
    from ..errors import InputError

    months, days = getattr(args, "recal_months", None), getattr(args, "recal_days", None)
    if months is not None and days is not None:
        raise InputError("give the re-calibration interval once: --recal-months MONTHS")
    if months is not None:
        if not 1 <= months <= 120:
            raise InputError(f"re-calibration interval must be 1-120 months, got {months}")
        return int(round(months * 365.25 / 12))
    return days


def run_add(args) -> int:
    from ..calibration import profiles as P
    from ..errors import InputError

    P.check_name(args.name)
    if args.source and args.wavelength:
        raise InputError("give either --source or --wavelength, not both")
    if args.name in P.names() and not args.replace:
        raise InputError(f"bench '{args.name}' exists already; add --replace to replace its scale (the old one "
                         "is kept in its history)")
    entry = P.hand_entry(args.pixel_size, args.pixel_size_u, args.pixel_size_y, args.pixel_size_y_u,
                         operator=args.operator, date=args.calibrated, note=args.note)
    prof = P.record_calibration(args.name, entry, **_meta(args))
    if args.json:
        print(json.dumps(prof.to_dict(), indent=2, ensure_ascii=False))
    else:
        print(format_profile(prof))
    return 0


def run_edit(args) -> int:
    from ..calibration import profiles as P
    from ..errors import InputError

    if args.source and args.wavelength:
        raise InputError("give either --source or --wavelength, not both")
    meta = _meta(args)
    meta["notes"] = args.note
    prof = P.update(args.name, **meta)
    if args.rename:
        prof = P.rename(args.name, args.rename)
    print(format_profile(prof))
    return 0


def run_remove(args) -> int:
    from ..calibration import profiles as P

    gone = P.remove(args.name)
    print(f"Removed bench profile '{gone.name}' (calibrated {gone.calibrated or '-'}).")
    return 0
