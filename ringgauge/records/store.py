"""The inspection store: append-only inspection records and issued documents, in SQLite or PostgreSQL.

One code path serves both databases; :class:`_Dialect` holds the few statements that differ (identity
columns, the triggers that refuse UPDATE and DELETE, parameter markers, locking). Every write is one
transaction: a crash or a kill between two records loses nothing that was committed and leaves nothing half
written.

Records are never edited or deleted. A correction is a new record that names the record it supersedes and
why; the old one stays, and listings show only the current end of each chain unless asked for history.
The schema carries its version; :data:`MIGRATIONS` brings an older store up to date when it is opened, and a
store newer than this ringgauge is refused.

Tamper evidence (schema 3). Triggers refuse UPDATE, DELETE and (SQLite) an INSERT that would replace a row,
but someone with the database file or the owner's login can drop them. So every row written also gets an
entry in the ``chain`` table, in the same transaction: the SHA-256 of the whole stored row, the hash of the
previous entry, and an HMAC-SHA256 of both made with the shop's records key (:mod:`.keys`, a secret file in the
ringgauge folder). :meth:`Store.check` walks the chain and names every altered, deleted, inserted or
reordered row, every forged or missing entry, damaged JSON, and missing or disabled triggers; the ringgauge
folder also keeps the last chain head each computer wrote (``chain-heads.json``), so cutting records off the
end of the chain is found too. On opening, a store whose append-only triggers are missing or disabled is
read-only until its owner repairs it.
"""

from __future__ import annotations

import hashlib
import json
import os
import sqlite3
import uuid
from contextlib import contextmanager
from dataclasses import asdict, dataclass, field, fields, replace
from datetime import datetime, timezone
from pathlib import Path
from functools import cached_property
from typing import TYPE_CHECKING, Any, Iterator

from .. import __version__
from ..errors import InputError, RinggaugeError as RinggaugeErrorBase, StoreError
from . import keys as _keys

if TYPE_CHECKING:  # pragma: no cover
    from ..result import AnalysisResult

DEFAULT_STORE_NAME = "records.sqlite"

#: record metadata a user types in (all optional text except temperature)
META_FIELDS = ("part", "drawing", "surface", "lot", "serial", "operator", "customer", "order_ref")


def utc_now() -> str:
    """Current UTC time as ISO 8601 with microseconds and a ``Z`` (sorts as text)."""
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def canonical_json(obj: Any) -> str:
    """JSON with sorted keys and no spaces: the same object always gives the same bytes."""
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


