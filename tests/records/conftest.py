"""Fixtures for the records tests: a real SQLite file, and a real PostgreSQL server started for the session.

The PostgreSQL cluster is throwaway: ``initdb`` into a temporary folder, ``pg_ctl`` serving a unix socket in
that folder only (no TCP). initdb refuses to run as root, so as root the server runs as the ``postgres``
system user. The tests are skipped, with the reason, only when the PostgreSQL binaries are missing.
"""

from __future__ import annotations

import copy
import hashlib
import os
import random
import shutil
import subprocess
import tempfile
import uuid

import numpy as np
import pytest

from pg_cluster import _as_server_user, _pg_bin
from records_sample import _BASE

from ringgauge.imaging import save_png, sha256_file
from ringgauge.records import RecordMeta, open_store


@pytest.fixture(scope="session")
def pg_server():
    """(socket folder, port) of a throwaway PostgreSQL cluster for this test session."""
    bindir = _pg_bin()
    if bindir is None:
        pytest.skip("PostgreSQL server binaries (initdb, pg_ctl) not found; scripts/system-deps.sh installs them")
    base = tempfile.mkdtemp(prefix="rg-pg-")
    os.chmod(base, 0o755)
    if os.geteuid() == 0:
        import pwd

        try:
            pw = pwd.getpwnam("postgres")
        except KeyError:
            pytest.fail("running as root, but there is no 'postgres' system user to run the test server as "
                        "(initdb refuses root); install the postgresql package or run the tests as a user")
        os.chown(base, pw.pw_uid, pw.pw_gid)
    data = os.path.join(base, "data")
    # one port range per pytest-xdist worker (gw0, gw1, ...), so parallel workers never pick the same port
    worker = os.environ.get("PYTEST_XDIST_WORKER", "gw0")
    port = 20000 + 1000 * (int(worker[2:]) % 25 if worker[2:].isdigit() else 0) + random.randint(0, 999)
    log = os.path.join(base, "server.log")
    run = dict(check=True, capture_output=True, text=True, timeout=120)
    try:
        subprocess.run(_as_server_user([f"{bindir}/initdb", "-D", data, "-A", "trust", "-U", "postgres",
                                        "-E", "UTF8", "--no-locale", "--no-sync"]), **run)
        subprocess.run(_as_server_user([f"{bindir}/pg_ctl", "-D", data, "-l", log, "-w", "-o",
                                        f"-k {base} -p {port} -c listen_addresses='' -c fsync=off",
                                        "start"]), **run)
    except subprocess.CalledProcessError as exc:
        shutil.rmtree(base, ignore_errors=True)
        pytest.fail(f"could not start the test PostgreSQL server: {exc.stderr or exc.stdout}")
    try:
        yield base, port
    finally:
        subprocess.run(_as_server_user([f"{bindir}/pg_ctl", "-D", data, "-m", "fast", "-w", "stop"]),
                       capture_output=True, timeout=60)
        shutil.rmtree(base, ignore_errors=True)


@pytest.fixture
def pg_url(pg_server):
    """URL of a fresh, empty database on the session's server."""
    import psycopg

    sock, port = pg_server
    name = "rg_" + uuid.uuid4().hex[:12]
    with psycopg.connect(f"postgresql://postgres@/postgres?host={sock}&port={port}", autocommit=True) as c:
        c.execute(f"CREATE DATABASE {name}")
    return f"postgresql://postgres@/{name}?host={sock}&port={port}"


@pytest.fixture
def sqlite_path(tmp_path, monkeypatch):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
    return tmp_path / "records.sqlite"


@pytest.fixture(params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)])
def store_target(request, tmp_path, monkeypatch):
    """The same tests against a real SQLite file and a real PostgreSQL database."""
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
    if request.param == "sqlite":
        return str(tmp_path / "records.sqlite")
    return request.getfixturevalue("pg_url")


@pytest.fixture
def store(store_target):
    s = open_store(store_target)
    yield s
    s.close()


@pytest.fixture
def make_result():
    """A hand-made result of the shape ``AnalysisResult.to_dict()`` gives (invented values, not check values)."""

    def make(tag: str = "a", *, radius_mm: float = 51.7, power: float = 1.2, verdict: str = "pass") -> dict:
        d = copy.deepcopy(_BASE)
        d["image"]["sha256"] = hashlib.sha256(tag.encode()).hexdigest()
        d["image"]["path"] = f"/bench/{tag}.png"
        d["radius_mm"] = radius_mm
        d["form"]["power_fringes"] = power
        d["verdict"]["overall"] = verdict
        return d

    return make


@pytest.fixture
def pg_split(pg_url, tmp_path, monkeypatch):
    """A PostgreSQL store set up by 'records init-server': (admin URL, bench URL, owner role, bench role).

    The admin (the cluster's superuser here) runs the set-up; benches then connect as the bench login, which
    may only INSERT and SELECT. Role names are unique per test (roles are shared by the whole cluster)."""
    from ringgauge.cli import main

    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
    tag = uuid.uuid4().hex[:8]
    owner, bench = f"rg_owner_{tag}", f"rg_bench_{tag}"
    assert main(["records", "init-server", "--db", pg_url, "--owner", owner, "--bench", bench]) == 0
    bench_url = pg_url.replace("postgresql://postgres@", f"postgresql://{bench}@")
    return pg_url, bench_url, owner, bench


@pytest.fixture
def stocked(tmp_path, make_result, monkeypatch):
    """A store holding one record whose image is on disk: (store, record)."""
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
    img = tmp_path / "S0007.png"
    yy, xx = np.mgrid[0:240, 0:320]
    save_png(img, 0.5 + 0.4 * np.cos(((xx - 160.0) ** 2 + (yy - 120.0) ** 2) / 400.0))
    res = make_result("S0007")
    res["image"].update(path=str(img), sha256=sha256_file(img), width=320, height=240)
    res["centre_px"] = [160.0, 120.0]
    store = open_store(tmp_path / "r.sqlite")
    rec = store.add(RecordMeta(part="PCX-25-50", drawing="D-1204 rev C", surface="S1", lot="L-0042", serial="0007",
                               operator="A. Kestrel", customer="Harbour Optics Guild", order_ref="PO-5531",
                               temperature_c=20.4), res)
    yield store, rec
    store.close()
