"""Helpers for the window's tests: sample images made by the synthetic generator and a hand-made analysis for
the widget tests (fast and predictable)."""

import math

import cv2
import numpy as np

from ringgauge.errors import AnalysisError
from ringgauge.fit.result import Ring, RingFit
from ringgauge.result import AnalysisResult, ImageInfo
from ringgauge.conformity import Verdict
from ringgauge.uncertainty import BudgetRow, Quantity, make_budget


def write_rings(path, *, radius_mm=800.0, width=320, height=256, pixel_um=16.0, seed=1, source="sodium-d"):
    from ringgauge import synth

    s = synth.newton_rings(radius_mm, camera=synth.Camera(width=width, height=height, pixel_um=pixel_um),
                           source=source, rng=seed)
    cv2.imwrite(str(path), s.image)
    return s.truth


def hand_result(frame, setup, radius_mm: float, *, verdict=None, n_rings: int = 10) -> AnalysisResult:
    """A result put together by hand (no image analysis): rings on r^2 = m lambda R / n exactly."""
    lam_mm = setup.wavelength_nm * 1e-6
    slope = lam_mm * radius_mm / setup.medium_index
    px_mm = setup.pixel_size_um * 1e-3
    rings = tuple(
        Ring(float(m), "dark", math.sqrt(m * slope) / px_mm, math.sqrt(m * slope), m * slope, 1e-4, 0.0)
        for m in range(1, n_rings + 1)
    )
    fit = RingFit(slope, slope * 1e-4, 0.0, 1e-4, 0.0, None, 1.0, 1.0, n_rings, 2, rings, rings[0].radius_mm,
                  rings[-1].radius_mm, "hand-made")
    rows = [BudgetRow("slope", slope, "mm²", slope * 1e-4, "normal", 1.0, radius_mm / slope, "1/mm",
                      radius_mm * 1e-4)]
    budget = make_budget("R", "mm", radius_mm, rows)
    h, w = frame.shape
    info = ImageInfo(frame.path, frame.sha256, w, h, frame.bit_depth, frame.channel, 0.0)
    if isinstance(verdict, dict):
        verdict = Verdict.from_dict(verdict)
    return AnalysisResult(info, setup, ((w - 1) / 2, (h - 1) / 2), (0.01, 0.01),
                          Quantity(radius_mm, budget.u_c, "mm", budget.k), budget.k, budget, fit, verdict=verdict,
                          warnings=("hand-made result",))


class FakeEngine:
    """Stands in for ringgauge.pipeline.analyse: R scales with 1/λ so a set-up change shows in the result."""

    def __init__(self, fail_on: str | None = None, verdict=None):
        self.calls = 0
        self.fail_on = fail_on
        self.verdict = verdict

    def __call__(self, frames, setup, *, progress=None):
        self.calls += 1
        if progress:
            progress(0.5, "hand-made analysis")
        if self.fail_on and self.fail_on in (frames[0].path or ""):
            raise AnalysisError("no ring system found (hand-made failure for the test)")
        return hand_result(frames[0], setup, 1000.0 * 589.2938 / setup.wavelength_nm, verdict=self.verdict)


def wait_for(qtbot, predicate, timeout=30000):
    qtbot.waitUntil(predicate, timeout=timeout)


def noiseless_rings(radius_mm=500.0, width=200, height=160, pixel_um=20.0):
    from ringgauge import synth

    s = synth.newton_rings(radius_mm, camera=synth.Camera(width=width, height=height, pixel_um=pixel_um,
                                                          blur_px=0.0),
                           lighting=synth.Lighting(falloff=0, gradient=0, stray=0), noise=False, rng=0)
    return s.intensity.astype(np.float64), s.truth


