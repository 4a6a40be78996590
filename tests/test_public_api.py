"""The public API at the top of the package: every name resolves, nothing heavy is imported until a name is
used, and the API measures a generated image."""

from __future__ import annotations

import subprocess
import sys

import pytest

import ringgauge

PUBLIC = ["analyse", "analyse_files", "BenchSetup", "load_frame", "get_source", "AnalysisResult", "RingFit",
          "Ring", "ImageInfo", "FormResult"]


def test_every_public_name_resolves_and_is_listed():
    assert set(PUBLIC) <= set(ringgauge.__all__)
    assert set(PUBLIC) <= set(dir(ringgauge))
    for name in ringgauge.__all__:
        obj = getattr(ringgauge, name)
        if name not in ("__version__",):
            assert getattr(obj, "__name__", None) == name, name  # the real object, not a placeholder
    with pytest.raises(AttributeError):
        ringgauge.no_such_name  # noqa: B018


def test_import_is_lazy():
    code = ("import sys, ringgauge\n"
            "heavy = [m for m in ('numpy', 'scipy', 'cv2', 'PySide6', 'ringgauge.pipeline') if m in sys.modules]\n"
            "assert not heavy, heavy\n"
            "ringgauge.get_source\n"
            "assert 'numpy' not in sys.modules or 'ringgauge.pipeline' not in sys.modules\n"
            "ringgauge.analyse\n"
            "assert 'ringgauge.pipeline' in sys.modules\n")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr[-2000:]


def test_the_api_measures_a_generated_image(tmp_path):
    from ringgauge import synth
    from ringgauge.imaging import save_png

    radius = 800.0
    img = synth.newton_rings(radius, source="sodium-d", rng=7)
    path = tmp_path / "lens.png"
    save_png(path, img.image01)
    pixel = img.truth["camera"]["pixel_um"]

    frame = ringgauge.load_frame(path)
    setup = ringgauge.BenchSetup(ringgauge.get_source("sodium-d"), pixel_size_um=pixel, pixel_size_u_um=0.01 * pixel)
    result = ringgauge.analyse(frame, setup)

    assert isinstance(result, ringgauge.AnalysisResult)
    assert isinstance(result.fit, ringgauge.RingFit) and isinstance(result.image, ringgauge.ImageInfo)
    assert all(isinstance(r, ringgauge.Ring) for r in result.fit.rings)
    # the generated image's own radius lies within the expanded uncertainty the analysis states
    assert result.radius_U_mm > 0
    assert abs(result.radius_mm - radius) <= result.radius_U_mm
