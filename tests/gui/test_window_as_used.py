"""The window as a bench inspector and a trainer use it, offscreen: stale and refused results, the layout at
1280×800 and 1024×700 with no cut text, zoom about the view's centre, the bench tool bar per page, printing, the
calibration and test-plate dialogs (the command line's own functions behind them), the training review, and the
window's actions checked both ways (model → widget and widget → model)."""

import csv
import json
import unicodedata
from pathlib import Path

import pytest
from gui_helpers import FakeEngine, analysed, cut_texts, make_window
from PySide6.QtCore import QPointF, Qt
from PySide6.QtGui import QKeySequence

from ringgauge import cli

SAMPLES = Path(__file__).resolve().parents[2] / "sample_images"


def _pdf_text(path) -> str:
    from pypdf import PdfReader

    text = unicodedata.normalize("NFKC", "\n".join(p.extract_text() or "" for p in PdfReader(str(path)).pages))
    return " ".join(text.split())  # the extractor separates words by tabs and line breaks


def _pdf_printer(path):
    from PySide6.QtPrintSupport import QPrinter

    pr = QPrinter(QPrinter.PrinterMode.HighResolution)
    pr.setOutputFormat(QPrinter.OutputFormat.PdfFormat)
    pr.setOutputFileName(str(path))
    return pr


def _open(qtbot, w, path):
    assert w.open_paths([str(path)])
    qtbot.waitUntil(analysed(w), timeout=10000)


# -- the layout --------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("size", [(1280, 800), (1024, 700)])
def test_no_cut_text_in_the_setup_panel_or_the_results_at_both_sizes(app, qtbot, sample_dir, rg_home, size):
    from ringgauge.conformity import TermVerdict, Verdict

    term = TermVerdict("rot_sym_irregularity", 0.1, 0.02, 0.5, "fringes", 0.1, 0.02, 0.5, None, 546.074, False, "pass")
    verdict = Verdict("conditional pass", (term,), decision_rule="simple acceptance")
    w = make_window(qtbot, FakeEngine(verdict=verdict), rg_home)
    w.resize(*size)
    qtbot.wait(20)
    # the empty view's hint is whole inside the view
    v = w.bench.view
    hint = v.mapFromScene(v._placeholder.sceneBoundingRect()).boundingRect()
    assert v.viewport().rect().contains(hint), (hint, v.viewport().rect())
    _open(qtbot, w, sample_dir / "lens-A01.png")
    for _ in range(5):
        qtbot.wait(20)
    assert w.width() <= size[0] and w.height() <= size[1]
    assert cut_texts(w.bench.setup_panel) == []
    assert cut_texts(w.bench.results) == []
    # the per-part Inspection group is in view without scrolling
    from PySide6.QtWidgets import QGroupBox

    insp = next(g for g in w.bench.setup_panel.findChildren(QGroupBox) if g.title() == "Inspection")
    assert insp.geometry().bottom() <= w.bench.setup_scroll.viewport().height()
    # the values table shows more than a couple of rows, and the Warnings tab is on screen (not scrolled away)
    t = w.bench.results.values
    assert t.rowAt(t.viewport().height() - 2) >= 4 or t.rowAt(t.viewport().height() - 2) == -1
    bar = w.bench.results.tabs.tabBar()
    assert bar.tabRect(2).right() <= bar.width()
    # the verdict names the trade's term, never the internal key
    assert "rot_sym" not in w.bench.results.banner.explain.text()
    assert "rotationally symmetric irregularity (C): PASS" in w.bench.results.banner.explain.text()
    # the training page: the level's name and the reading's fields whole
    w.tabs.setCurrentWidget(w.training)
    w.training.level.setCurrentIndex(w.training.level.findData("bench"))
    w.training.new_exercise(seed=14)
    qtbot.wait(20)
    assert cut_texts(w.training) == []


def test_cut_text_is_found_when_there_is_some(app, qtbot, sample_dir, rg_home):
    """The check above must be able to fail: squeeze the results and it names what is cut."""
    w = make_window(qtbot, FakeEngine(), rg_home)
    _open(qtbot, w, sample_dir / "lens-A01.png")
    w.bench.results.setMinimumWidth(0)
    w.bench.split.setSizes([300, 900, 80])
    qtbot.wait(50)
    assert any("table columns" in c or "cell" in c for c in cut_texts(w.bench.results))


