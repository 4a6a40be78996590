"""File formats: images from this folder's ring model written by general-purpose writers (Pillow, tifffile), read
through ``ringgauge.imaging.load_frame`` + ``analyse`` and through the command line (``cli.main``).

Formats from the issue: 8- and 16-bit greyscale PNG and TIFF, 12-bit data stored in 16-bit files, JPEG, colour.
"""

from __future__ import annotations

import json
import math
import re

import numpy as np
import pytest
import tifffile
from PIL import Image

import rings_model as M
from engine_runs import CENTRE_TOL_PX, RADIUS_TOL, cli_source_args, setup_for
from ringgauge.cli import main
from ringgauge.imaging import load_frame
from ringgauge.pipeline import analyse

W, H = 640, 480
CENTRE = (297.8, 251.3)
GREEN_DOMINANT = (0.12, 0.9, 0.45)  # blue, green, red gains: a green lamp on a colour camera


def _scene(bits=8, colour=None, spectrum=((M.HG_E_NM, 1.0),)) -> M.Scene:
    R = M.radius_for_rings(W, H, CENTRE, 26.0, 5.5, M.centroid_nm(spectrum))
    return M.Scene(
        width=W, height=H, pixel_um=5.5, radius_mm=R, centre_px=CENTRE, spectrum=spectrum, visibility=0.75,
        level=0.7, vignette_sigma=1.3, ramp=(0.2, 0.1), stray=0.05, blur_px=0.9, full_well_e=15000.0,
        read_noise_e=5.0, bits=bits, colour_gains=colour,
        dust=(M.Dust(150.0, 120.0, 5.0, "dark", 0.8), M.Dust(420.0, 330.0, 3.0, "glint", 0.6)),
    )


def _write_png(path, counts):
    if counts.ndim == 3:
        Image.fromarray(np.ascontiguousarray(counts[:, :, ::-1]), "RGB").save(path)  # BGR -> RGB
    elif counts.dtype == np.uint16:
        Image.fromarray(counts.astype(np.uint16)).save(path)  # Pillow writes uint16 as a 16-bit greyscale PNG
    else:
        Image.fromarray(counts, "L").save(path)


def _write_tiff(path, counts):
    if counts.ndim == 3:
        tifffile.imwrite(path, np.ascontiguousarray(counts[:, :, ::-1]), photometric="rgb")
    else:
        tifffile.imwrite(path, counts, photometric="minisblack")


def _write_jpeg(path, counts):
    if counts.ndim == 3:
        Image.fromarray(np.ascontiguousarray(counts[:, :, ::-1]), "RGB").save(path, quality=88)
    else:
        Image.fromarray(counts, "L").save(path, quality=88)


# name: (file name, scene, writer, codes transform, expected bit depth, expected channel, lossless)
FORMATS = {
    "PNG 8-bit grey": ("a.png", _scene(8), _write_png, None, 8, "grey", True),
    "PNG 16-bit grey": ("b.png", _scene(16), _write_png, None, 16, "grey", True),
    "PNG 16-bit holding 12-bit data": ("c.png", _scene(12), _write_png, None, 12, "grey", True),
    "TIFF 16-bit holding 12-bit data": ("d.tif", _scene(12), _write_tiff, None, 12, "grey", True),
    "TIFF 12-bit data shifted to the top bits": ("e.tiff", _scene(12), _write_tiff, lambda c: c << 4, 16, "grey", True),
    "TIFF 8-bit grey": ("f.tif", _scene(8), _write_tiff, None, 8, "grey", True),
    "JPEG grey": ("g.jpg", _scene(8), _write_jpeg, None, 8, "grey", False),
    "PNG colour, green dominant": ("h.png", _scene(8, GREEN_DOMINANT), _write_png, None, 8, "green", True),
    "JPEG colour, green dominant": ("i.jpeg", _scene(8, GREEN_DOMINANT), _write_jpeg, None, 8, "green", False),
    "TIFF colour 16-bit": ("j.tif", _scene(16, GREEN_DOMINANT), _write_tiff, None, 16, "green", True),
    "PNG colour, sodium (red and green)": (
        "k.png", _scene(8, (0.05, 0.7, 0.75), M.sodium_doublet()), _write_png, None, 8, None, True),
}


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("formats")
    out = {}
    for i, (name, (fname, scene, writer, transform, *_rest)) in enumerate(FORMATS.items()):
        codes = M.render(scene, 500 + i).counts
        if transform is not None:
            codes = transform(codes)
        writer(d / fname, codes)
        out[name] = (d / fname, codes)
    return out


