"""A stand-in analysis for lot-runner tests that must control timing and failures.

It reads the image for real (``load_frame``), so unreadable files fail the way they do in production, and
returns a result of the shape ``AnalysisResult.to_dict()`` has. Values are invented, never check values.
File names containing ``bad`` raise an analysis error; ``RG_TEST_DELAY_S`` slows every image down.
"""

from __future__ import annotations

import copy
import os
import time

from ringgauge.errors import AnalysisError
from ringgauge.imaging import load_frame


def fake_analyse(path: str, setup) -> dict:
    from records_sample import _BASE  # the hand-made result shape shared with the store tests

    delay = float(os.environ.get("RG_TEST_DELAY_S", "0"))
    if delay:
        time.sleep(delay)
    frame = load_frame(path)
    if "bad" in os.path.basename(path):
        raise AnalysisError(f"{frame.name}: no ring system found; check focus and lighting")
    d = copy.deepcopy(_BASE)
    d["image"].update(path=path, sha256=frame.sha256, width=frame.shape[1], height=frame.shape[0])
    level = float(frame.data.mean())
    d["radius_mm"] = 50.0 + level
    d["form"]["power_fringes"] = 1.0 + level
    d["verdict"]["overall"] = "pass" if level < 0.6 else "fail"
    return d


def crashing_analyse(path: str, setup) -> dict:
    """Like :func:`fake_analyse`, but a file named ``crash*`` kills its worker process outright, the way a
    native-code crash would."""
    if os.path.basename(path).startswith("crash"):
        os._exit(139)
    return fake_analyse(path, setup)
