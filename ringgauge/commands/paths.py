"""``ringgauge paths``: where settings, records, keys and logs live.

It only reads; like every command, it adds a line to the log."""

from __future__ import annotations

import argparse
import os


def register(sub) -> None:
    p = sub.add_parser(
        "paths",
        help="show where settings, records, keys and logs are kept",
        description="Print where ringgauge keeps its files: the settings folder (RINGGAUGE_HOME when set), bench "
                    "profiles, the test-plate register, shop details, the records store (RINGGAUGE_DB or --db; "
                    "a server address is shown without its password), the records and signing keys, and the log "
                    "folder with the rotating log and the crash log. It changes nothing (like every command, it "
                    "adds a line to the log).",
    )
    p.add_argument("--db", metavar="PATH|URL", default=argparse.SUPPRESS,
                   help="show this records store instead of the default")
    p.add_argument("--json", action="store_true", help="print the paths as JSON")
    p.set_defaults(func=run)


def _state(p) -> str:
    if p is None:
        return ""
    try:
        if os.path.isdir(p):
            return "folder"
        if os.path.isfile(p):
            return "exists"
        return "not created yet" if not os.path.exists(p) else "not a regular file"
    except OSError:
        return "unreadable"


def collect(db: str | None = None) -> list[tuple[str, str, str]]:
    """(what, where, state) rows; an entry that cannot be worked out says why instead of failing."""
    from ..logs import CRASH_FILE, LOG_FILE, log_dir

    rows: list[tuple[str, str, str]] = []

    def add(what, fn, state=True):
        try:
            where = fn()
        except Exception as exc:  # noqa: BLE001 - a broken entry is reported, the rest still printed
            rows.append((what, f"(unavailable: {' '.join(str(exc).split())})", ""))
            return
        rows.append((what, str(where), _state(where) if state else ""))

    from .. import settings

    env_home = os.environ.get("RINGGAUGE_HOME")
    add("settings folder" + (" (RINGGAUGE_HOME)" if env_home else ""), settings.home)
    add("bench profiles", lambda: settings.path("benches.json"))
    add("test-plate register", lambda: settings.path("test_plates.json"))
    add("shop details", lambda: settings.path("shop.json"))
    add("records store" + (" (--db)" if db else " (RINGGAUGE_DB)" if os.environ.get("RINGGAUGE_DB") else ""),
        lambda: _store(db), state=False)
    rows[-1] = (rows[-1][0], rows[-1][1], _store_state(db))

    def records_key():
        from ..records.keys import key_path

        return key_path()

    def signing(which):
        from ..report import signing as sg

        return sg.key_path() if which == "key" else sg.cert_path()

    add("records key" + (" (RINGGAUGE_RECORDS_KEY)" if os.environ.get("RINGGAUGE_RECORDS_KEY") else ""), records_key)
    add("signing key", lambda: signing("key"))
    add("signing certificate", lambda: signing("cert"))
    add("log folder", lambda: log_dir(create=False))
    add("log file (rotating)", lambda: log_dir(create=False) / LOG_FILE)
    add("crash log", lambda: log_dir(create=False) / CRASH_FILE)
    return rows


def _store(db: str | None) -> str:
    target = db or os.environ.get("RINGGAUGE_DB") or None
    if target is None:
        from ..records.store import default_store_path

        return str(default_store_path())
    from ..records.address import parse_address

    return parse_address(target).display


def _store_state(db: str | None) -> str:
    target = db or os.environ.get("RINGGAUGE_DB") or None
    if target is None:
        try:
            from ..records.store import default_store_path

            return _state(default_store_path())
        except Exception:  # noqa: BLE001
            return ""
    try:
        from ..records.address import parse_address

        a = parse_address(target)
    except Exception:  # noqa: BLE001
        return ""
    return "server" if a.is_server else _state(a.path)


def run(args) -> int:
    rows = collect(getattr(args, "db", None))
    if args.json:
        from ..settings import dumps_json

        print(dumps_json({what: {"path": where, "state": state} for what, where, state in rows}))
        return 0
    width = max(len(w) for w, _, _ in rows)
    for what, where, state in rows:
        print(f"{what:<{width}}  {where}" + (f"  ({state})" if state else ""))
    return 0
