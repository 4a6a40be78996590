"""A lot run killed outright (SIGKILL on the parent only) leaves no worker and no multiprocessing helper
running, and the records it already wrote are whole."""

from __future__ import annotations

import os
import shutil
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
LOT = REPO / "sample_images" / "lot-FH2604"


def _children(pid: int) -> dict[int, str]:
    """Direct children of ``pid`` from /proc (pid -> command line)."""
    out = {}
    for d in Path("/proc").iterdir():
        if not d.name.isdigit():
            continue
        try:
            stat = (d / "stat").read_text()
            ppid = int(stat.rsplit(")", 1)[1].split()[1])
            if ppid == pid:
                out[int(d.name)] = (d / "cmdline").read_bytes().replace(b"\0", b" ").decode(errors="replace")
        except (OSError, ValueError, IndexError):
            continue
    return out


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state not in ("Z", "X")  # a zombie has ended; only its exit status waits to be collected


@pytest.mark.skipif(not Path("/proc").is_dir(), reason="needs /proc to find the worker processes")
def test_killed_lot_run_leaves_no_process_running(tmp_path):
    lot = tmp_path / "lot"
    shutil.copytree(LOT, lot)
    db = tmp_path / "r.sqlite"
    env = {**os.environ, "RINGGAUGE_HOME": str(tmp_path / "home")}
    proc = subprocess.Popen([sys.executable, "-m", "ringgauge", "batch", str(lot), "--db", str(db), "--workers",
                             "2", "--quiet"], cwd=tmp_path, env=env, stdout=subprocess.DEVNULL,
                            stderr=subprocess.PIPE, start_new_session=True)
    kids: dict[int, str] = {}
    try:
        deadline = time.monotonic() + 90
        # wait until both workers are up and the first image has been recorded (a run in full swing)
        while time.monotonic() < deadline and proc.poll() is None:
            kids.update(_children(proc.pid))
            workers = [p for p, c in kids.items() if "spawn_main" in c]
            recorded = 0
            if db.exists():
                try:
                    with sqlite3.connect(db, timeout=1) as con:
                        recorded = con.execute("SELECT count(*) FROM inspection").fetchone()[0]
                except sqlite3.Error:
                    recorded = 0
            if len(workers) >= 2 and recorded >= 1:
                break
            time.sleep(0.2)
        assert proc.poll() is None, "the lot finished before it could be killed: " + proc.stderr.read().decode()
        kids.update(_children(proc.pid))
        assert len([p for p, c in kids.items() if "spawn_main" in c]) >= 2, kids
        os.kill(proc.pid, signal.SIGKILL)  # the parent only: no cleanup code of its own runs
        proc.wait(timeout=10)
        gone_by = time.monotonic() + 5.0
        while time.monotonic() < gone_by and any(_alive(p) for p in kids):
            time.sleep(0.1)
        left = {p: c for p, c in kids.items() if _alive(p)}
        assert not left, f"still running 5 s after the parent was killed: {left}"
    finally:
        for p in kids:
            if _alive(p):
                os.kill(p, signal.SIGKILL)
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    # what was written is whole: the file is sound, the chain of records checks out, nothing half-written
    con = sqlite3.connect(db)
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    con.close()
    chk = subprocess.run([sys.executable, "-m", "ringgauge", "records", "check", "--db", str(db)], cwd=tmp_path,
                         env=env, capture_output=True, text=True, timeout=120)
    assert chk.returncode == 0, chk.stdout + chk.stderr
    assert not [p.name for p in tmp_path.rglob("*") if p.name.endswith((".tmp", ".part"))]
