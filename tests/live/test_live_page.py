"""The window's Live page (pytest-qt, offscreen): a generated video played as the camera, the readouts, and a
capture that becomes a normal analysis on the Bench page."""

import json
import os

import pytest
from live_common import PIXEL_UM, RADIUS_MM, SOURCE

pytest.importorskip("PySide6")


@pytest.fixture
def window(qtbot, tmp_path):
    from ringgauge.gui.model import BenchSession, SetupState
    from ringgauge.gui.prefs import Prefs
    from ringgauge.gui.window import MainWindow

    s = BenchSession(None, SetupState(source=SOURCE, pixel_size_um=PIXEL_UM, pixel_size_u_um=0.0))
    w = MainWindow(s, prefs=Prefs(str(tmp_path / "live-test.ini")))
    w._debounce.setInterval(0)
    qtbot.addWidget(w)
    w.show()
    yield w
    w.live.stop()


def test_live_page_plays_a_file_and_capture_gives_a_normal_result(window, qtbot, sequences):
    seq = sequences[("centre", "settling")]
    page = window.live
    assert window.tabs.indexOf(page) >= 0
    # the lamp and laser cautions are on the live page itself
    text = page.safety_label.text().lower()
    assert "laser" in text and "mercury" in text
    assert page.start(seq["video"])
    qtbot.waitUntil(lambda: page.session.ended, timeout=60000)
    page.refresh()
    st = page.session.latest
    assert st.settled and st.power_sign == "+"
    assert "SETTLED" in page.settle_label.text()
    assert page.sign_label.text().startswith("+")
    assert "mm ±" in page.radius_label.text()
    assert page.view.rings_drawn >= 5
    assert page.capture_btn.isEnabled()
    paths = page.capture()
    assert len(paths) == 1 and os.path.exists(paths[0])
    ev = json.loads(open(os.path.splitext(paths[0])[0] + ".motion.json", encoding="utf-8").read())
    assert ev["power_sign"] == "+" and ev["readings"][0]["rings"] == "out" and ev["motion_before"]
    # the capture goes through the one pipeline as any opened image does
    assert window.tabs.currentWidget() is window.bench
    def done():
        assert window.session.result is not None, window.session.error

    qtbot.waitUntil(done, timeout=60000)
    d = window.session.result.to_dict()
    assert abs(d["radius_mm"] - RADIUS_MM) <= d["k"] * d["radius_u_mm"]
    assert any("sign from the rings' motion: +" in w for w in d["warnings"])


def test_bad_camera_shows_one_line_and_keeps_running(window):
    page = window.live
    assert not page.start("7")
    assert not page.problem.isHidden() and "camera 7" in page.problem.text()
    assert page.start_btn.isEnabled()
    assert page.capture() == []


def test_capture_refused_while_moving(window, qtbot, sequences):
    seq = sequences[("edge", "settling")]  # moving for its first 30 frames
    page = window.live
    assert page.start(seq["video"])
    qtbot.waitUntil(lambda: page.session.latest is not None, timeout=30000)
    page.stop()
    st = page.session.latest
    assert st.frame < 25 and not st.settled
    assert page.capture() == []
    assert "not settled" in page.capture_note.text()


def test_practice_hides_the_reading_until_the_trainee_answers(window, qtbot):
    page = window.live
    page.new_practice(seed=5, wait=True)
    assert page.practice is not None and page.hidden
    truth = page.practice["truth"]
    qtbot.waitUntil(lambda: page.session.ended, timeout=90000)
    page.refresh()
    assert page.sign_label.text().startswith("hidden")
    assert page.session.sign.sign == truth  # the machine reads the generated contact
    wrong = "-" if truth == "+" else "+"
    text = page.answer_practice(wrong)
    assert text.startswith("Not this time") and not page.hidden
    assert not page.sign_label.text().startswith("hidden")


def test_auto_capture_once_per_settling(window, qtbot, sequences):
    seq = sequences[("centre", "pressing")]  # at rest, pressed, released, at rest again: two settlings
    page = window.live
    page.auto_box.setChecked(True)
    caught = []
    page.captured.connect(lambda paths, ev: caught.append((paths, ev)))
    assert page.start(seq["video"])
    qtbot.waitUntil(lambda: page.session.ended, timeout=60000)
    page.refresh()
    assert len(caught) == 2, [ev["captured_frames"] for _p, ev in caught]
    first, second = (ev["captured_frames"][0] for _p, ev in caught)
    ev = {e["event"]: e for e in seq["truth"]["events"]}
    assert first < ev["pressing"]["first"] <= ev["releasing"]["last"] < second
    assert caught[1][1]["power_sign"] == "+"


def test_practice_files_removed_when_the_window_closes(window, qtbot):
    page = window.live
    page.new_practice(seed=3, wait=True)
    folder = page._practice_dir
    assert os.path.isdir(folder)
    window.close()
    assert not os.path.exists(folder)
    assert page.session is None or page.session.ended or page.session._stop.is_set()
