"""Setting up a shared PostgreSQL store with two roles: an owner that holds the tables, and the benches' login.

The owner role (NOLOGIN) owns every table, the append-only triggers and their function; only an owner can
drop or disable a trigger (``ALTER TABLE … DISABLE TRIGGER`` needs ownership). The benches' login may only
SELECT and INSERT the chained tables and read the others, so the login every bench uses can neither edit,
delete nor switch the protection off. Should an owner (or a superuser) disable a trigger anyway, every
ringgauge that opens the store notices (``pg_trigger.tgenabled``) and refuses to write, and ``records check``
reports it.
"""

from __future__ import annotations

import os
import re
import uuid

from ..errors import InputError, StoreError
from . import keys as _keys
from .store import MIGRATIONS, Store, _Postgres, describe_target, is_server_url, utc_now

#: chained tables the benches append to; the others they only read
BENCH_INSERT = ("inspection", "issued_document", "issued_file", "chain")
BENCH_READ = ("schema_migration", "store_info")
TABLES = BENCH_INSERT + BENCH_READ


def _ident(name: str) -> str:
    if not re.fullmatch(r"[a-z_][a-z0-9_]{0,62}", name or ""):
        raise InputError(f"role name {name!r}: use lower-case letters, digits and '_' (at most 63), starting "
                         "with a letter")
    return name


def _grants(owner: str, bench: str) -> list[str]:
    out = [f"REVOKE ALL ON {t} FROM PUBLIC" for t in TABLES] + [f"REVOKE ALL ON {t} FROM {bench}" for t in TABLES]
    out += [f"GRANT SELECT, INSERT ON {t} TO {bench}" for t in BENCH_INSERT]
    out += [f"GRANT SELECT ON {t} TO {bench}" for t in BENCH_READ]
    return out


def init_sql(owner: str, bench: str) -> str:
    """The whole set-up as a script a database administrator can read and run with psql."""
    owner, bench = _ident(owner), _ident(bench)
    d = _Postgres()
    key = _keys.load_key(create=True)
    lines = [
        "-- ringgauge records store: owner role holds the tables and triggers; the benches' login may only",
        "-- insert and read. Run as a role that may create roles, connected to the store's database.",
        f"DO $$ BEGIN IF NOT EXISTS (SELECT FROM pg_roles WHERE rolname = '{owner}') THEN "
        f"CREATE ROLE {owner} NOLOGIN; END IF; END $$;",
        f"DO $$ BEGIN IF NOT EXISTS (SELECT FROM pg_roles WHERE rolname = '{bench}') THEN "
        f"CREATE ROLE {bench} LOGIN; END IF; END $$;",
        f"-- set the benches' password yourself: ALTER ROLE {bench} PASSWORD '...';",
        f"GRANT {owner} TO CURRENT_USER;",
        f"GRANT USAGE, CREATE ON SCHEMA public TO {owner};",
        f"GRANT USAGE ON SCHEMA public TO {bench};",
        f"SET ROLE {owner};",
        "CREATE TABLE IF NOT EXISTS schema_migration (version INTEGER PRIMARY KEY, description TEXT NOT NULL, "
        "applied_utc TEXT NOT NULL);",
    ]
    for version, what, make in MIGRATIONS:
        for stmt in make(d):
            lines.append(re.sub(r"\s+", " ", stmt).strip() + ";")
        if version == 3:
            lines.append(f"INSERT INTO store_info (name, value) VALUES ('store_uid', '{uuid.uuid4()}');")
        quoted = what.replace("'", "''")
        lines.append(f"INSERT INTO schema_migration VALUES ({version}, '{quoted}', '{utc_now()}');")
    lines.append(f"INSERT INTO store_info (name, value) VALUES ('key_id', '{_keys.key_id(key)}');")
    lines += [s + ";" for s in _grants(owner, bench)]
    lines.append("RESET ROLE;")
    lines.append(f"-- copy the records key {_keys.key_path()} (key {_keys.key_id(key)}) to each bench's "
                 "ringgauge folder, owner-only (chmod 600)")
    return "\n".join(lines)


