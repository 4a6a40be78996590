"""Test-plate register, analyze options and the register command."""

import datetime as dt
import json

import pytest

from ringgauge.cli import main
from ringgauge.errors import InputError, ToleranceSyntaxError
from ringgauge.commands._setup import options_from_args, setup_from_args
from ringgauge.form import plates


@pytest.fixture(autouse=True)
def home(tmp_path, monkeypatch):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path))
    return tmp_path


PLATE = {"id": "TP-0412", "radius_mm": 51.68, "radius_u_mm": 0.002, "kind": "concave", "calibrated": "2026-03-14"}


def test_register_round_trip_and_retire(home):
    plates.add_plate(PLATE)
    plates.add_plate({**PLATE, "id": "TP-0007", "kind": "convex", "radius_mm": 120.5})
    got = plates.get_plate("tp-0412")
    assert got.radius_mm == 51.68 and got.kind == "concave"
    with pytest.raises(InputError, match="already in the register"):
        plates.add_plate(PLATE)
    plates.retire_plate("TP-0007", "2026-11-30")
    assert plates.get_plate("TP-0007").retired == "2026-11-30"
    doc = json.loads((home / "test_plates.json").read_text())
    assert [p["id"] for p in doc["plates"]] == ["TP-0412", "TP-0007"]
    assert not list(home.glob(".test_plates.*"))  # no temporary file left behind


def test_hand_edited_register_errors_are_one_line(home):
    (home / "test_plates.json").write_text('{"plates": [{"id": "TP-1", "radius_mm": "abc"}]}')
    with pytest.raises(InputError) as exc:
        plates.load_register()
    assert "\n" not in str(exc.value)
    (home / "test_plates.json").write_text("{not json")
    with pytest.raises(InputError, match="not valid JSON"):
        plates.load_register()


def test_overdue_calibration_is_warned():
    pl = plates._validate({**PLATE, "calibrated": "2020-01-31", "interval_months": 13}, "t")
    assert pl.due() == dt.date(2021, 2, 28)  # month end clamped
    assert plates.plate_warnings(pl, dt.date(2021, 3, 1))
    assert not plates.plate_warnings(pl, dt.date(2021, 2, 28))


def _parse(argv):
    from ringgauge.cli import build_parser

    return build_parser().parse_args(["analyze", *argv, "--source", "mercury-e", "--pixel-size", "10"])


def test_setup_from_register_and_by_hand():
    plates.add_plate({**PLATE, "calibrated": "2019-01-01"})
    setup, warn = setup_from_args(_parse(["a.png", "--test-plate", "TP-0412", "--tolerance", "3/2(0.5)"]))
    assert setup.test_plate["radius_mm"] == 51.68 and setup.tolerance == "3/2(0.5)"
    assert any("overdue" in w for w in warn)
    setup, warn = setup_from_args(_parse(["a.png", "--test-plate-radius", "51.68", "--test-diameter", "21"]))
    assert setup.test_plate["radius_u_mm"] == 0.0 and any("uncertainty" in w for w in warn)
    assert setup.test_diameter_mm == 21.0
    with pytest.raises(ToleranceSyntaxError, match="character"):
        setup_from_args(_parse(["a.png", "--tolerance", "3/2(0.5"]))
    with pytest.raises(InputError, match="not in the register"):
        setup_from_args(_parse(["a.png", "--test-plate", "TP-9999"]))
    assert options_from_args(_parse(["a.png", "b.png"])).asks_for_form(frames=2)
    assert not options_from_args(_parse(["a.png"])).asks_for_form(frames=1)


def test_plates_command(capsys, home):
    assert main(["plates", "add", "TP-0412", "--radius", "51.68", "--radius-u", "0.002", "--kind", "concave",
                 "--calibrated", "2020-01-01"]) == 0
    out = capsys.readouterr().out
    assert "overdue" in out and "51.6800 ± 0.0020 mm" in out
    assert main(["plates", "list"]) == 0
    assert "TP-0412" in capsys.readouterr().out
    assert main(["plates", "retire", "TP-0412"]) == 0
    assert "retired" in capsys.readouterr().out
    main(["plates", "list"])
    assert "TP-0412" not in capsys.readouterr().out
    assert main(["plates", "show", "TP-0412"]) == 0
    assert main(["plates", "add", "TP-0412", "--radius", "51.68", "--radius-u", "0.002", "--kind", "concave",
                 "--calibrated", "2020-13-01"]) == 2
    assert "calibration date" in capsys.readouterr().err
