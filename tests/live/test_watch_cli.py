"""``ringgauge watch`` and ``ringgauge simulate --sequence`` from the command line."""

import json
import socket
import subprocess
import sys
import threading
import time

import cv2
import pytest
from live_common import PIXEL_UM, SOURCE

from ringgauge.cli import main

SETUP = ["--source", SOURCE, "--pixel-size", str(PIXEL_UM)]


def test_watch_json_lines_parse_and_end_at_end_of_file(sequences, capsys):
    seq = sequences[("centre", "pressing")]
    rc = main(["watch", "--camera", seq["video"], *SETUP, "--json"])
    assert rc == 0
    lines = capsys.readouterr().out.splitlines()
    rows = [json.loads(line) for line in lines]
    assert [r["frame"] for r in rows] == list(range(seq["truth"]["frames"]))
    for r in rows:
        assert {"frame", "radius_mm", "radius_u_mm", "settled", "power_sign"} <= set(r)
        assert isinstance(r["settled"], bool)
        assert r["power_sign"] in ("+", "-", "unknown")
        assert r["radius_u_mm"] > 0
    assert rows[-1]["power_sign"] == "+" and rows[-1]["settled"] is True


def test_watch_text_mode(sequences, capsys):
    seq = sequences[("edge", "settling")]
    rc = main(["watch", "--camera", seq["video"], *SETUP, "--max-frames", "5"])
    out, err = capsys.readouterr()
    assert rc == 0
    lines = out.splitlines()
    assert len(lines) == 5 and all(line.startswith("frame") and " mm ± " in line for line in lines)
    assert "5 frames analysed, 0 dropped" in err


def test_watch_numbered_frames_folder(tmp_path, capsys):
    folder = tmp_path / "frames"
    rc = main(["simulate", "--sequence", "--out", str(folder), "--source", SOURCE, "--pixel-size", "16",
               "--width", "320", "--height", "256", "--radius", "800", "--settle-frames", "6", "--rest-frames", "3",
               "--press-frames", "0", "--after-frames", "0"])
    assert rc == 0
    truth = json.loads((folder / "truth.json").read_text())
    assert truth["frames"] == 9 and len(list(folder.glob("frame_*.png"))) == 9
    capsys.readouterr()
    assert main(["watch", "--camera", str(folder), *SETUP, "--json"]) == 0
    rows = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    assert len(rows) == 9 and all(r["radius_mm"] for r in rows)


def test_simulate_sequence_writes_a_video_with_its_truth(tmp_path, capsys):
    out = tmp_path / "s.avi"
    rc = main(["simulate", "--sequence", "--out", str(out), "--source", SOURCE, "--pixel-size", "16", "--width",
               "160", "--height", "128", "--radius", "400", "--settle-frames", "4", "--rest-frames", "2",
               "--press-frames", "2", "--after-frames", "1", "--contact", "edge"])
    assert rc == 0
    truth = json.loads(out.with_suffix(".truth.json").read_text())
    assert truth["power_sign"] == "-" and truth["frames"] == 9 and len(truth["gap_offset_nm"]) == 9
    cap = cv2.VideoCapture(str(out))
    n = 0
    while cap.read()[0]:
        n += 1
    assert n == 9


def _run(args, timeout=60):
    t = time.monotonic()
    p = subprocess.run([sys.executable, "-m", "ringgauge", *args], capture_output=True, text=True, timeout=timeout)
    return p, time.monotonic() - t


@pytest.mark.parametrize("kind", ["missing", "not-video", "camera", "empty-folder", "stream"])
def test_bad_source_one_line_nonzero_no_hang(tmp_path, kind):
    spec = {
        "missing": str(tmp_path / "nothing.avi"),
        "not-video": str(tmp_path / "notes.avi"),
        "camera": "7",
        "empty-folder": str(tmp_path / "empty"),
        "stream": "rtsp://127.0.0.1:9/bench",
    }[kind]
    (tmp_path / "notes.avi").write_text("not a video at all\n")
    (tmp_path / "empty").mkdir()
    p, _ = _run(["watch", "--camera", spec, *SETUP, "--json", "--open-timeout", "3"])
    assert p.returncode == 2
    assert p.stdout == ""
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("ringgauge: "), p.stderr
    assert "Traceback" not in p.stderr


