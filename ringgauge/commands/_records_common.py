"""Options the records, batch and certificate commands share: where the store is, and record metadata."""

from __future__ import annotations

import argparse
import os

from ..records.store import RecordMeta

DB_HELP = ("records store: a SQLite file, or a postgresql://user@host/dbname URL for a store shared by "
           "several benches (default: $RINGGAUGE_DB, else records.sqlite in the ringgauge folder)")


def add_db_argument(parser: argparse.ArgumentParser) -> None:
    # SUPPRESS: given before or after a sub-action, the value is kept (a sub-parser default would erase it)
    parser.add_argument("--db", metavar="PATH|URL", default=argparse.SUPPRESS, help=DB_HELP)


def db_target(args) -> str | None:
    return getattr(args, "db", None) or os.environ.get("RINGGAUGE_DB") or None


def open_from_args(args):
    from ..records import open_store

    return open_store(db_target(args))


def add_meta_arguments(parser: argparse.ArgumentParser, *, lot_required: bool = False, serial: bool = True) -> None:
    group = parser.add_argument_group("part and inspection details (stored with each record)")

    class _G:  # skip an option another option group (e.g. the set-up options) already defines
        @staticmethod
        def add_argument(flag, **kw):
            if flag not in parser._option_string_actions:
                group.add_argument(flag, **kw)

    g = _G()
    g.add_argument("--lot", required=lot_required, help="lot or batch name")
    g.add_argument("--part", help="part number")
    g.add_argument("--drawing", help="drawing number and revision")
    g.add_argument("--surface", help="which surface (e.g. S1, S2)")
    if serial:
        g.add_argument("--serial", help="lens serial number")
    g.add_argument("--operator", help="who measured")
    g.add_argument("--customer", help="customer name")
    g.add_argument("--order", dest="order_ref", help="customer order reference")
    g.add_argument("--temperature", dest="temperature_c", type=float, metavar="DEG_C",
                   help="room temperature at the bench, °C")
    g.add_argument("--notes", help="free text kept with the record")


def meta_from_args(args) -> RecordMeta:
    """The record details from parsed options (options not defined on the parser count as not given)."""
    return RecordMeta(**{k: getattr(args, k, None) for k in (
        "part", "drawing", "surface", "lot", "serial", "operator", "customer", "order_ref", "temperature_c",
        "notes")})
