"""The lot review page fills from a folder; the training page scores a correct and a wrong reading."""

import csv

import pytest
from gui_helpers import FakeEngine, write_rings
from PySide6.QtCore import Qt

from ringgauge.gui import training as tr
from ringgauge.gui.lot import COLUMNS, DONE, FAILED
from ringgauge.gui.lot_view import LotPage
from ringgauge.gui.model import BenchSession, SetupState
from ringgauge.gui.training_view import TrainingPage


# -- lot review -------------------------------------------------------------------------------------------------
@pytest.fixture
def lot_page(app, qtbot, sample_dir):
    write_rings(sample_dir / "lens-A03.png", seed=4, radius_mm=700.0)
    (sample_dir / "lens-A04.png").write_bytes(b"\x89PNG damaged")
    s = BenchSession(FakeEngine(fail_on="lens-A03"), SetupState(source="sodium-d", pixel_size_um=16.0))
    page = LotPage(s)
    qtbot.addWidget(page)
    page.show()
    return page


def test_lot_fills_from_a_folder(lot_page, qtbot, sample_dir):
    page = lot_page
    assert page.open_folder(str(sample_dir))
    assert page.model.rowCount() == 4
    qtbot.waitUntil(lambda: page.lot.counts()[DONE] + page.lot.counts()[FAILED] == 4, timeout=20000)
    status = {r.name: r.status for r in page.lot.rows}
    assert status == {"lens-A01.png": DONE, "lens-A02.png": DONE, "lens-A03.png": FAILED, "lens-A04.png": FAILED}
    assert "no ring system" in page.lot.rows[2].message and "cannot decode" in page.lot.rows[3].message
    assert page.counts.text().startswith("2 of 4 done, 2 failed")
    col_r = [k for k, _ in COLUMNS].index("radius_mm")
    # R to the digits its uncertainty supports: U = 0.20 mm (two significant digits)
    assert page.model.data(page.model.index(0, col_r)) == "1000.00"
    assert page.model.data(page.model.index(0, col_r + 1)) == "0.20"
    col_p = [k for k, _ in COLUMNS].index("power")
    assert page.table.isColumnHidden(col_p) and not page.table.isColumnHidden(col_r)
    assert page.message.text() == "Lot finished"


def test_lot_folder_name_is_shortened_not_cut(lot_page, qtbot, sample_dir):
    """A long folder path stays readable at its end (the lot's own folder name) and whole in the tooltip; the
    plain label it replaces was cut at the right edge at 1280x800."""
    page = lot_page
    page.resize(1280, 760)
    assert page.open_folder(str(sample_dir))
    label = page.folder_label
    whole = label.text()
    assert str(sample_dir) in whole and label.toolTip() == whole
    shown = label.fontMetrics().elidedText(whole, Qt.TextElideMode.ElideMiddle, label.contentsRect().width())
    assert shown.endswith("images") and label.fontMetrics().horizontalAdvance(shown) <= label.contentsRect().width()
    qtbot.waitUntil(lambda: page.lot.counts()[DONE] + page.lot.counts()[FAILED] == 4, timeout=20000)


def test_lot_sorts_filters_selects_and_exports(lot_page, qtbot, sample_dir, tmp_path):
    page = lot_page
    page.open_folder(str(sample_dir))
    qtbot.waitUntil(lambda: page.lot.counts()[DONE] + page.lot.counts()[FAILED] == 4, timeout=20000)
    col_status = [k for k, _ in COLUMNS].index("status")
    page.table.sortByColumn(col_status, Qt.SortOrder.AscendingOrder)
    first = page.proxy.data(page.proxy.index(0, col_status))
    assert first == "done"
    page.filter_choice.setCurrentText("Failed to analyse")
    assert page.proxy.rowCount() == 2
    page.filter_choice.setCurrentText("All rows")
    page.filter_text.setText("A02")
    assert page.proxy.rowCount() == 1
    page.table.selectRow(0)
    assert page.detail_title.text() == "lens-A02.png"
    assert float(page.detail.value_of("Radius of curvature R")[0]) == pytest.approx(1000.0)
    got = []
    page.openInBench.connect(lambda p, r: got.append((p, r)))
    page.b_bench.click()
    assert got and got[0][0].endswith("lens-A02.png") and got[0][1] is page.lot.rows[1].result
    page.filter_text.setText("A03")
    page.table.selectRow(0)
    assert page.detail.banner.word.text() == "NO MEASUREMENT"
    out = tmp_path / "lot.csv"
    assert page.export_csv(str(out))
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 4 and {r["status"] for r in rows} == {"done", "failed"}
    assert not page.export_csv(str(tmp_path / "no" / "such" / "dir.csv"))
    assert "cannot write" in page.message.text()


