"""The window's radius tolerance, decision rule and inspection details, offscreen with the real engine on a
sample lot image (R about 1003.4 mm, U about 2.0 mm at k = 2 on this bench).

Verdict zones per ILAC-G8:09/2019 §4.2.3 (figure 5, numbering from memory): the U interval inside the limits is
a pass, straddling a limit is conditional, wholly outside is a fail; guarded acceptance (§4.2.2, w = U) accepts
only inside TL ∓ U. The expected words below follow from the measured value and its U by plain arithmetic.
"""

from pathlib import Path

import pytest
from gui_helpers import analysed, make_window

from ringgauge.gui.model import SetupState

LOT = Path(__file__).resolve().parents[2] / "sample_images" / "lot-FH2604"


def _zone(R: float, U: float, lo: float, hi: float) -> str:
    if lo <= R - U and R + U <= hi:
        return "PASS"
    if R - U > hi or R + U < lo:
        return "FAIL"
    return "CONDITIONAL PASS" if lo <= R <= hi else "CONDITIONAL FAIL"


def _type(qtbot, edit, text: str) -> None:
    edit.clear()
    qtbot.keyClicks(edit, text)
    edit.editingFinished.emit()


def test_typing_a_radius_tolerance_changes_the_verdict_banner(app, qtbot, rg_home, tmp_path):
    setup = SetupState(source="sodium-d", pixel_size_um=8.0, pixel_size_u_um=0.004)
    w = make_window(qtbot, None, rg_home, setup)
    assert w.open_paths([str(LOT / "FH2604-04.png")])
    qtbot.waitUntil(lambda: analysed(w)() or w.session.error is not None, timeout=60000)
    assert w.session.error is None
    banner = w.bench.results.banner
    assert banner.word.text() == "MEASURED"  # no tolerance yet: no verdict
    R, U = w.session.result.radius_mm, w.session.result.radius_U_mm
    panel = w.bench.setup_panel

    def judged(text):
        return lambda: analysed(w)() and w.session.result.setup.radius_tolerance == text

    for text, lo, hi in (("1000 ± 0.5 %", 995.0, 1005.0), ("990..1002", 990.0, 1002.0),
                         ("1010 ± 2", 1008.0, 1012.0)):
        _type(qtbot, panel.radius_tol, text)
        qtbot.waitUntil(judged(text), timeout=60000)
        assert banner.word.text() == _zone(R, U, lo, hi), text
    # the three cases above cover a straddled upper limit, a value beyond it and an interval wholly below
    assert _zone(R, U, 995, 1005) == "CONDITIONAL PASS" and _zone(R, U, 1008, 1012) == "FAIL"
    assert banner.tone == "fail"
    # guarded acceptance names itself in the banner's rule line
    _type(qtbot, panel.radius_tol, "1000 ± 0.5 %")
    panel.rule.setCurrentIndex(panel.rule.findData("guard-banded"))
    qtbot.waitUntil(lambda: analysed(w)() and w.session.result.setup.decision_rule == "guard-banded"
                    and w.session.result.setup.radius_tolerance == "1000 ± 0.5 %", timeout=60000)
    assert banner.word.text() == "CONDITIONAL PASS"
    assert "not accepted" in banner.explain.text()
    assert "995" in panel.note.text() and "1005" in panel.note.text()
    # a bad tolerance is one line in the panel, not a crash
    _type(qtbot, panel.radius_tol, "1000 ±")
    qtbot.waitUntil(lambda: "Radius tolerance:" in panel.note.text(), timeout=10000)
    assert "after '±'" in panel.note.text()


def test_inspection_details_reach_the_record_serial_defaults_to_the_image(app, qtbot, rg_home, tmp_path):
    pytest.importorskip("ringgauge.records")
    from ringgauge.records import open_store

    setup = SetupState(source="sodium-d", pixel_size_um=8.0, pixel_size_u_um=0.004, radius_tolerance="995..1005")
    w = make_window(qtbot, None, rg_home, setup)
    panel = w.bench.setup_panel
    assert w.open_paths([str(LOT / "FH2604-01.png")])
    qtbot.waitUntil(analysed(w), timeout=60000)
    for key, text in (("part", "PCX-1000"), ("drawing", "PCX-1000 rev B"), ("customer", "Test Guild (invented)"),
                      ("order", "TG-1"), ("surface", "S1")):
        _type(qtbot, panel.details[key], text)
    _type(qtbot, panel.operator, "A. Tester")
    qtbot.waitUntil(lambda: analysed(w)() and dict(w.session.result.setup.inspection).get("surface")
                    == "S1", timeout=60000)
    store = str(tmp_path / "records.sqlite")
    assert w.keep_result(target=store)
    qtbot.waitUntil(lambda: w.kept_record is not None, timeout=20000)
    with open_store(store) as st:
        rec = st.get(w.kept_record[1])
    assert rec.meta.serial == "FH2604-01"  # the image's name, as nothing was typed
    assert (rec.meta.part, rec.meta.drawing, rec.meta.customer, rec.meta.order_ref, rec.meta.surface,
            rec.meta.operator) == ("PCX-1000", "PCX-1000 rev B", "Test Guild (invented)", "TG-1", "S1", "A. Tester")
    assert rec.result["verdict"]["radius"]["lower"] == 995.0
    assert rec.verdict == rec.result["verdict"]["overall"]