# -- stale and refused results --------------------------------------------------------------------------------------
def test_with_automatic_analysis_off_a_changed_setup_marks_the_result_out_of_date(app, qtbot, sample_dir, rg_home):
    eng = FakeEngine()
    w = make_window(qtbot, eng, rg_home)
    _open(qtbot, w, sample_dir / "lens-A01.png")
    w.a_auto.trigger()  # widget -> model
    assert not w.auto_analyse and not w.a_auto.isChecked()
    calls = eng.calls
    w.session.update_setup(source="mercury-e")  # model -> widget
    assert w.session.stale and w.bench.results.banner.word.text() == "OUT OF DATE"
    assert not w.bench.results.values.isEnabled() and "F5" in w.bench.results.banner.explain.text()
    qtbot.wait(100)
    assert eng.calls == calls  # nothing analysed behind the inspector's back
    w.a_analyse.trigger()  # F5
    qtbot.waitUntil(lambda: analysed(w)() and not w.session.stale, timeout=10000)
    assert w.bench.results.banner.word.text() == "MEASURED" and w.bench.results.values.isEnabled()
    assert w.session.result.setup.source.key == "mercury-e"
    # a hand setting changed is a changed input too
    w.session.set_centre(100.0, 90.0)
    assert w.bench.results.banner.word.text() == "OUT OF DATE"
    w.a_auto.trigger()  # back on: the next change is analysed at once
    w.session.update_setup(source="sodium-d")
    qtbot.waitUntil(lambda: analysed(w)() and not w.session.stale, timeout=10000)
    assert w.bench.results.banner.word.text() == "MEASURED"


def test_a_refused_file_from_the_watched_folder_clears_the_last_parts_verdict(app, qtbot, sample_dir, rg_home,
                                                                              tmp_path):
    w = make_window(qtbot, FakeEngine(), rg_home)
    cam = tmp_path / "camera"
    cam.mkdir()
    _open(qtbot, w, sample_dir / "lens-A01.png")
    assert w.bench.results.banner.word.text() == "MEASURED"
    assert w.start_watch(str(cam))
    (cam / "part-2.png").write_bytes(b"\x89PNG\r\n\x1a\n broken transfer")
    w.poll_watch()
    w.poll_watch()
    assert w.session.result is None and w.session.frames == ()
    assert w.bench.results.banner.word.text() == "NO MEASUREMENT"
    assert "part-2.png" in w.bench.results.banner.explain.text() or "part-2.png" in w.bench.notice.text()
    assert w.bench.results.values.rowCount() == 0
    w.stop_watch()


def test_without_a_test_diameter_the_window_evaluates_over_the_clear_aperture(app, qtbot, sample_dir, rg_home):
    w = make_window(qtbot, FakeEngine(), rg_home)
    w.session.update_setup(tolerance="3/2(0.5)")
    _open(qtbot, w, sample_dir / "lens-A01.png")
    assert w.session.error is None
    s = w.session.result.setup
    assert s.tolerance == "3/2(0.5)" and s.test_diameter_mm is None  # as 'ringgauge analyze' does


# -- view, tool bar, keys -------------------------------------------------------------------------------------------
def test_keyboard_zoom_keeps_the_view_centre_and_the_wheel_keeps_the_point_under_the_mouse(app, qtbot, sample_dir,
                                                                                           rg_home):
    w = make_window(qtbot, FakeEngine(), rg_home)
    _open(qtbot, w, sample_dir / "lens-A01.png")
    v = w.bench.view
    v.set_zoom(3.0)
    v.centerOn(200.0, 150.0)
    before = v.view_centre()
    z = v.zoom()
    w.a_zoom_in.trigger()
    assert v.zoom() == pytest.approx(1.25 * z)
    after = v.view_centre()
    assert abs(after.x() - before.x()) < 1.0 and abs(after.y() - before.y()) < 1.0
    w.a_zoom_out.trigger()
    after = v.view_centre()
    assert abs(after.x() - before.x()) < 1.0 and abs(after.y() - before.y()) < 1.0
    # the wheel keeps the image point under the mouse
    at = QPointF(40.0, 30.0)
    under = v.mapToScene(at.toPoint())
    v.zoom_by(1.25, anchor=at)
    again = v.mapToScene(at.toPoint())
    assert abs(again.x() - under.x()) < 1.0 and abs(again.y() - under.y()) < 1.0