def test_silent_stream_times_out(tmp_path):
    # a server that accepts the connection and never answers: the open is bounded by --open-timeout
    srv = socket.socket()
    srv.bind(("127.0.0.1", 0))
    srv.listen(4)
    port = srv.getsockname()[1]
    held = []
    stop = threading.Event()

    def accept():
        srv.settimeout(0.2)
        while not stop.is_set():
            try:
                held.append(srv.accept()[0])
            except OSError:
                pass

    th = threading.Thread(target=accept, daemon=True)
    th.start()
    try:
        p, took = _run(["watch", "--camera", f"http://127.0.0.1:{port}/live.mjpg", *SETUP, "--open-timeout", "2"])
    finally:
        stop.set()
        th.join(2)
        for c in held:
            c.close()
        srv.close()
    assert p.returncode == 2
    assert "did not answer within 2 s" in p.stderr and len(p.stderr.strip().splitlines()) == 1
    assert took < 20


@pytest.mark.parametrize("extra,words", [
    (["--settle-fringes", "0.7"], "between 0 and 0.5"),
    (["--max-frames", "0"], "at least 1"),
    (["--open-timeout", "0"], "between 0 and 120"),
    (["--settle-frames", "1"], "must be at least 2"),
])
def test_watch_bad_options_one_line(sequences, capsys, extra, words):
    seq = sequences[("centre", "pressing")]
    rc = main(["watch", "--camera", seq["video"], *SETUP, *extra])
    err = capsys.readouterr().err
    assert rc == 2 and words in err and len(err.strip().splitlines()) == 1, err


def test_gui_camera_missing_file_stops_before_the_window(tmp_path, capsys):
    rc = main(["gui", "--camera", str(tmp_path / "nope.avi")])
    err = capsys.readouterr().err
    assert rc == 2 and "no such file" in err and len(err.strip().splitlines()) == 1


def test_watch_refuses_frames_over_the_pixel_budget(sequences, capsys):
    from ringgauge.imaging import set_pixel_budget

    seq = sequences[("centre", "pressing")]  # 320 x 256 px = 0.08 MP
    try:
        rc = main(["watch", "--camera", seq["video"], *SETUP, "--max-megapixels", "0.05"])
    finally:
        set_pixel_budget(None)  # the option sets this process's budget (and its environment) for good
    err = capsys.readouterr().err
    assert rc == 2 and "exceed the limit of 0.05 megapixels" in err and len(err.strip().splitlines()) == 1


def test_ctrl_c_stops_watch_cleanly(sequences, tmp_path):
    import signal

    # a long file played as a camera (--realtime), interrupted once frames are coming
    cap = cv2.VideoCapture(sequences[("centre", "pressing")]["video"])
    frames = []
    while True:
        ok, img = cap.read()
        if not ok:
            break
        frames.append(img)
    long = tmp_path / "long.avi"
    w = cv2.VideoWriter(str(long), cv2.VideoWriter_fourcc(*"MJPG"), 25.0, frames[0].shape[1::-1], True)
    for _ in range(20):
        for f in frames:
            w.write(f)
    w.release()
    p = subprocess.Popen([sys.executable, "-m", "ringgauge", "watch", "--camera", str(long), *SETUP, "--realtime"],
                         stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                         preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    try:
        first = p.stdout.readline()
        assert first.startswith("frame"), first
        p.send_signal(signal.SIGINT)
        out, err = p.communicate(timeout=20)
    finally:
        if p.poll() is None:
            p.kill()
            p.wait()
    assert p.returncode == 130
    assert err.strip().splitlines()[-1] == "ringgauge: interrupted" and "Traceback" not in err
