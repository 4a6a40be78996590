"""``ringgauge calibrate`` and ``ringgauge bench`` through cli.main: output, saved profiles, bad input."""

import json

import numpy as np
import pytest

from ringgauge.calibration import profiles as P
from ringgauge.calibration import targets as T
from ringgauge.cli import main
from ringgauge.imaging import save_png
from ringgauge.synth import Camera


@pytest.fixture(autouse=True)
def home(tmp_path, monkeypatch):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
    return tmp_path / "home"


@pytest.fixture(scope="module")
def images(tmp_path_factory):
    d = tmp_path_factory.mktemp("cal")
    cam = Camera(width=320, height=256, pixel_um=2.0, pixel_y_um=2.03, blur_px=1.0)
    save_png(d / "grid.png", T.crossed_grid(30.0, angle_deg=9.0, camera=cam, rng=1).image01)
    save_png(d / "lines.png", T.line_grating(10.0, angle_deg=2.0, camera=cam, rng=2).image01)
    save_png(d / "lines90.png", T.line_grating(10.0, angle_deg=91.0, camera=cam, rng=3).image01)
    save_png(d / "disc.png", T.disc(0.4, camera=cam, rng=4).image01)
    save_png(d / "noise.png", np.random.default_rng(0).normal(0.5, 0.03, (256, 320)))
    (d / "broken.png").write_bytes(b"\x89PNG\r\n\x1a\nnot really")
    return d


def test_calibrate_grid_saves_profile_and_prints_units(images, capsys):
    rc = main(["calibrate", str(images / "grid.png"), "--grating-pitch", "30", "--pitch-u", "0.003", "--bench",
               "Bench 2 / 0.5x", "--source", "mercury-e", "--camera", "mono 1.3 MP", "--operator", "K. Arlo",
               "--target-id", "GRID-07"])
    out, err = capsys.readouterr()
    assert rc == 0
    lines = {ln.split(":")[0].strip(): ln.split(":", 1)[1] for ln in out.splitlines() if ":" in ln}
    vx, _, Ux, unit = lines["pixel scale x"].split()[:4]
    assert float(vx) == pytest.approx(2.0, rel=5e-4) and float(Ux) > 0 and unit == "µm/px"
    assert float(lines["pixel scale y"].split()[0]) == pytest.approx(2.03, rel=5e-4)
    assert "(± U, k = 2)" in lines["pixel scale x"]  # the ± is named as the expanded uncertainty
    assert "anisotropic" in out
    assert "Saved as bench 'Bench 2 / 0.5x'" in out
    assert "Mercury lamps emit ultraviolet" in out  # the lamp's safety note
    assert "finding the line pattern" in err  # progress on stderr
    prof = P.get("Bench 2 / 0.5x")
    assert prof.camera == "mono 1.3 MP" and prof.source == "mercury-e"
    assert prof.calibration["operator"] == "K. Arlo" and prof.calibration["target"]["id"] == "GRID-07"


def test_calibrate_json(images, capsys):
    rc = main(["calibrate", str(images / "lines.png"), str(images / "lines90.png"), "--grating-pitch", "10",
               "--pitch-u", "0.002", "--json"])
    out, _ = capsys.readouterr()
    assert rc == 0
    doc = json.loads(out)
    cal = doc["calibration"]
    assert cal["method"] == "line-scale-pair"
    assert cal["scale_x_um_per_px"]["unit"] == "µm/px"
    assert cal["scale_x_um_per_px"]["value"] == pytest.approx(2.0, rel=2e-4)
    assert cal["scale_y_um_per_px"]["value"] == pytest.approx(2.03, rel=2e-4)
    assert doc["bench"] is None  # not saved without --bench


def test_calibrate_disc(images, capsys):
    rc = main(["calibrate", str(images / "disc.png"), "--disc-diameter", "0.4", "--diameter-u", "0.0002",
               "--bench", "D"])
    out, _ = capsys.readouterr()
    assert rc == 0 and "edge definition" in out
    assert P.get("D").calibration["method"] == "disc"


