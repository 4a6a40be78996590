"""Fixtures for the records tests: a real SQLite file, and a real PostgreSQL server started for the session.

The PostgreSQL cluster is throwaway: ``initdb`` into a temporary folder, ``pg_ctl`` serving a unix socket in
that folder only (no TCP). initdb refuses to run as root, so as root the server runs as the ``postgres``
system user. The tests are skipped, with the reason, only when the PostgreSQL binaries are missing.
"""

from __future__ import annotations

import copy
import glob
import hashlib
import os
import random
import shutil
import subprocess
import tempfile
import uuid

import pytest

from ringgauge.records import open_store


def _pg_bin() -> str | None:
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"))
    if found:
        return os.path.dirname(found[-1])
    w = shutil.which("initdb")
    return os.path.dirname(w) if w else None


def _as_server_user(cmd: list[str]) -> list[str]:
    if os.geteuid() != 0:
        return cmd
    if shutil.which("runuser"):
        return ["runuser", "-u", "postgres", "--", *cmd]
    import shlex

    return ["su", "postgres", "-s", "/bin/sh", "-c", shlex.join(cmd)]


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
    port = random.randint(20000, 45000)
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


_BASE = {
    "ringgauge_version": "0.1.0",
    "image": {"path": "/bench/img.png", "sha256": "", "width": 640, "height": 480, "bit_depth": 8,
              "channel": "grey", "saturated_fraction": 0.0},
    "frames": [],
    "setup": {
        "source": {"key": "mercury-e", "name": "Mercury e-line (green)", "wavelength_nm": 546.074,
                   "wavelength_u_nm": 0.001, "fwhm_nm": 0.0, "reference": "NIST ASD (Hg I 546.074 nm)"},
        "wavelength_nm": 546.074, "wavelength_u_nm": 0.001, "pixel_size_um": [10.0, 10.0],
        "pixel_size_u_um": [0.02, 0.02], "medium_index": 1.0, "medium_index_u": 0.0, "fringe_kind": "dark",
        "bench": "bench 2", "bench_calibrated": "2026-10-01", "test_diameter_mm": 20.0, "tolerance": "3/2(0.5)",
        "test_plate": {"id": "TP-0117", "radius_mm": 51.68, "radius_u_mm": 0.002, "certificate": "TPC-88",
                       "calibrated": "2026-03-14"},
        "press_test": None, "decision_rule": "simple",
    },
    "coordinates": "x = column, y = row, pixel centres at integers, origin at the top-left pixel",
    "centre_px": [320.0, 240.0], "centre_u_px": [0.05, 0.05],
    "radius_mm": 51.7, "radius_u_mm": 0.02, "radius_U_mm": 0.04, "k": 2.0,
    "budget": {"output": "R", "unit": "mm", "value": 51.7, "u_c": 0.02, "k": 2.0, "U": 0.04, "dof_eff": None,
               "coverage": "approximately 95 %", "notes": [],
               "rows": [
                   {"quantity": "pixel size", "estimate": 10.0, "estimate_unit": "µm", "u": 0.02,
                    "distribution": "normal", "divisor": 1.0, "sensitivity": 10.34, "sensitivity_unit": "mm/µm",
                    "contribution": 0.0207, "share": 0.97, "dof": None, "note": ""},
                   {"quantity": "slope of r² against order", "estimate": 0.0282, "estimate_unit": "mm²",
                    "u": 1e-6, "distribution": "normal", "divisor": 1.0, "sensitivity": 1833.0,
                    "sensitivity_unit": "1/mm", "contribution": 0.0018, "share": 0.03, "dof": 12, "note": ""},
               ]},
    "fringes": {"slope_mm2_per_fringe": 0.0282, "rings_used": 3,
                "rings": [{"order": m, "kind": "dark", "radius_px": 16.8 * m ** 0.5, "radius_mm": 0.168 * m ** 0.5,
                           "r2_mm2": 0.0282 * m, "u_r2_mm2": 1e-5, "residual_mm2": 0.0, "used": True}
                          for m in (1, 2, 3)]},
    "fullfield": {},
    "form": {"power_fringes": 1.2, "power_u_fringes": 0.05, "irregularity_fringes": 0.3,
             "irregularity_u_fringes": 0.05, "verdict": "pass"},
    "verdict": {"overall": "pass", "terms": [], "decision_rule": "simple acceptance"},
    "warnings": [],
    "elapsed_s": 0.5,
}


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
