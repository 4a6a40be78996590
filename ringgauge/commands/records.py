"""``ringgauge records``: list, show, export and correct inspection records."""

from __future__ import annotations

import json
import sys
from pathlib import Path

from ..errors import InputError
from ._options import integer, number
from ..uncertainty import format_value
from ._records_common import add_db_argument, open_from_args


def register(sub) -> None:
    p = sub.add_parser(
        "records", help="list, show, export and correct inspection records",
        description="The inspection records store. Records are never edited or deleted: a correction is a new "
                    "record that supersedes the old one, with a reason.",
    )
    add_db_argument(p)
    rs = p.add_subparsers(dest="records_command", metavar="ACTION", parser_class=type(p))

    def filters(q):
        add_db_argument(q)
        g = q.add_argument_group("filters (combine with AND)")
        g.add_argument("--lot")
        g.add_argument("--part")
        g.add_argument("--operator")
        g.add_argument("--serial")
        g.add_argument("--verdict", help="pass, fail, conditional pass, conditional fail, not evaluated")
        g.add_argument("--status", choices=("ok", "failed"), help="ok = analysed, failed = analysis failed")
        g.add_argument("--since", metavar="DATE", help="from this UTC date (YYYY-MM-DD) or date-time")
        g.add_argument("--until", metavar="DATE", help="up to and including this UTC date or date-time")
        g.add_argument("--all", dest="include_superseded", action="store_true",
                       help="include records that were superseded by a correction")
        g.add_argument("--limit", type=int, metavar="N", help="at most N records")

    q = rs.add_parser("list", help="list records (newest corrections only, unless --all)")
    filters(q)
    q.add_argument("--json", action="store_true", help="print JSON instead of a table")
    q.set_defaults(func=run_list)

    q = rs.add_parser("show", help="show one record in full, with its correction history")
    add_db_argument(q)
    q.add_argument("record_id", type=integer("RECORD_ID", lo=1, hi=2**63 - 1), metavar="RECORD_ID")
    q.add_argument("--json", action="store_true", help="print the record as JSON (with the full result)")
    q.set_defaults(func=run_show)

    q = rs.add_parser("export", help="export records as CSV or JSON")
    filters(q)
    q.add_argument("--format", choices=("csv", "json"), default=None,
                   help="csv (one row per record) or json (full records); default from --out's ending, else csv")
    q.add_argument("--csv", dest="format", action="store_const", const="csv", help="same as --format csv")
    q.add_argument("--json", dest="format", action="store_const", const="json", help="same as --format json")
    q.add_argument("--out", metavar="FILE", help="write to FILE instead of standard output")
    q.set_defaults(func=run_export)

    q = rs.add_parser("supersede", help="correct a record: append a new record that replaces it, with a reason",
                      description="Append a corrected copy of a record. Give the reason and what changes: "
                                  "details (serial, lot, ...) and/or a new measurement: --reanalyse measures the "
                                  "record's image again with its bench set-up (--image names another image), "
                                  "--result takes a result file written and sealed by 'ringgauge analyze --out'. "
                                  "A result ringgauge did not seal (typed or edited by hand) is refused unless "
                                  "--manual is given; it is then kept as a MANUAL ENTRY, shown as such by "
                                  "'records show' and on the certificate.")
    add_db_argument(q)
    q.add_argument("record_id", type=integer("RECORD_ID", lo=1, hi=2**63 - 1), metavar="RECORD_ID")
    q.add_argument("--reason", required=True, help="why the record is corrected (kept with the correction)")
    for name in ("lot", "part", "drawing", "surface", "serial", "operator", "customer"):
        q.add_argument(f"--{name}", help=f"corrected {name}")
    q.add_argument("--order", dest="order_ref", help="corrected order reference")
    q.add_argument("--temperature", dest="temperature_c", type=number("--temperature", lo=-40, hi=80, unit="°C"),
                   metavar="DEG_C", help="corrected temperature")
    q.add_argument("--notes", help="corrected notes")
    q.add_argument("--result", metavar="FILE.json", help="a new result written by 'ringgauge analyze --out FILE.json'")
    q.add_argument("--reanalyse", action="store_true", help="measure the record's image again with its set-up")
    q.add_argument("--image", metavar="PATH", help="with --reanalyse: measure this image instead of the stored one")
    q.add_argument("--manual", action="store_true",
                   help="accept a --result ringgauge did not seal, kept and shown as a manual (hand-typed) entry")
    q.set_defaults(func=run_supersede)

    q = rs.add_parser("check", help="walk the records' hash chain: finds altered, deleted, inserted, reordered or "
                                    "forged records, damaged JSON, and disabled protection",
                      description="Check the whole store: every row against the hash chain sealed with the shop's "
                                  "records key, every record against its own checksum, the append-only triggers, "
                                  "and the end of the chain against the one this computer last wrote. Names every "
                                  "problem; exit status 1 when there is one.")
    add_db_argument(q)
    q.set_defaults(func=run_check)

    q = rs.add_parser("init-server", help="set up a PostgreSQL store: an owner role holds the tables, the benches' "
                                          "login may only insert and read",
                      description="Run once by the database administrator, with --db naming the database as a "
                                  "login that may create roles. Creates (or repairs) the owner role that holds the "
                                  "tables and their append-only triggers and the benches' login role with INSERT "
                                  "and SELECT only, brings the schema up to date as the owner, re-enables any "
                                  "disabled trigger, and binds the store to this ringgauge folder's records key. "
                                  "The bench password is read from RINGGAUGE_BENCH_PASSWORD (or none: set it "
                                  "yourself). --print-sql prints the statements instead of running them.")
    add_db_argument(q)
    q.add_argument("--owner", default="ringgauge_owner", metavar="ROLE", help="owner role (default ringgauge_owner)")
    q.add_argument("--bench", default="ringgauge_bench", metavar="ROLE", help="benches' login (default ringgauge_bench)")
    q.add_argument("--print-sql", action="store_true", help="print the SQL script, run nothing")
    q.set_defaults(func=run_init_server)

    q = rs.add_parser("lots", help="list the lots in the store with their record counts")
    add_db_argument(q)
    q.set_defaults(func=run_lots)

    p.set_defaults(func=lambda a: (p.print_help(sys.stderr), 2)[1])


