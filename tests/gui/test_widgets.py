"""Widgets against their models, in both directions: change the model, see the widget; change the widget, see
the model."""

import pytest
from gui_helpers import hand_result
from PySide6.QtCore import QPoint, Qt

from ringgauge.gui import display
from ringgauge.gui.image_view import ImageView
from ringgauge.gui.model import BenchSession, Overrides, SetupState
from ringgauge.gui.results_panel import ResultsPanel
from ringgauge.gui.setup_panel import SetupPanel
from ringgauge.imaging import load_frame


@pytest.fixture
def panel(app, qtbot, fake_engine):
    s = BenchSession(fake_engine, SetupState(source="sodium-d", pixel_size_um=16.0, pixel_size_u_um=0.05))
    p = SetupPanel(s)
    qtbot.addWidget(p)
    return p


def test_setup_panel_shows_session_changes(panel):
    s = panel.session
    s.update_setup(source="hene", pixel_size_um=5.5, medium="water", operator="R.T.", tolerance="3/2(0.5)",
                   test_diameter_mm=20.0, fringe_kind="bright")
    assert panel.source.currentData() == "hene"
    assert panel.wavelength.value() == pytest.approx(632.816) and not panel.wavelength.isEnabled()
    assert panel.pixel.value() == pytest.approx(5.5)
    assert panel.medium.currentData() == "water" and panel.index.value() == pytest.approx(1.333)
    assert not panel.index.isEnabled()
    assert panel.operator.text() == "R.T." and panel.tolerance.text() == "3/2(0.5)"
    assert panel.diameter.value() == pytest.approx(20.0) and panel.kind.currentData() == "bright"
    assert "Laser light" in panel.note.text()  # the lamp's caution follows the source


def test_setup_panel_edits_reach_the_session(panel, qtbot):
    s = panel.session
    panel.source.setCurrentIndex(panel.source.findData("custom"))
    assert s.setup.source == "custom" and panel.wavelength.isEnabled()
    panel.wavelength.setValue(610.25)
    assert s.setup.custom_wavelength_nm == pytest.approx(610.25)
    assert s.setup.to_bench_setup().wavelength_nm == pytest.approx(610.25)
    panel.pixel.setValue(7.25)
    panel.pixel_u.setValue(0.03)
    assert (s.setup.pixel_size_um, s.setup.pixel_size_u_um) == (pytest.approx(7.25), pytest.approx(0.03))
    panel.medium.setCurrentIndex(panel.medium.findData("custom"))
    panel.index.setValue(1.4)
    assert s.setup.medium == "custom" and s.setup.to_bench_setup().medium_index == pytest.approx(1.4)
    panel.operator.setText("M.W.")
    panel.operator.editingFinished.emit()
    assert s.setup.operator == "M.W."
    panel.diameter.setValue(0.0)
    assert s.setup.test_diameter_mm is None


def test_results_panel_states_the_verdict_in_words(app, qtbot, sample_dir):
    rp = ResultsPanel()
    qtbot.addWidget(rp)
    f = load_frame(sample_dir / "lens-A01.png")
    setup = SetupState(source="sodium-d", pixel_size_um=16.0).to_bench_setup()
    for overall, word, tone in (("pass", "PASS", "pass"), ("fail", "FAIL", "fail"),
                                ("conditional fail", "CONDITIONAL FAIL", "conditional")):
        rule = "guard-banded acceptance: a term passes only when value + U is within the limit"
        r = hand_result(f, setup, 900.0, verdict={"overall": overall, "terms": [],
                                                  "decision_rule": rule})
        rp.show_result(r)
        assert rp.banner.word.text() == word and rp.banner.tone == tone
        assert rp.banner.rule.text() == "Decision rule: guard-banded acceptance"
        assert rp.banner.rule.toolTip() == rule
    value, U, unit = rp.value_of("Radius of curvature R")
    assert float(value) == pytest.approx(900.0, abs=0.1) and U.startswith("± ") and unit == "mm"
    assert rp.banner.headline.text() == f"R = {value} {U} mm  (k = 2)"
    assert rp.budget.rowCount() == 1 and rp.tabs.tabText(2) == "Warnings (1)"
    rp.show_error("the image is all black (no fringe contrast)")
    assert rp.banner.word.text() == "NO MEASUREMENT" and "all black" in rp.banner.explain.text()
    assert rp.banner.headline.isHidden()
    assert rp.values.rowCount() == 0


