"""One set-up builder: the command line and the window's set-up panel give the same BenchSetup for the same
choices (both go through ringgauge.setup_options.build_setup), and refuse bad choices with the same one line."""

import pytest

from ringgauge.cli import build_parser
from ringgauge.commands._setup import setup_from_args
from ringgauge.errors import InputError, ToleranceSyntaxError
from ringgauge.gui.model import Overrides, SetupState
from ringgauge.setup_options import SetupOptions, build_setup

PLATE = {"id": "TP-0412", "radius_mm": 51.68, "radius_u_mm": 0.002, "kind": "concave", "calibrated": "2026-03-14"}


@pytest.fixture(autouse=True)
def home(tmp_path, monkeypatch):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
    return tmp_path / "home"


@pytest.fixture()
def png(tmp_path):
    """A plain 400 x 300 image: its header gives the size a hand-set aperture is checked against."""
    import cv2
    import numpy as np

    path = tmp_path / "part.png"
    cv2.imwrite(str(path), np.zeros((300, 400), dtype=np.uint8) + 60)
    return str(path)


def cli(*argv, image="part.png"):
    return setup_from_args(build_parser().parse_args(["analyze", image, *argv]))


def window(overrides=None, **state):
    return SetupState(**state).to_bench_setup(overrides=overrides)


def same(a, b):
    assert a == b
    assert a.to_dict() == b.to_dict()


def test_plain_radius_set_up_in_water_with_bright_fringes():
    c, warn = cli("--source", "sodium-d", "--pixel-size", "8", "--pixel-size-u", "0.004", "--medium-index", "1.333",
                  "--medium-index-u", "0.001", "--fringe-kind", "bright")
    # water as the panel offers it: n = 1.333, u = 0.001 (ringgauge.gui.model.MEDIA)
    g = window(source="sodium-d", pixel_size_um=8.0, pixel_size_u_um=0.004, medium="water", fringe_kind="bright")
    same(c, g)
    assert (c.medium_index, c.fringe_kind, c.pixel_size_u_um) == (1.333, "bright", 0.004) and not warn


def test_custom_source():
    c, _ = cli("--wavelength", "600.5", "--wavelength-u", "0.2", "--bandwidth", "3", "--pixel-size", "10",
               "--pixel-size-u", "0.05")
    g = window(source="custom", custom_wavelength_nm=600.5, custom_wavelength_u_nm=0.2, custom_fwhm_nm=3.0,
               pixel_size_um=10.0, pixel_size_u_um=0.05)
    same(c, g)
    assert c.wavelength_nm == 600.5 and c.source.wavelength_u_nm == 0.2 and c.source.fwhm_nm == 3.0


def test_bench_profile_with_an_overdue_calibration():
    from ringgauge.calibration import profiles

    profiles.record_calibration("Bench Q", profiles.hand_entry(5.2, 0.01, date="2020-01-02"),
                                recalibration_days=180, medium_index=1.0)
    c, warn = cli("--bench", "Bench Q", "--source", "mercury-e")
    g = window(bench_profile="Bench Q", source="mercury-e", medium="air")
    same(c, g)
    assert c.bench == "Bench Q" and c.pixel_size_um == 5.2 and c.pixel_size_u_um == 0.01
    # the warnings are stored with the set-up (the window shows them) and told to the command line's user
    assert any("re-calibration interval" in w for w in c.bench_warnings)
    assert list(c.bench_warnings) == [w for w in warn if w in c.bench_warnings]
    assert c.to_dict()["bench_warnings"] == list(c.bench_warnings)


def test_test_plate_from_the_register_and_the_form_options():
    from ringgauge.form import plates

    plates.add_plate(PLATE)
    c, _ = cli("--source", "mercury-e", "--pixel-size", "25", "--pixel-size-u", "0.02", "--test-plate", "TP-0412",
               "--tolerance", "3/2(0.5)", "--test-diameter", "20", "--decision-rule", "guard-banded",
               "--press-test", "rings-spread", "--gap-change", "decreasing", "--radius-tolerance", "1000 ± 0.5 %")
    g = window(source="mercury-e", pixel_size_um=25.0, pixel_size_u_um=0.02, test_plate="TP-0412",
               tolerance="3/2(0.5)", test_diameter_mm=20.0, decision_rule="guard-banded", press_test="rings-spread",
               gap_change="decreasing", radius_tolerance="1000 ± 0.5 %")
    same(c, g)
    assert c.test_plate["id"] == "TP-0412" and c.test_plate["radius_mm"] == 51.68
    assert (c.tolerance, c.test_diameter_mm, c.decision_rule, c.press_test, c.gap_change) == (
        "3/2(0.5)", 20.0, "guard-banded", "rings-spread", "decreasing")
    assert c.radius_tolerance == "1000 ± 0.5 %"


def test_hand_set_aperture_and_centre(png):
    # the command line takes the aperture's diameter, as a drawing gives it; the window keeps its radius
    c, warn = cli("--source", "sodium-d", "--pixel-size", "8", "--aperture", "200.5", "150", "240",
                  "--centre", "201", "149", image=png)
    g = window(Overrides(centre_px=(201.0, 149.0), aperture_px=(200.5, 150.0, 120.0)), source="sodium-d",
               pixel_size_um=8.0, pixel_size_u_um=0.0)
    same(c, g)
    assert c.aperture_px == (200.5, 150.0, 120.0) and c.centre_px == (201.0, 149.0) and not warn
    assert c.to_dict()["aperture_px"] == [200.5, 150.0, 120.0]


