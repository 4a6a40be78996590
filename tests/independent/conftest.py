"""Independent robustness tests of the radius engine: images from this folder's own ring model."""

import pytest


@pytest.fixture(autouse=True)
def _home(tmp_path, monkeypatch):
    # settings, crash logs and records of the CLI go to a temporary folder, never the user's
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