def make_window(qtbot, engine, rg_home, setup=None):
    """A shown main window over a session with ``engine`` (None = the real pipeline), settings in rg_home."""
    from ringgauge.gui.model import BenchSession, SetupState
    from ringgauge.gui.prefs import Prefs
    from ringgauge.gui.window import MainWindow

    prefs = Prefs(str(rg_home / "window-test.ini"))
    s = BenchSession(engine, setup or SetupState(source="sodium-d", pixel_size_um=16.0, pixel_size_u_um=0.02))
    w = MainWindow(s, prefs=prefs)
    w._debounce.setInterval(0)  # analyse at once after a change (the window waits 350 ms for more typing)
    qtbot.addWidget(w)
    w.show()
    return w


def analysed(w):
    return lambda: w.session.result is not None and not w.session.busy


def cut_texts(root) -> list[str]:
    """Texts that do not fit where ``root``'s visible widgets show them: labels and line edits narrower than
    their text, combo boxes whose current item is elided, table cells narrower than their text (or columns
    beyond the table's viewport), tab bars that need scroll buttons. Compares ``fontMetrics`` widths with the
    space the style gives the text."""
    from PySide6.QtWidgets import (QAbstractSpinBox, QComboBox, QLabel, QLineEdit, QStyle, QStyleOptionComboBox,
                                   QTableWidget, QTabWidget)

    from ringgauge.gui.widgets import ElidedLabel

    out = []
    for w in [root, *root.findChildren(object)]:
        if not hasattr(w, "isVisibleTo") or not w.isVisibleTo(root.window()) or w.width() <= 1:
            continue
        if isinstance(w, ElidedLabel):  # shortens itself in the middle and keeps the whole text as its tooltip
            continue
        if isinstance(w, QLabel) and w.text() and not w.wordWrap() and "<" not in w.text() and w.pixmap().isNull():
            need = max(w.fontMetrics().horizontalAdvance(line) for line in w.text().splitlines())
            if need > w.contentsRect().width() + 1:
                out.append(f"label {w.text()!r}: {need} px of text in {w.contentsRect().width()} px")
        elif isinstance(w, QComboBox) and w.currentText():
            opt = QStyleOptionComboBox()
            w.initStyleOption(opt)
            r = w.style().subControlRect(QStyle.ComplexControl.CC_ComboBox, opt,
                                         QStyle.SubControl.SC_ComboBoxEditField, w)
            need = w.fontMetrics().horizontalAdvance(w.currentText())
            if need > r.width() + 1:
                out.append(f"list {w.currentText()!r}: {need} px of text in {r.width()} px")
        elif isinstance(w, QLineEdit) and w.text() and not isinstance(w.parent(), QComboBox):
            need = w.fontMetrics().horizontalAdvance(w.text())
            avail = w.contentsRect().width() - w.textMargins().left() - w.textMargins().right() - 4
            if isinstance(w.parent(), QAbstractSpinBox):
                avail = w.width() - 4
            if need > avail:
                out.append(f"field {w.text()!r}: {need} px of text in {avail} px")
        elif isinstance(w, QTableWidget) and w.rowCount():
            fm = w.fontMetrics()
            margin = 2 * (w.style().pixelMetric(QStyle.PixelMetric.PM_FocusFrameHMargin, None, w) + 1)
            total = sum(w.columnWidth(c) for c in range(w.columnCount()) if not w.isColumnHidden(c))
            if total > w.viewport().width() + 1:
                out.append(f"table columns {total} px wide in a {w.viewport().width()} px view")
            for r in range(w.rowCount()):
                for c in range(w.columnCount()):
                    it = w.item(r, c)
                    if it is not None and it.text():
                        need = fm.horizontalAdvance(it.text()) + margin
                        if need > w.columnWidth(c) + 1:
                            out.append(f"cell {it.text()!r}: {need} px of text in {w.columnWidth(c)} px")
        elif isinstance(w, QTabWidget):
            bar = w.tabBar()
            need = sum(bar.tabSizeHint(i).width() for i in range(bar.count()))
            if need > bar.width() + 1 and need > w.width():
                out.append(f"tabs {[bar.tabText(i) for i in range(bar.count())]}: {need} px in {w.width()} px")
    return out
