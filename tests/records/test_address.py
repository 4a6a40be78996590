"""Store addresses (--db / RINGGAUGE_DB): every form psycopg's conninfo understands, a SQLite path only when it
looks like one, and the password never printed, logged or stored — checked against a real password-protected
PostgreSQL server on loopback."""

from __future__ import annotations

import os
import random
import shutil
import subprocess
import sys
import tempfile
import uuid
from pathlib import Path

import pytest
from pg_cluster import _as_server_user, _pg_bin

from ringgauge.records.address import AddressError, display, parse_address

SECRET = "Tr0ub4dor&3-x9"  # a password that must never appear anywhere
REPO = Path(__file__).resolve().parents[2]


# ------------------------------------------------------------------------------------- parsing, no server


@pytest.mark.parametrize("text, shown", [
    ("postgresql://bench2@db.shop.lan:5432/records", "bench2@db.shop.lan:5432/records"),
    ("postgres://bench2@db.shop.lan/records", "bench2@db.shop.lan/records"),
    (f"postgresql://bench2:{SECRET.replace('&', '%26')}@db.shop.lan:5433/records", "bench2@db.shop.lan:5433/records"),
    (f"postgresql://db.shop.lan/records?user=b2&password={SECRET.replace('&', '%26')}&sslmode=verify-full",
     "b2@db.shop.lan/records"),
    (f"host=db.shop.lan port=5432 dbname=records user=bench2 password='{SECRET}'", "bench2@db.shop.lan:5432/records"),
    ("service=records", "service=records"),
    ("service=records user=bench2", "service=records (bench2@)"),
    ("postgresql://u@[::1]:5433/d", "u@[::1]:5433/d"),
    ("postgresql:///records?host=/run/postgresql", "/run/postgresql/records"),
])
def test_server_forms(text, shown):
    a = parse_address(text)
    assert a.is_server and a.display == shown and SECRET not in repr(a) and SECRET not in str(a)
    assert display(text) == shown


@pytest.mark.parametrize("text, why", [
    (f"pgsql://bench2:{SECRET}@db/records", "'pgsql:' addresses are not understood"),
    (f"postgresql+psycopg://bench2:{SECRET}@db/records", "'postgresql+psycopg:' addresses are not understood"),
    (f"jdbc:postgresql://db/records?password={SECRET}", "'jdbc:' addresses are not understood"),
    (f"postgresql://bench2:{SECRET}%zz@db/records", "malformed percent-escape"),
    ("postgresql://bench2:p@ss@db/records", "has an '@' or '/' inside its user name or password"),
    (f"host=db dbname=records passwrd={SECRET}", "unknown connection option 'passwrd'"),
    (f"host=db password='{SECRET}", "server address cannot be read"),
    (f"mysql://u:{SECRET}@h/d", "'mysql://' is not a records store address"),
    (f"bench2:{SECRET}@db/records", "looks like a server address without its scheme"),
    ("records", "is neither a SQLite file"),
    (f"./x password={SECRET}", "looks like a key=value server address"),
    ("", "is empty"),
    ("rec\nords.sqlite", "control character"),
])
def test_refused_forms_never_repeat_the_password(text, why):
    with pytest.raises(AddressError) as ei:
        parse_address(text)
    msg = str(ei.value)
    assert why in msg and "\n" not in msg
    assert SECRET not in msg and "ss@db" not in msg
    assert SECRET not in display(text)


@pytest.mark.parametrize("text", ["records.sqlite", "lot.db", "./records", "/srv/rg/records", "~/rg/records.sqlite3"])
def test_sqlite_paths(text):
    a = parse_address(text)
    assert not a.is_server and a.path == Path(text).expanduser()


