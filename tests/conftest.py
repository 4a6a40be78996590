import os

import pytest

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")


@pytest.fixture(autouse=True)
def _ringgauge_home(tmp_path, monkeypatch):
    """Every test gets its own settings folder, so nothing touches the user's files."""
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "ringgauge-home"))
