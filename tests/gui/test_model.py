"""The window's plain-Python models: no display needed."""

import csv
import math
import os
from dataclasses import replace

import numpy as np
import pytest

from ringgauge.conformity import TermVerdict, Verdict
from ringgauge.errors import ImageError, InputError
from ringgauge.gui import display
from ringgauge.gui.lot import DONE, FAILED, Lot
from ringgauge.gui.model import BenchSession, FolderWatch, Overrides, SetupState, _Cancelled
from ringgauge.imaging import frame_from_array, load_frame

from gui_helpers import FakeEngine, hand_result, noiseless_rings, write_rings


# -- set-up state ------------------------------------------------------------------------------------------------
def test_setup_state_round_trip_and_bad_saved_values():
    s = SetupState(source="hene", pixel_size_um=5.5, pixel_size_u_um=0.02, operator="K.L.", test_diameter_mm=25.0)
    assert SetupState.from_dict(s.to_dict()) == s
    broken = {"source": 3, "pixel_size_um": "lots", "medium_index": float("nan"), "operator": "J.B.", "junk": 1}
    back = SetupState.from_dict(broken)
    assert back.source == SetupState().source and back.pixel_size_um == SetupState().pixel_size_um
    assert back.medium_index == 1.0 and back.operator == "J.B."
    assert SetupState.from_dict(None) == SetupState()


def test_setup_to_bench_setup_media_sources_and_messages():
    b = SetupState(source="mercury-e", medium="water", pixel_size_um=4.0, pixel_size_u_um=0.01).to_bench_setup()
    assert b.medium_index == pytest.approx(1.333) and b.wavelength_nm == pytest.approx(546.074)
    c = SetupState(source="custom", custom_wavelength_nm=600.5, custom_wavelength_u_nm=0.2).to_bench_setup()
    assert c.wavelength_nm == 600.5 and c.source.wavelength_u_nm == 0.2
    with pytest.raises(InputError, match="outside 200-2000 nm"):
        SetupState(source="custom", custom_wavelength_nm=0.6).to_bench_setup()
    with pytest.raises(InputError, match="over 20 %"):
        SetupState(pixel_size_um=1.0, pixel_size_u_um=0.5).to_bench_setup()
    # no test diameter: the form is evaluated over the clear aperture found, as 'ringgauge analyze' does
    b = SetupState(tolerance="3/2(0.5)").to_bench_setup()
    assert b.tolerance == "3/2(0.5)" and b.test_diameter_mm is None
    ov = Overrides(centre_px=(10.0, 20.0))
    b = SetupState(operator=" ab ").to_bench_setup(overrides=ov)
    assert (b.operator, b.centre_px, b.gap_change) == ("ab", (10.0, 20.0), "increasing")
    # nothing else was set by hand or typed
    assert (b.aperture_px, b.inspection, b.motion_sign, b.bench_warnings) == (None, (), None, ())


# -- session -----------------------------------------------------------------------------------------------------------
def test_session_opens_frames_and_keeps_them_on_a_bad_file(sample_dir, tmp_path):
    s = BenchSession(FakeEngine())
    seen = []
    s.changed.connect(seen.append)
    s.open_paths([sample_dir / "lens-A01.png"])
    assert len(s.frames) == 1 and seen == ["frames"] and s.title == "lens-A01.png"
    bad = tmp_path / "broken.png"
    bad.write_bytes(b"\x89PNG not really")
    with pytest.raises(ImageError, match="cannot decode"):
        s.open_paths([bad])
    assert s.frames[0].name == "lens-A01.png"  # nothing lost
    s.open_paths([sample_dir])  # a folder is a frame set
    assert [f.name for f in s.frames] == ["lens-A01.png", "lens-A02.png"]
    write_rings(tmp_path / "small.png", width=100, height=80)
    with pytest.raises(InputError, match="same size"):
        s.open_paths([sample_dir / "lens-A01.png", tmp_path / "small.png"])
    with pytest.raises(InputError, match="no image"):
        s.open_paths([])


def test_session_runs_and_drops_results_of_outdated_inputs(sample_dir):
    eng = FakeEngine()
    s = BenchSession(eng, SetupState(source="sodium-d", pixel_size_um=16.0))
    with pytest.raises(InputError, match="no image open"):
        s.make_job()
    s.open_paths([sample_dir / "lens-A01.png"])
    r = s.run_now()
    assert r.radius_mm == pytest.approx(1000.0) and s.result is r and not s.busy
    old = s.make_job()
    s.update_setup(source="mercury-e")  # the operator changes the lamp while the old job runs
    assert old.cancelled
    with pytest.raises(_Cancelled):
        old.run()
    assert s.accept(old, hand_result(s.frames[0], old.setup, 1.0)) is False
    assert s.result is r  # the stale result was not shown
    new = s.run_now()
    assert new.radius_mm == pytest.approx(1000.0 * 589.2938 / 546.074)


