"""Frame sources: newest-frame delivery with dropped frames counted, lost and regained tracks."""

import time

import cv2
import numpy as np
from live_common import setup_for_tests

from ringgauge.live.session import LiveSession
from ringgauge.live.source import CaptureSource, open_source


def test_camera_like_playback_drops_frames_rather_than_lag(sequences):
    seq = sequences[("centre", "pressing")]
    src = CaptureSource(seq["video"], pace=True)
    try:
        a = src.read()
        time.sleep(0.5)  # a busy analysis: at 25 frames/s about 12 frames arrive meanwhile
        b = src.read()
    finally:
        src.close()
    assert a.index == 0
    assert b.index >= 5, b.index  # the newest frame, not the next one in the queue
    assert src.dropped == b.index - a.index - 1


def test_file_played_frame_by_frame_drops_nothing(sequences):
    seq = sequences[("centre", "pressing")]
    with open_source(seq["video"]) as src:
        idx = [f.index for f in src]
    assert idx == list(range(seq["truth"]["frames"])) and src.dropped == 0


def test_track_lost_on_a_blank_frame_and_found_again(sequences, tmp_path):
    seq = sequences[("edge", "settling")]
    cap = cv2.VideoCapture(seq["video"])
    n = seq["truth"]["frames"]
    for i in range(n):
        ok, img = cap.read()
        assert ok
        if i == 6:
            img = np.full_like(img, 90)  # the lamp flickered off, or a hand passed over the part
        cv2.imwrite(str(tmp_path / f"f{i:03d}.png"), img)
    with open_source(str(tmp_path)) as src:
        states = list(LiveSession(src, setup_for_tests()))
    assert [st.ok for st in states] == [True] * 6 + [False] + [True] * (n - 7)
    assert "no ring system" in states[6].message or "contrast" in states[6].message, states[6].message
    assert not states[7].settled  # the settle window starts again after a lost track
    # the track found again goes on to read the sign when the part comes to rest
    assert states[-1].settled and states[-1].power_sign == "-"
