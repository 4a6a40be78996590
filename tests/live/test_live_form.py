"""Live readouts against a test plate: generated test-plate videos played through VideoCapture.

Each video is a part with fixed power and astigmatism settling on the plate (the air film thinning, eased to a
stop), resting, pressed gently and released, resting again; its truth JSON gives the form and the piston of
every frame. Form terms scale with the square of the evaluated diameter (quadratic terms), so the truth over
the test diameter is the truth over the part's aperture times (test diameter / aperture)².
"""

import json
import math

import pytest

from ringgauge import synth
from ringgauge.bench_setup import default_setup
from ringgauge.cli import main
from ringgauge.live.form_sequence import FormPlan, write_form_sequence
from ringgauge.live.form_tracker import FormLiveSession, open_session
from ringgauge.live.motion import SETTLE_FRAMES, SETTLE_FRINGES
from ringgauge.live.sequence import SequencePlan
from ringgauge.live.source import open_source

CAMERA = synth.Camera(width=320, height=320, pixel_um=80.0)
PIXEL_UM = 80.0
SOURCE = "mercury-e"
TEST_DIAMETER_MM = 16.0
BASE = SequencePlan(settle_frames=24, rest_frames=14, press_frames=12, after_frames=12)


def _setup():
    # the pixel scale is exact in a generated file
    return default_setup(PIXEL_UM, SOURCE, test_diameter_mm=TEST_DIAMETER_MM)


def _play(video):
    session = open_session(open_source(video), _setup())
    states = list(session)
    return session, states


@pytest.fixture(scope="module")
def plates(tmp_path_factory):
    out = {}
    for contact, power, astig, axis, seed in (("centre", 2.5, 0.6, 30.0, 21), ("edge", 3.0, 0.8, 110.0, 22)):
        d = tmp_path_factory.mktemp(f"plate_{contact}")
        plan = FormPlan(power_fringes=power, astigmatism_fringes=astig, axis_deg=axis, contact=contact, base=BASE)
        video, truth = write_form_sequence(d / f"{contact}.avi", plan, source=SOURCE, camera=CAMERA, rng=seed)
        session, states = _play(str(video))
        out[contact] = {"video": str(video), "truth": json.loads(truth.read_text()), "session": session,
                        "states": states}
    return out


def _scale(truth):
    return (TEST_DIAMETER_MM / truth["aperture_diameter_mm"]) ** 2


def test_a_form_setup_gets_the_test_plate_session(plates):
    assert isinstance(plates["centre"]["session"], FormLiveSession)


@pytest.mark.parametrize("contact", ["centre", "edge"])
def test_power_and_astigmatism_within_their_uncertainty_on_settled_frames(plates, contact):
    p = plates[contact]
    truth, states = p["truth"], p["states"]
    assert len(states) == truth["frames"] and all(s.ok for s in states), [s.message for s in states if not s.ok]
    settled = [s for s in states if s.settled]
    assert len(settled) >= 10
    want_p = truth["power_fringes"] * _scale(truth)
    want_a = truth["astigmatism_fringes"] * _scale(truth)
    for s in settled:
        # U = 2u (k = 2); the power carries its sign once the motion gave one
        if s.power_sign != "unknown":
            assert abs(s.power_fringes - want_p) <= 2 * s.power_u_fringes, (s.frame, s.power_fringes, want_p)
        else:
            assert abs(s.power_fringes - abs(want_p)) <= 2 * s.power_u_fringes
        assert abs(s.astigmatism_fringes - want_a) <= 2 * s.astigmatism_u_fringes, (s.frame, s.astigmatism_fringes)
        # one fringe = lambda/2 of height (the fringe of a test-plate gap in air)
        assert s.power_nm == pytest.approx(s.power_fringes * truth["wavelength_nm"] / 2, rel=1e-9)
        # an uncertainty that could hide anything is no check: U under 0.1 fringe
        assert 0 < 2 * s.power_u_fringes < 0.1 and 0 < 2 * s.astigmatism_u_fringes < 0.1
    # the axis is the meridian of larger power magnitude: the generated axis (where the gap grows most) for
    # centre contact, the meridian across it for edge contact (there the gap falls toward the edge)
    want_axis = (truth["astigmatism_axis_deg"] + (0.0 if contact == "centre" else 90.0)) % 180.0
    d_axis = (settled[-1].astigmatism_axis_deg - want_axis + 90.0) % 180.0 - 90.0
    assert abs(d_axis) < 2.0, settled[-1].astigmatism_axis_deg


