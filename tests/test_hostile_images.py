"""Hostile image files: refused in one line before they cost memory or time, never a hang, never a traceback,
never a library warning on the terminal."""

from __future__ import annotations

import os
import resource
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest

from hostile_files import bmp_bomb, jpeg_bomb, png_bomb, tiff_bomb
from ringgauge.errors import ImageError
from ringgauge.imaging import frame_from_array, load_frame, save_png, set_pixel_budget

REPO = Path(__file__).resolve().parents[1]
SAMPLE = REPO / "sample_images" / "lot-FH2604" / "FH2604-01.png"
CLI_ARGS = ["--source", "sodium-d", "--pixel-size", "8"]


@pytest.fixture(autouse=True)
def _default_budget(monkeypatch):
    monkeypatch.delenv("RINGGAUGE_MAX_MEGAPIXELS", raising=False)
    set_pixel_budget(None)
    yield
    set_pixel_budget(None)


def _rings(n: int = 96) -> np.ndarray:
    yy, xx = np.mgrid[0:n, 0:n]
    return (0.5 + 0.4 * np.cos(((xx - n / 2) ** 2 + (yy - n / 2) ** 2) / 40.0)).astype(np.float32)


def _cli(*args: str, mem_mb: int | None = None, timeout: float = 60.0, env: dict | None = None):
    def limit():
        if mem_mb:
            resource.setrlimit(resource.RLIMIT_AS, (mem_mb << 20, mem_mb << 20))

    e = {**os.environ, **(env or {})}
    return subprocess.run([sys.executable, "-m", "ringgauge", *args], capture_output=True, text=True,
                          timeout=timeout, preexec_fn=limit, env=e, cwd=REPO)


# --------------------------------------------------------------------------------------- declared sizes


@pytest.mark.parametrize("make, fmt, w, h", [
    (lambda p: png_bomb(p / "a.png", 16000, 16000), "PNG", 16000, 16000),
    (lambda p: png_bomb(p / "a.png", 20000, 20000, bit_depth=16), "PNG", 20000, 20000),
    (lambda p: png_bomb(p / "a.png", 30000, 30000, colour_type=2), "PNG", 30000, 30000),
    (lambda p: tiff_bomb(p / "a.tif", 30000, 30000), "TIFF", 30000, 30000),
    (lambda p: jpeg_bomb(p / "a.jpg", 60000, 60000), "JPEG", 60000, 60000),
    (lambda p: bmp_bomb(p / "a.bmp", 20000, 20000), "BMP", 20000, 20000),
])
def test_declared_size_refused_before_decoding(tmp_path, make, fmt, w, h):
    f = make(tmp_path)
    assert f.stat().st_size < 10_000  # a small file...
    with pytest.raises(ImageError) as ei:
        load_frame(f)
    mp = w * h / 1e6
    assert str(ei.value) == (f"{f}: the {fmt} header declares {w}x{h} pixels ({mp:.0f} megapixels), more than the "
                             "limit of 100 megapixels; raise it with --max-megapixels if the image is genuine")


def test_png_bomb_under_a_memory_limit_is_one_line(tmp_path):
    # 16000 x 16000 used to peak at 5.1 GiB; with 1.5 GB of address space the refusal must still be clean
    f = png_bomb(tmp_path / "bomb.png", 16000, 16000)
    r = _cli("analyze", str(f), *CLI_ARGS, mem_mb=1500)
    assert r.returncode == 2, r.stderr
    assert r.stderr.count("\n") == 1 and "declares 16000x16000 pixels" in r.stderr
    assert "Traceback" not in r.stderr


def test_budget_option_raises_and_lowers_the_limit(tmp_path):
    r = _cli("analyze", str(SAMPLE), *CLI_ARGS, "--max-megapixels", "0.5")
    assert r.returncode == 2
    assert r.stderr.strip().endswith("declares 1024x768 pixels (0.79 megapixels), more than the limit of 0.5 "
                                     "megapixels; raise it with --max-megapixels if the image is genuine")
    with pytest.raises(ImageError, match="more than the limit of 0.5 megapixels"):
        load_frame(SAMPLE, max_megapixels=0.5)
    assert load_frame(SAMPLE, max_megapixels=0.8).shape == (768, 1024)
    f = png_bomb(tmp_path / "b.png", 12000, 12000)  # 144 MP: over the default, allowed with the option
    with pytest.raises(ImageError, match="more than the limit of 100 megapixels"):
        load_frame(f)
    set_pixel_budget(200)
    assert os.environ["RINGGAUGE_MAX_MEGAPIXELS"] == "200.0"  # worker processes inherit it
    with pytest.raises(ImageError) as ei:  # allowed now, but the file is truncated: one line from the decoder
        load_frame(f)
    assert "cannot decode" in str(ei.value) and "\n" not in str(ei.value)