def test_existing_file_without_suffix_is_a_sqlite_path(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    Path("store").write_bytes(b"")
    assert parse_address("store").path == Path("store")


def test_key_value_string_no_longer_becomes_a_local_file(tmp_path, monkeypatch, capsys):
    from ringgauge.cli import main

    monkeypatch.chdir(tmp_path)
    code = main(["records", "list", "--db", f"host=127.0.0.1 port=1 dbname=x user=u password={SECRET}"])
    err = capsys.readouterr().err
    assert code == 4 and err.startswith("ringgauge: cannot reach the records server u@127.0.0.1:1/x: ")
    assert SECRET not in err
    assert not [f for f in tmp_path.rglob("*") if "host=" in f.name or SECRET in f.name or f.suffix == ".sqlite"]


def test_window_follows_ringgauge_db(tmp_path, monkeypatch, make_result):
    from ringgauge.gui.recording import save_records

    target = tmp_path / "shared.sqlite"
    monkeypatch.setenv("RINGGAUGE_DB", str(target))

    class _R:
        def __init__(self, d):
            self.d = d

        def to_dict(self):
            return self.d

    from ringgauge.gui.recording import ToRecord

    ids = save_records([ToRecord("/bench/a.png", _R(make_result("w")))], lot="W1", operator="A. Tester",
                       setup=None)
    from ringgauge.records import open_store

    with open_store(str(target)) as s:
        assert [r.id for r in s.find()] == ids
    assert not (Path(os.environ["RINGGAUGE_HOME"]) / "records.sqlite").exists()


def test_gui_db_option_checked_up_front(capsys, monkeypatch):
    from ringgauge.cli import main

    monkeypatch.delenv("RINGGAUGE_DB", raising=False)
    code = main(["gui", "--db", f"pgsql://u:{SECRET}@h/d"])
    err = capsys.readouterr().err
    assert code == 2 and "'pgsql:' addresses are not understood" in err and SECRET not in err
    monkeypatch.setenv("RINGGAUGE_DB", f"postgresql://u:{SECRET}@a@h/d")
    code = main(["gui"])
    err = capsys.readouterr().err
    assert code == 2 and err.startswith("ringgauge: RINGGAUGE_DB: ") and SECRET not in err


# -------------------------------------------------------------------------- a password-protected server


@pytest.fixture(scope="module")
def pw_server():
    """(host, port, db, user) of a throwaway cluster on 127.0.0.1 that demands a password (scram-sha-256)."""
    bindir = _pg_bin()
    if bindir is None:
        pytest.skip("PostgreSQL server binaries (initdb, pg_ctl) not found; scripts/system-deps.sh installs them")
    if os.geteuid() == 0 and not shutil.which("runuser"):
        pytest.skip("running as root without runuser to start the server as 'postgres'")
    base = tempfile.mkdtemp(prefix="rg-pgpw-")
    os.chmod(base, 0o755)
    if os.geteuid() == 0:
        import pwd

        pw = pwd.getpwnam("postgres")
        os.chown(base, pw.pw_uid, pw.pw_gid)
    data, log, pwfile = (os.path.join(base, n) for n in ("data", "server.log", "pw"))
    Path(pwfile).write_text(SECRET + "\n")
    if os.geteuid() == 0:
        os.chown(pwfile, pw.pw_uid, pw.pw_gid)
    port = random.randint(45001, 60000)
    run = dict(check=True, capture_output=True, text=True, timeout=120)
    try:
        subprocess.run(_as_server_user([f"{bindir}/initdb", "-D", data, "-A", "scram-sha-256", "-U", "rgowner",
                                        "--pwfile", pwfile, "-E", "UTF8", "--no-locale", "--no-sync"]), **run)
        os.unlink(pwfile)
        subprocess.run(_as_server_user([f"{bindir}/pg_ctl", "-D", data, "-l", log, "-w", "-o",
                                        f"-k {base} -p {port} -c listen_addresses=127.0.0.1 -c fsync=off",
                                        "start"]), **run)
    except subprocess.CalledProcessError as exc:
        shutil.rmtree(base, ignore_errors=True)
        pytest.fail(f"could not start the password-protected test server: {exc.stderr or exc.stdout}")
    import psycopg

    db = "rg_" + uuid.uuid4().hex[:10]
    with psycopg.connect(host="127.0.0.1", port=port, user="rgowner", password=SECRET, dbname="postgres",
                         autocommit=True) as c:
        c.execute(f"CREATE DATABASE {db}")
    try:
        yield "127.0.0.1", port, db, "rgowner"
    finally:
        subprocess.run(_as_server_user([f"{bindir}/pg_ctl", "-D", data, "-m", "fast", "-w", "stop"]),
                       capture_output=True, timeout=60)
        shutil.rmtree(base, ignore_errors=True)


def _cli(*args, env: dict, cwd: Path) -> subprocess.CompletedProcess:
    e = {k: v for k, v in os.environ.items() if not k.startswith("PG")}
    e.update(env)
    return subprocess.run([sys.executable, "-m", "ringgauge", *args], capture_output=True, text=True, timeout=120,
                          env=e, cwd=cwd)


def _nothing_holds_the_secret(*roots: Path) -> None:
    for root in roots:
        for f in root.rglob("*"):
            if f.is_file():
                assert SECRET.encode() not in f.read_bytes(), f"the password was written to {f}"


@pytest.mark.postgres
def test_password_never_printed_logged_or_stored(pw_server, tmp_path, make_result):
    host, port, db, user = pw_server
    home = tmp_path / "home"
    enc = SECRET.replace("&", "%26")
    forms = [
        f"postgresql://{user}:{enc}@{host}:{port}/{db}",
        f"postgresql://{host}:{port}/{db}?user={user}&password={enc}",
        f"host={host} port={port} dbname={db} user={user} password='{SECRET}'",
    ]
    shown = f"{user}@{host}:{port}/{db}"
    from ringgauge.records import RecordMeta, open_store

    with open_store(forms[0]) as s:
        assert s.where == shown
        s.add(RecordMeta(lot="PW", serial="001", operator="A. Tester"), make_result("pw"))
    for i, form in enumerate(forms):
        env = {"RINGGAUGE_HOME": str(home)}
        r = _cli("--debug", "records", "list", "--db", form, env=env, cwd=tmp_path)
        assert r.returncode == 0, r.stderr
        assert "PW" in r.stdout and SECRET not in r.stdout + r.stderr and enc not in r.stdout + r.stderr
        r = _cli("-v", "records", "list", env={**env, "RINGGAUGE_DB": form}, cwd=tmp_path)
        assert r.returncode == 0 and SECRET not in r.stdout + r.stderr
        r = _cli("paths", env={**env, "RINGGAUGE_DB": form}, cwd=tmp_path)
        assert shown in r.stdout and SECRET not in r.stdout + r.stderr
        r = _cli("records", "check", "--db", form, env=env, cwd=tmp_path)
        assert SECRET not in r.stdout + r.stderr
    # a wrong password: the server's refusal, one line, neither password shown
    r = _cli("records", "list", "--db", f"postgresql://{user}:WrongPass99@{host}:{port}/{db}",
             env={"RINGGAUGE_HOME": str(home)}, cwd=tmp_path)
    assert r.returncode == 4 and r.stderr.count("\n") == 1 and "WrongPass99" not in r.stderr
    assert r.stderr.startswith(f"ringgauge: cannot reach the records server {shown}: ")
    _nothing_holds_the_secret(home, tmp_path)


@pytest.mark.postgres
def test_pgpass_and_service_file(pw_server, tmp_path):
    host, port, db, user = pw_server
    pgpass = tmp_path / "pgpass"
    pgpass.write_text(f"{host}:{port}:{db}:{user}:{SECRET}\n")
    os.chmod(pgpass, 0o600)
    services = tmp_path / "pg_service.conf"
    services.write_text(f"[rgtest]\nhost={host}\nport={port}\ndbname={db}\nuser={user}\n")
    env = {"RINGGAUGE_HOME": str(tmp_path / "home"), "PGPASSFILE": str(pgpass), "PGSERVICEFILE": str(services)}
    r = _cli("records", "list", "--db", f"postgresql://{user}@{host}:{port}/{db}", env=env, cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    r = _cli("records", "list", "--db", "service=rgtest", env=env, cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    r = _cli("records", "list", env={**env, "RINGGAUGE_DB": "service=rgtest", "PGPASSFILE": "/nonexistent"},
             cwd=tmp_path)
    assert r.returncode == 4 and r.stderr.startswith("ringgauge: cannot reach the records server service=rgtest")


def test_empty_value_does_not_swallow_the_password():
    with pytest.raises(AddressError) as ei:
        parse_address(f"host= password={SECRET} dbname=records")
    assert "holds a space or '='" in str(ei.value) and SECRET not in str(ei.value)
