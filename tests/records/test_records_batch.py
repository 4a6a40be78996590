"""The lot runner: parallel analysis, failures recorded with their reason, resume by checksum, and a kill in
the middle of a lot followed by a resume with nothing lost or doubled."""

from __future__ import annotations

import io
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from fakelab import fake_analyse

from ringgauge.bench_setup import default_setup
from ringgauge.errors import InputError
from ringgauge.imaging import save_png, sha256_file
from ringgauge.records import RecordFilter, RecordMeta, open_store
from ringgauge.records.batch import Progress, find_images, run_lot

HERE = Path(__file__).resolve().parent


def make_folder(folder: Path, n: int, *, bad: int = 0, seed: int = 0) -> list[Path]:
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    out = []
    for i in range(n):
        p = folder / (f"bad{i:03d}.png" if i < bad else f"s{i:03d}.png")
        save_png(p, rng.uniform(0.1, 0.9, (48, 64)))
        out.append(p)
    return out


def test_lot_records_every_image_and_keeps_going(tmp_path):
    make_folder(tmp_path / "lot", 6, bad=2)
    (tmp_path / "lot" / "broken.png").write_bytes(b"\x89PNG not really")
    (tmp_path / "lot" / "notes.txt").write_text("not an image")
    store = open_store(tmp_path / "r.sqlite")
    err = io.StringIO()
    run = run_lot(store, find_images(tmp_path / "lot"), default_setup(10.0),
                  RecordMeta(lot="L1", part="PCX", operator="j.finch"), workers=2, analyse_fn=fake_analyse,
                  progress=Progress(7, err))
    assert (run.images, run.recorded, run.failed, run.skipped, run.interrupted) == (7, 7, 3, 0, False)
    recs = store.find(RecordFilter(lot="L1"))
    assert len(recs) == 7
    failed = {r.image_name: r.failure_reason for r in recs if r.status == "failed"}
    assert set(failed) == {"bad000.png", "bad001.png", "broken.png"}
    assert "no ring system found" in failed["bad000.png"]
    assert "cannot decode" in failed["broken.png"]
    for r in recs:
        assert r.image_sha256 == sha256_file(r.image_path)
        assert r.meta.serial == Path(r.image_path).stem and r.meta.operator == "j.finch"
    assert "7/7 images" in err.getvalue() and "images/s" in err.getvalue() and "failed 3" in err.getvalue()
    # run again: everything is already there, nothing is repeated
    again = run_lot(store, find_images(tmp_path / "lot"), default_setup(10.0), RecordMeta(lot="L1"),
                    workers=2, analyse_fn=fake_analyse, progress=False)
    assert (again.recorded, again.skipped) == (0, 7)
    assert len(store.find(RecordFilter(lot="L1"))) == 7
    store.close()


@pytest.mark.slow
def test_retry_failed_supersedes_the_failure(tmp_path):
    make_folder(tmp_path / "lot", 3, bad=1)
    store = open_store(tmp_path / "r.sqlite")
    run_lot(store, find_images(tmp_path / "lot"), default_setup(10.0), RecordMeta(lot="L"), workers=1,
            analyse_fn=fake_analyse, progress=False)
    bad = tmp_path / "lot" / "bad000.png"
    fixed = tmp_path / "lot" / "fixed000.png"
    bad.rename(fixed)  # the same bytes under a name the stand-in accepts
    run = run_lot(store, find_images(tmp_path / "lot"), default_setup(10.0), RecordMeta(lot="L"), workers=1,
                  analyse_fn=fake_analyse, retry_failed=True, progress=False)
    assert (run.recorded, run.skipped) == (1, 2)
    recs = store.find(RecordFilter(lot="L"))
    assert len(recs) == 3 and all(r.status == "ok" for r in recs)
    new = store.get(run.record_ids[0])
    assert new.supersedes is not None and store.get(new.supersedes).status == "failed"
    assert "after a failure" in new.supersede_reason
    store.close()


def test_copies_of_one_image_are_analysed_once(tmp_path):
    paths = make_folder(tmp_path / "lot", 2)
    (tmp_path / "lot" / "s000-copy.png").write_bytes(paths[0].read_bytes())
    store = open_store(tmp_path / "r.sqlite")
    run = run_lot(store, find_images(tmp_path / "lot"), default_setup(10.0), RecordMeta(lot="L"), workers=1,
                  analyse_fn=fake_analyse, progress=False)
    assert (run.recorded, run.skipped) == (2, 1)
    store.close()


def test_folder_errors(tmp_path):
    with pytest.raises(InputError, match="no such folder"):
        find_images(tmp_path / "none")
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match="no image files"):
        find_images(tmp_path / "empty")
    store = open_store(tmp_path / "r.sqlite")
    with pytest.raises(InputError, match="needs a lot name"):
        run_lot(store, [], default_setup(10.0), RecordMeta())
    store.close()


