"""Options the records, batch and certificate commands share: where the store is, and record metadata."""

from __future__ import annotations

import argparse
import os

from ._options import name_type, number
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
    g.add_argument("--lot", required=lot_required, type=name_type("the lot name", max_len=200),
                   help="lot or batch name")
    g.add_argument("--part", type=name_type("the part", max_len=200), help="part number")
    g.add_argument("--drawing", type=name_type("the drawing", max_len=200), help="drawing number and revision")
    g.add_argument("--surface", type=name_type("the surface", max_len=200), help="which surface (e.g. S1, S2)")
    if serial:
        g.add_argument("--serial", type=name_type("the serial", max_len=200), help="lens serial number")
    g.add_argument("--operator", type=name_type("the operator", max_len=200), help="who measured")
    g.add_argument("--customer", type=name_type("the customer", max_len=200), help="customer name")
    g.add_argument("--order", dest="order_ref", type=name_type("the order reference", max_len=200),
                   help="customer order reference")
    g.add_argument("--temperature", dest="temperature_c", type=number("--temperature", lo=-40, hi=80, unit="°C"),
                   metavar="DEG_C", help="room temperature at the bench, °C")
    g.add_argument("--notes", help="free text kept with the record")


def meta_from_args(args) -> RecordMeta:
    """The record details from parsed options (options not defined on the parser count as not given).

    Checked here, before any work is done (also values a lot sheet filled in): no control characters, bounded
    length (:func:`ringgauge.options.check_meta_fields`)."""
    from ..options import check_meta_fields

    values = {k: getattr(args, k, None) for k in (
        "part", "drawing", "surface", "lot", "serial", "operator", "customer", "order_ref", "temperature_c",
        "notes")}
    check_meta_fields(values)
    return RecordMeta(**values)
