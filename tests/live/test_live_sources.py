"""Frame sources: newest-frame delivery with dropped frames counted, lost and regained tracks."""

import time

import cv2
import numpy as np
import pytest
from live_common import setup_for_tests

from ringgauge.errors import InputError
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


def test_capture_set_keeps_few_images_and_the_motion_evidence(sequences):
    seq = sequences[("edge", "pressing")]
    with open_source(seq["video"]) as src:
        s = LiveSession(src, setup_for_tests())
        states = list(s)
    assert len(s.recent_frames) <= s.options.settle_frames + 6  # images are not hoarded (1 MB per megapixel)
    assert len(s.history) == len(states)  # the states (small) are all kept as evidence
    got = s.capture_set(1)
    assert [f.index for f in got["frames"]] == [states[-1].frame]
    ev = got["evidence"]
    assert ev["power_sign"] == "-" and [r["event"] for r in ev["readings"]] == ["press"]
    assert len(ev["motion_before"]) == len(states)
    # a frame that moved on past the kept images cannot be captured as if it were there
    first_settled = next(st.frame for st in states if st.settled)
    with pytest.raises(InputError, match="no longer held"):
        s.capture_set(1, at_frame=first_settled)
