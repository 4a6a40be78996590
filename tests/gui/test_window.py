"""The main flows of the bench window, offscreen: open, analyse, read the values and verdict; change the set-up
and see the result follow; bad files, failed analyses and incomplete set-ups; records and certificates."""

import json

import pytest
from gui_helpers import cut_texts, FakeEngine, analysed, make_window, write_rings

from ringgauge.gui.model import SetupState
from ringgauge.gui.prefs import Prefs


def test_open_analyse_and_read_values(app, qtbot, fake_engine, sample_dir, rg_home):
    w = make_window(qtbot, fake_engine, rg_home)
    assert w.open_paths([str(sample_dir / "lens-A01.png")])
    qtbot.waitUntil(analysed(w), timeout=10000)
    value, U, unit = w.bench.results.value_of("Radius of curvature R")
    assert float(value) == pytest.approx(1000.0, abs=0.1) and unit == "mm" and U.startswith("± ")
    assert w.bench.results.banner.word.text() == "MEASURED"
    assert w.bench.title.text() == "lens-A01.png"
    assert w.bench.view.layer_item_count("rings") == 10
    assert f"R = {value} {U} mm (k = 2)" in w.status.text()
    w.bench.plots.draw_all()
    assert w.bench.plots.rings.has_data and w.bench.plots.form.has_data
    assert not w.bench.plots.profile.has_data  # a hand-made result carries no profile: the tab says so
    assert not w.progress.isVisible()
    assert str(sample_dir / "lens-A01.png") in w.prefs.recent()
    out = rg_home / "result.json"
    w.write_json(str(out))
    assert json.loads(out.read_text(encoding="utf-8"))["radius_mm"] == pytest.approx(1000.0)


def test_a_setup_change_updates_the_result(app, qtbot, fake_engine, sample_dir, rg_home):
    w = make_window(qtbot, fake_engine, rg_home)
    w.open_paths([str(sample_dir / "lens-A01.png")])
    qtbot.waitUntil(analysed(w), timeout=10000)
    panel = w.bench.setup_panel
    panel.source.setCurrentIndex(panel.source.findData("mercury-e"))
    expected = 1000.0 * 589.2938 / 546.074
    qtbot.waitUntil(lambda: analysed(w)() and w.session.result.setup.wavelength_nm == pytest.approx(546.074),
                    timeout=10000)
    value, _, _ = w.bench.results.value_of("Radius of curvature R")
    assert float(value) == pytest.approx(expected, abs=0.1)
    assert "UV" in panel.note.text() or "ultraviolet" in panel.note.text()
    # the set-up was saved for the next run
    assert Prefs(w.prefs.file).load_setup().source == "mercury-e"


def test_a_bad_file_clears_the_previous_result_and_says_so(app, qtbot, fake_engine, sample_dir, rg_home, tmp_path):
    w = make_window(qtbot, fake_engine, rg_home)
    w.open_paths([str(sample_dir / "lens-A01.png")])
    qtbot.waitUntil(analysed(w), timeout=10000)
    bad = tmp_path / "half-written.png"
    bad.write_bytes(b"\x89PNG\r\n\x1a\n" + b"\0" * 20)
    assert w.open_paths([str(bad)]) is False
    assert "cannot decode" in w.status.text()
    assert w.bench.notice_row.isVisible() and "cannot decode" in w.bench.notice.text()
    # the previous part's image and verdict must not stay beside a file that failed (a watched camera folder)
    assert w.session.frames == () and w.session.result is None and w.session.error
    assert w.bench.results.banner.word.text() == "NO MEASUREMENT"
    assert "image not opened" in w.bench.results.banner.explain.text()
    assert w.bench.results.values.rowCount() == 0 and w.bench.title.text() == "No image open"
    assert w.bench.view.image_size() == (0, 0) and not w.a_print.isEnabled()
    assert w.open_paths([str(tmp_path / "missing.png")]) is False
    assert "no such file" in w.bench.notice.text()
    assert w.open_paths([str(sample_dir / "lens-A02.png")])
    assert not w.bench.notice_row.isVisible()


def test_a_failed_analysis_shows_the_engines_message(app, qtbot, sample_dir, rg_home):
    w = make_window(qtbot, FakeEngine(fail_on="lens-A02"), rg_home)
    w.open_paths([str(sample_dir / "lens-A02.png")])
    qtbot.waitUntil(lambda: w.session.error is not None, timeout=10000)
    assert "no ring system found" in w.bench.results.banner.explain.text()
    assert "Analysis failed" in w.status.text() and w.isVisible()


def test_an_unexpected_engine_crash_is_a_message_not_a_crash(app, qtbot, sample_dir, rg_home):
    def broken(frames, setup, *, progress=None):
        raise ZeroDivisionError("division by zero")

    w = make_window(qtbot, broken, rg_home)
    w.open_paths([str(sample_dir / "lens-A01.png")])
    qtbot.waitUntil(lambda: w.session.error is not None, timeout=10000)
    assert "internal error (ZeroDivisionError" in w.session.error
    assert (rg_home / "crash.log").exists()