def test_lot_refuses_an_incomplete_setup(lot_page, sample_dir):
    page = lot_page
    page.session.update_setup(tolerance="3/2(")  # a tolerance that cannot be read
    page.open_folder(str(sample_dir), run=False)
    assert page.run_lot() is False and "tolerance" in page.message.text()
    assert page.open_folder(str(sample_dir / "nowhere")) is False


# -- training ---------------------------------------------------------------------------------------------------------
def test_shop_formula_worked_example():
    # Worked by hand from the sagitta s = h²/2R (common practice, no source): R = 50 mm, D = 25 mm, N = 3,
    # λ = 546.07 nm gives ΔR ≈ 4NλR²/D² = 26.21 µm (paraxial shop formula). Our radius is exact for the paraxial gap, so it agrees to
    # first order: the second-order term is ΔR·(4NλR/D²) ≈ 5e-4 relative.
    r = tr.part_radius_mm(50.0, 3.0, 25.0, 546.07)
    assert (50.0 - r) * 1e3 == pytest.approx(26.21, rel=1e-3)
    assert tr.power_from_radius(r, 50.0, 25.0, 546.07) == pytest.approx(3.0, rel=1e-12)


def test_exercises_are_repeatable_and_their_truth_is_consistent():
    a, b = tr.make_exercise("bench", 11), tr.make_exercise("bench", 11)
    assert a.truth == b.truth and (a.frames[0] == b.frames[0]).all()
    assert (a.frames[0] != a.frames[1]).any()  # the pair differs by the λ/8 step
    t = a.truth
    assert t["sign"] == ("centre" if t["power_signed_fringes"] > 0 else "edge")
    # with no tilt or zone the count along the meridian is the number of whole fringes the gap passes
    c = tr.make_exercise("starter", 3)
    p, piston = c.form.power, c.form.piston
    lo, hi = sorted((piston, piston + p))
    assert c.truth["fringe_count"] == sum(1 for k in range(-20, 40) if lo < k < hi) > 0
    with pytest.raises(Exception, match="unknown difficulty"):
        tr.make_exercise("impossible", 1)


def test_the_frame_pair_shows_the_sign():
    # The gap grows by λ/8 from frame A to frame B, so the fringes move toward the contact point: inward with
    # contact at the centre, outward with contact at the edge (common practice, no source). Measured on the images: a dark
    # ring's position along the counting line, and the nearest dark ring in frame B.
    import numpy as np

    def minima(img, ex):
        cx, cy, r = ex.aperture_px
        row = int(round(cy))
        xs = np.arange(int(cx) + 3, int(cx + 0.92 * r))
        line = img[row - 2:row + 3, xs].astype(float).mean(axis=0)
        line = np.convolve(line, np.ones(5) / 5, mode="same")
        med = np.median(line)
        return [xs[i] for i in range(3, len(line) - 3)
                if line[i] < line[i - 1] and line[i] <= line[i + 1] and line[i] < med]

    seen = set()
    for seed in range(60):
        ex = tr.make_exercise("starter", seed)
        sign = ex.truth["sign"]
        if sign in seen or ex.truth["power_fringes"] < 2.5:
            continue
        a, b = minima(ex.frames[0], ex), minima(ex.frames[1], ex)
        ring = a[1]  # the second dark ring out from the centre
        moved = min(b, key=lambda x: abs(x - ring)) - ring
        assert (moved < 0) if sign == "centre" else (moved > 0), (seed, sign, a, b)
        seen.add(sign)
        if len(seen) == 2:
            break
    assert seen == {"centre", "edge"}


def test_training_page_scores_a_correct_and_a_wrong_reading(app, qtbot, rg_home):
    page = TrainingPage()
    qtbot.addWidget(page)
    page.show()
    page.trainee.setText("Trainee Nine")
    page.level.setCurrentIndex(page.level.findData("bench"))
    ex = page.new_exercise(seed=21)
    t = ex.truth
    page.count.setValue(t["fringe_count"])
    page.power.setValue(round(t["power_fringes"], 2))
    page.astig.setValue(round(t["astigmatism_fringes"], 2))
    page.irreg.setValue(round(t["irregularity_fringes"], 2))
    page.sign_buttons[t["sign"]].setChecked(True)
    page.radius.setValue(round(t["part_radius_mm"], 4))
    sc = page.score_reading()
    assert sc.points == 6 and "6 of 6 right" in page.debrief.toHtml()
    assert page.revealed and not page.b_score.isEnabled()
    # a wrong reading: one fringe too many, the wrong sign, a radius read off the plate without correction
    ex = page.new_exercise(seed=22)
    t = ex.truth
    page.count.setValue(t["fringe_count"] + 1)
    page.power.setValue(round(t["power_fringes"], 2))
    wrong_sign = "edge" if t["sign"] == "centre" else "centre"
    page.sign_buttons[wrong_sign].setChecked(True)
    page.radius.setValue(round(ex.plate_radius_mm, 3))
    sc = page.score_reading()
    items = {i.item: i for i in sc.items}
    assert not items["Fringe count"].correct and "1 fringe too many" in items["Fringe count"].comment
    assert not items["Sign"].correct and items["Power"].correct
    assert not items["Part radius"].correct and "fringes of power" in items["Part radius"].comment
    # the log keeps both attempts, and the trainer's review shows them
    log = tr.TraineeLog()
    assert [e["score"]["points"] for e in log.entries("Trainee Nine")] == [6, sc.points]
    page.tabs.setCurrentIndex(1)
    page.reload_review()
    # the name as typed, not the file name's safe spelling of it
    assert page.review_who.currentText() == "Trainee Nine" and page.review_table.rowCount() == 2
    assert "2 attempts" in page.review_summary.text()