@pytest.mark.slow
def test_kill_in_the_middle_then_resume(tmp_path):
    n = 16
    make_folder(tmp_path / "lot", n, bad=1)
    db = tmp_path / "r.sqlite"
    env = {**os.environ, "RG_TEST_DELAY_S": "1.0", "RINGGAUGE_HOME": str(tmp_path / "home")}
    cmd = [sys.executable, str(HERE / "batch_driver.py"), str(db), str(tmp_path / "lot"), "2"]
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, start_new_session=True)
    try:
        deadline = time.monotonic() + 60
        count = 0
        while time.monotonic() < deadline:
            time.sleep(0.1)
            if db.exists():
                try:
                    con = sqlite3.connect(db, timeout=5)
                    count = con.execute("SELECT COUNT(*) FROM inspection").fetchone()[0]
                    con.close()
                except sqlite3.OperationalError:
                    count = 0  # schema not created yet
            if count >= 4:
                break
        assert proc.poll() is None, proc.stderr.read().decode()
        os.killpg(proc.pid, signal.SIGKILL)  # the hardest stop: no cleanup code runs at all
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
    con = sqlite3.connect(db)
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"  # the file itself is sound after the kill
    con.close()
    store = open_store(db)
    before = store.find(RecordFilter(lot="K1"))
    assert 4 <= len(before) < n, "the kill must land in the middle of the lot"
    assert all(r.intact() for r in before)
    store.close()
    env["RG_TEST_DELAY_S"] = "0"
    out = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert f"recorded {n - len(before)} skipped {len(before)}" in out.stdout
    store = open_store(db)
    after = store.find(RecordFilter(lot="K1", include_superseded=True))
    shas = [r.image_sha256 for r in after]
    assert len(after) == n and len(set(shas)) == n  # nothing lost, nothing doubled
    assert {sha256_file(p) for p in find_images(tmp_path / "lot")} == set(shas)
    assert [r.id for r in before] == [r.id for r in after[: len(before)]]  # earlier records untouched
    assert sum(r.status == "failed" for r in after) == 1
    store.close()


@pytest.mark.slow
@pytest.mark.postgres
def test_lot_on_a_shared_postgresql_store(tmp_path, pg_url):
    """Two benches sharing one server: the second run of the lot finds every image already recorded."""
    make_folder(tmp_path / "lot", 5, bad=1)
    with open_store(pg_url) as bench1:
        run = run_lot(bench1, find_images(tmp_path / "lot"), default_setup(10.0), RecordMeta(lot="PG1"),
                      workers=2, analyse_fn=fake_analyse, progress=False, max_images=3)
        assert (run.recorded, run.skipped) == (3, 0)
    with open_store(pg_url) as bench2:
        run = run_lot(bench2, find_images(tmp_path / "lot"), default_setup(10.0), RecordMeta(lot="PG1"),
                      workers=2, analyse_fn=fake_analyse, progress=False)
        assert (run.recorded, run.skipped) == (2, 3)
        recs = bench2.find(RecordFilter(lot="PG1"))
        assert len(recs) == 5 and len({r.image_sha256 for r in recs}) == 5
        assert sum(r.status == "failed" for r in recs) == 1 and all(r.intact() for r in recs)


@pytest.mark.slow
@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_ctrl_c_or_term_stops_cleanly_and_resumes(tmp_path, sig):
    n = 12
    make_folder(tmp_path / "lot", n)
    db = tmp_path / "r.sqlite"
    env = {**os.environ, "RG_TEST_DELAY_S": "1.0", "RINGGAUGE_HOME": str(tmp_path / "home")}
    cmd = [sys.executable, str(HERE / "batch_driver.py"), str(db), str(tmp_path / "lot"), "2"]
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, start_new_session=True)
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            time.sleep(0.1)
            try:
                con = sqlite3.connect(db, timeout=5)
                if con.execute("SELECT COUNT(*) FROM inspection").fetchone()[0] >= 2:
                    con.close()
                    break
                con.close()
            except sqlite3.OperationalError:
                pass
        os.kill(proc.pid, sig)  # the parent only, as a terminal's Ctrl-C or a service stop would
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
    assert proc.returncode == 0, err.decode()
    assert b"interrupted True" in out and b"stopping" in err
    with open_store(db) as store:
        first = len(store.find(RecordFilter(lot="K1")))
    assert 2 <= first < n
    env["RG_TEST_DELAY_S"] = "0"
    out = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=120)
    assert f"recorded {n - first} skipped {first}" in out.stdout
    with open_store(db) as store:
        recs = store.find(RecordFilter(lot="K1", include_superseded=True))
    assert len(recs) == n and len({r.image_sha256 for r in recs}) == n


@pytest.mark.slow
def test_a_worker_crash_is_pinned_on_its_image(tmp_path):
    from fakelab import crashing_analyse

    paths = make_folder(tmp_path / "lot", 6)
    paths[2].rename(tmp_path / "lot" / "crash002.png")
    store = open_store(tmp_path / "r.sqlite")
    run = run_lot(store, find_images(tmp_path / "lot"), default_setup(10.0), RecordMeta(lot="C"), workers=2,
                  analyse_fn=crashing_analyse, progress=False)
    recs = store.find(RecordFilter(lot="C"))
    assert (run.recorded, run.failed) == (6, 1) and len(recs) == 6
    failed = [r for r in recs if r.status == "failed"]
    assert [r.image_name for r in failed] == ["crash002.png"] and "crashed" in failed[0].failure_reason
    store.close()