@pytest.mark.parametrize("value", ["nan", "inf", "0", "-5", "1e9", "lots"])
def test_budget_option_refuses_bad_values(value):
    r = _cli("analyze", str(SAMPLE), *CLI_ARGS, "--max-megapixels", value)
    assert r.returncode == 2 and r.stderr.startswith("ringgauge: argument --max-megapixels: ")
    assert r.stderr.count("\n") == 1


def test_bad_budget_in_the_environment():
    r = _cli("analyze", str(SAMPLE), *CLI_ARGS, env={"RINGGAUGE_MAX_MEGAPIXELS": "nan"})
    assert r.returncode == 2
    assert r.stderr == ("ringgauge: RINGGAUGE_MAX_MEGAPIXELS='nan' is not a number of megapixels in (0, 1000]; "
                        "fix or unset it\n")


# ------------------------------------------------------------------------------------- not regular files


def test_fifo_is_refused_without_hanging(tmp_path):
    fifo = tmp_path / "frame.png"
    os.mkfifo(fifo)
    t0 = time.monotonic()
    r = _cli("analyze", str(fifo), *CLI_ARGS, timeout=30)  # a hang would raise TimeoutExpired here
    assert time.monotonic() - t0 < 30
    assert r.returncode == 2
    assert r.stderr == (f"ringgauge: {fifo}: is a named pipe (FIFO), not an image file; save the frame to a file "
                        "and give that\n")
    link = tmp_path / "link.png"
    link.symlink_to(fifo)
    with pytest.raises(ImageError, match="is a named pipe"):
        load_frame(link)


@pytest.mark.parametrize("dev", ["/dev/zero", "/dev/null", "/dev/urandom"])
def test_devices_are_refused(dev):
    if not os.path.exists(dev):
        pytest.skip(f"{dev} not on this system")
    with pytest.raises(ImageError) as ei:
        load_frame(dev)
    assert str(ei.value) == f"{dev}: is a device, not an image file; save the frame to a file and give that"


def test_folder_empty_and_missing(tmp_path):
    with pytest.raises(ImageError, match="is a folder, not an image file"):
        load_frame(tmp_path)
    (tmp_path / "e.png").write_bytes(b"")
    with pytest.raises(ImageError, match=r"the file is empty \(0 bytes\)$"):
        load_frame(tmp_path / "e.png")
    with pytest.raises(ImageError, match="no such file"):
        load_frame(tmp_path / "none.png")


# --------------------------------------------------------------------------------- TIFF pages and types


def test_multi_page_tiff_uses_page_one_and_says_so(tmp_path):
    tifffile = pytest.importorskip("tifffile")
    first = (_rings() * 255).astype(np.uint8)
    pages = np.stack([first] + [np.full_like(first, 7)] * 199)
    tifffile.imwrite(tmp_path / "stack.tif", pages, photometric="minisblack")
    frame = load_frame(tmp_path / "stack.tif")
    assert np.array_equal(frame.data, (first / np.float32(255)).astype(np.float32))
    assert "stack.tif: the TIFF file holds 200 pages; only the first was used (give one frame per file)" \
        in frame.notes


def test_complex_tiff_refused(tmp_path):
    tifffile = pytest.importorskip("tifffile")
    tifffile.imwrite(tmp_path / "c.tif", _rings().astype(np.complex64))
    with pytest.raises(ImageError) as ei:
        load_frame(tmp_path / "c.tif")
    assert str(ei.value) == (f"{tmp_path / 'c.tif'}: the TIFF holds complex numbers, not intensities; save the "
                             "intensity as a greyscale image")
    r = _cli("analyze", str(tmp_path / "c.tif"), *CLI_ARGS)
    assert r.returncode == 2 and r.stderr.count("\n") == 1 and "Warning" not in r.stderr