def test_training_log_needs_a_name_and_survives_a_damaged_line(rg_home):
    log = tr.TraineeLog()
    ex = tr.make_exercise("starter", 2)
    sc = tr.score(ex, tr.Reading())
    assert sc.points == 0 and all("not given" == i.given for i in sc.items)
    with pytest.raises(Exception, match="trainee's name"):
        log.record("  ", ex, tr.Reading(), sc)
    log.record("Ana", ex, tr.Reading(), sc)
    with open(log.file("Ana"), "a", encoding="utf-8") as fh:
        fh.write("{half a line\n")
    log.record("Ana", ex, tr.Reading(), sc)
    assert len(log.entries("Ana")) == 2
    s = log.summary("Ana")
    assert s["attempts"] == 2 and s["levels"]["starter"]["mean_percent"] == 0.0


@pytest.mark.slow
def test_lot_is_kept_in_the_records_and_certified(lot_page, qtbot, sample_dir, tmp_path):
    pytest.importorskip("ringgauge.certificates")
    from ringgauge.records import RecordFilter, open_store

    page = lot_page
    page.session.update_setup(operator="J.V.")
    page.open_folder(str(sample_dir))
    qtbot.waitUntil(lambda: not page.running, timeout=20000)
    store = str(tmp_path / "records.sqlite")
    assert page.issue_certificates(str(tmp_path)) is False and "records first" in page.message.text()
    assert page.keep_in_records(target=store)
    qtbot.waitUntil(lambda: page.b_keep.isEnabled(), timeout=20000)
    assert page.b_certs.isEnabled(), page.message.text()
    assert [r.record_id is not None for r in page.lot.rows] == [True] * 4
    with open_store(store) as st:
        recs = st.find(RecordFilter(lot="images"))
        assert len(recs) == 4 and {r.status for r in recs} == {"ok", "failed"}
        assert {r.meta.operator for r in recs} == {"J.V."}
    # keeping again adds nothing: a lot never holds the same image twice
    ids = [r.record_id for r in page.lot.rows]
    page.keep_in_records(target=store)
    qtbot.waitUntil(lambda: page.b_keep.isEnabled(), timeout=20000)
    assert [r.record_id for r in page.lot.rows] == ids
    out = tmp_path / "certs"
    out.mkdir()
    assert page.issue_certificates(str(out), target=store)
    qtbot.waitUntil(lambda: bool(page.kept_paths) or "cannot" in page.message.text(), timeout=60000)
    names = sorted(p.name for p in out.iterdir())
    assert len(names) == 3  # two measured lenses and the lot report; failed images get no certificate
    assert all(n.endswith(".pdf") for n in names) and "Wrote 3 PDF files" in page.message.text()


def test_lot_rows_accept_an_engine_that_reports_messages_only(app, qtbot, sample_dir):
    from gui_helpers import hand_result

    def engine(frames, setup, *, progress=None):
        progress("a step without a fraction")
        return hand_result(frames[0], setup, 777.0)

    page = LotPage(BenchSession(engine, SetupState(source="sodium-d", pixel_size_um=16.0)))
    qtbot.addWidget(page)
    page.open_folder(str(sample_dir))
    qtbot.waitUntil(lambda: not page.running, timeout=20000)
    assert [r.status for r in page.lot.rows] == [DONE, DONE]


def test_stopping_a_lot_stops_its_work(app, qtbot, sample_dir):
    import time

    from gui_helpers import hand_result

    reports = []

    def slow(frames, setup, *, progress=None):
        for i in range(40):
            time.sleep(0.05)
            reports.append(i)
            progress(i / 40, "working")
        return hand_result(frames[0], setup, 700.0)

    page = LotPage(BenchSession(slow, SetupState(source="sodium-d", pixel_size_um=16.0)))
    qtbot.addWidget(page)
    page.open_folder(str(sample_dir))
    qtbot.waitUntil(lambda: len(reports) >= 3, timeout=10000)
    page.stop()
    assert page.wait(10000)
    n = len(reports)
    qtbot.wait(300)
    assert len(reports) == n < 40  # the engine stopped at its next report, and the second image never began
    assert [r.status for r in page.lot.rows] == ["queued", "queued"] and page.lot.counts()[DONE] == 0
