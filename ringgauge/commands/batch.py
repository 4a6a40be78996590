"""``ringgauge batch``: analyse a lot's images in parallel, record each one, and summarise the lot."""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path

from ..errors import InputError
from ._help import ExampleFormatter
from ._records_common import add_db_argument, add_meta_arguments, meta_from_args, open_from_args


def register(sub) -> None:
    from .analyze import add_setup_arguments

    p = sub.add_parser(
        "batch", help="analyse every image of a lot in parallel and record each result",
        description=(
            "Analyse every image in FOLDER with the same bench set-up, on all cores, recording each result (or "
            "the reason an image failed) in the records store as it finishes. Run the same command again after "
            "an interruption: images the lot already holds (same SHA-256) are skipped. Each image's file name "
            "(without its ending) becomes the lens serial. Ends with the lot summary: counts by verdict, mean "
            "and spread of radius and power, Cp/Cpk against the tolerance, and an individuals control chart."
        ),
        formatter_class=ExampleFormatter,
        epilog="Example: ringgauge batch lot-0042/ --lot L-0042 --part PCX-25-50 --source mercury-e "
               "--bench bench-2 --tolerance '3/2(0.5)' --test-diameter 20",
    )
    p.add_argument("folder", metavar="FOLDER", help="folder holding the lot's images (PNG, TIFF, JPEG)")
    add_setup_arguments(p)
    add_meta_arguments(p, lot_required=False, serial=False)
    g = p.add_argument_group("lot run")
    g.add_argument("--lot-sheet", metavar="FILE.json",
                   help="the lot's details, set-up and tolerances (default: lot.json in FOLDER if there); "
                        "options given here override it — fields in the README")
    g.add_argument("--workers", type=int, metavar="N",
                   help=f"parallel analyses (default: all {os.cpu_count() or 1} cores)")
    g.add_argument("--recursive", action="store_true", help="also take images from sub-folders")
    g.add_argument("--retry-failed", action="store_true",
                   help="analyse again the images that failed last time (the new record supersedes the failure)")
    g.add_argument("--chart", metavar="FILE.png",
                   help="where to write the control chart (default: <lot>-control-chart.png here)")
    g.add_argument("--report", metavar="FILE.pdf", help="also issue the lot report as a PDF")
    g.add_argument("--json", action="store_true", help="print the lot summary as JSON")
    g.add_argument("--quiet", action="store_true", help="no progress bar")
    add_db_argument(p)
    p.set_defaults(func=run)
    from ._setup import track_given

    track_given(p)  # the lot sheet fills only what the command line left out


def _radius_limits(setup):
    from ..conformity import parse_radius_tolerance

    if not setup.radius_tolerance:
        return None
    t = parse_radius_tolerance(setup.radius_tolerance)
    return (t.lower, t.upper)


def _safe(name: str) -> str:
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in name)


