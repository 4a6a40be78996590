"""The output a user sees does not change by accident: ``analyze --json`` on every sample image and the text of
every demo certificate and lot report, against the golden copies in ``tests/golden`` (written by
``tests/golden/capture.py``; volatile parts such as run times, versions, dates and record identifiers are
normalised away there)."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent / "golden"))
import capture  # noqa: E402

GOLDEN = Path(__file__).resolve().parent / "golden"


@pytest.mark.parametrize("name", sorted(capture.cases()))
def test_analyze_json_unchanged(name, tmp_path, monkeypatch):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path))
    want = json.loads((GOLDEN / "analyze" / f"{name}.json").read_text())
    got = capture.run_analyze(capture.cases()[name])
    got = json.loads(json.dumps(got))  # tuples to lists, as the golden copy was read
    diffs = capture.numbers_close(want, got)
    assert not diffs, f"{name}: {len(diffs)} difference(s), first: " + "; ".join(diffs[:8])


def test_demo_documents_unchanged(tmp_path):
    got = capture.demo_documents(tmp_path)
    want = {p.stem: p.read_text() for p in sorted((GOLDEN / "documents").glob("*.txt"))}
    assert sorted(got) == sorted(want)
    for name in want:
        assert got[name] == want[name], f"{name} differs from tests/golden/documents/{name}.txt"


def test_golden_comparison_can_fail():
    # the comparison itself: a changed digit, a missing key and a changed string are each reported
    a = {"x": 1.0, "y": [1, 2], "s": "mm"}
    assert capture.numbers_close(a, {"x": 1.0 + 1e-6, "y": [1, 2], "s": "mm"})
    assert capture.numbers_close(a, {"x": 1.0, "y": [1, 2]})
    assert capture.numbers_close(a, {"x": 1.0, "y": [1, 2], "s": "µm"})
    assert not capture.numbers_close(a, {"x": 1.0 + 1e-13, "y": [1, 2], "s": "mm"})
