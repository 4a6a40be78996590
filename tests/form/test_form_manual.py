"""Hand-set aperture and centre: ``analyze --aperture X Y DIAMETER`` / ``--centre X Y`` mean what the window's
hand-set aperture and centre mean (set-up fields ``aperture_px = (x, y, radius)`` and ``centre_px = (x, y)``)."""

import json
import sys

import cv2
import numpy as np
import pytest

sys.path.insert(0, str(__import__("pathlib").Path(__file__).resolve().parents[1] / "independent"))
import plate_model as P  # noqa: E402

from ringgauge.bench_setup import BenchSetup  # noqa: E402
from ringgauge.cli import main  # noqa: E402
from ringgauge.errors import InputError  # noqa: E402
from ringgauge.commands._setup import setup_from_args  # noqa: E402
from ringgauge.form.aperture import aperture_for  # noqa: E402
from ringgauge.form.evaluate import evaluate_form  # noqa: E402
from ringgauge.imaging import frame_from_array  # noqa: E402
from ringgauge.sources import get_source  # noqa: E402


@pytest.fixture(autouse=True)
def _home(tmp_path, monkeypatch):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))


def _parse(argv):
    from ringgauge.cli import build_parser

    return build_parser().parse_args(["analyze", *argv, "--source", "mercury-e", "--pixel-size", "10"])


@pytest.fixture()
def png(tmp_path):
    path = tmp_path / "part.png"
    cv2.imwrite(str(path), np.zeros((300, 400), dtype=np.uint8) + 60)
    return str(path)


def test_options_become_the_windows_hand_settings(png):
    setup, warn = setup_from_args(_parse([png, "--aperture", "200.5", "150", "240", "--centre", "201", "149"]))
    # the window keeps (x, y, radius); the command line takes a diameter like a drawing does
    assert setup.aperture_px == (200.5, 150.0, 120.0)
    assert setup.centre_px == (201.0, 149.0)
    assert not warn  # one image, no form option: a radius measurement, where the centre is used


@pytest.mark.parametrize(
    "argv, words",
    [
        (["--aperture", "500", "100", "50"], "outside the image (400 x 300 px)"),
        (["--aperture", "100", "100", "0"], "must be positive"),
        (["--aperture", "100", "100", "4"], "too small"),
        (["--centre", "-20", "10"], "outside the image"),
    ],
)
def test_bad_manual_values_are_one_line_errors(png, argv, words):
    with pytest.raises(InputError) as exc:
        setup_from_args(_parse([png] + argv))
    assert words in str(exc.value) and "\n" not in str(exc.value)


@pytest.mark.parametrize("argv", [["--aperture", "nan", "1", "2"], ["--centre", "inf", "3"], ["--centre", "x", "3"],
                                  ["--aperture", "1", "2"]])
def test_non_finite_or_missing_numbers_are_usage_errors(png, argv, capsys):
    code = main(["analyze", png, "--source", "mercury-e", "--pixel-size", "10"] + argv)
    err = capsys.readouterr().err
    assert code != 0 and "Traceback" not in err and err.strip()


def test_centre_in_form_mode_says_it_is_not_used(png):
    _, warn = setup_from_args(_parse([png, png, "--centre", "10", "10"]))
    assert any("radius measurement only" in w for w in warn)


def test_hand_set_aperture_is_evaluated_as_given():
    part = P.Part(power=2.0, rim_phase=0.0)
    img = frame_from_array(P.render(part, 4)[0]).data
    ap = aperture_for(img, given=(200.0, 200.0, 120.0))
    assert ap.manual and ap.centre_px == (200.0, 200.0) and ap.radius_px == 120.0
    assert ap.to_dict()["source"] == "set by hand"
    with pytest.raises(InputError, match="outside the image"):
        aperture_for(img, given=(900.0, 10.0, 50.0))
    with pytest.raises(InputError, match="not a usable circle"):
        aperture_for(img, given=(100.0, 10.0, float("nan")))


@pytest.mark.slow
def test_form_over_a_hand_set_smaller_aperture():
    # power scales with the square of the evaluated radius (rho^2 term): over 120 of 150 px it is 0.64 x
    part = P.Part(power=2.0, rim_phase=0.5)
    frame = frame_from_array(P.render(part, 5)[0])
    setup = BenchSetup(source=get_source("mercury-e"), pixel_size_um=part.pixel_um,
                       aperture_px=(200.0, 200.0, 120.0))
    r = evaluate_form([frame], setup)
    assert r.aperture.radius_px == 120.0 and r.aperture.manual
    assert abs(abs(r.terms["power_fringes"]) - 2.0 * 0.64) < 0.05


@pytest.mark.slow
def test_cli_aperture_end_to_end(tmp_path, capsys):
    part = P.Part(power=2.0, rim_phase=0.0)
    path = tmp_path / "part.png"
    cv2.imwrite(str(path), P.render(part, 6)[0])
    code = main(["analyze", str(path), "--source", "mercury-e", "--pixel-size", "60", "--mode", "form",
                 "--aperture", "200", "200", "240", "--json", "--quiet"])
    out = capsys.readouterr().out
    assert code == 0
    d = json.loads(out)
    form = d.get("form") or d
    ap = form["aperture"]
    assert ap["source"] == "set by hand" and ap["diameter_px"] == pytest.approx(240.0)
    assert d["setup"]["aperture_px"] == [200.0, 200.0, 120.0]  # what shaped the result is stored with it