def test_layer_keys_and_actions_agree_both_ways(app, qtbot, sample_dir, rg_home):
    w = make_window(qtbot, FakeEngine(), rg_home)
    _open(qtbot, w, sample_dir / "lens-A01.png")
    v = w.bench.view
    v.setFocus()
    qtbot.waitUntil(v.hasFocus, timeout=2000)
    qtbot.keyClick(v, Qt.Key.Key_1)  # widget (key) -> model
    assert not v.visible["rings"] and not w.layer_actions["rings"].isChecked()
    assert not v._groups["rings"].isVisible()
    w.set_layer("rings", True)  # model -> widget
    assert v.visible["rings"] and w.layer_actions["rings"].isChecked() and v._groups["rings"].isVisible()
    qtbot.keyClick(v, Qt.Key.Key_5)
    assert not v.visible["centre"] and not w.layer_actions["centre"].isChecked()


def test_the_bench_tool_bar_shows_on_the_bench_page_only(app, qtbot, rg_home):
    w = make_window(qtbot, FakeEngine(), rg_home)
    assert w.bench_toolbar.isVisible()
    for page in (w.lot, w.training):
        w.tabs.setCurrentWidget(page)
        assert not w.bench_toolbar.isVisible()
    w.tabs.setCurrentWidget(w.bench)
    assert w.bench_toolbar.isVisible()


def test_hand_set_aperture_is_analysed_again_and_clear_redo_round_trip(app, qtbot, sample_dir, rg_home):
    eng = FakeEngine()
    w = make_window(qtbot, eng, rg_home)
    _open(qtbot, w, sample_dir / "lens-A01.png")
    calls = eng.calls
    w.set_mode("aperture")
    w.bench.view.aperturePicked.emit(160.0, 128.0, 60.0)  # widget -> model
    assert w.session.overrides.aperture_px == (160.0, 128.0, 60.0)
    assert w.bench.view.overlay.aperture_by_hand and w.bench.view.mode == "look"
    qtbot.waitUntil(lambda: eng.calls > calls and analysed(w)(), timeout=10000)
    assert w.session.result.setup.aperture_px == (160.0, 128.0, 60.0)  # the engine was told
    assert w.a_clear.isEnabled()
    w.a_clear.trigger()
    assert w.session.overrides.empty and not w.bench.view.overlay.aperture_by_hand
    w.a_undo.trigger()  # the clear is undone
    assert w.session.overrides.aperture_px == (160.0, 128.0, 60.0) and w.a_redo.isEnabled()
    w.a_redo.trigger()
    assert w.session.overrides.empty and not w.a_redo.isEnabled()
    w.session.set_aperture(100.0, 100.0, 40.0)  # model -> widget
    assert w.bench.view.overlay.aperture == (100.0, 100.0, 40.0, 40.0) and w.a_undo.isEnabled()


def test_save_json_and_recent_files(app, qtbot, sample_dir, rg_home, tmp_path, monkeypatch):
    from PySide6.QtWidgets import QFileDialog

    w = make_window(qtbot, FakeEngine(), rg_home)
    _open(qtbot, w, sample_dir / "lens-A01.png")
    out = tmp_path / "lens-A01.json"
    monkeypatch.setattr(QFileDialog, "getSaveFileName", staticmethod(lambda *a, **k: (str(out), "")))
    w.a_save.trigger()
    d = json.loads(out.read_text(encoding="utf-8"))
    assert d["radius_mm"] == pytest.approx(w.session.result.radius_mm) and "Saved" in w.status.text()
    # recent files: the menu lists what was opened; choosing one opens it
    _open(qtbot, w, sample_dir / "lens-A02.png")
    names = [a.text() for a in w.recent_menu.actions()]
    assert str(sample_dir / "lens-A01.png") in names and str(sample_dir / "lens-A02.png") in names
    a = next(a for a in w.recent_menu.actions() if a.text() == str(sample_dir / "lens-A01.png"))
    a.trigger()
    qtbot.waitUntil(analysed(w), timeout=10000)
    assert w.session.frames[0].name == "lens-A01.png" and w.bench.title.text() == "lens-A01.png"