def _check(scene, radius_mm, centre_px, what):
    rel = (radius_mm - scene.radius_mm) / scene.radius_mm
    cerr = math.hypot(centre_px[0] - scene.centre_px[0], centre_px[1] - scene.centre_px[1])
    msg = f"{what}: radius error {100 * rel:+.4f} %, centre error {cerr:.3f} px"
    print(msg)
    assert abs(rel) <= RADIUS_TOL, msg
    assert cerr <= CENTRE_TOL_PX, msg


@pytest.mark.parametrize("name", list(FORMATS))
def test_load_frame_reads_the_codes(files, name):
    path, codes = files[name]
    _fname, scene, _w, _t, bits, channel, lossless = FORMATS[name]
    frame = load_frame(path)
    assert frame.shape == (H, W)
    assert frame.bit_depth == bits
    if channel is not None:
        assert frame.channel == channel
    assert frame.data.dtype == np.float32 and 0.0 <= frame.data.min() and frame.data.max() <= 1.0
    if lossless and codes.ndim == 2:
        # the stored codes come back scaled to the file's own full scale (12-bit data: 4095)
        np.testing.assert_allclose(frame.data, codes / ((1 << bits) - 1), rtol=0, atol=1e-6)
    if lossless and channel == "green":
        np.testing.assert_allclose(frame.data, codes[:, :, 1] / ((1 << bits) - 1), rtol=0, atol=1e-6)


@pytest.mark.parametrize("name", list(FORMATS))
def test_format_through_load_frame_and_cli(files, name, capsys):
    path, _codes = files[name]
    scene = FORMATS[name][1]
    res = analyse(load_frame(path), setup_for(scene))
    _check(scene, res.radius_mm, res.centre_px, f"{name} (load_frame + analyse)")
    capsys.readouterr()  # keep only what the command prints

    rc = main(["analyze", str(path), *cli_source_args(scene), "--pixel-size", repr(scene.pixel_um), "--json"])
    out, err = capsys.readouterr()
    assert rc == 0, err
    assert "Traceback" not in err
    d = json.loads(out)
    _check(scene, d["radius_mm"], d["centre_px"], f"{name} (cli)")
    # one pipeline behind both: the command line gives what analyse gives, with its uncertainty
    assert d["radius_mm"] == pytest.approx(res.radius_mm, rel=1e-12)
    assert d["radius_u_mm"] == pytest.approx(res.radius_u_mm, rel=1e-12)
    assert d["radius_u_mm"] > 0 and d["radius_U_mm"] == pytest.approx(d["k"] * d["radius_u_mm"])
    assert d["image"]["bit_depth"] == FORMATS[name][4]


def test_text_report_gives_radius_with_unit_and_expanded_uncertainty(files, capsys):
    path, _ = files["PNG 8-bit grey"]
    scene = FORMATS["PNG 8-bit grey"][1]
    u_pix = 0.005  # µm, standard uncertainty of the pixel size
    rc = main(["analyze", str(path), *cli_source_args(scene), "--pixel-size", repr(scene.pixel_um),
               "--pixel-size-u", repr(u_pix)])
    out, err = capsys.readouterr()
    assert rc == 0, err
    m = re.search(r"R = ([0-9.]+) ± ([0-9.]+) mm", out)
    assert m, out
    R, U = float(m.group(1)), float(m.group(2))
    assert abs(R - scene.radius_mm) / scene.radius_mm <= RADIUS_TOL
    # The pixel scale enters R squared, so u(R)/R = 2 u_p / p dominates here (derived from R = n s / lambda, s in
    # px^2 times p^2; sensitivity by JCGM 100:2008 5.1.3); GUM
    # expanded uncertainty U = k u_c with k = 2 (JCGM 100:2008). U is printed to two significant digits.
    expected_U = 2.0 * 2.0 * scene.radius_mm * u_pix / scene.pixel_um
    assert U == pytest.approx(expected_U, rel=0.05), out