def init_server(url: str, owner: str, bench: str) -> list[str]:
    """Create or repair the roles, schema, triggers and grants; returns what was done, one line each."""
    if not is_server_url(url):
        raise InputError("init-server sets up a PostgreSQL store: give --db postgresql://ADMIN@HOST/DBNAME")
    owner, bench = _ident(owner), _ident(bench)
    import psycopg
    from psycopg import sql as psql

    where = describe_target(url)
    try:
        conn = psycopg.connect(url, autocommit=True, connect_timeout=10)
    except psycopg.Error as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise StoreError(f"cannot reach the records server {where}: {first}") from None
    out = []
    try:
        def run(stmt, params=None):
            conn.execute(stmt, params)

        try:
            roles = {r[0] for r in conn.execute("SELECT rolname FROM pg_roles WHERE rolname IN (%s, %s)",
                                                (owner, bench)).fetchall()}
            if owner not in roles:
                run(f"CREATE ROLE {owner} NOLOGIN")
                out.append(f"created the owner role {owner} (no login)")
            if bench not in roles:
                run(f"CREATE ROLE {bench} LOGIN")
                out.append(f"created the benches' login {bench}")
            pw = os.environ.get("RINGGAUGE_BENCH_PASSWORD")
            if pw:
                run(psql.SQL("ALTER ROLE {} PASSWORD {}").format(psql.Identifier(bench), psql.Literal(pw)))
                out.append(f"set the password of {bench} from RINGGAUGE_BENCH_PASSWORD")
            run(f"GRANT {owner} TO CURRENT_USER")
            run(f"GRANT USAGE, CREATE ON SCHEMA public TO {owner}")
            run(f"GRANT USAGE ON SCHEMA public TO {bench}")
            # tables made earlier by another login (e.g. before the roles existed) pass to the owner
            for t in TABLES:
                if conn.execute("SELECT to_regclass(%s)", (t,)).fetchone()[0] is not None:
                    run(f"ALTER TABLE {t} OWNER TO {owner}")
            if conn.execute("SELECT 1 FROM pg_proc WHERE proname = 'ringgauge_refuse_change'").fetchone():
                run(f"ALTER FUNCTION ringgauge_refuse_change() OWNER TO {owner}")
            run(f"SET ROLE {owner}")
        except psycopg.Error as exc:
            first = str(exc).strip().splitlines()[0]
            raise StoreError(f"records server {where}: {first} (init-server needs a login that may create roles "
                             "and owns the database)") from None
        store = Store(conn, _Postgres(), where)
        store._migrate(None)
        store._version = store.schema_version()
        out.append(f"schema at version {store._version}, tables owned by {owner}")
        fixed = _repair_triggers(store)
        out += fixed or ["append-only triggers: all present and enabled"]
        key = _keys.load_key(create=True)
        info = store._store_info()
        if "key_id" not in info:
            conn.execute("INSERT INTO store_info (name, value) VALUES (%s, %s)", ("key_id", _keys.key_id(key)))
            out.append(f"store bound to the records key {_keys.key_id(key)} ({_keys.key_path()})")
        elif info["key_id"] != _keys.key_id(key):
            out.append(f"note: the store is bound to records key {info['key_id']}, not this folder's "
                       f"{_keys.key_id(key)}; benches need the store's key")
        try:
            for stmt in _grants(owner, bench):
                run(stmt)
        except psycopg.Error as exc:
            raise StoreError(f"records server {where}: {str(exc).strip().splitlines()[0]}") from None
        out.append(f"{bench} may only INSERT and SELECT ({', '.join(BENCH_INSERT)}) and SELECT "
                   f"({', '.join(BENCH_READ)})")
        out.append(f"copy {_keys.key_path()} to each bench's ringgauge folder (owner-only) so they can seal records")
        run("RESET ROLE")
    finally:
        conn.close()
    return out


def _repair_triggers(store: Store) -> list[str]:
    problems = store.guard_problems()
    if not problems:
        return []
    d = _Postgres()
    done = []
    for t in TABLES:
        if not store._table_exists(t) or t == "schema_migration":
            continue
        rows = store._read("SELECT t.tgname, t.tgenabled FROM pg_trigger t JOIN pg_class c ON c.oid = t.tgrelid "
                           "WHERE c.relname = ? AND NOT t.tgisinternal", (t,))
        have = {r[0]: r[1] for r in rows}
        for g in d.guards(t):
            if g not in have:
                with store._tx() as cur:
                    for stmt in d.append_only(t):
                        if g in stmt or "FUNCTION ringgauge_refuse_change()" in stmt and "CREATE OR REPLACE" in stmt:
                            cur.execute(stmt)
                done.append(f"re-created the append-only trigger {g} on {t}")
            elif have[g] not in ("O", "A"):
                with store._tx() as cur:
                    cur.execute(f"ALTER TABLE {t} ENABLE TRIGGER {g}")
                done.append(f"re-enabled the append-only trigger {g} on {t}")
    done.append("run 'ringgauge records check' now: rows may have been changed while the protection was off")
    return done


def repair_sqlite(path: str) -> list[str]:
    """Put back missing append-only triggers of a SQLite store (its owner is whoever may write the file)."""
    from .store import _SQLite, _m1, _m2, _m3, open_store

    out = []
    with open_store(path) as store:
        problems = store.guard_problems()
        if not problems:
            return ["append-only triggers: all present"]
        d = _SQLite()
        stmts = [x for make in (_m1, _m2, _m3) for x in make(d) if x.startswith("CREATE TRIGGER")]
        with store._tx() as cur:
            for p in problems:
                name = p.split("trigger ", 1)[1].split(" ", 1)[0]
                for stmt in stmts:
                    if stmt.startswith(f"CREATE TRIGGER {name} "):
                        cur.execute(stmt)
                        out.append(f"re-created the append-only trigger {name}")
    out.append("run 'ringgauge records check' now: rows may have been changed while the protection was off")
    return out