def test_ctrl_k_keeps_and_ctrl_p_prints(app, qtbot, sample_dir, rg_home, tmp_path, monkeypatch):
    pytest.importorskip("ringgauge.records")
    import PySide6.QtPrintSupport as qps

    w = make_window(qtbot, FakeEngine(), rg_home)
    _open(qtbot, w, sample_dir / "lens-A01.png")
    assert w.a_keep.shortcut() == QKeySequence("Ctrl+K")
    assert w.a_print.shortcut() == QKeySequence(QKeySequence.StandardKey.Print)
    assert w.a_cert.shortcut() == QKeySequence("Ctrl+Shift+P")
    w.activateWindow()
    qtbot.keyClick(w, Qt.Key.Key_K, Qt.KeyboardModifier.ControlModifier)
    qtbot.waitUntil(lambda: w.kept_record is not None, timeout=20000)
    assert "Kept as inspection record" in w.status.text()
    pdf = tmp_path / "printed.pdf"

    class Dialog:  # stands in for the modal print dialog: the user picks "print to PDF" and OK
        def __init__(self, printer, _parent=None):
            printer.setOutputFormat(qps.QPrinter.OutputFormat.PdfFormat)
            printer.setOutputFileName(str(pdf))

        def setWindowTitle(self, _t):  # noqa: N802
            pass

        def exec(self):
            from PySide6.QtWidgets import QDialog

            return QDialog.DialogCode.Accepted

    monkeypatch.setattr(qps, "QPrintDialog", Dialog)
    qtbot.keyClick(w, Qt.Key.Key_P, Qt.KeyboardModifier.ControlModifier)
    assert pdf.exists()
    text = _pdf_text(pdf)
    assert "Radius of curvature R" in text and "MEASURED" in text and "lens-A01.png" in text


def test_print_a_result_and_a_certificate_to_pdf(app, qtbot, sample_dir, rg_home, tmp_path):
    pytest.importorskip("ringgauge.certificates")
    w = make_window(qtbot, FakeEngine(), rg_home)
    assert not w.a_print.isEnabled() and w.print_to(_pdf_printer(tmp_path / "none.pdf")) is False
    _open(qtbot, w, sample_dir / "lens-A01.png")
    assert w.a_print.isEnabled()
    assert w.print_to(_pdf_printer(tmp_path / "result.pdf"))
    text = _pdf_text(tmp_path / "result.pdf")
    R = w.bench.results.value_of("Radius of curvature R")
    assert f"{R[0]}" in text and R[1] in text and "U = k·u" in text and "Not a certificate" in text
    # a certificate: kept, issued, then printed page for page with its number
    store = str(tmp_path / "records.sqlite")
    assert w.keep_result(target=store)
    qtbot.waitUntil(lambda: w.kept_record is not None, timeout=20000)
    assert w.issue_certificate(str(tmp_path), target=store)
    qtbot.waitUntil(lambda: w.last_certificate is not None, timeout=60000)
    assert w.a_print_cert.isEnabled()
    assert w.print_to(_pdf_printer(tmp_path / "cert-print.pdf"), "certificate")
    printed = _pdf_text(tmp_path / "cert-print.pdf")
    number = Path(w.last_certificate).stem
    assert number in printed and "authoritative" in printed


def test_a_lot_row_opens_on_the_bench_with_its_own_result(app, qtbot, sample_dir, rg_home):
    from gui_helpers import hand_result

    from ringgauge.imaging import load_frame

    eng = FakeEngine()
    w = make_window(qtbot, eng, rg_home)
    path = str(sample_dir / "lens-A02.png")
    res = hand_result(load_frame(path), w.session.setup.to_bench_setup(), 650.0)
    w.tabs.setCurrentWidget(w.lot)
    w.lot.openInBench.emit(path, res)  # widget (lot row) -> model
    qtbot.wait(50)
    assert w.tabs.currentWidget() is w.bench and w.bench_toolbar.isVisible()
    assert w.session.result is res and eng.calls == 0  # the lot's own result, not analysed again
    assert w.bench.results.value_of("Radius of curvature R")[0].startswith("650")