def test_operator_and_inspection_details():
    c, _ = cli("--source", "sodium-d", "--pixel-size", "8", "--operator", "T. Quill", "--serial", "SN-1",
               "--part", "PCX-9", "--order", "ORD-4")
    g = window(source="sodium-d", pixel_size_um=8.0, pixel_size_u_um=0.0, operator="T. Quill", serial="SN-1",
               part="PCX-9", order="ORD-4")
    same(c, g)
    assert c.operator == "T. Quill"
    assert c.inspection == (("serial", "SN-1"), ("part", "PCX-9"), ("order_ref", "ORD-4"))


def test_analyze_json_keeps_the_hand_set_aperture(tmp_path, capsys):
    import json

    from ringgauge.cli import main
    from ringgauge.synth import Camera, newton_rings
    from ringgauge.imaging import save_png

    img = newton_rings(300.0, camera=Camera(width=320, height=256, pixel_um=10.0), rng=1)
    path = tmp_path / "lens.png"
    save_png(path, img.image01)
    code = main(["analyze", str(path), "--source", "sodium-d", "--pixel-size", "10", "--aperture", "160", "128",
                 "200", "--operator", "T. Quill", "--json", "--quiet"])
    d = json.loads(capsys.readouterr().out)
    assert code == 0
    assert d["setup"]["aperture_px"] == [160.0, 128.0, 100.0] and d["setup"]["operator"] == "T. Quill"


# -- refusals: one line each, the same words from both sides ----------------------------------------------------
@pytest.mark.parametrize("opts, words", [
    (SetupOptions(pixel_size_um=8.0), "name the light source: --source NAME"),
    (SetupOptions(source="sodium-d"), "give the pixel scale: --pixel-size UM"),
    (SetupOptions(source="sodium-d", wavelength_nm=589.0, pixel_size_um=8.0),
     "give either --source or --wavelength, not both"),
    (SetupOptions(source="sodium-d", pixel_size_um=8.0, test_plate="TP-0412", test_plate_radius_mm=50.0),
     "give either --test-plate ID or --test-plate-radius MM, not both"),
    (SetupOptions(source="sodium-d", pixel_size_um=8.0, test_plate_radius_u_mm=0.01),
     "--test-plate-radius-u needs --test-plate-radius"),
    (SetupOptions(source="sodium-d", pixel_size_um=8.0, test_plate_radius_mm=50.0, test_plate_kind="flat"),
     "a flat test plate has no radius"),
    (SetupOptions(source="sodium-d", pixel_size_um=8.0, aperture_px=(100.0, 100.0, 0.0)),
     "--aperture: the diameter must be positive"),
    (SetupOptions(source="sodium-d", pixel_size_um=8.0, radius_tolerance="1000 ± 5", radius_limits_mm=(995, 1005)),
     "give either --radius-tolerance or --radius-limits, not both"),
])
def test_refusals_keep_their_words(opts, words):
    with pytest.raises(InputError) as exc:
        build_setup(opts)
    assert words in str(exc.value) and "\n" not in str(exc.value)


def test_hand_settings_are_checked_against_the_image_size():
    base = dict(source="sodium-d", pixel_size_um=8.0)
    with pytest.raises(InputError, match=r"outside the image \(400 x 300 px\)"):
        build_setup(SetupOptions(**base, aperture_px=(500.0, 100.0, 50.0)), image_size=(400, 300))
    with pytest.raises(InputError, match="too small to evaluate"):
        build_setup(SetupOptions(**base, aperture_px=(100.0, 100.0, 4.0)), image_size=(400, 300))
    with pytest.raises(InputError, match=r"--centre: \(-20, 10\) px lies outside the image"):
        build_setup(SetupOptions(**base, centre_px=(-20.0, 10.0)), image_size=(400, 300))
    # the same circle given by its radius (the window's way) passes the same check
    s, _ = build_setup(SetupOptions(**base, aperture_px=(100.0, 100.0, 50.0), aperture_size="radius"),
                       image_size=(400, 300))
    assert s.aperture_px == (100.0, 100.0, 50.0)
    _, warn = build_setup(SetupOptions(**base, centre_px=(10.0, 10.0)), frames=2)
    assert any("radius measurement only" in w for w in warn)


@pytest.mark.parametrize("cli_argv, state, exc_type, words", [
    (["--test-plate", "TP-9999"], {"test_plate": "TP-9999"}, InputError, "not in the register"),
    (["--tolerance", "3/2(0.5"], {"tolerance": "3/2(0.5"}, ToleranceSyntaxError, "character"),
    (["--radius-tolerance", "1000 ±"], {"radius_tolerance": "1000 ±"}, InputError, "radius tolerance"),
    (["--bench", "No Such Bench"], {"bench_profile": "No Such Bench"}, InputError, "No Such Bench"),
])
def test_window_and_command_line_refuse_alike(cli_argv, state, exc_type, words):
    argv = ["--source", "sodium-d"] + ([] if "--bench" in cli_argv else ["--pixel-size", "8"]) + cli_argv
    with pytest.raises(exc_type) as on_cli:
        cli(*argv)
    with pytest.raises(exc_type) as in_window:
        window(source="sodium-d", pixel_size_um=8.0, **state)
    assert words in str(on_cli.value) and str(on_cli.value) == str(in_window.value)
    assert "\n" not in str(on_cli.value)