def sha256_text(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


@dataclass(frozen=True)
class RecordMeta:
    """What the operator tells about the part: none of it is measured."""

    part: str | None = None
    drawing: str | None = None
    surface: str | None = None
    lot: str | None = None
    serial: str | None = None
    operator: str | None = None
    customer: str | None = None
    order_ref: str | None = None
    temperature_c: float | None = None
    notes: str | None = None

    def __post_init__(self):
        for name in META_FIELDS + ("notes",):
            v = getattr(self, name)
            if v is not None and not isinstance(v, str):
                raise InputError(f"{name} must be text, got {v!r}")
            if v is not None and len(v) > 200 and name != "notes":
                raise InputError(f"{name} is longer than 200 characters")
        if self.temperature_c is not None:
            t = float(self.temperature_c)
            if not -40.0 <= t <= 80.0:
                raise InputError(f"temperature {t} °C is outside -40 to 80 °C; give it in degrees Celsius")
            object.__setattr__(self, "temperature_c", t)

    def with_(self, **changes) -> "RecordMeta":
        return replace(self, **{k: v for k, v in changes.items() if v is not None})


@dataclass(frozen=True)
class InspectionRecord:
    """One stored inspection: who, what, when, with which bench, and the full result."""

    id: int
    uid: str
    created_utc: str
    status: str  # "ok" or "failed"
    meta: RecordMeta
    software_version: str
    image_name: str | None
    image_path: str | None
    image_sha256: str | None
    setup: dict | None
    result: dict | None
    verdict: str | None
    radius_mm: float | None
    radius_U_mm: float | None  # noqa: N815
    power_fringes: float | None
    power_U_fringes: float | None  # noqa: N815
    failure_reason: str | None
    supersedes: int | None
    supersede_reason: str | None
    content_sha256: str
    superseded_by: int | None = None
    #: False when read without the full result (listings): ``result`` is then None even for a good record
    has_result: bool = True
    #: where the result came from: "measured" (ringgauge analysed the image), "re-analysed" (a correction
    #: measured again), "sealed result" (a result file ringgauge wrote and sealed), "manual" (typed by hand);
    #: None for records written before origins were kept
    origin: str | None = None

    @property
    def manual(self) -> bool:
        return self.origin == "manual"

    @cached_property
    def analysis(self) -> AnalysisResult | None:
        """The stored result as a typed :class:`~ringgauge.result.AnalysisResult` (the JSON ``result`` stays the
        record's checksummed truth). None for a failed record, one read without its result, or a hand-made
        result that is not a whole analysis; a damaged analysis result raises :class:`InputError`."""
        from ..result import AnalysisResult  # numpy; listings do without it

        if self.status != "ok" or not self.has_result or not self.result:
            return None
        try:
            return AnalysisResult.from_dict(self.result)
        except (InputError, KeyError, TypeError, ValueError) as exc:
            if self.manual:
                return None
            raise InputError(f"record {self.id}: its stored result cannot be read ({exc})") from None

    @property
    def current(self) -> bool:
        return self.superseded_by is None

    def content(self) -> dict:
        """The fields the record checksum covers (everything but the database id and the chain link back)."""
        return _content(self.uid, self.created_utc, self.status, self.meta, self.software_version,
                        self.image_name, self.image_path, self.image_sha256, self.setup, self.result,
                        self.failure_reason, self.supersedes, self.supersede_reason, self.origin)

    def intact(self) -> bool:
        """True when the stored fields still give the checksum written with them, and the searchable copies
        of result fields (verdict, radius, power) still agree with the stored result."""
        if not self.has_result:
            raise ValueError("read the record with its result (find(..., with_result=True)) to check it")
        if sha256_text(canonical_json(self.content())) != self.content_sha256:
            return False
        cols = _columns(self.result, self.setup)
        return all(cols[k] == getattr(self, k) for k in ("verdict", "radius_mm", "radius_U_mm", "power_fringes",
                                                         "power_U_fringes"))

    def to_dict(self, *, with_result: bool = True) -> dict:
        d = {
            "id": self.id,
            "uid": self.uid,
            "created_utc": self.created_utc,
            "status": self.status,
            **asdict(self.meta),
            "software_version": self.software_version,
            "image_name": self.image_name,
            "image_path": self.image_path,
            "image_sha256": self.image_sha256,
            "verdict": self.verdict,
            "radius_mm": self.radius_mm,
            "radius_U_mm": self.radius_U_mm,
            "power_fringes": self.power_fringes,
            "power_U_fringes": self.power_U_fringes,
            "failure_reason": self.failure_reason,
            "supersedes": self.supersedes,
            "supersede_reason": self.supersede_reason,
            "superseded_by": self.superseded_by,
            "content_sha256": self.content_sha256,
            "origin": self.origin,
            "setup": self.setup,
        }
        if with_result:
            d["result"] = self.result
        return d


@dataclass(frozen=True)
class IssuedDocument:
    """A certificate or lot report as issued: its number and the exact content it prints."""

    id: int
    number: str
    kind: str  # "certificate" or "lot report"
    record_id: int | None
    lot: str | None
    issued_utc: str
    content: dict
    content_sha256: str


@dataclass(frozen=True)
class RecordFilter:
    """Which records to list; every field is optional and they combine with AND."""

    lot: str | None = None
    part: str | None = None
    operator: str | None = None
    verdict: str | None = None
    status: str | None = None
    serial: str | None = None
    since: str | None = None  # ISO date or date-time, UTC, inclusive
    until: str | None = None  # ISO date or date-time, UTC, inclusive (a bare date means the whole day)
    image_sha256: str | None = None
    include_superseded: bool = False
    limit: int | None = None


def _content(uid, created, status, meta, version, image_name, image_path, sha, setup, result, failure,
             supersedes, reason, origin=None) -> dict:
    out = {
        "uid": uid,
        "created_utc": created,
        "status": status,
        "meta": asdict(meta),
        "software_version": version,
        "image_name": image_name,
        "image_path": image_path,
        "image_sha256": sha,
        "setup": setup,
        "result": result,
        "failure_reason": failure,
        "supersedes": supersedes,
        "supersede_reason": reason,
    }
    if origin is not None:  # records from before origins were kept keep their checksum
        out["origin"] = origin
    return out


# ----------------------------------------------------------------------------------------------- dialects


class _Dialect:
    name = "?"
    identity = ""

    def sql(self, text: str) -> str:
        return text

    def append_only(self, table: str) -> list[str]:
        raise NotImplementedError

    def lock_key(self, cur, key: str) -> None:
        """Serialise writers that check-then-insert on the same key (a lot)."""

    def no_replace(self, table: str, unique: tuple[str, ...]) -> list[str]:
        """Statements refusing an INSERT that would take the place of an existing row (none needed)."""
        return []

    def guards(self, table: str, version: int = 99) -> list[str]:
        """Names of the triggers that keep ``table`` append-only (in a store of schema ``version``)."""
        raise NotImplementedError


class _SQLite(_Dialect):
    name = "sqlite"
    identity = "INTEGER PRIMARY KEY AUTOINCREMENT"

    def no_replace(self, table: str, unique: tuple[str, ...]) -> list[str]:
        # REPLACE INTO / INSERT OR REPLACE delete the clashing row first; SQLite fires delete triggers for that
        # only with recursive_triggers on, which a hand-opened connection does not set. A BEFORE INSERT
        # trigger runs before the conflict is resolved, so it refuses the clash on any connection.
        clash = " OR ".join(f"{c} = NEW.{c}" for c in unique)
        return [f"CREATE TRIGGER {table}_no_replace BEFORE INSERT ON {table} "
                f"WHEN EXISTS (SELECT 1 FROM {table} WHERE {clash}) "
                f"BEGIN SELECT RAISE(ABORT, 'append-only: {table} rows cannot be replaced'); END"]

    def guards(self, table: str, version: int = 99) -> list[str]:
        return [f"{table}_no_update", f"{table}_no_delete"] + \
            ([f"{table}_no_replace"] if table in _NO_REPLACE and version >= 3 else [])

    def append_only(self, table: str) -> list[str]:
        return [
            f"CREATE TRIGGER {table}_no_update BEFORE UPDATE ON {table} "
            f"BEGIN SELECT RAISE(ABORT, 'append-only: {table} rows cannot be changed'); END",
            f"CREATE TRIGGER {table}_no_delete BEFORE DELETE ON {table} "
            f"BEGIN SELECT RAISE(ABORT, 'append-only: {table} rows cannot be deleted'); END",
        ]


class _Postgres(_Dialect):
    name = "postgresql"
    identity = "BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY"

    def sql(self, text: str) -> str:
        return text.replace("?", "%s")

    def append_only(self, table: str) -> list[str]:
        return [
            "CREATE OR REPLACE FUNCTION ringgauge_refuse_change() RETURNS trigger LANGUAGE plpgsql AS $$ "
            "BEGIN RAISE EXCEPTION 'append-only: % rows cannot be changed or deleted', TG_TABLE_NAME; END $$",
            f"CREATE TRIGGER {table}_append_only BEFORE UPDATE OR DELETE ON {table} "
            "FOR EACH ROW EXECUTE FUNCTION ringgauge_refuse_change()",
            f"CREATE TRIGGER {table}_no_truncate BEFORE TRUNCATE ON {table} "
            "FOR EACH STATEMENT EXECUTE FUNCTION ringgauge_refuse_change()",
        ]

    def lock_key(self, cur, key: str) -> None:
        cur.execute("SELECT pg_advisory_xact_lock(hashtext(%s))", (key,))

    def guards(self, table: str, version: int = 99) -> list[str]:
        return [f"{table}_append_only", f"{table}_no_truncate"]


# --------------------------------------------------------------------------------------------- migrations


def _m1(d: _Dialect) -> list[str]:
    return [
        f"""CREATE TABLE inspection (
            id {d.identity},
            uid TEXT NOT NULL UNIQUE,
            created_utc TEXT NOT NULL,
            status TEXT NOT NULL CHECK (status IN ('ok', 'failed')),
            part TEXT, drawing TEXT, surface TEXT, lot TEXT, serial TEXT, operator TEXT,
            customer TEXT, order_ref TEXT, temperature_c DOUBLE PRECISION, notes TEXT,
            software_version TEXT NOT NULL,
            image_name TEXT, image_path TEXT, image_sha256 TEXT,
            source_key TEXT, wavelength_nm DOUBLE PRECISION, pixel_size_um DOUBLE PRECISION,
            pixel_size_u_um DOUBLE PRECISION, pixel_calibration TEXT, medium_index DOUBLE PRECISION,
            test_plate TEXT, tolerance TEXT,
            setup_json TEXT, result_json TEXT,
            verdict TEXT,
            radius_mm DOUBLE PRECISION, radius_U_mm DOUBLE PRECISION,
            power_fringes DOUBLE PRECISION, power_U_fringes DOUBLE PRECISION,
            failure_reason TEXT,
            supersedes BIGINT UNIQUE REFERENCES inspection(id),
            supersede_reason TEXT,
            content_sha256 TEXT NOT NULL,
            CHECK ((supersedes IS NULL) = (supersede_reason IS NULL)),
            CHECK ((status = 'failed') = (failure_reason IS NOT NULL))
        )""",
        "CREATE INDEX inspection_lot ON inspection (lot, image_sha256)",
        "CREATE INDEX inspection_part ON inspection (part)",
        "CREATE INDEX inspection_created ON inspection (created_utc)",
        *d.append_only("inspection"),
    ]


def _m2(d: _Dialect) -> list[str]:
    return [
        f"""CREATE TABLE issued_document (
            id {d.identity},
            number TEXT NOT NULL UNIQUE,
            kind TEXT NOT NULL CHECK (kind IN ('certificate', 'lot report')),
            record_id BIGINT REFERENCES inspection(id),
            lot TEXT,
            issued_utc TEXT NOT NULL,
            content_json TEXT NOT NULL,
            content_sha256 TEXT NOT NULL
        )""",
        "CREATE INDEX issued_document_record ON issued_document (record_id)",
        *d.append_only("issued_document"),
    ]


#: tables whose rows are chained, with the columns an INSERT must not clash on (SQLite REPLACE guard)
_NO_REPLACE = {"inspection": ("id", "uid"), "issued_document": ("id", "number"), "issued_file": ("id",),
               "chain": ("seq",), "store_info": ("name",)}
CHAINED = ("inspection", "issued_document", "issued_file")
GENESIS = "0" * 64


def _m3(d: _Dialect) -> list[str]:
    out = [
        "ALTER TABLE inspection ADD COLUMN origin TEXT",
        f"""CREATE TABLE issued_file (
            id {d.identity},
            number TEXT NOT NULL REFERENCES issued_document(number),
            file_sha256 TEXT NOT NULL,
            signed INTEGER NOT NULL,
            signer TEXT,
            written_utc TEXT NOT NULL
        )""",
        "CREATE INDEX issued_file_number ON issued_file (number)",
        """CREATE TABLE chain (
            seq BIGINT PRIMARY KEY,
            tbl TEXT NOT NULL,
            row_id BIGINT NOT NULL,
            row_hash TEXT NOT NULL,
            prev_hash TEXT NOT NULL,
            entry_hash TEXT NOT NULL,
            key_id TEXT NOT NULL,
            mac TEXT NOT NULL,
            legacy INTEGER NOT NULL,
            created_utc TEXT NOT NULL,
            UNIQUE (tbl, row_id)
        )""",
        "CREATE TABLE store_info (name TEXT PRIMARY KEY, value TEXT NOT NULL)",
    ]
    for t in ("issued_file", "chain", "store_info"):
        out += d.append_only(t)
    for t in ("inspection", "issued_document", "issued_file", "chain", "store_info"):
        out += d.no_replace(t, _NO_REPLACE[t])
    return out


#: (version, what it does, statements for a dialect); append new ones, never edit old ones
MIGRATIONS = (
    (1, "inspection records (append-only, supersede chains)", _m1),
    (2, "issued certificates and lot reports (append-only)", _m2),
    (3, "hash chain sealed with the shop's records key; record origins; issued files; REPLACE refused", _m3),
)
SCHEMA_VERSION = MIGRATIONS[-1][0]


# ----------------------------------------------------------------------------------------------- the store


def default_store_path() -> Path:
    from ..settings import path

    return path(DEFAULT_STORE_NAME)


def is_server_url(target: str | os.PathLike | None) -> bool:
    from .address import looks_like_server

    return looks_like_server(target)


def describe_target(target: str | os.PathLike | None) -> str:
    """The store's location for messages, with any password hidden (``user@host:port/dbname``)."""
    from .address import display

    return display(target)


def open_store(target: str | os.PathLike | None = None, *, migrate_to: int | None = None) -> "Store":
    """Open (and create or upgrade) the store at ``target``.

    ``None`` is ``RINGGAUGE_DB`` when set, else the default SQLite file in the user's ringgauge folder; a server
    address (``postgresql://`` URL, key=value string, ``service=NAME``) is a shared server; a SQLite path
    otherwise (see :mod:`ringgauge.records.address`; anything else is refused). The password of a server
    address is used to connect and never shown. ``migrate_to`` stops the upgrade at a schema version (tests).
    """
    from .address import parse_address

    if target is None:
        target = os.environ.get("RINGGAUGE_DB") or None
    addr = parse_address(target, option="--db" if target is None or not os.environ.get("RINGGAUGE_DB")
                         or target != os.environ.get("RINGGAUGE_DB") else "RINGGAUGE_DB")
    if addr.is_server:
        try:
            import psycopg
        except ImportError:  # pragma: no cover - psycopg is a declared dependency
            raise StoreError("PostgreSQL support needs the 'psycopg' package; reinstall ringgauge") from None
        try:
            conn = psycopg.connect(addr.conninfo, autocommit=True, connect_timeout=10)
        except psycopg.Error as exc:
            first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise StoreError(f"cannot reach the records server {addr.display}: {addr.scrub(first)}") from None
        store = Store(conn, _Postgres(), addr.display)
    else:
        p = addr.path
        if p.is_dir():
            raise StoreError(f"{p} is a folder; give the records store as a file, e.g. {p / DEFAULT_STORE_NAME}")
        if not p.parent.exists():
            raise StoreError(f"cannot create the records store {p}: folder {p.parent} does not exist")
        try:
            conn = sqlite3.connect(str(p), timeout=30.0, isolation_level=None)
            conn.execute("PRAGMA journal_mode=WAL")
            conn.execute("PRAGMA synchronous=FULL")
            conn.execute("PRAGMA foreign_keys=ON")
            # a REPLACE's implicit delete then meets the delete trigger on this connection too
            conn.execute("PRAGMA recursive_triggers=ON")
        except sqlite3.DatabaseError as exc:
            raise StoreError(f"{p} is not a ringgauge records store ({exc})") from None
        store = Store(conn, _SQLite(), str(p))
    import logging

    logging.getLogger("ringgauge.records").info("records store %s (%s)", store.where, store.dialect)
    try:
        store._migrate(migrate_to)
        store._version = store.schema_version()
        store._check_guards()
    except BaseException:
        store.close()
        raise
    return store


class Store:
    """An open inspection store. Use :func:`open_store`; close it (or use ``with``) when done."""

    def __init__(self, conn, dialect: _Dialect, where: str):
        self._conn = conn
        self._d = dialect
        self.where = where
        #: why this store may not be written (missing or disabled append-only triggers), or None
        self.write_refusal: str | None = None
        self._head: tuple[int, str] | None = None
        self._version = SCHEMA_VERSION

    # -- plumbing
    @property
    def dialect(self) -> str:
        return self._d.name

    def close(self) -> None:
        try:
            self._conn.close()
        except Exception:  # noqa: BLE001 - closing twice or after a server loss is harmless
            pass

    def __enter__(self) -> "Store":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def _errors(self):
        if self._d.name == "sqlite":
            return (sqlite3.Error,)
        import psycopg

        return (psycopg.Error,)

    @contextmanager
    def _tx(self) -> Iterator[Any]:
        """One transaction: everything inside commits together or not at all."""
        try:
            if self._d.name == "sqlite":
                cur = self._conn.cursor()
                cur.execute("BEGIN IMMEDIATE")
                try:
                    yield cur
                except BaseException:
                    self._conn.rollback()
                    raise
                self._conn.commit()
            else:
                with self._conn.transaction():
                    with self._conn.cursor() as cur:
                        yield cur
        except self._errors() as exc:
            msg = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise StoreError(f"records store {self.where}: {msg}") from None

    def _q(self, cur, sql: str, params=()):
        cur.execute(self._d.sql(sql), tuple(params))
        return cur

    def _read(self, sql: str, params=()) -> list[tuple]:
        try:
            cur = self._conn.cursor()
            try:
                cur.execute(self._d.sql(sql), tuple(params))
                return list(cur.fetchall())
            finally:
                cur.close()
        except self._errors() as exc:
            msg = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise StoreError(f"records store {self.where}: {msg}") from None

    # -- schema
    def _table_exists(self, name: str) -> bool:
        if self._d.name == "sqlite":
            rows = self._read("SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = ?", (name,))
        else:
            rows = self._read("SELECT 1 FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace "
                              "WHERE c.relname = ? AND n.nspname = current_schema() AND c.relkind = 'r'", (name,))
        return bool(rows)

    def schema_version(self) -> int:
        if not self._table_exists("schema_migration"):
            return 0
        rows = self._read("SELECT MAX(version) FROM schema_migration")
        return int(rows[0][0] or 0)

    def _migrate(self, upto: int | None) -> None:
        target = SCHEMA_VERSION if upto is None else upto
        have = self.schema_version()  # read first: a bench login may read but not create tables
        if have > SCHEMA_VERSION:
            raise StoreError(
                f"records store {self.where} has schema version {have}, newer than this ringgauge "
                f"({__version__}, schema {SCHEMA_VERSION}); upgrade ringgauge"
            )
        if have >= target:
            return
        try:
            with self._tx() as cur:
                self._d.lock_key(cur, "ringgauge schema")
                self._q(cur, "CREATE TABLE IF NOT EXISTS schema_migration (version INTEGER PRIMARY KEY, "
                             "description TEXT NOT NULL, applied_utc TEXT NOT NULL)")
            for version, what, make in MIGRATIONS:
                if version > target:
                    break
                with self._tx() as cur:
                    self._d.lock_key(cur, "ringgauge schema")
                    done = self._q(cur, "SELECT 1 FROM schema_migration WHERE version = ?", (version,)).fetchone()
                    if done:
                        continue
                    for stmt in make(self._d):
                        cur.execute(stmt)
                    if version == 3:
                        self._q(cur, "INSERT INTO store_info (name, value) VALUES ('store_uid', ?)",
                                (str(uuid.uuid4()),))
                        self._seal_legacy(cur)
                    self._q(cur, "INSERT INTO schema_migration (version, description, applied_utc) "
                                 "VALUES (?, ?, ?)", (version, what, utc_now()))
        except StoreError as exc:
            if "permission denied" in str(exc) or "must be owner" in str(exc):
                raise StoreError(f"records store {self.where} needs its schema brought to version {target} "
                                 "and this login may not change tables; ask the store's owner to run "
                                 "'ringgauge records init-server'") from None
            raise
        self._save_head()

    def _seal_legacy(self, cur) -> None:
        """Chain the rows written before the chain existed (marked legacy: edits before today are not provable)."""
        for table in ("inspection", "issued_document"):
            for (rid,) in self._q(cur, f"SELECT id FROM {table} ORDER BY id").fetchall():
                self._chain(cur, table, int(rid), legacy=True)

    def _check_guards(self) -> None:
        """Refuse writes (not reads) when an append-only trigger is missing or disabled."""
        problems = self.guard_problems()
        if problems:
            self.write_refusal = (f"records store {self.where} is not protected ({problems[0]}); writing refused "
                                  "until its owner restores it with 'ringgauge records init-server' and runs "
                                  "'ringgauge records check'")

    def guard_problems(self) -> list[str]:
        """Each append-only trigger that is missing or disabled, in words."""
        tables = [t for t in ("inspection", "issued_document", "issued_file", "chain", "store_info")
                  if self._table_exists(t)]
        out = []
        for t in tables:
            want = self._d.guards(t, self._version)
            if self._d.name == "sqlite":
                have = {r[0]: "O" for r in self._read(
                    "SELECT name FROM sqlite_master WHERE type = 'trigger' AND tbl_name = ?", (t,))}
            else:
                have = {r[0]: r[1] for r in self._read(
                    "SELECT t.tgname, t.tgenabled FROM pg_trigger t JOIN pg_class c ON c.oid = t.tgrelid "
                    "JOIN pg_namespace n ON n.oid = c.relnamespace WHERE c.relname = ? "
                    "AND n.nspname = current_schema() AND NOT t.tgisinternal", (t,))}
            for g in want:
                state = have.get(g)
                if isinstance(state, bytes):
                    state = state.decode()
                if state is None:
                    out.append(f"append-only trigger {g} on {t} is missing")
                elif state not in ("O", "A"):
                    out.append(f"append-only trigger {g} on {t} is disabled")
        return out

    # -- the chain
    def _store_info(self, cur=None) -> dict:
        if not self._table_exists("store_info"):
            return {}
        sql = "SELECT name, value FROM store_info"
        rows = self._q(cur, sql).fetchall() if cur is not None else self._read(sql)
        return {r[0]: r[1] for r in rows}

    def _write_key(self, cur) -> bytes:
        """The records key for a write, checked against the key the store was sealed with."""
        if self.write_refusal:
            raise StoreError(self.write_refusal)
        info = self._store_info(cur)
        want = info.get("key_id")
        if want is None:
            key = _keys.load_key(create=True)
            self._q(cur, "INSERT INTO store_info (name, value) VALUES ('key_id', ?)", (_keys.key_id(key),))
            return key
        key = _keys.load_key()
        if key is None:
            raise StoreError(f"records store {self.where} is sealed with records key {want}, and this ringgauge "
                             f"folder has none ({_keys.key_path()}); copy the shop's records.key there "
                             "(owner-only permissions) before writing")
        if _keys.key_id(key) != want:
            raise StoreError(f"records store {self.where} is sealed with records key {want}, but "
                             f"{_keys.key_path()} is key {_keys.key_id(key)}; copy the shop's records.key there")
        return key

    def _row(self, cur, table: str, row_id: int) -> dict | None:
        c = self._q(cur, f"SELECT * FROM {table} WHERE id = ?", (row_id,))
        r = c.fetchone()
        if r is None:
            return None
        return {d[0].lower(): v for d, v in zip(c.description, r)}

    def _chain(self, cur, table: str, row_id: int, *, legacy: bool = False) -> None:
        """Append the chain entry of a row just written (same transaction)."""
        key = self._write_key(cur)
        self._d.lock_key(cur, "ringgauge chain")
        row = self._row(cur, table, row_id)
        rh = row_hash(table, row)
        last = self._q(cur, "SELECT seq, entry_hash FROM chain ORDER BY seq DESC LIMIT 1").fetchone()
        seq = int(last[0]) + 1 if last else 1
        prev = last[1] if last else GENESIS
        eh = entry_hash(seq, table, row_id, rh, prev)
        self._q(cur, "INSERT INTO chain (seq, tbl, row_id, row_hash, prev_hash, entry_hash, key_id, mac, legacy, "
                     "created_utc) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (seq, table, row_id, rh, prev, eh, _keys.key_id(key), _keys.mac(key, eh), int(legacy), utc_now()))
        self._head = (seq, eh)

    def _save_head(self) -> None:
        """Remember, in this computer's ringgauge folder, the last chain entry it wrote to this store."""
        if self._head is None:
            return
        seq, eh = self._head
        self._head = None
        try:
            uid = self._store_info().get("store_uid")
            if not uid:
                return
            from ..settings import locked, path, read_json, write_json_atomic

            p = path(HEADS_FILE)
            with locked(p):
                heads = read_json(p, what="chain heads file", missing={})
                if not isinstance(heads, dict):
                    heads = {}
                old = heads.get(uid) or {}
                if not isinstance(old, dict) or int(old.get("seq") or 0) < seq:
                    heads[uid] = {"seq": seq, "entry_hash": eh, "store": self.where, "utc": utc_now()}
                    write_json_atomic(p, heads, what="chain heads file")
        except Exception:  # noqa: BLE001 - the record is committed; a lost head only weakens the tail check
            pass

    def check(self, only: dict[str, set[int]] | None = None) -> "CheckReport":
        """Walk the chain and every row; name each altered, deleted, inserted, reordered or forged one.

        ``only`` ({table: row ids}) checks the whole chain but reads only those rows (a document's own record
        when it is issued or verified), so a large store is not read in full each time."""
        rep = CheckReport(self.where)
        for g in self.guard_problems():
            rep.add(None, None, "UNPROTECTED", g)
        if not self._table_exists("chain"):
            rep.notes.append(f"schema {self.schema_version()}: no hash chain yet (open with this ringgauge to add it)")
        info = self._store_info()
        key = _keys.load_key()
        want = info.get("key_id")
        if key is None and want:
            rep.add(None, None, "UNVERIFIABLE", f"no records key in this ringgauge folder ({_keys.key_path()}); "
                    f"the seals (key {want}) cannot be checked")
        elif key is not None and want and _keys.key_id(key) != want:
            rep.add(None, None, "UNVERIFIABLE", f"this ringgauge folder's records key {_keys.key_id(key)} is not "
                    f"the store's key {want}; the seals cannot be checked")
            key = None
        entries = self._read("SELECT seq, tbl, row_id, row_hash, prev_hash, entry_hash, key_id, mac, legacy "
                             "FROM chain ORDER BY seq") if self._table_exists("chain") else []
        rep.entries = len(entries)
        expect, prev = 1, GENESIS
        by_row: dict[tuple[str, int], tuple] = {}
        last_id: dict[str, int] = {}
        legacy = 0
        for raw_entry in entries:
            try:
                seq, tbl, rid, rh, ph, eh, kid, mac, leg = raw_entry
                seq, rid = int(seq), int(rid)
                if not all(isinstance(x, str) for x in (tbl, rh, ph, eh)):
                    raise TypeError
            except (TypeError, ValueError):
                rep.add(None, None, "DAMAGED", f"chain entry {raw_entry[0]!r} is damaged (its fields are not what "
                        "ringgauge writes)")
                continue
            legacy += bool(leg)
            if seq != expect:
                rep.add(None, None, "MISSING", f"chain entries {expect}–{seq - 1} are missing (rows and their "
                        "entries were removed)" if seq > expect + 1 else f"chain entry {expect} is missing")
            elif ph != prev:
                rep.add(None, None, "BROKEN LINK", f"chain entry {seq} does not follow entry {seq - 1} "
                        "(an entry was inserted, replaced or reordered)")
            if entry_hash(seq, tbl, rid, rh, ph) != eh:
                rep.add(tbl, rid, "FORGED", f"chain entry {seq} was altered (its hash does not match its fields)")
            elif key is not None and not _keys.mac_ok(key, eh, mac):
                rep.add(tbl, rid, "FORGED", f"chain entry {seq} is not sealed by the shop's records key")
            if tbl in last_id and rid < last_id[tbl]:
                rep.add(tbl, rid, "REORDERED", f"{_label(tbl, rid)} is chained after {_label(tbl, last_id[tbl])}")
            last_id[tbl] = max(rid, last_id.get(tbl, rid))
            by_row[(tbl, rid)] = (seq, rh)
            expect, prev = seq + 1, eh
        if legacy:
            rep.notes.append(f"{legacy} row(s) written before the chain existed were sealed when the store was "
                             "upgraded; changes made before that cannot be detected")
        for tbl in CHAINED:
            if not self._table_exists(tbl):
                continue
            if only is not None and not only.get(tbl):
                continue
            c = self._conn.cursor()
            try:
                if only is not None:
                    ids = sorted(int(i) for i in only[tbl])
                    c.execute(self._d.sql(f"SELECT * FROM {tbl} WHERE id IN ({', '.join('?' * len(ids))}) "
                                          "ORDER BY id"), tuple(ids))
                else:
                    c.execute(f"SELECT * FROM {tbl} ORDER BY id")
                names = [d[0].lower() for d in c.description]
                rows = [dict(zip(names, r)) for r in c.fetchall()]
            finally:
                c.close()
            seen = set()
            for row in rows:
                try:
                    rid = int(row["id"])
                except (TypeError, ValueError):
                    rep.add(tbl, None, "DAMAGED", f"a row of {tbl} has a damaged id {row.get('id')!r}")
                    continue
                seen.add(rid)
                if tbl == "inspection":
                    rep.records += 1
                elif tbl == "issued_document":
                    rep.documents += 1
                reasons = _content_problems(tbl, row)
                sealed = by_row.get((tbl, rid))
                if entries and sealed is None:
                    rep.add(tbl, rid, "INSERTED", f"{_label(tbl, rid)} is not in the chain (inserted outside "
                            "ringgauge)")
                elif sealed is not None and row_hash(tbl, row) != sealed[1]:
                    reasons.insert(0, f"its stored row no longer matches chain entry {sealed[0]}")
                if reasons:
                    kind = "DAMAGED" if any("damaged JSON" in r for r in reasons) else "ALTERED"
                    rep.add(tbl, rid, kind, f"{_label(tbl, rid)}: {kind} — " + "; ".join(reasons))
            for (t, rid), (seq, _) in by_row.items():
                if t == tbl and rid not in seen and (only is None or rid in only[tbl]):
                    rep.add(tbl, rid, "DELETED", f"{_label(tbl, rid)} is in the chain (entry {seq}) but no longer "
                            "in the store")
        if entries:
            uid = info.get("store_uid")
            try:
                from ..settings import path, read_json

                heads = read_json(path(HEADS_FILE), what="chain heads file", missing={})
            except Exception:  # noqa: BLE001 - a damaged heads file is reported, not fatal
                heads = {}
                rep.notes.append("the chain heads file in the ringgauge folder is unreadable; the end of the chain "
                                 "was not checked against it")
            head = heads.get(uid) if isinstance(heads, dict) else None
            if isinstance(head, dict) and head.get("seq"):
                hseq = int(head["seq"])
                got = {int(e[0]): e[5] for e in entries}
                if hseq > max(got):
                    rep.add(None, None, "END REMOVED", f"this computer wrote chain entry {hseq} on "
                            f"{str(head.get('utc', ''))[:19]}, but the chain now ends at entry {max(got)}: the "
                            "newest rows were removed")
                elif hseq in got and got[hseq] != head.get("entry_hash"):
                    rep.add(None, None, "REWRITTEN", f"chain entry {hseq} differs from the one this computer "
                            "wrote: the chain was rebuilt")
        return rep

    # -- writing
    def add(
        self,
        meta: RecordMeta,
        result: dict | None,
        *,
        image_path: str | None = None,
        image_sha256: str | None = None,
        failure: str | None = None,
        setup: dict | None = None,
        once_per_lot: bool = False,
        origin: str = "measured",
    ) -> InspectionRecord:
        """Append one record: a result (``failure`` None) or a failed analysis with its reason.

        ``once_per_lot``: refuse (return the existing current record instead) when the lot already holds a
        current record of the same image checksum — the batch runner's guard against doubles.
        ``origin``: where the result came from (:data:`ORIGINS`); "manual" marks a value typed by hand.
        """
        return self._insert(meta, result, image_path=image_path, image_sha256=image_sha256, failure=failure,
                            setup=setup, once_per_lot=once_per_lot, origin=origin)

    def supersede(
        self,
        record_id: int,
        reason: str,
        *,
        meta_changes: dict | None = None,
        result: dict | None = None,
        failure: str | None = None,
        image_path: str | None = None,
        image_sha256: str | None = None,
        origin: str | None = None,
    ) -> InspectionRecord:
        """Append a correction of ``record_id``: a copy with the given changes, linked back, with a reason.

        Only the current end of a chain can be superseded; the store refuses a second correction of the same
        record (it names the record that already replaced it). ``origin`` says where a new ``result`` came
        from (:data:`ORIGINS`); a new result without one is stored as "manual" (nothing proves it was
        measured). A correction of details only keeps the old record's origin.
        """
        reason = (reason or "").strip()
        if not reason:
            raise InputError("a correction needs a reason (--reason \"...\")")
        old = self.get(record_id)
        if old.superseded_by is not None:
            raise StoreError(
                f"record {record_id} was already superseded by record {old.superseded_by}; correct that one"
            )
        unknown = set(meta_changes or {}) - {f.name for f in fields(RecordMeta)}
        if unknown:
            raise InputError(f"cannot change {', '.join(sorted(unknown))} in a correction")
        meta = replace(old.meta, **(meta_changes or {}))
        if result is None and failure is None:
            result, failure = old.result, old.failure_reason
            origin = old.origin
        elif origin is None:
            origin = "manual" if result is not None else "measured"
        return self._insert(
            meta, result, image_path=image_path or old.image_path,
            image_sha256=image_sha256 or (result or {}).get("image", {}).get("sha256") or old.image_sha256,
            failure=failure, setup=None if result else old.setup, supersedes=old.id, reason=reason, origin=origin,
        )

    def _insert(self, meta, result, *, image_path, image_sha256, failure, setup, once_per_lot=False,
                supersedes=None, reason=None, origin="measured") -> InspectionRecord:
        if self.write_refusal:
            raise StoreError(self.write_refusal)
        from ..options import check_meta_fields

        # a newline in a lot name split the output and the records listing: one check for every way in
        check_meta_fields({k: getattr(meta, k) for k in META_FIELDS + ("notes",)})
        if origin is not None and origin not in ORIGINS:
            raise InputError(f"unknown record origin {origin!r}; one of {', '.join(ORIGINS)}")
        if self._version < 3:
            origin = None  # an old schema (tests of upgrades) has no column for it
        if result is None and not failure:
            raise InputError("a record needs either a result or the reason the analysis failed")
        if result is not None and failure:
            raise InputError("a record has either a result or a failure reason, not both")
        if result is not None:
            try:
                result = json.loads(canonical_json(result))  # plain JSON types only; NaN refused
            except (TypeError, ValueError) as exc:
                raise InputError(f"the result cannot be stored as JSON ({exc})") from None
            img = result.get("image") or {}
            image_sha256 = image_sha256 or img.get("sha256")
            image_path = image_path or img.get("path")
            setup = result.get("setup") or setup
        if image_sha256 is not None and (len(image_sha256) != 64 or any(c not in "0123456789abcdef" for c in image_sha256)):
            raise InputError(f"image checksum must be 64 hex digits (SHA-256), got {image_sha256!r}")
        status = "failed" if failure else "ok"
        uid = str(uuid.uuid4())
        created = utc_now()
        image_name = os.path.basename(image_path) if image_path else None
        content = _content(uid, created, status, meta, __version__, image_name, image_path, image_sha256,
                           setup, result, failure, supersedes, reason, origin)
        checksum = sha256_text(canonical_json(content))
        cols = _columns(result, setup)
        row = {
            "uid": uid, "created_utc": created, "status": status, **asdict(meta),
            "software_version": __version__, "image_name": image_name, "image_path": image_path,
            "image_sha256": image_sha256, **cols,
            "setup_json": None if setup is None else canonical_json(setup),
            "result_json": None if result is None else canonical_json(result),
            "failure_reason": failure, "supersedes": supersedes, "supersede_reason": reason,
            "content_sha256": checksum,
        }
        if self._version >= 3:
            row["origin"] = origin
        names = list(row)
        sql = (f"INSERT INTO inspection ({', '.join(names)}) VALUES ({', '.join('?' for _ in names)}) "
               "RETURNING id")
        existing = None
        with self._tx() as cur:
            if once_per_lot and meta.lot is not None and image_sha256 is not None:
                self._d.lock_key(cur, f"lot {meta.lot}")
                hit = self._q(cur, f"SELECT id FROM inspection i WHERE lot = ? AND image_sha256 = ? AND {_CURRENT} "
                                   "ORDER BY id DESC LIMIT 1", (meta.lot, image_sha256)).fetchone()
                if hit:
                    existing = int(hit[0])
            if existing is None:
                new_id = int(self._q(cur, sql, [row[n] for n in names]).fetchone()[0])
                if self._version >= 3:
                    self._chain(cur, "inspection", new_id)
        if existing is not None:
            return self.get(existing)
        self._save_head()
        return self.get(new_id)

    # -- reading
    def get(self, record_id: int) -> InspectionRecord:
        try:
            rid = int(record_id)
        except (TypeError, ValueError):
            raise InputError(f"record id must be a whole number, got {record_id!r}") from None
        rows = self._read(f"SELECT {self._select()} FROM inspection i WHERE i.id = ?", (rid,))
        if not rows:
            raise StoreError(f"no record {rid} in {self.where}; list them with 'ringgauge records list'")
        return _record(rows[0])

    def _select(self, light: bool = False) -> str:
        sel = _SELECT_LIGHT if light else _SELECT
        return sel + (", i.origin" if self._version >= 3 else ", NULL")

    def history(self, record_id: int) -> list[InspectionRecord]:
        """The whole correction chain that ``record_id`` belongs to, oldest first."""
        rec = self.get(record_id)
        chain = [rec]
        while chain[0].supersedes is not None:
            chain.insert(0, self.get(chain[0].supersedes))
        while chain[-1].superseded_by is not None:
            chain.append(self.get(chain[-1].superseded_by))
        return chain

    def find(self, flt: RecordFilter = RecordFilter(), *, with_result: bool = True) -> list[InspectionRecord]:
        """Records matching ``flt``, oldest first. ``with_result=False`` leaves the (large) result JSON unread:
        listings of thousands of records stay fast."""
        where, params = [], []
        for col in ("lot", "part", "operator", "verdict", "status", "serial", "image_sha256"):
            v = getattr(flt, col)
            if v is not None:
                where.append(f"i.{col} = ?")
                params.append(v)
        if flt.since:
            where.append("i.created_utc >= ?")
            params.append(_iso_bound(flt.since, end=False))
        if flt.until:
            where.append("i.created_utc <= ?")
            params.append(_iso_bound(flt.until, end=True))
        if not flt.include_superseded:
            where.append(_CURRENT)
        sql = f"SELECT {self._select(not with_result)} FROM inspection i"
        if where:
            sql += " WHERE " + " AND ".join(where)
        sql += " ORDER BY i.id"
        if flt.limit:
            sql += f" LIMIT {int(flt.limit)}"
        return [_record(r, with_result) for r in self._read(sql, params)]

    def done_in_lot(self, lot: str) -> dict[str, InspectionRecord]:
        """Current records of a lot by image checksum (what a resumed batch must not repeat)."""
        out: dict[str, InspectionRecord] = {}
        for r in self.find(RecordFilter(lot=lot), with_result=False):
            if r.image_sha256:
                out[r.image_sha256] = r
        return out

    def lots(self) -> list[tuple[str, int]]:
        rows = self._read(f"SELECT lot, COUNT(*) FROM inspection i WHERE lot IS NOT NULL AND {_CURRENT} "
                          "GROUP BY lot ORDER BY lot")
        return [(r[0], int(r[1])) for r in rows]

    # -- issued documents
    def issue(self, kind: str, content: dict, *, record_id: int | None = None, lot: str | None = None,
              prefix: str = "RG") -> IssuedDocument:
        """Give a document its unique number and keep exactly what it prints (append-only)."""
        if kind not in ("certificate", "lot report"):
            raise ValueError(f"unknown document kind {kind!r}")
        if self.write_refusal:
            raise StoreError(self.write_refusal)
        issued = utc_now()
        with self._tx() as cur:
            # Numbers count up under a lock (SQLite: the write transaction; PostgreSQL: an advisory lock), so
            # every bench sharing a server gets its own; the UNIQUE constraint is the last guard.
            self._d.lock_key(cur, "issued_document")
            n = int(self._q(cur, "SELECT COUNT(*) FROM issued_document").fetchone()[0]) + 1
            number = _document_number(prefix, kind, issued, n)
            body = {**content, "number": number, "issued_utc": issued}
            text = canonical_json(body)
            self._q(
                cur, "INSERT INTO issued_document (number, kind, record_id, lot, issued_utc, content_json, "
                     "content_sha256) VALUES (?, ?, ?, ?, ?, ?, ?)",
                (number, kind, record_id, lot, issued, text, sha256_text(text)),
            )
            if self._version >= 3:
                did = int(self._q(cur, "SELECT id FROM issued_document WHERE number = ?", (number,)).fetchone()[0])
                self._chain(cur, "issued_document", did)
        self._save_head()
        return self.document(number)

    def record_file(self, number: str, file_sha256: str, *, signed: bool, signer: str | None = None) -> None:
        """Keep the SHA-256 of a PDF written for an issued document (each print or reprint), chained."""
        if self.write_refusal:
            raise StoreError(self.write_refusal)
        self.document(number)
        with self._tx() as cur:
            self._q(cur, "INSERT INTO issued_file (number, file_sha256, signed, signer, written_utc) "
                         "VALUES (?, ?, ?, ?, ?) RETURNING id", (number, file_sha256, int(signed), signer, utc_now()))
            fid = int(cur.fetchone()[0])
            self._chain(cur, "issued_file", fid)
        self._save_head()

    def issued_files(self, number: str) -> list[dict]:
        """Every PDF written for document ``number``: file SHA-256, signed or not, signer, when."""
        if not self._table_exists("issued_file"):
            return []
        rows = self._read("SELECT file_sha256, signed, signer, written_utc, id FROM issued_file WHERE number = ? "
                          "ORDER BY id", (number,))
        return [{"file_sha256": r[0], "signed": bool(r[1]), "signer": r[2], "written_utc": r[3], "id": int(r[4])}
                for r in rows]

    def document(self, number: str) -> IssuedDocument:
        rows = self._read("SELECT id, number, kind, record_id, lot, issued_utc, content_json, content_sha256 "
                          "FROM issued_document WHERE number = ?", (number,))
        if not rows:
            raise StoreError(f"no certificate or lot report numbered {number} in {self.where}")
        r = rows[0]
        try:
            content = json.loads(r[6])
        except (TypeError, ValueError):
            raise StoreError(f"issued document {number} in {self.where} has damaged stored content (not valid "
                             "JSON); run 'ringgauge records check'") from None
        return IssuedDocument(int(r[0]), r[1], r[2], r[3], r[4], r[5], content, r[7])

    def documents(self, *, record_id: int | None = None, lot: str | None = None) -> list[IssuedDocument]:
        where, params = [], []
        if record_id is not None:
            where.append("record_id = ?")
            params.append(int(record_id))
        if lot is not None:
            where.append("lot = ?")
            params.append(lot)
        sql = "SELECT number FROM issued_document"
        if where:
            sql += " WHERE " + " AND ".join(where)
        return [self.document(r[0]) for r in self._read(sql + " ORDER BY id", params)]


def _document_number(prefix: str, kind: str, issued_utc: str, n: int) -> str:
    tag = "C" if kind == "certificate" else "L"
    return f"{prefix}-{tag}{issued_utc[:4]}-{n:06d}"


_CURRENT = "NOT EXISTS (SELECT 1 FROM inspection s WHERE s.supersedes = i.id)"

_SELECT_COLS = ("id", "uid", "created_utc", "status", *META_FIELDS, "temperature_c", "notes", "software_version",
                "image_name", "image_path", "image_sha256", "setup_json", "result_json", "verdict", "radius_mm",
                "radius_U_mm", "power_fringes", "power_U_fringes", "failure_reason", "supersedes",
                "supersede_reason", "content_sha256")
_SELECT = ", ".join(f"i.{c}" for c in _SELECT_COLS) + \
    ", (SELECT s.id FROM inspection s WHERE s.supersedes = i.id) AS superseded_by"


_SELECT_LIGHT = _SELECT.replace("i.result_json", "NULL")


def _json_field(d: dict, name: str):
    if d[name] is None:
        return None
    try:
        return json.loads(d[name])
    except (TypeError, ValueError):
        raise StoreError(f"record {d['id']} has damaged JSON in its stored {name.replace('_json', '')} (altered "
                         "outside ringgauge); run 'ringgauge records check'") from None


def _record(row, with_result: bool = True) -> InspectionRecord:
    d = dict(zip(_SELECT_COLS + ("superseded_by", "origin"), row))
    meta = RecordMeta(**{k: d[k] for k in META_FIELDS}, temperature_c=d["temperature_c"], notes=d["notes"])
    return InspectionRecord(
        id=int(d["id"]), uid=d["uid"], created_utc=d["created_utc"], status=d["status"], meta=meta,
        software_version=d["software_version"], image_name=d["image_name"], image_path=d["image_path"],
        image_sha256=d["image_sha256"],
        setup=_json_field(d, "setup_json"),
        result=_json_field(d, "result_json"),
        verdict=d["verdict"], radius_mm=d["radius_mm"], radius_U_mm=d["radius_U_mm"],
        power_fringes=d["power_fringes"], power_U_fringes=d["power_U_fringes"],
        failure_reason=d["failure_reason"],
        supersedes=None if d["supersedes"] is None else int(d["supersedes"]),
        supersede_reason=d["supersede_reason"], content_sha256=d["content_sha256"],
        superseded_by=None if d["superseded_by"] is None else int(d["superseded_by"]),
        has_result=with_result, origin=d.get("origin"),
    )


def _num(x) -> float | None:
    try:
        return None if x is None else float(x)
    except (TypeError, ValueError):
        return None


def _columns(result: dict | None, setup: dict | None) -> dict:
    """Searchable copies of a few result fields (the JSON stays the record's full truth)."""
    s = setup or {}
    src = s.get("source") or {}
    pix = s.get("pixel_size_um")
    pixu = s.get("pixel_size_u_um")
    plate = s.get("test_plate")
    calib = None
    if s.get("bench"):
        calib = s["bench"] + (f" (calibrated {s['bench_calibrated']})" if s.get("bench_calibrated") else "")
    out = {
        "source_key": src.get("key"),
        "wavelength_nm": _num(s.get("wavelength_nm")),
        "pixel_size_um": _num(pix[0] if isinstance(pix, list) else pix),
        "pixel_size_u_um": _num(pixu[0] if isinstance(pixu, list) else pixu),
        "pixel_calibration": calib,
        "medium_index": _num(s.get("medium_index")),
        "test_plate": None if plate is None else canonical_json(plate),
        "tolerance": s.get("tolerance"),
        "verdict": None, "radius_mm": None, "radius_U_mm": None, "power_fringes": None, "power_U_fringes": None,
    }
    if result:
        v = result.get("verdict")
        out["verdict"] = (v or {}).get("overall") if isinstance(v, dict) else v
        out["radius_mm"] = _num(result.get("radius_mm"))
        out["radius_U_mm"] = _num(result.get("radius_U_mm"))
        form = result.get("form") or {}
        out["power_fringes"] = _num(form.get("power_fringes"))
        pu = _num(form.get("power_u_fringes"))
        k = _num(result.get("k")) or 2.0
        out["power_U_fringes"] = _num(form.get("power_U_fringes")) or (None if pu is None else k * pu)
    return out


def _iso_bound(text: str, *, end: bool) -> str:
    """A user's date or date-time (UTC) as a bound on ``created_utc``."""
    t = text.strip()
    try:
        if len(t) == 10:
            datetime.strptime(t, "%Y-%m-%d")
            return t + ("T23:59:59.999999Z" if end else "T00:00:00.000000Z")
        dt = datetime.fromisoformat(t.replace("Z", "+00:00"))
    except ValueError:
        raise InputError(f"date {text!r} is not YYYY-MM-DD or an ISO date-time") from None
    if dt.tzinfo is not None:
        dt = dt.astimezone(timezone.utc).replace(tzinfo=None)
    return dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ")


# ----------------------------------------------------------------------------------------- chain helpers

#: where a record's result came from (see :attr:`InspectionRecord.origin`)
ORIGINS = ("measured", "re-analysed", "sealed result", "manual")
ORIGIN_TEXT = {
    "measured": "measured by ringgauge from the image",
    "re-analysed": "measured again by ringgauge from the image (correction)",
    "sealed result": "result file written and sealed by ringgauge",
    "manual": "MANUAL ENTRY — values typed by hand, not measured by ringgauge",
    None: "measured (record written before origins were kept)",
}
HEADS_FILE = "chain-heads.json"


def row_hash(table: str, row: dict) -> str:
    """SHA-256 of a whole stored row (every column, the id included), independent of column order."""
    return sha256_text(canonical_json({"table": table, "row": {k.lower(): v for k, v in row.items()}}))


def entry_hash(seq: int, table: str, row_id: int, rh: str, prev: str) -> str:
    return sha256_text(canonical_json([int(seq), table, int(row_id), rh, prev]))


def _label(table: str | None, rid: int | None) -> str:
    return {"inspection": "record", "issued_document": "issued document", "issued_file": "issued file entry"}.get(
        table or "", table or "") + f" {rid}"


def _content_problems(table: str, row: dict) -> list[str]:
    """What is wrong with a stored row by its own checksums (damaged JSON, checksum, searchable copies)."""
    out = []
    if table == "inspection":
        for col in ("setup_json", "result_json"):
            if row.get(col) is not None:
                try:
                    json.loads(row[col])
                except (TypeError, ValueError):
                    out.append(f"damaged JSON in its stored {col.replace('_json', '')}")
        if out:
            return out
        vals = [row.get(c.lower()) for c in _SELECT_COLS] + [None, row.get("origin")]
        try:
            rec = _record(vals)
        except (RinggaugeErrorBase, TypeError, ValueError) as exc:
            return [f"unreadable ({exc})"]
        if not rec.intact():
            out.append("its content no longer matches the checksum written with it")
    elif table == "issued_document":
        text = row.get("content_json")
        try:
            json.loads(text)
        except (TypeError, ValueError):
            return ["damaged JSON in its stored content"]
        if sha256_text(text) != row.get("content_sha256"):
            out.append("its content no longer matches the checksum written with it")
    return out


@dataclass
class CheckFinding:
    table: str | None
    row_id: int | None
    kind: str
    message: str


@dataclass
class CheckReport:
    """What :meth:`Store.check` found: every problem as one line, and counts."""

    where: str
    records: int = 0
    documents: int = 0
    entries: int = 0
    findings: list = field(default_factory=list)
    notes: list = field(default_factory=list)

    def add(self, table, rid, kind, message) -> None:
        self.findings.append(CheckFinding(table, rid, kind, message))

    @property
    def ok(self) -> bool:
        return not self.findings

    def bad_records(self) -> set[int]:
        return {f.row_id for f in self.findings if f.table == "inspection" and f.row_id is not None}