def run(args) -> int:
    from ..records.batch import find_images, run_lot
    from ..certificates import power_limits_from_tolerance
    from ..records.lot import chart_png, summarise_lot
    from ..records.store import RecordFilter
    from .analyze import setup_from_args

    from ..records.lotsheet import find_sheet, read_sheet
    from ._setup import apply_sheet

    if args.workers is not None and args.workers < 1:
        raise InputError("--workers must be at least 1")
    sheet_path = find_sheet(args.folder, getattr(args, "lot_sheet", None))
    if sheet_path is not None:
        used = apply_sheet(args, read_sheet(sheet_path), getattr(args, "_given", set()))
        print(f"lot sheet {sheet_path}: {len(used)} field(s) used", file=sys.stderr)
    if not args.lot or not args.lot.strip():
        raise InputError("give the lot name: --lot LOT (or \"lot\" in the lot sheet)")
    setup, warnings = setup_from_args(args)
    for w in warnings:
        print(f"ringgauge: warning: {w}", file=sys.stderr)
    images = find_images(args.folder, recursive=args.recursive)
    meta = meta_from_args(args)
    from ..settings import check_target, dumps_json

    # output files are checked before the lot runs (a folder given as --chart used to fail after the records)
    check_target(Path(args.chart) if args.chart else Path(f"{_safe(meta.lot)}-control-chart.png"), "--chart")
    if args.report:
        check_target(args.report, "--report")
    with open_from_args(args) as store:
        print(f"lot {meta.lot}: {len(images)} image(s) in {args.folder}; records store {store.where}", file=sys.stderr)
        run_ = run_lot(store, images, setup, meta, workers=args.workers, retry_failed=args.retry_failed,
                       progress=not args.quiet, warnings=warnings)
        records = store.find(RecordFilter(lot=meta.lot), with_result=False)
        limits = power_limits_from_tolerance(setup.tolerance, setup.wavelength_nm)
        radius_limits = _radius_limits(setup)
        summary = summarise_lot(records, meta.lot, power_limits=limits, radius_limits=radius_limits)
        chart = Path(args.chart) if args.chart else Path(f"{_safe(meta.lot)}-control-chart.png")
        chart_written = False
        if summary.charts:
            chart_png(summary.charts, chart, title=f"Lot {meta.lot} — individuals chart")
            chart_written = True
        report = None
        if args.report and not run_.interrupted:
            from ..certificates import issue_lot_report
            from ..shop import load_shop

            doc, path = issue_lot_report(store, meta.lot, args.report, load_shop(), tolerance=setup.tolerance,
                                         radius_limits=radius_limits)
            report = (doc.number, str(path))
    if args.json:
        out = {"run": {"images": run_.images, "recorded": run_.recorded, "failed": run_.failed,
                       "skipped": run_.skipped, "interrupted": run_.interrupted, "elapsed_s": run_.elapsed_s},
               "summary": summary.to_dict(), "chart": str(chart) if chart_written else None,
               "report": None if report is None else {"number": report[0], "path": report[1]}}
        print(dumps_json(out, what="the lot summary"))
    else:
        print(_summary_text(run_, summary, chart if chart_written else None, report))
    if run_.interrupted:
        print(f"ringgauge: interrupted — {run_.recorded} image(s) recorded in this run, {run_.remaining} left; "
              "run the same command again to carry on", file=sys.stderr)
        return 130
    return 0


def _summary_text(run_, summary, chart, report) -> str:
    from ..records.lot import verdict_sort_key

    lines = [
        f"lot {summary.lot}: {run_.images} image(s) in the folder — {run_.recorded} recorded now "
        f"({run_.failed} failed), {run_.skipped} already recorded; {run_.elapsed_s:.1f} s",
        f"  records in the lot: {summary.n_records} — "
        + ", ".join(f"{k} {summary.counts[k]}" for k in sorted(summary.counts, key=verdict_sort_key)),
    ]
    if summary.radius_tolerance:
        from ..conformity import RULE_NAMES

        lines.append(f"  radius tolerance {summary.radius_tolerance}, decision rule: "
                     f"{RULE_NAMES.get(summary.decision_rule, 'differs between parts')}")
        lines.append("  radius verdicts: " + ", ".join(f"{k} {summary.radius_counts[k]}" for k in
                                                       sorted(summary.radius_counts, key=verdict_sort_key))
                     + f" — accepted {summary.accepted} of {summary.n_records}")
    from ..records.lot import fmt_fixed

    dec = {"mm": summary.decimals.get("radius", 3), "fringes": summary.decimals.get("power", 3)}
    for sp in (summary.radius, summary.power):
        if sp.n:
            d = dec[sp.unit]
            sd = "—" if sp.sd is None else fmt_fixed(sp.sd, d + 1, sp.unit)
            lines.append(f"  {sp.quantity}: mean {fmt_fixed(sp.mean, d, sp.unit)}, standard deviation {sd} "
                         f"(n = {sp.n})")
    for c in summary.capabilities:
        d = dec.get(c.unit, 3)
        cp = "—" if c.cp is None else f"{c.cp:.2f}"
        lo = "—" if c.lsl is None else fmt_fixed(c.lsl, d)
        hi = "—" if c.usl is None else fmt_fixed(c.usl, d)
        lines.append(f"  capability of {c.quantity} ({lo} to {hi} {c.unit}): Cp {cp}, Cpk {c.cpk:.2f}")
    for ch in summary.charts:
        d = dec.get(ch.unit, 3)
        flag = f"; {len(ch.out_of_limits)} point(s) outside the limits" if ch.out_of_limits else ""
        lines.append(f"  individuals chart of {ch.quantity}: centre {fmt_fixed(ch.centre, d, ch.unit)}, limits "
                     f"{fmt_fixed(ch.lcl, d)} to {fmt_fixed(ch.ucl, d, ch.unit)}{flag}")
    for n in summary.notes:
        lines.append(f"  note: {n}")
    if chart:
        lines.append(f"  control chart: {chart}")
    if report:
        lines.append(f"  lot report {report[0]}: {report[1]}")
    return "\n".join(lines)