def test_session_failure_is_a_message(sample_dir):
    s = BenchSession(FakeEngine(fail_on="lens-A01"))
    s.open_paths([sample_dir / "lens-A01.png"])
    with pytest.raises(Exception, match="no ring system"):
        s.run_now()
    assert s.result is None and "no ring system" in s.error


def test_overrides_undo_redo_and_bounds(sample_dir):
    s = BenchSession(FakeEngine())
    with pytest.raises(InputError, match="open an image"):
        s.set_centre(1, 1)
    s.open_paths([sample_dir / "lens-A01.png"])
    assert not s.can_undo
    s.set_centre(100.0, 90.0)
    s.set_aperture(150.0, 120.0, 80.0)
    assert s.overrides == Overrides((100.0, 90.0), (150.0, 120.0, 80.0))
    s.undo()
    assert s.overrides == Overrides((100.0, 90.0), None)
    s.undo()
    assert s.overrides.empty and not s.can_undo and s.can_redo
    s.redo()
    assert s.overrides.centre_px == (100.0, 90.0)
    with pytest.raises(InputError, match="far outside"):
        s.set_centre(5000.0, 10.0)
    with pytest.raises(InputError, match="at least 8 px"):
        s.set_aperture(10.0, 10.0, 2.0)
    g = s.generation
    s.clear_overrides()
    assert s.overrides.empty and s.generation == g + 1 and s.can_undo
    assert "centre set by hand" in Overrides((1.0, 2.0)).describe()


def test_folder_watch_reports_new_files_once_they_stop_growing(tmp_path):
    write_rings(tmp_path / "old.png")
    w = FolderWatch(tmp_path)
    assert w.poll() == []  # files present at the start are not reported
    p = tmp_path / "new.png"
    p.write_bytes(b"\x89PNG")  # the camera has begun writing
    assert w.poll() == []
    write_rings(p)  # ... and finished
    assert w.poll() == []  # size changed since the last poll
    assert w.poll() == [str(p)]
    assert w.poll() == []
    with pytest.raises(InputError, match="no such folder"):
        FolderWatch(tmp_path / "nowhere")


# -- display helpers ------------------------------------------------------------------------------------------------
def test_value_rows_verdict_and_overlay_from_a_result(sample_dir):
    f = load_frame(sample_dir / "lens-A01.png")
    setup = SetupState(source="sodium-d", pixel_size_um=16.0).to_bench_setup()
    # the verdict as the form evaluation makes it
    term = TermVerdict("power", 2.9, 0.2, 3.0, "fringes", 2.9, 0.2, 3.0, None, 546.074, False, "conditional pass")
    verdict = Verdict("conditional pass", (term,), decision_rule="simple acceptance", meaning="within U of a limit")
    res = hand_result(f, setup, 1234.5, verdict=verdict)
    d = res.to_dict()
    rows = {r.label: r for r in display.value_rows(res)}
    R = rows["Radius of curvature R"]
    U = d["radius_U_mm"]
    assert R.unit == "mm" and R.uncertainty.startswith("± ")
    # U to at most two significant digits, rounded (not cut), and R to the same decimal place (GUM 7.2.6 — from
    # memory); checked from the stored U, not with the display's own rounding
    u_text = R.uncertainty[2:]
    assert 1 <= len(u_text.replace(".", "").lstrip("0")) <= 2, R.uncertainty
    assert abs(float(u_text) - U) <= 0.5 * 10.0 ** (math.floor(math.log10(U)) - 1) + 1e-12, (u_text, U)
    dec = len(u_text.split(".")[1]) if "." in u_text else 0
    assert (len(R.value.split(".")[1]) if "." in R.value else 0) == dec, (R.value, u_text)
    assert abs(float(R.value) - 1234.5) <= 0.5 * 10.0**-dec + 1e-9
    assert rows["Wavelength λ"].unit == "nm" and rows["Pixel size x"].unit == "µm"
    v = display.verdict_view(res)
    assert (v.word, v.tone, v.decision_rule) == ("CONDITIONAL PASS", "conditional", "simple acceptance")
    assert v.terms == ("power (A): CONDITIONAL PASS (2.90 ± 0.20 fringes, limit 3 fringes)",)
    assert v.explanation == "within U of a limit"
    for overall, word in (("pass", "PASS"), ("fail", "FAIL"), ("conditional fail", "CONDITIONAL FAIL")):
        assert display.verdict_view(replace(res, verdict=Verdict(overall))).word == word
    ov = display.overlay_from(res, Overrides(aperture_px=(10, 20, 30)))
    assert len(ov.rings) == 10 and ov.centre == ((f.shape[1] - 1) / 2, (f.shape[0] - 1) / 2)
    assert ov.aperture == (10.0, 20.0, 30.0, 30.0) and ov.aperture_by_hand
    # ring radii drawn where r^2 = m lambda R / n puts them (Newton's rings; Hecht, Optics, ch. 9 — from memory)
    lam_mm = d["setup"]["wavelength_nm"] * 1e-6
    assert ov.rings[3].rx * 16e-3 == pytest.approx(np.sqrt(4 * lam_mm * 1234.5), rel=1e-9)