@pytest.mark.slow
def test_real_engine_measures_a_synthetic_lens(app, qtbot, rg_home, tmp_path):
    pytest.importorskip("ringgauge.pipeline")
    truth = write_rings(tmp_path / "lens.png", radius_mm=800.0, width=320, height=256, pixel_um=16.0, seed=3)
    w = make_window(qtbot, None, rg_home, SetupState(source="sodium-d", pixel_size_um=16.0, pixel_size_u_um=0.02))
    w.open_paths([str(tmp_path / "lens.png")])
    qtbot.waitUntil(lambda: analysed(w)() or w.session.error is not None, timeout=120000)
    assert w.session.error is None
    r = w.session.result
    # the generator's truth lies within the expanded uncertainty the engine states
    assert abs(r.radius_mm - truth["radius_mm"]) <= r.radius_U_mm
    value, U, unit = w.bench.results.value_of("Radius of curvature R")
    assert unit == "mm" and float(value) == pytest.approx(r.radius_mm, abs=float(U.split()[1]))
    w.bench.plots.draw_all()
    assert w.bench.plots.profile.has_data and w.bench.plots.rings.has_data


@pytest.mark.slow
def test_keep_a_result_and_issue_its_certificate(app, qtbot, fake_engine, sample_dir, rg_home, tmp_path):
    pytest.importorskip("ringgauge.certificates")
    from ringgauge.records import open_store

    w = make_window(qtbot, fake_engine, rg_home)
    store = str(tmp_path / "records.sqlite")
    assert w.issue_certificate(str(tmp_path)) is False and "records first" in w.bench.notice.text()
    w.open_paths([str(sample_dir / "lens-A01.png")])
    qtbot.waitUntil(analysed(w), timeout=10000)
    assert w.keep_result(target=store)
    qtbot.waitUntil(lambda: w.kept_record is not None, timeout=20000)
    assert w.a_cert.isEnabled() and "Kept as inspection record" in w.status.text()
    with open_store(store) as st:
        rec = st.get(w.kept_record[1])
        assert rec.radius_mm == pytest.approx(1000.0) and rec.image_name == "lens-A01.png"
    assert w.issue_certificate(str(tmp_path), target=store)
    qtbot.waitUntil(lambda: w.last_certificate is not None, timeout=60000)
    assert w.last_certificate.exists() and w.last_certificate.suffix == ".pdf"


@pytest.mark.slow
def test_real_form_evaluation_gives_a_verdict_that_follows_the_tolerance(app, qtbot, rg_home, tmp_path):
    pytest.importorskip("ringgauge.form.evaluate")
    import cv2

    from ringgauge import synth

    # a part with 2 fringes of power and 0.6 fringe of astigmatism at 30° on a test plate (synthetic truth)
    s = synth.test_plate_fringes(synth.SurfaceForm(power=2.0, astig=0.6, astig_axis_deg=30.0),
                                 aperture_diameter_mm=20.0, camera=synth.Camera(width=320, height=320, pixel_um=75.0),
                                 source="mercury-e", rng=5)
    cv2.imwrite(str(tmp_path / "part.png"), s.image)
    setup = SetupState(source="mercury-e", pixel_size_um=75.0, pixel_size_u_um=0.1, tolerance="3/2(0.5)",
                       test_diameter_mm=20.0)
    w = make_window(qtbot, None, rg_home, setup)
    w.open_paths([str(tmp_path / "part.png")])
    done = lambda: (analysed(w)() or w.session.error is not None)  # noqa: E731
    qtbot.waitUntil(done, timeout=180000)
    assert w.session.error is None
    form = w.session.result.form.to_dict()
    assert cut_texts(w.bench.results) == []  # the form's longer names fit whole, every row (not only those in view)
    # astigmatism after the best-fit sphere is irregularity: 0.6 fringe of it fails B = 0.5
    assert w.bench.results.banner.word.text() == "FAIL" and w.bench.results.banner.tone == "fail"
    assert "irregularity (B): FAIL" in w.bench.results.banner.explain.text()
    assert "Decision rule: simple acceptance" in w.bench.results.banner.rule.text()
    value, U, unit = w.bench.results.value_of("Power (A)")
    assert unit == "fringes" and float(value) == pytest.approx(form["power_fringes"], abs=1e-3)
    assert abs(form["power_fringes"] - 2.0) < 0.1 and abs(form["astigmatism_fringes"] - 0.6) < 0.1
    # the aperture, and the test diameter it was evaluated over (circle and its label)
    assert w.bench.view.layer_item_count("aperture") == 3 and w.bench.view.layer_item_count("meridians") == 4
    tx, ty, trx, _ = w.bench.view.overlay.test_circle
    assert trx == pytest.approx(10.0 / 75e-3)  # 20 mm across at 75 µm per pixel
    w.bench.plots.draw_all()
    assert w.bench.plots.form.has_data
    # a looser drawing tolerance: the verdict follows
    panel = w.bench.setup_panel
    panel.tolerance.setText("3/3(1)")
    panel.tolerance.editingFinished.emit()
    qtbot.waitUntil(lambda: done() and w.session.result.setup.tolerance == "3/3(1)", timeout=180000)
    assert w.bench.results.banner.word.text() == "PASS"


def test_an_incomplete_setup_is_a_message_in_the_banner(app, qtbot, fake_engine, sample_dir, rg_home):
    w = make_window(qtbot, fake_engine, rg_home)
    w.open_paths([str(sample_dir / "lens-A01.png")])
    qtbot.waitUntil(analysed(w), timeout=10000)
    calls = fake_engine.calls
    w.session.update_setup(tolerance="3/2(")  # a tolerance that cannot be read
    qtbot.waitUntil(lambda: w.session.error is not None, timeout=5000)
    assert "tolerance" in w.bench.results.banner.explain.text().lower()
    assert not w.session.busy and not w.progress.isVisible() and fake_engine.calls == calls
    w.session.update_setup(tolerance="3/2(0.5)")
    qtbot.waitUntil(lambda: fake_engine.calls > calls and analysed(w)(), timeout=10000)
