"""Bench profiles: storage, history, warnings, and the setup_kwargs contract the engine relies on."""

import datetime as dt
import json
import math

import pytest

from ringgauge.bench_setup import BenchSetup
from ringgauge.calibration import measure_grating
from ringgauge.calibration import profiles as P
from ringgauge.calibration import targets as T
from ringgauge.errors import InputError
from ringgauge.sources import LightSource, get_source
from ringgauge.synth import Camera


@pytest.fixture(autouse=True)
def home(tmp_path, monkeypatch):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path))
    return tmp_path


KEYS = {"pixel_size_um", "pixel_size_u_um", "pixel_size_y_um", "pixel_size_y_u_um", "bench", "bench_calibrated"}


def test_hand_entry_round_trip_and_setup_kwargs(home):
    e = P.hand_entry(5.2, 0.01, operator="R. Vale", date="2026-11-20", note="from the optics shop's sheet")
    P.record_calibration("Bench A", e, camera="mono 2 MP", source="sodium-d", medium_index=1.0)
    doc = json.loads((home / "benches.json").read_text(encoding="utf-8"))
    assert doc["format"] == P.FORMAT and "Bench A" in doc["benches"]
    kw, warns = P.setup_kwargs("Bench A", today=dt.date(2026, 12, 1))
    assert KEYS <= set(kw)
    assert kw["pixel_size_um"] == 5.2 and kw["pixel_size_u_um"] == 0.01
    assert kw["pixel_size_y_um"] is None and kw["pixel_size_y_u_um"] is None
    assert kw["bench"] == "Bench A" and kw["bench_calibrated"] == "2026-11-20"
    assert isinstance(kw["source"], LightSource) and kw["source"].key == "sodium-d"
    assert kw["medium_index"] == 1.0
    setup = BenchSetup(**kw)  # the contract: these are BenchSetup keyword arguments
    assert setup.pixel_size_xy_um == (5.2, 5.2)
    assert any("along y was not measured" in w for w in warns)
    assert not any("re-calibration" in w for w in warns)


def test_overdue_warning_after_interval():
    P.record_calibration("B", P.hand_entry(3.0, 0.003, date="2026-01-02"), recalibration_days=180)
    _, warns = P.setup_kwargs("B", today=dt.date(2026, 7, 1))  # 180 days: not yet overdue
    assert not any("re-calibration interval" in w for w in warns)
    _, warns = P.setup_kwargs("B", today=dt.date(2026, 7, 2))  # 181 days
    assert any("181 days ago" in w and "180-day re-calibration interval" in w for w in warns)


def _grid_cal(sx, sy, seed=3):
    im = T.crossed_grid(30.0, angle_deg=14.0, camera=Camera(width=320, height=256, pixel_um=sx, pixel_y_um=sy,
                                                            blur_px=1.0), rng=seed)
    return measure_grating(im.image, 30.0, 0.003)


def test_anisotropic_profile_passes_both_scales_and_warns():
    cal = _grid_cal(2.0, 2.03)
    P.record_calibration("Aniso", P.calibration_entry(cal, operator="J. Tern"))
    kw, warns = P.setup_kwargs("Aniso")
    assert kw["pixel_size_um"] == pytest.approx(cal.scale_x.value)
    assert kw["pixel_size_y_um"] == pytest.approx(cal.scale_y.value)
    assert kw["pixel_size_y_u_um"] == pytest.approx(cal.scale_y.u)
    assert any("differ" in w and "both scales are used" in w for w in warns)
    assert BenchSetup(source=get_source("mercury-e"), **kw).pixel_size_xy_um[1] == pytest.approx(2.03, rel=1e-4)


def test_agreeing_x_and_y_give_one_scale():
    cal = _grid_cal(2.0, 2.0)
    assert not cal.anisotropic
    P.record_calibration("Iso", P.calibration_entry(cal))
    kw, warns = P.setup_kwargs("Iso")
    assert kw["pixel_size_y_um"] is None
    assert kw["pixel_size_um"] == pytest.approx(0.5 * (cal.scale_x.value + cal.scale_y.value))
    assert kw["pixel_size_u_um"] == pytest.approx(max(cal.scale_x.u, cal.scale_y.u))
    assert warns == []


