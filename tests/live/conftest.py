"""Generated bench sequences, written once per test session as MJPG videos and played back through VideoCapture.

Small frames (320 x 256, 16 µm pixels, mercury e-line, R = 800 mm: about 24 rings) keep the rendering quick; the
sequences are seeded, so every run plays the same files.
"""

import json
import os

import pytest

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

from live_common import CAMERA, PRESS, RADIUS_MM, SETTLE, SOURCE  # noqa: E402

from ringgauge.live.sequence import SequencePlan, write_sequence  # noqa: E402


@pytest.fixture(autouse=True)
def _ringgauge_home(tmp_path, monkeypatch):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "ringgauge-home"))


def _make(tmp_path_factory, name, contact, kw, seed):
    d = tmp_path_factory.mktemp(name)
    plan = SequencePlan(radius_mm=RADIUS_MM, contact=contact, **kw)
    video, truth = write_sequence(d / f"{name}.avi", plan, source=SOURCE, camera=CAMERA, rng=seed)
    return {"video": str(video), "truth": json.loads(truth.read_text()), "plan": plan}


@pytest.fixture(scope="session")
def sequences(tmp_path_factory):
    """Four generated videos: centre / edge contact, settling / pressing."""
    return {
        ("centre", "settling"): _make(tmp_path_factory, "centre_settle", "centre", SETTLE, 11),
        ("edge", "settling"): _make(tmp_path_factory, "edge_settle", "edge", SETTLE, 12),
        ("centre", "pressing"): _make(tmp_path_factory, "centre_press", "centre", PRESS, 13),
        ("edge", "pressing"): _make(tmp_path_factory, "edge_press", "edge", PRESS, 14),
    }