def _filter(args):
    from ..records import RecordFilter

    if args.limit is not None and args.limit <= 0:
        raise InputError("--limit must be a positive number of records")
    return RecordFilter(lot=args.lot, part=args.part, operator=args.operator, serial=args.serial,
                        verdict=args.verdict, status=args.status, since=args.since, until=args.until,
                        include_superseded=args.include_superseded, limit=args.limit)


def _pm(value, U, unit):
    if value is None:
        return "—"
    return format_value(value, U, unit)


def _k2(u):
    """A stored standard uncertainty as the expanded U (k = 2) that the record pages print."""
    try:
        return 2.0 * float(u) if u else None
    except (TypeError, ValueError):
        return None


def _pixel_text(s: dict) -> str:
    pix = s.get("pixel_size_um") or []
    pixu = s.get("pixel_size_u_um") or []
    if not pix:
        return "—"
    ux = _k2(pixu[0] if pixu else None)
    if len(pix) > 1 and pix[1] != pix[0]:
        uy = _k2(pixu[1] if len(pixu) > 1 else None)
        return f"x {_pm(pix[0], ux, 'µm')}, y {_pm(pix[1], uy, 'µm')}"
    return _pm(pix[0], ux, "µm")


def _verdict(r) -> str:
    v = "ANALYSIS FAILED" if r.status == "failed" else (r.verdict or "not evaluated")
    return v + (f" (superseded by {r.superseded_by})" if r.superseded_by else "")


