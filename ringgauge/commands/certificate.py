"""``ringgauge certificate``: certificates of records, lot reports, reprints and verification."""

from __future__ import annotations

import sys
from pathlib import Path

from ..errors import InputError, RinggaugeError
from ._options import number
from ._records_common import add_db_argument, db_target, open_from_args

USAGE = """ringgauge certificate RECORD_ID [--out FILE.pdf]      certificate of one inspection record
       ringgauge certificate --lot LOT [--out FILE.pdf]    lot report (statistics, control chart, all parts)
       ringgauge certificate --reprint NUMBER [--out ...]  lay out an issued document again
       ringgauge certificate verify FILE.pdf               check a certificate or lot report

Every certificate and lot report is signed with the shop's key when issued (see 'ringgauge shop').
'verify' checks the signature, that it covers the whole file, the signer, the embedded content, every printed
table cell, and (with the records store) the issued file, the records chain and the record."""


def register(sub) -> None:
    p = sub.add_parser(
        "certificate", help="PDF certificates of records, lot reports, and their verification",
        usage=USAGE,
        description="Issue a PDF certificate of an inspection record or a lot report, reprint an issued "
                    "document, or verify a PDF. The shop's details come from shop.json in the ringgauge "
                    "folder. A record's certificate is issued once; asking again reprints it (same number, same "
                    "content checksum) unless --new-issue is given.",
    )
    p.add_argument("target", nargs="*", metavar="RECORD_ID | verify FILE.pdf")
    p.add_argument("--lot", help="issue a lot report for this lot")
    p.add_argument("--reprint", metavar="NUMBER", help="reprint the issued document with this number")
    p.add_argument("--out", metavar="FILE.pdf", help="where to write the PDF (default: <number>.pdf here)")
    p.add_argument("--paper", choices=("A4", "Letter"), help="paper size (default: from shop.json, else A4)")
    p.add_argument("--approver", help="name printed in the approval field (default: from shop.json)")
    p.add_argument("--new-issue", action="store_true", help="issue a new certificate number instead of reprinting")
    p.add_argument("--tolerance", help="lot report: ISO 10110-5 tolerance for capability (default: the records')")
    p.add_argument("--radius-limits", nargs=2, type=number("--radius-limits", lo=-1e7, hi=1e7, unit="mm"),
                   metavar=("LSL_MM", "USL_MM"),
                   help="lot report: radius specification limits in mm, for Cp/Cpk of the radius")
    p.add_argument("--chart", metavar="FILE.png", help="lot report: also write the control chart as PNG")
    p.add_argument("--shop", metavar="FILE.json", help="shop details file (default: shop.json in the ringgauge folder)")
    add_db_argument(p)
    p.set_defaults(func=run)


def _out(args, number: str) -> Path:
    return Path(args.out) if args.out else Path(f"{number}.pdf")


def run(args) -> int:
    from ..shop import load_shop

    t = list(args.target)
    if t and t[0] == "verify":
        if len(t) != 2:
            raise InputError("usage: ringgauge certificate verify FILE.pdf")
        return run_verify(args, t[1])
    modes = sum(bool(x) for x in (t, args.lot, args.reprint))
    if modes != 1:
        raise InputError("give one of: a RECORD_ID, --lot LOT, --reprint NUMBER, or 'verify FILE.pdf'")
    if args.out and not args.out.lower().endswith(".pdf"):
        raise InputError(f"--out {args.out}: give a file name ending in .pdf")
    shop = load_shop(args.shop)
    from ..certificates import issue_certificate, issue_lot_report, reprint

    with open_from_args(args) as store:
        if t:
            if len(t) != 1 or not t[0].isdigit():
                raise InputError(f"expected one record id (a whole number), got {' '.join(t)}")
            # the default file name is the certificate number, known only once issued: write, then rename
            out = Path(args.out) if args.out else Path(f".ringgauge-certificate-{t[0]}.part.pdf")
            doc, path, again = issue_certificate(store, int(t[0]), out, shop, paper=args.paper,
                                                 approver=args.approver, new_issue=args.new_issue)
            if not args.out:
                path = out.replace(_out(args, doc.number))
            verb = "reprinted" if again else "issued"
            print(f"certificate {doc.number} {verb} for record {t[0]}: {path}")
            if again:
                print("(already issued earlier; same number and content — use --new-issue for a new certificate)",
                      file=sys.stderr)
        elif args.lot:
            tmp = Path(args.out) if args.out else Path(".ringgauge-lot-report.part.pdf")
            limits = tuple(args.radius_limits) if args.radius_limits else None
            doc, path = issue_lot_report(store, args.lot, tmp, shop, paper=args.paper, tolerance=args.tolerance,
                                         radius_limits=limits, approver=args.approver, chart_out=args.chart)
            if not args.out:
                path = tmp.replace(_out(args, doc.number))
            print(f"lot report {doc.number} issued for lot {args.lot}: {path}")
            if args.chart:
                print(f"control chart: {args.chart}")
        else:
            tmp = Path(args.out) if args.out else _out(args, args.reprint)
            doc, path = reprint(store, args.reprint, tmp, paper=args.paper or shop.get("paper") or "A4")
            print(f"{doc.kind} {doc.number} reprinted: {path}")
    return 0


def run_verify(args, file: str) -> int:
    from ..report.verify import verify_pdf

    store = None
    target = db_target(args)
    try:
        store = open_from_args(args) if (target or _default_store_exists()) else None
    except RinggaugeError as exc:
        print(f"  (records store not opened: {exc})")
        store = None
    try:
        v = verify_pdf(file, store)
    finally:
        if store is not None:
            store.close()
    print(f"{v.path}: {v.kind or 'document'} {v.number or '?'}, {v.pages} page(s), "
          f"{'signed' if v.signed else 'UNSIGNED'}")
    for ok, what in v.checks:
        print(f"  {'ok  ' if ok else 'FAIL'}  {what}")
    if v.checksum:
        print(f"  content checksum {v.checksum}")
    print(f"  file SHA-256 {v.file_sha256}")
    if store is None:
        print("  (no records store to compare with; give --db to check it was issued there)")
    if not v.ok:
        print(f"ringgauge: {file} did NOT verify (failed: {', '.join(dict.fromkeys(v.failed()))})", file=sys.stderr)
        return 1
    print("verified: signature valid and trusted" if v.signed else "verified (unsigned document, by the older checks)")
    return 0


def _default_store_exists() -> bool:
    from ..records.store import default_store_path

    return default_store_path().exists()