def test_image_view_layers_and_picking(app, qtbot, sample_dir):
    v = ImageView()
    qtbot.addWidget(v)
    v.resize(400, 320)
    v.show()
    f = load_frame(sample_dir / "lens-A01.png")
    v.set_image(display.image_to_u8(f.data))
    setup = SetupState(source="sodium-d", pixel_size_um=16.0).to_bench_setup()
    r = hand_result(f, setup, 800.0)
    v.set_overlay(display.overlay_from(r, Overrides(aperture_px=(160, 128, 100))))
    assert v.layer_item_count("rings") == 10
    assert v.layer_item_count("centre") == 4  # two arms, each with a dark halo
    assert v.layer_item_count("aperture") == 1
    v.set_layer_visible("rings", False)
    assert not v._groups["rings"].isVisible()
    v.set_overlay(display.overlay_from(r))  # a new result keeps the layer switched off
    assert not v._groups["rings"].isVisible() and v.layer_item_count("aperture") == 0
    # click to set the centre: the signal carries image coordinates
    v.set_mode("centre")
    got = []
    v.centrePicked.connect(lambda x, y: got.append((x, y)))
    target = v.mapFromScene(100.0, 60.0)
    qtbot.mouseClick(v.viewport(), Qt.MouseButton.LeftButton, pos=target)
    assert got and got[0] == pytest.approx((100.0, 60.0), abs=2.0 / v.zoom())
    # press and drag to set the aperture
    v.set_mode("aperture")
    ap = []
    v.aperturePicked.connect(lambda x, y, r: ap.append((x, y, r)))
    a, b = v.mapFromScene(160.0, 128.0), v.mapFromScene(220.0, 128.0)
    qtbot.mousePress(v.viewport(), Qt.MouseButton.LeftButton, pos=a)
    qtbot.mouseMove(v.viewport(), pos=b)
    qtbot.mouseRelease(v.viewport(), Qt.MouseButton.LeftButton, pos=b)
    assert ap and ap[0][2] == pytest.approx(60.0, abs=3.0 / v.zoom())
    z = v.zoom()
    v.zoom_by(2.0)
    assert v.zoom() == pytest.approx(2 * z)
    v.fit()
    assert v.zoom() == pytest.approx(z, rel=0.05)
    assert isinstance(target, QPoint)


def test_bench_profiles_fill_the_panel_and_the_setup(app, qtbot, fake_engine):
    profiles = pytest.importorskip("ringgauge.calibration.profiles")
    entry = profiles.hand_entry(6.45, 0.012, operator="Q.A.", date="2026-11-02")
    profiles.save(profiles.BenchProfile("Bench 2 camera", source="mercury-e", calibration=entry))
    s = BenchSession(fake_engine, SetupState(source="sodium-d", pixel_size_um=16.0, pixel_size_u_um=0.05))
    p = SetupPanel(s)
    qtbot.addWidget(p)
    assert p.profile.isEnabled() and p.profile.findData("Bench 2 camera") > 0
    p.profile.setCurrentIndex(p.profile.findData("Bench 2 camera"))
    assert s.setup.bench_profile == "Bench 2 camera"
    assert s.setup.source == "mercury-e"  # the bench's usual lamp comes along
    assert p.pixel.value() == pytest.approx(6.45) and not p.pixel.isEnabled()
    assert "calibrated 2026-11-02" in p.note.text()
    b = s.setup.to_bench_setup()
    assert (b.pixel_size_um, b.pixel_size_u_um, b.bench) == (pytest.approx(6.45), pytest.approx(0.012),
                                                             "Bench 2 camera")
    p.profile.setCurrentIndex(0)  # back to typed values
    assert s.setup.bench_profile == "" and p.pixel.isEnabled() and p.pixel.value() == pytest.approx(16.0)


def test_test_plates_and_tolerance_in_the_panel(app, qtbot, fake_engine):
    plates = pytest.importorskip("ringgauge.form.plates")
    pytest.importorskip("ringgauge.form.tolerance")
    plates.add_plate({"id": "TP-0412", "radius_mm": 51.68, "kind": "concave", "radius_u_mm": 0.002,
                      "calibrated": "2020-01-15"})
    plates.add_plate({"id": "TP-0007", "radius_mm": 30.0, "kind": "convex", "radius_u_mm": 0.002,
                      "calibrated": "2026-06-01", "retired": "2026-09-01"})
    s = BenchSession(fake_engine, SetupState(source="mercury-e", pixel_size_um=25.0, pixel_size_u_um=0.05))
    p = SetupPanel(s)
    qtbot.addWidget(p)
    assert p.plate.findData("TP-0412") > 0 and p.plate.findData("TP-0007") < 0  # retired plates not offered
    p.plate.setCurrentIndex(p.plate.findData("TP-0412"))
    assert s.setup.test_plate == "TP-0412"
    assert "R = 51.68 mm" in p.note.text() and "overdue" in p.note.text()
    p.tolerance.setText("3/2(0.5")
    p.tolerance.editingFinished.emit()
    assert s.setup.tolerance == "3/2(0.5" and "Tolerance:" in p.note.text()
    p.diameter.setValue(20.0)
    with pytest.raises(Exception, match="tolerance '3/2\\(0.5'"):
        s.setup.to_bench_setup()
    p.tolerance.setText("3/2(0.5)")
    p.tolerance.editingFinished.emit()
    b = s.setup.to_bench_setup()
    assert b.tolerance == "3/2(0.5)" and b.test_diameter_mm == 20.0
    assert b.test_plate["id"] == "TP-0412" and b.test_plate["radius_mm"] == pytest.approx(51.68)


def test_decision_rule_and_sign_evidence_both_ways(panel):
    s = panel.session
    s.update_setup(decision_rule="guard-banded", press_test="rings-spread", gap_change="decreasing")
    assert (panel.rule.currentData(), panel.press.currentData(), panel.gap.currentData()) == (
        "guard-banded", "rings-spread", "decreasing")
    panel.rule.setCurrentIndex(panel.rule.findData("simple"))
    panel.press.setCurrentIndex(panel.press.findData(""))
    panel.gap.setCurrentIndex(panel.gap.findData("increasing"))
    assert (s.setup.decision_rule, s.setup.press_test, s.setup.gap_change) == ("simple", "", "increasing")
    panel.press.setCurrentIndex(panel.press.findData("rings-shrink"))
    b = s.setup.to_bench_setup()
    assert b.press_test == "rings-shrink" and b.gap_change == "increasing"
    assert b.decision_rule == "simple"