# -- registers -------------------------------------------------------------------------------------------------------
def test_calibration_dialog_measures_saves_and_feeds_the_setup_panel(app, qtbot, rg_home):
    from ringgauge.calibration import profiles
    from ringgauge.gui.registers import CalibrationDialog

    w = make_window(qtbot, FakeEngine(), rg_home)
    assert w.bench.setup_panel.profile.count() == 1  # none saved yet
    dlg = CalibrationDialog(w)
    qtbot.addWidget(dlg)
    dlg.saved.connect(lambda _n: w.bench.setup_panel.reload_lists())
    img = str(SAMPLES / "calibration" / "stage-micrometer-100um.png")
    # the command line's checks: a disc takes one image, the size must be a number
    dlg.images.setText(f"{img};{img}")
    dlg.kind.setCurrentIndex(dlg.kind.findData("disc"))
    dlg.size.setText("4.000")
    assert dlg.measure() is False and "a disc calibration takes one image" in dlg.message.text()
    dlg.kind.setCurrentIndex(dlg.kind.findData("lines"))
    dlg.images.setText(img)
    dlg.size.setText("a hundred")
    assert dlg.measure() is False and "must be a number" in dlg.message.text()
    dlg.size.setText("100")
    dlg.size_u.setText("0.05")
    dlg.bench.setCurrentText("Bench 2")
    assert dlg.measure()
    qtbot.waitUntil(lambda: dlg.result is not None or "Measuring" not in dlg.message.text(), timeout=60000)
    assert dlg.result is not None, dlg.message.text()
    p = profiles.get("Bench 2")
    sx = p.scales()[0]
    assert sx == pytest.approx(dlg.result.calibration.scale_x.value)
    assert "pixel scale" in dlg.report.toPlainText() and "Saved as bench 'Bench 2'" in dlg.message.text()
    # the set-up panel offers it now; choosing it there reaches the session
    panel = w.bench.setup_panel
    i = panel.profile.findData("Bench 2")
    assert i > 0 and panel.profile.isEnabled()
    panel.profile.setCurrentIndex(i)
    assert w.session.setup.bench_profile == "Bench 2"


def test_plates_dialog_adds_and_retires_through_the_register(app, qtbot, rg_home, capsys):
    from ringgauge.form import plates
    from ringgauge.gui.registers import PlatesDialog

    w = make_window(qtbot, FakeEngine(), rg_home)
    w.a_plates.trigger()  # Tools > Test plates…
    dlg = w._plates
    dlg.pid.setText("TP-0412")
    dlg.radius.setText("51.68")
    dlg.radius_u.setText("0.002")
    assert dlg.add()
    got = {p.id: p for p in plates.load_register()}
    assert got["TP-0412"].radius_mm == 51.68 and got["TP-0412"].kind == "concave"
    panel = w.bench.setup_panel
    assert dlg.plate_ids() == ["TP-0412"] and panel.plate.findData("TP-0412") > 0
    panel.plate.setCurrentIndex(panel.plate.findData("TP-0412"))  # widget -> model
    assert w.session.setup.test_plate == "TP-0412"
    dlg.pid.setText("TP-0500")
    dlg.radius.setText("80.1")
    dlg.radius_u.setText("0.003")
    assert dlg.add()
    # the lists are filled again, and the panel still shows the session's plate (model -> widget)
    assert panel.plate.currentData() == "TP-0412" and panel.plate.findData("TP-0500") > 0
    # the command line sees the same register
    assert cli.main(["plates", "list"]) == 0 and "TP-0412" in capsys.readouterr().out
    # the register's own checks: the same identifier twice is refused with its message
    dlg.pid.setText("TP-0412")
    dlg.radius.setText("51.68")
    dlg.radius_u.setText("0.002")
    assert dlg.add() is False and "TP-0412" in dlg.message.text()
    dlg.radius.setText("")
    dlg.pid.setText("TP-0413")
    assert dlg.add() is False and "radius is empty" in dlg.message.text()
    assert dlg.retire("TP-0412")
    assert {p.id: p for p in plates.load_register()}["TP-0412"].retired and dlg.plate_ids() == ["TP-0500"]
    assert panel.plate.findData("TP-0500") > 0


def test_tools_menu_opens_both_dialogs(app, qtbot, rg_home):
    w = make_window(qtbot, FakeEngine(), rg_home)
    w.a_calibrate.trigger()
    w.a_plates.trigger()
    assert w._calibration.isVisible() and w._plates.isVisible()
    w._calibration.close()
    w._plates.close()