@pytest.mark.parametrize("contact", ["centre", "edge"])
def test_settled_only_once_the_generated_gap_stopped(plates, contact):
    p = plates[contact]
    piston = p["truth"]["piston_fringes"]
    states = p["states"]
    for s in states:
        if s.settled:
            window = piston[max(0, s.frame - SETTLE_FRAMES + 1): s.frame + 1]
            # the rule: still within SETTLE_FRINGES over SETTLE_FRAMES frames; 0.01 fringe allows for the
            # measured motion's own noise
            assert max(window) - min(window) <= SETTLE_FRINGES + 0.01, (s.frame, max(window) - min(window))
    ev = {e["event"]: e for e in p["truth"]["events"] if e["event"] != "still"}
    by_frame = {s.frame: s for s in states}
    # settled at the end of the rest and at the very end; never while pressed or released
    assert by_frame[ev["pressing"]["first"] - 1].settled
    assert by_frame[states[-1].frame].settled
    moving = range(ev["pressing"]["first"] + 2, ev["releasing"]["last"] + 1)
    assert not any(by_frame[i].settled for i in moving)
    assert not any(by_frame[i].settled for i in range(0, ev["settling"]["last"] - 3))


@pytest.mark.parametrize("contact", ["centre", "edge"])
def test_sign_from_the_fringes_motion(plates, contact):
    p = plates[contact]
    session = p["session"]
    want = p["truth"]["power_sign"]
    assert session.sign.sign == want, session.sign.detail
    readings = session.sign.readings
    # both the settling and the press are read, and each gives the truth's sign
    assert {r["event"] for r in readings} == {"settling", "press"}
    assert all(r["power_sign"] == want for r in readings)
    # centre contact: the fringes move out while the gap closes; edge contact: in
    assert all(r["rings"] == ("out" if want == "+" else "in") for r in readings)
    last = p["states"][-1]
    assert math.copysign(1.0, last.power_fringes) == (1.0 if want == "+" else -1.0)


def test_capture_keeps_the_settled_frame_and_the_form_evidence(plates):
    session = plates["centre"]["session"]
    got = session.capture_set(1)
    ev = got["evidence"]
    assert got["states"][-1].settled
    assert ev["power_sign"] == "+" and ev["tracked_power_fringes"] > 0
    assert ev["tracked_power_U_fringes"] == pytest.approx(2 * got["states"][-1].power_u_fringes)
    assert ev["motion_before"] and "piston_fringes" in ev["motion_before"][0]


def test_watch_json_lines_carry_the_form_readouts(plates, capsys):
    p = plates["edge"]
    rc = main(["watch", "--camera", p["video"], "--source", SOURCE, "--pixel-size", str(PIXEL_UM),
               "--test-diameter", str(TEST_DIAMETER_MM), "--json"])
    out = capsys.readouterr().out
    assert rc == 0
    lines = [json.loads(line) for line in out.splitlines()]
    assert len(lines) == p["truth"]["frames"]
    need = ("frame", "power_fringes", "power_u_fringes", "astigmatism_fringes", "astigmatism_u_fringes", "settled",
            "power_sign", "latency_ms", "dropped")
    assert all(all(k in d for k in need) for d in lines)
    assert [d["frame"] for d in lines] == list(range(len(lines)))
    last = lines[-1]
    assert last["settled"] is True and last["power_sign"] == "-" and last["power_fringes"] < 0
    want = p["truth"]["power_fringes"] * _scale(p["truth"])
    assert abs(last["power_fringes"] - want) <= 2 * last["power_u_fringes"]