def test_residual_view_is_small_for_the_right_fit_and_large_for_a_wrong_one():
    img, truth = noiseless_rings()
    lam_mm = 589.2938e-6
    R = truth["radius_mm"]
    setup = SetupState(source="sodium-d", pixel_size_um=20.0).to_bench_setup()
    made = hand_result(frame_from_array(img), setup, R)
    base = replace(made, centre_px=tuple(truth["centre_px"]),
                   fit=replace(made.fit, slope_mm2=lam_mm * R, intercept_mm2=0.0, r_max_mm=1.5))
    right = display.residual_image(img, base)
    wrong = display.residual_image(img, replace(base, fit=replace(base.fit, slope_mm2=lam_mm * R * 1.03)))
    amp = np.nanstd(img)
    # the Airy fringe shape is not a pure cosine, so the right model leaves a small harmonic residual
    assert np.nanstd(right) < 0.05 * amp
    assert np.nanstd(wrong) > 5 * np.nanstd(right)
    rgb = display.signed_to_rgb(right)
    assert rgb.shape == img.shape + (3,) and rgb.dtype == np.uint8


def test_image_to_u8_stretches_and_rejects_bad_shapes():
    a = np.linspace(0.2, 0.4, 100 * 80, dtype=np.float32).reshape(80, 100)
    u = display.image_to_u8(a)
    assert u.dtype == np.uint8 and u.min() == 0 and u.max() == 255
    assert display.image_to_u8(np.full((4, 4), 0.5)).shape == (4, 4)
    with pytest.raises(ValueError):
        display.image_to_u8(np.zeros(5))


# -- lot -------------------------------------------------------------------------------------------------------------------
def test_lot_rows_results_failures_and_csv(sample_dir, tmp_path):
    lot = Lot()
    with pytest.raises(InputError, match="no images"):
        lot.load_folder(tmp_path / "images" / "..")  # tmp_path itself holds no images
    (sample_dir / "notes.txt").write_text("not an image")
    lot.load_folder(sample_dir)
    assert [r.name for r in lot.rows] == ["lens-A01.png", "lens-A02.png"]
    setup = SetupState(source="sodium-d", pixel_size_um=16.0).to_bench_setup()
    eng = FakeEngine(fail_on="lens-A02")
    lot.set_result(0, Lot.analyse_one(lot.rows[0].path, setup, eng))
    with pytest.raises(Exception, match="no ring system") as exc:
        Lot.analyse_one(lot.rows[1].path, setup, eng)
    lot.set_failure(1, str(exc.value))
    assert lot.counts()[DONE] == 1 and lot.counts()[FAILED] == 1
    assert lot.cell(0, "radius_mm") == pytest.approx(1000.0) and lot.cell(0, "verdict") == "MEASURED"
    out = tmp_path / "lot.csv"
    assert lot.export_csv(out) == 2
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert rows[0]["image"] == "lens-A01.png" and float(rows[0]["radius_mm"]) == pytest.approx(1000.0)
    assert "radius_U_mm_k2" in rows[0] and rows[1]["status"] == "failed" and "no ring system" in rows[1]["note"]
    with pytest.raises(InputError, match="cannot write"):
        lot.export_csv(tmp_path / "missing-folder" / "x.csv")


def test_csv_never_written_for_an_empty_lot(tmp_path):
    with pytest.raises(InputError, match="empty"):
        Lot().export_csv(tmp_path / "x.csv")
    assert not os.path.exists(tmp_path / "x.csv")