# -- training ----------------------------------------------------------------------------------------------------------
def test_training_leaves_the_radius_empty_scores_irregularity_and_reviews_as_typed(app, qtbot, rg_home, tmp_path):
    from ringgauge.gui.training_view import TrainingPage

    page = TrainingPage()
    qtbot.addWidget(page)
    page.show()
    page.trainee.setText("New starter 1")
    page.level.setCurrentIndex(page.level.findData("bench"))
    ex = page.new_exercise(seed=14)
    assert page.radius.value() == 0 and page.radius.text() == "—"  # not the plate's radius: that gives it away
    t = ex.truth
    assert t["irregularity_fringes"] >= t["astigmatism_fringes"] - 0.02  # astigmatism is irregularity too
    page.irreg.setValue(t["irregularity_fringes"])
    sc = page.score_reading()
    items = {i.item: i for i in sc.items}
    assert items["Irregularity"].correct and not items["Part radius"].correct
    assert page.review_summary.text().startswith("1 attempt.") and "bench: 1 attempt," in page.review_summary.text()
    page.new_exercise(seed=15)
    page.irreg.setValue(t["irregularity_fringes"] + 3)
    page.score_reading()
    page.tabs.setCurrentIndex(1)
    assert page.review_who.currentText() == "New starter 1"
    assert page.review_summary.text().startswith("2 attempts.") and "bench: 2 attempts," in page.review_summary.text()
    when = page.review_table.item(0, 0).text()
    assert "T" not in when.split()[0] and len(when.split()[1]) == 5  # "2026-12-02 14:05 UTC", not ISO
    # reopen the older attempt (second row: newest first): the same exercise and reading, scored again
    assert page.reopen(1)
    assert page.exercise.id == ex.id and page.tabs.currentIndex() == 0
    assert page.irreg.value() == pytest.approx(t["irregularity_fringes"]) and "not logged again" in \
        page.debrief.toPlainText()
    assert len(page.log.entries("New starter 1")) == 2
    # export the review
    out = tmp_path / "review.csv"
    page.tabs.setCurrentIndex(1)
    assert page.export_csv(str(out))
    rows = list(csv.DictReader(open(out, encoding="utf-8")))
    assert len(rows) == 2 and rows[0]["trainee"] == "New starter 1" and rows[0]["exercise"] == ex.id
    assert "Exported 2 attempts" in page.review_message.text()
    assert not page.export_csv(str(tmp_path / "no" / "dir.csv")) and "cannot write" in page.review_message.text()


# -- what the form plots show ------------------------------------------------------------------------------------------
def test_form_map_axes_in_mm_and_the_profile_along_the_radius(sample_dir):
    import numpy as np
    from gui_helpers import hand_result

    from ringgauge.gui import display
    from ringgauge.gui.model import SetupState
    from ringgauge.imaging import load_frame

    f = load_frame(str(sample_dir / "lens-A01.png"))  # 320 x 256 px
    setup = SetupState(source="sodium-d", pixel_size_um=16.0, pixel_size_u_um=0.02).to_bench_setup()
    res = hand_result(f, setup, 800.0)
    m = display.form_map(res, f.shape)
    cx, cy = res.centre_px
    # millimetres from the centre: 16 µm per pixel; +y up on the plot
    assert m["extent_mm"] == pytest.approx((-cx * 0.016, (320 - cx) * 0.016, (cy - 256) * 0.016, cy * 0.016))
    # a paraboloid gap g = c·r² comes back as c·r² along the radius (mean), with no spread around each ring
    n = 201
    xs = np.linspace(-5.0, 5.0, n)
    X, Y = np.meshgrid(xs, xs)
    R2 = X**2 + Y**2
    gap = np.where(R2 <= 25.0, 10.0 * R2, np.nan)
    prof = display.form_profile({"gap_nm": gap, "extent_mm": (-5.0, 5.0, -5.0, 5.0)}, bins=20)
    r = prof["r_mm"]
    assert r.max() < 5.0 and r.min() > 0
    assert prof["mean_nm"] == pytest.approx(10.0 * r**2, rel=0.05, abs=2.0)
    assert np.all(prof["hi_nm"] - prof["lo_nm"] <= 10.0 * (2 * 5.0 / 20) * 2 * r + 1.0)  # one bin's width of r²
    assert display.form_profile(None) is None