def test_lot_review_shows_the_lot_reports_statistics_and_takes_a_lot_name(app, qtbot, rg_home, tmp_path):
    import re
    import shutil

    from ringgauge.gui.lot_view import LotPage
    from ringgauge.gui.model import BenchSession

    folder = tmp_path / "lot-folder"
    folder.mkdir()
    for p in sorted(LOT.glob("FH2604-0[1-4].png")):
        shutil.copy(p, folder / p.name)
    s = BenchSession(None, SetupState(source="sodium-d", pixel_size_um=8.0, pixel_size_u_um=0.004,
                                      radius_tolerance="1000 ± 0.5 %", decision_rule="guard-banded"))
    page = LotPage(s)
    qtbot.addWidget(page)
    page.show()
    assert page.open_folder(str(folder))
    assert page.lot_name.text() == "lot-folder"  # no lot sheet here: the folder's name, to be typed over
    qtbot.keyClicks(page.lot_name, "-A")
    page.lot_name.editingFinished.emit()
    assert page.lot.name == "lot-folder-A"
    qtbot.waitUntil(lambda: not page.running, timeout=120000)
    summary, t = page.statistics
    assert summary.lot == "lot-folder-A" and summary.n_records == 4
    text = page.stats.text()
    # the radius verdict of each part from its R ± U by plain arithmetic (ILAC-G8:09/2019 figures 4 and 5)
    accepted = 0
    for r in page.lot.rows:
        R, U = r.result.radius_mm, r.result.radius_U_mm
        accepted += 995 + U <= R <= 1005 - U
    assert f"Accepted on radius: {accepted} of 4" in text
    assert "guarded acceptance (w = U)" in text and "R 1000 ± 5 mm (995 … 1005 mm)" in text
    assert "995.0 to 1005.0 mm" in text and "Cpk" in text and "rough estimates" in text
    # one number of digits: the mean has as many decimals as the parts' R ± U in the lot tables
    dec = t["decimals"]["radius"]
    assert re.search(rf"\d+\.\d{{{dec}}} mm", t["radius"]["mean"])
    assert all(re.fullmatch(rf"\d+\.\d{{{dec}}} ± \d+\.\d{{{dec}}}", row["radius"]) for row in t["rows"])
    assert page.chart.pixmap() is not None and not page.chart.pixmap().isNull()


def test_details_change_no_measurement_and_a_new_image_clears_the_serial(app, qtbot, rg_home):
    from ringgauge.gui.model import BenchSession

    s = BenchSession(None, SetupState(source="sodium-d", pixel_size_um=8.0, pixel_size_u_um=0.004))
    s.open_paths([str(LOT / "FH2604-01.png")])
    s.result = s.run_now()
    seen = []
    s.changed.connect(seen.append)
    before = s.result
    s.update_setup(serial="SN-7", part="PCX-1000", operator="A. Tester")
    assert seen == ["details"] and not getattr(s, "stale", False)  # no new analysis for who and what
    assert s.result.radius_mm == before.radius_mm
    assert dict(s.result.setup.inspection) == {"serial": "SN-7", "part": "PCX-1000"}
    assert s.result.setup.operator == "A. Tester"
    s.update_setup(radius_tolerance="995..1005")
    assert seen[-1] == "setup"  # a tolerance changes the verdict: analysed again
    s.open_paths([str(LOT / "FH2604-02.png")])
    assert s.setup.serial == "" and s.setup.part == "PCX-1000"  # the serial belonged to the last part


def test_lot_csv_carries_the_radius_verdict_and_tolerance(app, qtbot, tmp_path):
    import csv

    from ringgauge.gui.lot import Lot
    from ringgauge.pipeline import analyse

    folder = tmp_path / "lot"
    folder.mkdir()
    import shutil

    shutil.copy(LOT / "FH2604-04.png", folder / "FH2604-04.png")
    lot = Lot()
    lot.load_folder(folder)
    setup = SetupState(source="sodium-d", pixel_size_um=8.0, pixel_size_u_um=0.004, radius_tolerance="995..1005",
                       decision_rule="guard-banded").to_bench_setup()
    lot.set_result(0, Lot.analyse_one(lot.rows[0].path, setup, analyse))
    R, U = lot.rows[0].result.radius_mm, lot.rows[0].result.radius_U_mm
    out = tmp_path / "lot.csv"
    lot.export_csv(out)
    with open(out, newline="", encoding="utf-8") as fh:
        (row,) = list(csv.DictReader(fh))
    # ILAC-G8:09/2019 figures 4/5: the U interval straddles 1005 mm, inside it, not accepted under w = U
    assert R <= 1005 < R + U
    assert row["radius_verdict"] == "conditional pass (not accepted)"
    assert row["radius_tolerance"] == "R 995 … 1005 mm"