def test_job_progress_takes_fraction_and_message_or_a_message_alone(sample_dir):
    seen = []

    def engine(frames, setup, *, progress=None):
        progress(0.4, "fitting")
        progress("a step without a fraction")
        progress(float("nan"), "a broken fraction")
        progress(7.0, "too far")
        return "done"

    s = BenchSession(engine)
    s.open_paths([sample_dir / "lens-A01.png"])
    job = s.make_job()
    assert job.run(lambda f, m: seen.append((f, m))) == "done"
    assert seen == [(0.4, "fitting"), (0.4, "a step without a fraction"), (0.4, "a broken fraction"),
                    (1.0, "too far")]


def test_hand_settings_the_result_ignored_are_named():
    from types import SimpleNamespace

    made = hand_result(frame_from_array(noiseless_rings()[0]), SetupState().to_bench_setup(), 800.0)
    aperture = SimpleNamespace(centre_px=(150.0, 150.0), radius_px=100.0)  # 200 px across
    d = replace(made, centre_px=(100.0, 80.0), form=SimpleNamespace(aperture=aperture))
    assert display.overrides_ignored(d, Overrides(centre_px=(101.0, 81.0))) == []
    assert display.overrides_ignored(d, Overrides(centre_px=(120.0, 80.0)))[0].startswith("centre")
    assert display.overrides_ignored(d, Overrides(aperture_px=(150.0, 150.0, 100.5))) == []
    assert display.overrides_ignored(d, Overrides(aperture_px=(150.0, 150.0, 130.0)))[0].startswith("aperture")


def test_form_residual_follows_the_gap_fit():
    fit = pytest.importorskip("ringgauge.form.fit")
    from types import SimpleNamespace

    from ringgauge import synth

    P, piston = 1.6, 0.3
    s = synth.test_plate_fringes(synth.SurfaceForm(power=P, piston=piston), aperture_diameter_mm=20.0,
                                 camera=synth.Camera(width=200, height=200, pixel_um=125.0, blur_px=0.0),
                                 lighting=synth.Lighting(falloff=0, gradient=0, stray=0), noise=False)
    img = s.intensity
    c = (99.5, 99.5)
    r = 10.0 / 0.125  # aperture radius in px

    def form_with(power):
        # P rho^2 = P/2 (Z20 + 1): piston term and the unnormalised defocus Z(2,0) = 2 rho^2 - 1
        coeffs = np.zeros(len(fit.TERMS))
        coeffs[0], coeffs[3] = piston + power / 2, power / 2
        g = SimpleNamespace(names=tuple(t[0] for t in fit.TERMS), coeffs=coeffs, centre_px=c, radius_px=r, aspect=1.0)
        return SimpleNamespace(engine_fits=(g,), fringe_nm=273.0)

    right = display.residual_image(img, None, form_obj=form_with(P))
    wrong = display.residual_image(img, None, form_obj=form_with(P + 0.15))
    amp = np.nanstd(img[np.isfinite(right)])
    assert np.nanstd(right) < 0.05 * amp
    assert np.nanstd(wrong) > 4 * np.nanstd(right)


def test_cancel_stops_the_running_job_at_its_next_report(sample_dir):
    s = BenchSession(FakeEngine())
    s.open_paths([sample_dir / "lens-A01.png"])
    job = s.make_job()
    s.cancel()
    assert not s.busy
    with pytest.raises(_Cancelled):
        job.run()


def test_headline_carries_the_key_values_with_their_uncertainty():
    from types import SimpleNamespace

    from ringgauge.form.result import FormResult, FormTerm
    from ringgauge.uncertainty import Quantity

    made = hand_result(frame_from_array(noiseless_rings()[0]), SetupState().to_bench_setup(), 800.0)
    radius = replace(made, radius=Quantity(826.2632, 3.3776 / 2, "mm", 2.0), k=2.0)
    assert display.headline(radius) == "R = 826.3 ± 3.4 mm  (k = 2)"

    def term(name, v, u):
        return FormTerm(name, Quantity(v, u, "fringes", 2.0), Quantity(v * 273.0, u * 273.0, "nm", 2.0))

    form = SimpleNamespace(k=2.0, quantities=(term("power", 1.6903, 0.0065), term("irregularity", 0.3481, 0.012)))
    form.term = lambda name: FormResult.term(form, name)
    assert display.headline(replace(made, radius=None, form=form)) == \
        "Power 1.690 ± 0.013 · Irregularity 0.348 ± 0.024 fringes  (k = 2)"
    assert display.headline(None) == ""