def test_live_page_shows_the_form_and_capture_gives_a_form_result(plates, qtbot, tmp_path):
    pytest.importorskip("PySide6")
    from ringgauge.gui.model import BenchSession, SetupState
    from ringgauge.gui.prefs import Prefs
    from ringgauge.gui.window import MainWindow

    p = plates["centre"]
    s = BenchSession(None, SetupState(source=SOURCE, pixel_size_um=PIXEL_UM, pixel_size_u_um=0.0,
                                      test_diameter_mm=TEST_DIAMETER_MM))
    w = MainWindow(s, prefs=Prefs(str(tmp_path / "live-form.ini")))
    w._debounce.setInterval(0)
    qtbot.addWidget(w)
    w.show()
    page = w.live
    try:
        assert page.start(p["video"]), page.problem.text()
        qtbot.waitUntil(lambda: page.session.ended, timeout=120000)
        page.refresh()
        assert "SETTLED" in page.settle_label.text()
        text = page.radius_label.text()
        st = page.session.latest
        # power with its sign, ± U (k = 2), in fringes and nm; astigmatism likewise
        assert f"power {st.power_fringes:+.3f} ± {2 * st.power_u_fringes:.3f} fringe" in text
        assert f"({st.power_nm:+.0f} ± {2 * st.power_u_nm:.0f} nm)" in text
        assert f"astigmatism {st.astigmatism_fringes:.3f} ± {2 * st.astigmatism_u_fringes:.3f} fringe" in text
        assert "gap at fixed points" in page.settle_rule.text()
        assert page.sign_label.text().startswith("+")
        paths = page.capture()
        assert len(paths) == 1
        ev = json.loads(open(paths[0].rsplit(".", 1)[0] + ".motion.json", encoding="utf-8").read())
        assert ev["power_sign"] == "+" and ev["tracked_power_fringes"] > 0

        def done():
            assert w.session.result is not None, w.session.error

        qtbot.waitUntil(done, timeout=120000)
        d = w.session.result.to_dict()
        form = d.get("form") or d
        want = p["truth"]["power_fringes"] * _scale(p["truth"])
        # the capture is a normal one-frame form analysis: its power within its U of the truth, and with the sign
        # the live view read from the rings' motion (one frame alone cannot give it)
        assert form["power_sign"] == "+" and form["sign"]["method"] == "live motion", form.get("sign")
        assert abs(form["power_fringes"] - want) <= form["k"] * form["power_u_fringes"], form["power_fringes"]
    finally:
        page.stop()


def test_training_page_plays_a_generated_sequence_on_the_live_page(qtbot, tmp_path):
    pytest.importorskip("PySide6")
    from ringgauge.gui.model import BenchSession, SetupState
    from ringgauge.gui.prefs import Prefs
    from ringgauge.gui.window import MainWindow

    # the practice sequences are drawn with 12 µm pixels under the mercury e-line
    s = BenchSession(None, SetupState(source="mercury-e", pixel_size_um=12.0, pixel_size_u_um=0.0))
    w = MainWindow(s, prefs=Prefs(str(tmp_path / "training-seq.ini")))
    qtbot.addWidget(w)
    w.show()
    w.tabs.setCurrentWidget(w.training)
    try:
        w.training.b_sequence.click()
        assert w.tabs.currentWidget() is w.live
        qtbot.waitUntil(lambda: w.live.session is not None and w.live.session.ended, timeout=180000)
        w.live.refresh()
        assert w.live.practice is not None and w.live.session.analysed > 20
        # the contact stays hidden until the trainee answers; then the machine's reading is the truth's
        assert w.live.sign_label.text().startswith("hidden")
        text = w.live.answer_practice(w.live.practice["truth"])
        assert text.startswith("Right.") and w.live.session.sign.sign == w.live.practice["truth"]
    finally:
        w.live.stop()