def test_unknown_name_lists_known_benches():
    P.record_calibration("Bench 1", P.hand_entry(2.0, 0.002))
    P.record_calibration("Bench 2", P.hand_entry(4.0, 0.004))
    with pytest.raises(InputError, match=r"no bench profile named 'Bench 3'.*known benches: Bench 1, Bench 2"):
        P.setup_kwargs("Bench 3")


def test_unknown_name_with_no_profiles_says_how_to_make_one():
    with pytest.raises(InputError, match="there are none yet"):
        P.setup_kwargs("anything")


def test_recalibration_keeps_history():
    P.record_calibration("H", P.hand_entry(2.0, 0.002, date="2026-01-05"), camera="cam 1", lens="0.5x")
    prof = P.record_calibration("H", P.hand_entry(2.01, 0.002))
    assert prof.camera == "cam 1" and prof.lens == "0.5x"  # kept when not given again
    assert prof.calibration["scale_x_um"] == 2.01
    assert [h["scale_x_um"] for h in prof.history] == [2.0]
    assert P.get("H").history[0]["date"] == "2026-01-05"


def test_writes_are_atomic_and_damaged_file_is_kept(home):
    P.record_calibration("A", P.hand_entry(2.0, 0.002))
    assert [p.name for p in home.iterdir() if p.name.startswith(".benches-")] == []
    path = home / "benches.json"
    path.write_text('{"format": "ringgauge bench profiles", "benches": {', encoding="utf-8")
    before = path.read_bytes()
    with pytest.raises(InputError, match="damaged"):
        P.record_calibration("B", P.hand_entry(2.0, 0.002))
    assert path.read_bytes() == before  # nothing overwritten
    path.write_text("[1, 2, 3]", encoding="utf-8")
    with pytest.raises(InputError, match="not a ringgauge bench profile file"):
        P.load_all()


@pytest.mark.parametrize(
    "call, message",
    [
        (lambda: P.hand_entry(-1.0), "positive number"),
        (lambda: P.hand_entry(2.0, 1.0), "over 20 %"),
        (lambda: P.hand_entry(2.0, 0.01, date="01/12/2026"), "YYYY-MM-DD"),
        (lambda: P.hand_entry(2.0, 0.01, date="2999-01-01"), "in the future"),
        (lambda: P.record_calibration("", P.hand_entry(2.0, 0.01)), "not usable"),
        (lambda: P.record_calibration("x\ny", P.hand_entry(2.0, 0.01)), "not usable"),
        (lambda: P.record_calibration("B", P.hand_entry(2.0, 0.01), source="xenon"), "unknown light source"),
        (lambda: P.record_calibration("B", P.hand_entry(2.0, 0.01), recalibration_days=0), "1-3650 days"),
        (lambda: P.record_calibration("B", P.hand_entry(2.0, 0.01), medium_index=3.1), "outside 1.0-2.5"),
    ],
)
def test_bad_profile_input_is_refused(call, message):
    with pytest.raises(InputError, match=message):
        call()


def test_remove_and_rename():
    P.record_calibration("Old", P.hand_entry(2.0, 0.002))
    P.rename("Old", "New")
    assert P.names() == ["New"]
    P.remove("New")
    assert P.names() == []
    with pytest.raises(InputError):
        P.remove("New")


def test_custom_wavelength_becomes_a_light_source():
    P.record_calibration("W", P.hand_entry(2.0, 0.002), wavelength_nm=587.56)
    kw, _ = P.setup_kwargs("W")
    assert kw["source"].wavelength_nm == 587.56
    # switching to a built-in source drops the custom wavelength
    P.update("W", source="hene")
    kw, _ = P.setup_kwargs("W")
    assert kw["source"].key == "hene" and P.get("W").wavelength_nm is None


def test_hand_entry_without_uncertainty_is_flagged():
    e = P.hand_entry(2.0)
    assert e["scale_x_u_um"] == 0.0 and e["warnings"]
    assert math.isclose(P.hand_entry(2.0, 0.01, 2.1, 0.02)["difference_u_um"], math.hypot(0.01, 0.02))
