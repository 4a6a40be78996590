"""Settings files are written one safe way: atomic replace under a lock, damaged files reported in one line,
and a read-modify-write of the test-plate register by two processes at once loses nothing."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from ringgauge import settings
from ringgauge.errors import RinggaugeError

REPO = Path(__file__).resolve().parents[1]


def test_atomic_write_round_trip_and_no_temp_left(tmp_path):
    target = tmp_path / "a.json"
    settings.write_json_atomic(target, {"x": 1, "name": "Prüfling µ"})
    assert settings.read_json(target, what="test file") == {"x": 1, "name": "Prüfling µ"}
    settings.write_json_atomic(target, {"x": 2})
    assert json.loads(target.read_text(encoding="utf-8")) == {"x": 2}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.json", "a.json.lock"]


def test_atomic_write_keeps_permissions(tmp_path):
    target = tmp_path / "p.json"
    target.write_text("{}")
    os.chmod(target, 0o600)
    settings.write_json_atomic(target, {"y": 1})
    assert (target.stat().st_mode & 0o777) == 0o600


def test_failed_write_leaves_old_file_and_no_temp(tmp_path, monkeypatch):
    target = tmp_path / "b.json"
    settings.write_json_atomic(target, {"old": True})

    def boom(*a, **k):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "fsync", boom)
    with pytest.raises(RinggaugeError, match=r"^cannot write .*b\.json: No space left on device$"):
        settings.write_json_atomic(target, {"new": True})
    monkeypatch.undo()
    assert settings.read_json(target, what="x") == {"old": True}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["b.json", "b.json.lock"]


def test_non_finite_json_refused(tmp_path):
    with pytest.raises(RinggaugeError, match="not finite"):
        settings.write_json_atomic(tmp_path / "c.json", {"v": float("inf")})
    assert not (tmp_path / "c.json").exists()


@pytest.mark.parametrize("raw", [b"{bad", b"\xff\xfe\x00garbage", b'{"a": NaN}', b"[" * 100000])
def test_damaged_json_is_one_line(tmp_path, raw):
    target = tmp_path / "d.json"
    target.write_bytes(raw)
    with pytest.raises(RinggaugeError) as ei:
        settings.read_json(target, what="the test-plate register")
    msg = str(ei.value)
    assert "\n" not in msg and msg.startswith("the test-plate register ") and "damaged" in msg


def test_write_to_a_folder_is_one_line(tmp_path):
    with pytest.raises(RinggaugeError, match="is a folder"):
        settings.write_text_atomic(tmp_path, "x")


def test_home_pointing_at_a_file(tmp_path, monkeypatch):
    f = tmp_path / "afile"
    f.write_text("x")
    monkeypatch.setenv("RINGGAUGE_HOME", str(f))
    with pytest.raises(RinggaugeError, match=r"^RINGGAUGE_HOME .*afile is not a folder"):
        settings.home()


def test_lock_timeout_is_one_line(tmp_path):
    target = tmp_path / "e.json"
    holder = subprocess.Popen(
        [sys.executable, "-c", textwrap.dedent(f"""
            import sys, time
            from ringgauge import settings
            with settings.locked({str(target)!r}):
                print("held", flush=True)
                time.sleep(30)
        """)], stdout=subprocess.PIPE, text=True, cwd=REPO)
    try:
        assert holder.stdout.readline().strip() == "held"
        with pytest.raises(RinggaugeError, match="being changed by another ringgauge process"):
            with settings.locked(target, timeout=0.3):
                pass
    finally:
        holder.kill()
        holder.wait()


_ADDER = textwrap.dedent("""
    import sys, time
    from pathlib import Path
    from ringgauge.form import plates
    reg, tag, n, go = Path(sys.argv[1]), sys.argv[2], int(sys.argv[3]), Path(sys.argv[4])
    while not go.exists():
        time.sleep(0.005)
    for i in range(n):
        plates.add_plate({"id": f"TP-{tag}{i:03d}", "radius_mm": 50 + i, "kind": "concave",
                          "radius_u_mm": 0.002, "calibrated": "2026-03-14"}, reg)
""")


def test_two_processes_adding_plates_lose_nothing(tmp_path):
    reg = tmp_path / "test_plates.json"
    go = tmp_path / "go"
    n = 25
    procs = [subprocess.Popen([sys.executable, "-c", _ADDER, str(reg), tag, str(n), str(go)], cwd=REPO)
             for tag in ("A", "B")]
    time.sleep(0.5)  # both interpreters loaded before the start signal, so the writes overlap
    go.write_text("go")
    for p in procs:
        assert p.wait(timeout=120) == 0
    from ringgauge.form import plates

    ids = sorted(pl.id for pl in plates.load_register(reg))
    assert ids == sorted([f"TP-A{i:03d}" for i in range(n)] + [f"TP-B{i:03d}" for i in range(n)])
    assert not [p.name for p in tmp_path.iterdir() if p.name.endswith(".tmp")]


@pytest.mark.parametrize("kind", ["fifo", "folder", "missing"])
def test_user_named_files_never_block(tmp_path, kind):
    p = tmp_path / "thing.json"
    if kind == "fifo":
        os.mkfifo(p)
    elif kind == "folder":
        p.mkdir()
    with pytest.raises(RinggaugeError) as ei:
        settings.read_regular_bytes(p, what="the lot sheet")
    msg = str(ei.value)
    assert msg.startswith("the lot sheet ") and "\n" not in msg
    assert {"fifo": "not a regular file", "folder": "is a folder", "missing": "no such file"}[kind] in msg



def test_one_off_outputs_leave_no_lock_file(tmp_path):
    settings.write_text_atomic(tmp_path / "records.csv", "a,b\n", lock=False)
    assert [p.name for p in tmp_path.iterdir()] == ["records.csv"]


def test_records_key_that_is_a_pipe_is_refused(tmp_path, monkeypatch):
    from ringgauge.records import keys

    fifo = tmp_path / "records.key"
    os.mkfifo(fifo, 0o600)
    monkeypatch.setenv("RINGGAUGE_RECORDS_KEY", str(fifo))
    with pytest.raises(RinggaugeError, match="is not a regular file"):
        keys.load_key()