def run_list(args) -> int:
    with open_from_args(args) as store:
        recs = store.find(_filter(args), with_result=False)
    if args.json:
        json.dump([r.to_dict(with_result=False) for r in recs], sys.stdout, indent=2, ensure_ascii=False)
        sys.stdout.write("\n")
        return 0
    if not recs:
        print("no records match", file=sys.stderr)
        return 0
    from ..report.text import local_time

    head = ("id", "recorded (local)", "lot", "serial", "part", "verdict", "R ± U", "power ± U", "operator")
    rows = [(str(r.id), local_time(r.created_utc), r.meta.lot or "—", r.meta.serial or "—",
             r.meta.part or "—", _verdict(r), _pm(r.radius_mm, r.radius_U_mm, "mm"),
             _pm(r.power_fringes, r.power_U_fringes, "fringes"), r.meta.operator or "—") for r in recs]
    widths = [max(len(h), *(len(row[i]) for row in rows)) for i, h in enumerate(head)]
    print("  ".join(h.ljust(w) for h, w in zip(head, widths)).rstrip())
    for row in rows:
        print("  ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip())
    print(f"{len(recs)} record(s); U is the expanded uncertainty (k = 2 unless the record says otherwise)",
          file=sys.stderr)
    return 0


def run_show(args) -> int:
    with open_from_args(args) as store:
        rec = store.get(args.record_id)
        chain = store.history(rec.id)
        docs = store.documents(record_id=rec.id)
        sealed = store.check(only={"inspection": {rec.id}})
    problems = [f.message for f in sealed.findings if f.row_id == rec.id or f.table is None]
    if args.json:
        d = rec.to_dict()
        d["intact"] = rec.intact()
        d["chain_problems"] = problems
        d["manual_entry"] = rec.manual
        d["history"] = [{"id": r.id, "created_utc": r.created_utc, "supersede_reason": r.supersede_reason}
                        for r in chain]
        d["documents"] = [{"number": x.number, "issued_utc": x.issued_utc} for x in docs]
        json.dump(d, sys.stdout, indent=2, ensure_ascii=False)
        sys.stdout.write("\n")
        return 0
    from ..report.text import local_time

    m = rec.meta
    s = rec.setup or {}
    # a correction is recorded later than the part was measured: say which time is which
    when = (f"  recorded        {local_time(rec.created_utc)} (correction of record {chain[0].id}, measured "
            f"{local_time(chain[0].created_utc)}), ringgauge {rec.software_version}"
            if rec.supersedes is not None and chain and chain[0].id != rec.id else
            f"  measured        {local_time(rec.created_utc)}, ringgauge {rec.software_version}")
    lines = [
        f"record {rec.id}  ({rec.uid})",
        when,
        f"  part            {m.part or '—'}  drawing {m.drawing or '—'}  surface {m.surface or '—'}",
        f"  lot / serial    {m.lot or '—'} / {m.serial or '—'}",
        f"  operator        {m.operator or '—'}",
        f"  customer/order  {m.customer or '—'} / {m.order_ref or '—'}",
        f"  temperature     {'—' if m.temperature_c is None else f'{m.temperature_c:.1f} °C'}",
        f"  image           {rec.image_path or '—'}",
        f"  image SHA-256   {rec.image_sha256 or '—'}",
    ]
    if s:
        lines += [
            f"  source          {(s.get('source') or {}).get('name', '—')}, "
            f"λ = {_pm(s.get('wavelength_nm'), _k2(s.get('wavelength_u_nm')), 'nm')}",
            f"  pixel size      {_pixel_text(s)}, bench {s.get('bench') or '—'}"
            + (f", calibrated {s['bench_calibrated']}" if s.get("bench_calibrated") else ""),
            f"  medium index    "
            + (_pm(s.get('medium_index'), _k2(s.get('medium_index_u')), '').strip() if s.get('medium_index_u')
               else f"{s.get('medium_index', 1.0):g} (taken as exact)"),
            f"  test plate      {json.dumps(s.get('test_plate'), ensure_ascii=False) if s.get('test_plate') else '—'}",
            f"  tolerance       {s.get('tolerance') or '—'}",
        ]
    if rec.status == "failed":
        lines.append(f"  ANALYSIS FAILED {rec.failure_reason}")
    else:
        lines += [
            f"  verdict         {rec.verdict or 'not evaluated'}",
            f"  radius          {_pm(rec.radius_mm, rec.radius_U_mm, 'mm')}",
            f"  power           {_pm(rec.power_fringes, rec.power_U_fringes, 'fringes')}",
        ]
    from ..records.store import ORIGIN_TEXT

    lines.append(f"  origin          {ORIGIN_TEXT.get(rec.origin, rec.origin)}")
    lines.append(f"  integrity       {'intact (checksum matches)' if rec.intact() else 'ALTERED: checksum does not match'}"
                 + ("; sealed in the records chain" if not problems else ""))
    for p in problems:
        lines.append(f"  CHAIN           {p}")
    if len(chain) > 1:
        lines.append("  history:")
        for r in chain:
            mark = "→" if r.id == rec.id else " "
            why = f" — {r.supersede_reason}" if r.supersede_reason else " — original"
            lines.append(f"   {mark} record {r.id}  recorded {local_time(r.created_utc)}{why}")
    for x in docs:
        lines.append(f"  document        {x.kind} {x.number}, issued {local_time(x.issued_utc)}")
    lines.append("  ± values are expanded uncertainties U (k = 2); times are local")
    print("\n".join(lines))
    if rec.status == "ok" and rec.result:
        try:
            from ..report.text import format_result
        except ImportError:
            return 0
        try:
            text = format_result(rec.result)
        except Exception as exc:  # noqa: BLE001 - an old or partial result must not hide the record itself
            print(f"\n(the full result cannot be laid out as text: {type(exc).__name__}: {exc}; use --json)")
        else:
            print()
            print(text)
    return 0


def run_export(args) -> int:
    from ..records.export import check_out_path, export_to_file, write_csv, write_json

    fmt = args.format or ("json" if args.out and args.out.lower().endswith(".json") else "csv")
    if args.out:
        check_out_path(args.out)  # a folder or missing folder is refused before the store is read
    with open_from_args(args) as store:
        recs = store.find(_filter(args))
    writer = write_json if fmt == "json" else write_csv
    if args.out:
        out = Path(args.out)
        n = export_to_file(recs, out, fmt)
        print(f"exported {n} record(s) to {out} ({fmt.upper()})", file=sys.stderr)
    else:
        writer(recs, sys.stdout)
    return 0


def run_supersede(args) -> int:
    changes = {k: getattr(args, k) for k in ("lot", "part", "drawing", "surface", "serial", "operator",
                                              "customer", "order_ref", "temperature_c", "notes")
               if getattr(args, k) is not None}
    if args.result and args.reanalyse:
        raise InputError("give either --result FILE.json or --reanalyse, not both")
    if args.image and not args.reanalyse:
        raise InputError("--image goes with --reanalyse (measure that image again)")
    if args.manual and not args.result:
        raise InputError("--manual goes with --result FILE.json (a result typed or edited by hand)")
    result, origin, how = None, None, ""
    if args.result:
        from ..records.keys import check_seal

        p = Path(args.result)
        if p.exists() and not p.is_file():
            raise InputError(f"{p} is not a regular file; give the result file written by 'analyze --out'")
        try:
            result = json.loads(p.read_text(encoding="utf-8"))
        except FileNotFoundError:
            raise InputError(f"{p}: no such file") from None
        except (OSError, UnicodeDecodeError) as exc:
            raise InputError(f"{p}: cannot be read ({getattr(exc, 'strerror', None) or exc})") from None
        except json.JSONDecodeError as exc:
            raise InputError(f"{p}: not valid JSON (line {exc.lineno}: {exc.msg})") from None
        if not isinstance(result, dict) or "setup" not in result or "image" not in result:
            raise InputError(f"{p}: not a ringgauge result (expected the JSON of 'ringgauge analyze --out')")
        from ..result import AnalysisResult

        try:  # every stored result must read back as a typed result, a hand-edited one too
            AnalysisResult.from_dict({k: v for k, v in result.items() if k != "ringgauge_seal"})
        except (KeyError, TypeError, ValueError, AttributeError, IndexError) as exc:
            raise InputError(f"{p}: not a whole ringgauge result ({type(exc).__name__}: {exc}); start from the JSON "
                             "of 'ringgauge analyze --out'") from None
        why = check_seal(result)
        if why is None:
            origin, how = "sealed result", "new result (sealed by ringgauge)"
        elif args.manual:
            origin, how = "manual", "MANUAL ENTRY (typed or edited by hand)"
        else:
            raise InputError(f"{p} is not accepted as a measurement: {why}. Re-measure with --reanalyse, or keep "
                             "it as a hand-typed value with --manual (flagged as a manual entry)")
        from ..records.keys import SEAL_KEY

        result = {k: v for k, v in result.items() if k != SEAL_KEY}
    if not changes and result is None and not args.reanalyse:
        raise InputError("nothing to correct: give the corrected details (e.g. --serial), --reanalyse, or "
                         "--result FILE.json")
    with open_from_args(args) as store:
        if args.reanalyse:
            from ..records.reanalyse import reanalyse

            old = store.get(args.record_id)
            result, note = reanalyse(old, args.image)
            origin, how = "re-analysed", f"measured again ({note})"
        new = store.supersede(args.record_id, args.reason, meta_changes=changes, result=result, origin=origin)
    what = ", ".join([f"{k} = {v}" for k, v in changes.items()] + ([how] if how else []))
    print(f"record {new.id} supersedes record {args.record_id} ({what}); reason: {args.reason}")
    if new.manual:
        print(f"record {new.id} is a MANUAL ENTRY: its results were not measured by ringgauge, and its "
              "certificate will say so", file=sys.stderr)
    return 0


def run_check(args) -> int:
    with open_from_args(args) as store:
        rep = store.check()
        where = store.where
    for f in rep.findings:
        print(f.message if f.message.startswith(("record ", "issued ")) else f"{f.kind}: {f.message}")
    for n in rep.notes:
        print(f"note: {n}")
    bad = rep.bad_records()
    print(f"{rep.records} record(s) checked in {where}: {rep.records - len(bad)} intact, {len(bad)} altered; "
          f"{rep.documents} issued document(s); chain of {rep.entries} entries "
          + ("intact" if rep.ok else f"— {len(rep.findings)} problem(s)"))
    return 0 if rep.ok else 1


def run_init_server(args) -> int:
    from ..records.server import init_server, init_sql
    from ._records_common import db_target

    target = db_target(args)
    if args.print_sql:
        print(init_sql(args.owner, args.bench))
        return 0
    if not target:
        raise InputError("give the PostgreSQL database: --db postgresql://ADMIN@HOST/DBNAME (or set RINGGAUGE_DB)")
    from ..records.store import is_server_url

    if not is_server_url(target):  # a SQLite file has no roles: put back any missing protection
        from ..records.server import repair_sqlite

        for line in repair_sqlite(target):
            print(line)
        return 0
    for line in init_server(target, args.owner, args.bench):
        print(line)
    return 0


def run_lots(args) -> int:
    with open_from_args(args) as store:
        lots = store.lots()
    if not lots:
        print("no lots in the store", file=sys.stderr)
        return 0
    width = max(3, *(len(str(lot)) for lot, _ in lots))
    print(f"{'lot':{width}s}  records")
    for lot, n in lots:
        print(f"{str(lot):{width}s}  {n:7d}")
    return 0