@pytest.mark.parametrize(
    "argv, code, message",
    [
        (["calibrate", "{d}/noise.png", "--grating-pitch", "10"], 3, "no line pattern found"),
        (["calibrate", "{d}/noise.png", "--disc-diameter", "1"], 3, "no complete disc"),
        (["calibrate", "{d}/grid.png", "--grating-pitch", "30000"], 3, "outside the plausible"),
        (["calibrate", "{d}/missing.png", "--grating-pitch", "10"], 2, "no such file"),
        (["calibrate", "{d}/broken.png", "--grating-pitch", "10"], 2, "cannot decode"),
        (["calibrate", "{d}/grid.png", "--grating-pitch", "-3"], 2, "positive number"),
        (["calibrate", "{d}/grid.png", "--grating-pitch", "30", "--diameter-u", "1"], 2, "--diameter-u goes with"),
        (["calibrate", "{d}/grid.png", "--grating-pitch", "30", "--bench", " bad"], 2, "not usable"),
        (["calibrate", "{d}/grid.png", "--grating-pitch", "30", "--source", "xenon"], 2, "unknown light source"),
        (["calibrate", "{d}/lines.png", "{d}/grid.png", "{d}/disc.png", "--grating-pitch", "10"], 2, "one calibration"),
        (["bench", "show", "nothing"], 2, "no bench profile named"),
    ],
)
def test_bad_input_gives_one_line_and_nonzero_exit(images, capsys, argv, code, message):
    rc = main([a.format(d=images) for a in argv])
    _, err = capsys.readouterr()
    assert rc == code
    last = err.strip().splitlines()[-1]
    assert last.startswith("ringgauge: ") and message in last
    assert "Traceback" not in err


def test_bench_add_list_show_edit_remove(capsys, home):
    assert main(["bench", "add", "Manual", "--pixel-size", "4.8", "--pixel-size-u", "0.005", "--calibrated",
                 "2026-01-10", "--note", "vendor sheet", "--source", "sodium-d"]) == 0
    assert main(["bench", "add", "Manual", "--pixel-size", "4.9"]) == 2  # exists: needs --replace
    capsys.readouterr()
    assert main(["bench", "list"]) == 0
    out = capsys.readouterr().out
    assert "Manual: 4.800 ± 0.010 µm/px (x = y)" in out and "OVERDUE" in out
    assert main(["bench", "show", "Manual", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["calibration"]["scale_x_um"] == 4.8
    assert main(["bench", "edit", "Manual", "--lens", "2x objective", "--rename", "Bench 5"]) == 0
    assert P.get("Bench 5").lens == "2x objective"
    assert main(["bench", "add", "Bench 5", "--pixel-size", "4.81", "--pixel-size-u", "0.005", "--replace"]) == 0
    assert len(P.get("Bench 5").history) == 1
    assert main(["bench", "remove", "Bench 5"]) == 0
    assert P.names() == []


def test_analyze_with_a_calibrated_bench_names_it_and_uses_both_scales(tmp_path, capsys):
    # one camera set-up (anisotropic pixels) photographs a grid, then a lens on a flat
    from ringgauge.synth import newton_rings

    cam = Camera(width=412, height=400, pixel_um=5.0, pixel_y_um=5.15, blur_px=0.8)
    save_png(tmp_path / "grid.png", T.crossed_grid(100.0, angle_deg=7.0, camera=cam, rng=1).image01)
    rings = newton_rings(150.0, camera=cam, source="sodium-d", rng=4)
    save_png(tmp_path / "rings.png", rings.image01)
    assert main(["calibrate", str(tmp_path / "grid.png"), "--grating-pitch", "100", "--pitch-u", "0.01",
                 "--bench", "B5", "--source", "sodium-d"]) == 0
    capsys.readouterr()
    assert main(["analyze", str(tmp_path / "rings.png"), "--bench", "B5", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    prof = P.get("B5")
    assert doc["setup"]["bench"] == "B5" and doc["setup"]["bench_calibrated"] == prof.calibrated
    assert doc["setup"]["pixel_size_um"] == pytest.approx([prof.calibration["scale_x_um"],
                                                           prof.calibration["scale_y_um"]])
    assert doc["setup"]["source"]["key"] == "sodium-d"
    assert abs(doc["radius_mm"] - 150.0) < doc["radius_U_mm"]  # truth from the generator
    assert any("both scales are used" in w for w in doc["warnings"])
