"""Tools of the bench window, offscreen: manual overrides with undo, layers and the residual view, drag and
drop, the watched folder, settings that persist, shortcuts, and a window that stays responsive."""

import pytest
from gui_helpers import analysed, make_window, write_rings
from PySide6.QtCore import QMimeData, QPointF, Qt, QUrl
from PySide6.QtGui import QDropEvent

from ringgauge.gui.prefs import Prefs
from ringgauge.gui.window import MainWindow
from ringgauge.sources import SAFETY_NOTES


def test_manual_centre_with_undo(app, qtbot, fake_engine, sample_dir, rg_home):
    w = make_window(qtbot, fake_engine, rg_home)
    w.open_paths([str(sample_dir / "lens-A01.png")])
    qtbot.waitUntil(analysed(w), timeout=10000)
    assert not w.a_undo.isEnabled()
    w.set_mode("centre")
    assert w.bench.view.mode == "centre" and w.a_pick_centre.isChecked()
    w.bench.view.centrePicked.emit(120.0, 100.0)
    assert w.session.overrides.centre_px == (120.0, 100.0)
    assert w.bench.view.overlay.centre == (120.0, 100.0) and w.bench.view.overlay.centre_by_hand
    assert w.bench.view.mode == "look" and w.a_undo.isEnabled()
    assert w.bench.results.banner.word.text() == "ANALYSING"
    # the engine is told
    qtbot.waitUntil(lambda: analysed(w)() and w.session.result.setup.centre_px == (120.0, 100.0),
                    timeout=10000)
    # the hand-made engine keeps its own centre: the window says the hand setting was not used
    assert "did not use your hand-set centre" in w.bench.notice.text()
    w.a_undo.trigger()
    assert w.session.overrides.empty and not w.a_undo.isEnabled() and w.a_redo.isEnabled()
    w.bench.view.aperturePicked.emit(5.0, 5.0, 1.0)  # too small: a message, no change
    assert w.session.overrides.empty and "at least 8 px" in w.status.text()


def test_hand_set_centre_is_kept_with_the_result_and_the_record(app, qtbot, fake_engine, sample_dir, rg_home,
                                                                tmp_path):
    from ringgauge.records import open_store

    w = make_window(qtbot, fake_engine, rg_home)
    w.open_paths([str(sample_dir / "lens-A01.png")])
    qtbot.waitUntil(analysed(w), timeout=10000)
    w.set_mode("centre")
    w.bench.view.centrePicked.emit(120.0, 100.0)
    qtbot.waitUntil(lambda: analysed(w)() and w.session.result.setup.centre_px == (120.0, 100.0), timeout=10000)
    assert w.session.result.to_dict()["setup"]["centre_px"] == [120.0, 100.0]
    store = str(tmp_path / "records.sqlite")
    assert w.keep_result(target=store)
    qtbot.waitUntil(lambda: w.kept_record is not None, timeout=20000)
    with open_store(store) as st:
        rec = st.get(w.kept_record[1])
    # what shaped the result is kept with it: the record's set-up and its result's set-up
    assert rec.setup["centre_px"] == [120.0, 100.0]
    assert rec.result["setup"]["centre_px"] == [120.0, 100.0]


def test_bench_profile_warnings_are_shown_with_the_result(app, qtbot, fake_engine, sample_dir, rg_home):
    from ringgauge.calibration import profiles
    from ringgauge.gui.model import SetupState

    # calibrated in 2020 with a 180-day interval: overdue on any day these tests run
    profiles.record_calibration("Bench Q", profiles.hand_entry(16.0, 0.02, date="2020-01-02"),
                                recalibration_days=180)
    w = make_window(qtbot, fake_engine, rg_home, setup=SetupState(source="sodium-d", bench_profile="Bench Q"))
    w.open_paths([str(sample_dir / "lens-A01.png")])
    qtbot.waitUntil(analysed(w), timeout=10000)
    overdue = [t for t in w.session.result.setup.bench_warnings if "re-calibration interval" in t]
    assert overdue
    shown = [w.bench.results.warnings.item(i).text() for i in range(w.bench.results.warnings.count())]
    assert overdue[0] in shown and "hand-made result" in shown  # the engine's own warnings stay
    assert overdue[0] in w.session.result.to_dict()["warnings"]  # so also in a saved result and a record


def test_layers_residual_view_and_help(app, qtbot, fake_engine, sample_dir, rg_home):
    w = make_window(qtbot, fake_engine, rg_home)
    w.open_paths([str(sample_dir / "lens-A01.png")])
    qtbot.waitUntil(analysed(w), timeout=10000)
    w.layer_actions["rings"].trigger()
    assert not w.bench.view._groups["rings"].isVisible()
    w.a_residual.trigger()
    assert w.residual_on
    qtbot.waitUntil(lambda: "Residual view" in w.bench.hint.text(), timeout=10000)
    assert w._residual_cache[1].shape == w.session.frames[0].shape + (3,)
    w.a_residual.trigger()
    assert not w.residual_on
    text = w.help_html()
    for note in SAFETY_NOTES:
        assert note.replace("'", "&#x27;") in text
    w.show_help()
    assert w._help.isVisible()
    w._help.close()


