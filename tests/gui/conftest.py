"""Fixtures for the window's tests: an offscreen Qt platform (set before Qt is imported), a private
RINGGAUGE_HOME, sample images and a hand-made engine."""

import os
import shutil

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402
from gui_helpers import FakeEngine, write_rings  # noqa: E402


@pytest.fixture(autouse=True)
def rg_home(tmp_path, monkeypatch):
    home = tmp_path / "home"
    monkeypatch.setenv("RINGGAUGE_HOME", str(home))
    return home


@pytest.fixture(scope="session")
def _sample_images(tmp_path_factory):
    d = tmp_path_factory.mktemp("sample-images")
    write_rings(d / "lens-A01.png", seed=1)
    write_rings(d / "lens-A02.png", seed=2, radius_mm=650.0)
    return d


@pytest.fixture
def sample_dir(tmp_path, _sample_images):
    """Two synthetic lens images (made once per session), copied into a folder of the test's own."""
    d = tmp_path / "images"
    shutil.copytree(_sample_images, d)
    return d


@pytest.fixture
def fake_engine():
    return FakeEngine()


@pytest.fixture
def app(qapp):
    from ringgauge.gui.app import make_app

    return make_app()