def test_float_tiff_with_nan_refused(tmp_path):
    tifffile = pytest.importorskip("tifffile")
    img = _rings()
    img[3, 4] = np.nan
    tifffile.imwrite(tmp_path / "n.tif", img)
    with pytest.raises(ImageError, match="NaN or infinite"):
        load_frame(tmp_path / "n.tif")


def test_complex_array_refused_in_memory():
    with pytest.raises(ImageError, match="complex numbers"):
        frame_from_array(_rings().astype(np.complex128))


# ---------------------------------------------------------------------------------------- float32 frames


@pytest.mark.parametrize("bits", [8, 16])
def test_frames_made_in_float32_match_a_double_precision_reference(tmp_path, bits):
    img = _rings(200)
    save_png(tmp_path / "r.png", img, bits=bits)
    frame = load_frame(tmp_path / "r.png")
    import cv2

    raw = cv2.imread(str(tmp_path / "r.png"), cv2.IMREAD_UNCHANGED).astype(np.float64)
    full = 255.0 if bits == 8 else float((1 << frame.bit_depth) - 1)
    assert frame.data.dtype == np.float32
    np.testing.assert_allclose(frame.data, raw / full, rtol=0, atol=1e-7)


def test_colour_frame_picks_channel_and_luminance_without_float64_copies():
    grey = _rings(128)
    bgr = np.stack([grey * 0.05, grey, grey * 0.1], axis=2)
    f = frame_from_array((bgr * 255).astype(np.uint8))
    assert f.channel == "green" and f.data.dtype == np.float32
    same = np.repeat((grey * 255).astype(np.uint8)[:, :, None], 3, axis=2)
    g = frame_from_array(same)
    assert g.channel == "luminance"
    np.testing.assert_allclose(g.data, (grey * 255).astype(np.uint8) / 255.0, atol=2e-6)


# ------------------------------------------------------------------------------------- no library noise


def test_damaged_files_print_one_line_and_no_library_warning(tmp_path):
    good = SAMPLE.read_bytes()
    (tmp_path / "trunc.png").write_bytes(good[: len(good) // 3])
    (tmp_path / "garbage.tif").write_bytes(b"II*\0" + os.urandom(4000))
    (tmp_path / "text.jpg").write_text("not a picture")
    for f in ("trunc.png", "garbage.tif", "text.jpg"):
        r = _cli("analyze", str(tmp_path / f), *CLI_ARGS)
        assert r.returncode == 2, (f, r.stderr)
        assert r.stderr.count("\n") == 1 and r.stderr.startswith("ringgauge: "), (f, r.stderr)
        assert "Traceback" not in r.stderr and "Warning" not in r.stderr and "libpng" not in r.stderr


def test_loader_script_in_child_never_warns(tmp_path):
    tifffile = pytest.importorskip("tifffile")
    tifffile.imwrite(tmp_path / "stack.tif", np.stack([(_rings() * 255).astype(np.uint8)] * 3),
                     photometric="minisblack")
    code = textwrap.dedent(f"""
        import warnings
        warnings.simplefilter("error")
        from ringgauge.imaging import load_frame
        print(load_frame({str(tmp_path / 'stack.tif')!r}).notes[0])
    """)
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60, cwd=REPO)
    assert r.returncode == 0, r.stderr
    assert r.stderr == "" and "3 pages" in r.stdout


def test_camera_folder_frames_get_the_same_checks(tmp_path):
    from ringgauge.live.source import FolderSource

    save_png(tmp_path / "frame_00000.png", _rings())
    png_bomb(tmp_path / "frame_00001.png", 16000, 16000)
    os.mkfifo(tmp_path / "frame_00002.png")
    src = FolderSource(str(tmp_path))
    assert src.read() is not None
    with pytest.raises(ImageError, match="declares 16000x16000 pixels"):
        src.read()
    src._i = 2
    with pytest.raises(ImageError, match="is a named pipe"):
        src.read()


def test_fifo_with_aperture_option_does_not_hang(tmp_path):
    fifo = tmp_path / "frame.png"
    os.mkfifo(fifo)
    r = _cli("analyze", str(fifo), *CLI_ARGS, "--aperture", "10", "10", "10", timeout=30)
    assert r.returncode == 2 and "is a named pipe" in r.stderr and r.stderr.count("\n") == 1