def test_drop_a_file_onto_the_window(app, qtbot, fake_engine, sample_dir, rg_home):
    w = make_window(qtbot, fake_engine, rg_home)
    mime = QMimeData()
    mime.setUrls([QUrl.fromLocalFile(str(sample_dir / "lens-A02.png"))])
    ev = QDropEvent(QPointF(50, 50), Qt.DropAction.CopyAction, mime, Qt.MouseButton.NoButton,
                    Qt.KeyboardModifier.NoModifier)
    w.dropEvent(ev)
    assert w.session.title == "lens-A02.png"
    qtbot.waitUntil(analysed(w), timeout=10000)


def test_watched_folder_opens_each_new_image(app, qtbot, fake_engine, rg_home, tmp_path):
    cam = tmp_path / "camera"
    cam.mkdir()
    w = make_window(qtbot, fake_engine, rg_home)
    assert w.start_watch(str(cam)) and w.a_unwatch.isEnabled()
    write_rings(cam / "part-0001.png")
    assert w.poll_watch() == []  # seen once: maybe still being written
    assert w.poll_watch() == [str(cam / "part-0001.png")]
    assert w.session.title == "part-0001.png"
    qtbot.waitUntil(analysed(w), timeout=10000)
    w.stop_watch()
    assert w.watch is None
    assert w.start_watch(str(tmp_path / "nowhere")) is False and "no such folder" in w.status.text()


def test_settings_persist_between_runs(app, qtbot, fake_engine, rg_home):
    w = make_window(qtbot, fake_engine, rg_home)
    w.bench.setup_panel.operator.setText("A.N.")
    w.bench.setup_panel.operator.editingFinished.emit()
    w.bench.setup_panel.pixel.setValue(12.5)
    w.close()
    again = MainWindow(prefs=Prefs(w.prefs.file))
    qtbot.addWidget(again)
    assert again.session.setup.operator == "A.N." and again.session.setup.pixel_size_um == pytest.approx(12.5)
    assert again.bench.setup_panel.pixel.value() == pytest.approx(12.5)


def test_the_window_stays_responsive_while_the_engine_works(app, qtbot, sample_dir, rg_home):
    import time

    from PySide6.QtCore import QTimer

    from gui_helpers import hand_result

    def slow(frames, setup, *, progress=None):
        for i in range(20):
            time.sleep(0.15)
            progress((i + 1) / 20, f"step {i + 1}")
        return hand_result(frames[0], setup, 900.0)

    w = make_window(qtbot, slow, rg_home)
    ticks = []
    timer = QTimer()
    timer.timeout.connect(lambda: ticks.append(time.perf_counter()))
    timer.start(50)
    w.open_paths([str(sample_dir / "lens-A01.png")])
    qtbot.waitUntil(lambda: w.session.busy, timeout=5000)
    qtbot.waitUntil(lambda: w.progress.value() >= 50, timeout=10000)
    assert w.bench.results.banner.word.text() == "ANALYSING"
    done_at = []
    w.session.changed.connect(lambda what: done_at.append(time.perf_counter()) if what == "result" else None)
    qtbot.waitUntil(analysed(w), timeout=20000)
    timer.stop()
    during = [t for t in ticks if t < done_at[0]]
    gaps = [b - a for a, b in zip(during, during[1:])]
    # the event loop kept turning while the engine worked for 3 s: a blocked GUI thread would show one gap of
    # about 3 s; the bound leaves room for a heavily shared machine
    assert len(during) > 15 and max(gaps) < 1.0


def test_single_key_shortcuts_do_not_steal_typing(app, qtbot, fake_engine, sample_dir, rg_home):
    w = make_window(qtbot, fake_engine, rg_home)
    w.open_paths([str(sample_dir / "lens-A01.png")])
    qtbot.waitUntil(analysed(w), timeout=10000)
    op = w.bench.setup_panel.operator
    op.setFocus()
    qtbot.waitUntil(op.hasFocus, timeout=2000)
    qtbot.keyClicks(op, "AC1R")
    assert op.text() == "AC1R"
    assert w.bench.view.mode == "look" and not w.residual_on and w.layer_actions["rings"].isChecked()
    w.bench.view.setFocus()
    qtbot.waitUntil(w.bench.view.hasFocus, timeout=2000)
    qtbot.keyClick(w.bench.view, Qt.Key.Key_C)
    assert w.bench.view.mode == "centre"
    qtbot.keyClick(w.bench.view, Qt.Key.Key_Escape)
    assert w.bench.view.mode == "look"
