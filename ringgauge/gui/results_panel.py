"""The results panel: a verdict banner in words and colour, every value with unit and uncertainty, the
uncertainty budget, and the warnings."""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import (
    QAbstractItemView,
    QFrame,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QListWidget,
    QStyle,
    QTableWidget,
    QTableWidgetItem,
    QTabWidget,
    QVBoxLayout,
    QWidget,
)

from ..result import AnalysisResult
from .display import VerdictView, budget_rows, value_rows, verdict_view

#: banner colours per tone: (background, text). The word and symbol carry the meaning; colour only helps.
TONES = {
    "pass": ("#1d6b3a", "#ffffff"),
    "fail": ("#a3211c", "#ffffff"),
    "conditional": ("#f2c14e", "#111111"),
    "none": ("#d9dde3", "#111111"),
    "busy": ("#dce7f3", "#111111"),
    "error": ("#fbe3d6", "#5a1400"),
    "stale": ("#e6e0cf", "#3b3200"),
}


class VerdictBanner(QFrame):
    def __init__(self, parent=None):
        super().__init__(parent)
        self.setObjectName("verdictBanner")
        self.setFrameShape(QFrame.Shape.StyledPanel)
        lay = QHBoxLayout(self)
        lay.setContentsMargins(14, 10, 14, 10)
        self.symbol = QLabel()
        self.word = QLabel()
        self.symbol.setObjectName("verdictWord")
        self.word.setObjectName("verdictWord")
        self.symbol.setMinimumWidth(36)
        text = QVBoxLayout()
        self.headline = QLabel()
        self.headline.setObjectName("verdictHeadline")
        self.headline.setWordWrap(True)
        self.headline.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.explain = QLabel()
        self.explain.setWordWrap(True)
        self.rule = QLabel()
        self.rule.setWordWrap(True)
        self.rule.setObjectName("verdictRule")
        text.addWidget(self.word)
        text.addWidget(self.headline)
        text.addWidget(self.explain)
        text.addWidget(self.rule)
        lay.addWidget(self.symbol, 0, Qt.AlignmentFlag.AlignTop)
        lay.addLayout(text, 1)
        self.setMinimumHeight(96)
        self.tone = "none"
        self.show_verdict(verdict_view(None))

    def _paint(self, tone: str) -> None:
        self.tone = tone
        bg, fg = TONES[tone]
        self.setStyleSheet(f"#verdictBanner {{ background: {bg}; border-radius: 6px; }}"
                           f"#verdictBanner QLabel {{ color: {fg}; background: transparent; }}"
                           "#verdictBanner QLabel#verdictWord { font-size: 18pt; font-weight: bold; }"
                           "#verdictBanner QLabel#verdictRule { font-size: 9pt; }"
                           "#verdictBanner QLabel#verdictHeadline { font-size: 13pt; font-weight: bold; }")

    def show_verdict(self, v: VerdictView) -> None:
        self.symbol.setText(v.symbol)
        self.word.setText(v.word)
        self.headline.setText(v.headline)
        self.headline.setVisible(bool(v.headline))
        lines = [v.explanation] + list(v.terms)
        self.explain.setText("\n".join(x for x in lines if x))
        # the rule's name on the banner, its full wording as the tooltip (and on the certificate)
        name = v.decision_rule.split(":", 1)[0].strip()
        self.rule.setText(f"Decision rule: {name}" if name else "")
        self.rule.setToolTip(v.decision_rule)
        self.rule.setVisible(bool(v.decision_rule))
        self.setAccessibleName(f"Verdict: {v.word}")
        self._paint(v.tone)

    def show_busy(self, fraction: float, message: str) -> None:
        self.symbol.setText("…")
        self.word.setText("ANALYSING")
        self.headline.setVisible(False)
        self.explain.setText(f"{message} ({100 * fraction:.0f} %)" if message else "")
        self.rule.setVisible(False)
        self._paint("busy")

    def show_stale(self, message: str) -> None:
        self.symbol.setText("⟳")
        self.word.setText("OUT OF DATE")
        self.headline.setVisible(False)
        self.explain.setText(message)
        self.rule.setVisible(False)
        self.setAccessibleName(f"Result out of date: {message}")
        self._paint("stale")

    def show_error(self, message: str) -> None:
        self.symbol.setText("!")
        self.word.setText("NO MEASUREMENT")
        self.headline.setVisible(False)
        self.explain.setText(message)
        self.rule.setVisible(False)
        self.setAccessibleName(f"Analysis failed: {message}")
        self._paint("error")


class ResultsPanel(QWidget):
    HEADERS = ["Quantity", "Value", "U", "Unit"]

    def __init__(self, parent=None):
        super().__init__(parent)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(4, 4, 4, 4)
        self.banner = VerdictBanner(self)
        lay.addWidget(self.banner)
        self.tabs = QTabWidget(self)
        self.values = QTableWidget(0, 4, self)
        self.values.setHorizontalHeaderLabels(self.HEADERS)
        self.values.horizontalHeaderItem(2).setToolTip("Expanded uncertainty U = k·u (k as stated below the table)")
        self.budget = QTableWidget(0, 7, self)
        self.budget.setHorizontalHeaderLabels(
            ["Input quantity", "Estimate", "u", "Distribution", "Sensitivity c", "Contribution", "Share"])
        for t in (self.values, self.budget):
            t.verticalHeader().setVisible(False)
            t.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
            t.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
            t.setAlternatingRowColors(True)
            t.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
            t.horizontalHeader().setStretchLastSection(True)
        # the values' columns are sized from every row (see _column_widths), the last one takes what is left
        self.values.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Interactive)
        self.values.horizontalHeader().setStretchLastSection(True)
        self.warnings = QListWidget(self)
        self.tabs.addTab(self.values, "Values")
        self.tabs.addTab(self.budget, "Uncertainty budget")
        self.tabs.addTab(self.warnings, "Warnings")
        lay.addWidget(self.tabs, 1)
        self.k_note = QLabel("")
        self.k_note.setWordWrap(True)
        lay.addWidget(self.k_note)
        self.stale = False

    def clear(self) -> None:
        self.stale = False
        for t in (self.values, self.budget):
            t.setEnabled(True)
        self.values.setRowCount(0)
        self.budget.setRowCount(0)
        self.warnings.clear()
        self.tabs.setTabText(2, "Warnings")
        self.k_note.setText("")
        self.banner.show_verdict(verdict_view(None))

    def show_result(self, result: AnalysisResult | None) -> None:
        self.stale = False
        for t in (self.values, self.budget):
            t.setEnabled(True)
        self.banner.show_verdict(verdict_view(result))
        rows = value_rows(result)
        self.values.setRowCount(len(rows))
        group = None
        for i, r in enumerate(rows):
            for j, text in enumerate((r.label, r.value, r.uncertainty, r.unit)):
                it = QTableWidgetItem(text)
                if j in (1, 2):
                    it.setTextAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
                if r.group != group and j == 0:
                    it.setToolTip(r.group)
                self.values.setItem(i, j, it)
            group = r.group
        brows = budget_rows(result)
        self.budget.setRowCount(len(brows))
        for i, r in enumerate(brows):
            for j, text in enumerate(r):
                self.budget.setItem(i, j, QTableWidgetItem(text))
        self._fit_width()
        warns = [] if result is None else list(result.warnings)
        self.warnings.clear()
        self.warnings.addItems(warns)
        self.tabs.setTabText(2, f"Warnings ({len(warns)})" if warns else "Warnings")
        k = None if result is None else result.k
        coverage = "approximately 95 %" if result is None or result.budget is None else result.budget.coverage
        self.k_note.setText(f"U = k·u with k = {k:g} ({coverage} coverage)." if k else "")

    def needed_width(self) -> int:
        """Width the values table needs to show every column whole (no cut text, no sideways scrolling)."""
        t = self.values
        cols = sum(self._column_widths())
        frame = 2 * t.frameWidth() + t.verticalScrollBar().sizeHint().width()
        lay = self.layout().contentsMargins()
        return cols + frame + lay.left() + lay.right() + 16

    def _column_widths(self) -> list[int]:
        t = self.values
        h = t.horizontalHeader()
        fm = t.fontMetrics()
        pad = 2 * (t.style().pixelMetric(QStyle.PixelMetric.PM_FocusFrameHMargin, None, t) + 1) + 2
        out = []
        for c in range(t.columnCount()):
            # every row counts, not only those scrolled into view (Qt's own sizing looks at visible rows only)
            texts = [t.item(r, c).text() for r in range(t.rowCount()) if t.item(r, c) is not None]
            out.append(max([h.sectionSizeHint(c)] + [fm.horizontalAdvance(x) + pad for x in texts]))
        return out

    def _fit_width(self) -> None:
        for c, wdt in enumerate(self._column_widths()):
            self.values.setColumnWidth(c, wdt)
        # the splitter then takes the room from the photograph, never from the numbers
        self.setMinimumWidth(min(self.needed_width(), 640))

    def show_busy(self, fraction: float, message: str) -> None:
        self.banner.show_busy(fraction, message)

    def mark_stale(self, message: str = "") -> None:
        """The inputs changed after this result was made and it was not analysed again: the banner says so and
        the values are greyed (still readable, no longer the answer)."""
        self.stale = True
        for t in (self.values, self.budget):
            t.setEnabled(False)
        self.banner.show_stale(message or "The set-up changed after this result was made. Press F5 (Analyse "
                               "now) to measure with the new set-up; the values below belong to the old one.")

    def show_error(self, message: str) -> None:
        self.clear()
        self.banner.show_error(message)

    def value_of(self, label: str) -> tuple[str, str, str] | None:
        """(value, U, unit) shown for a quantity label — for tests and the clipboard."""
        for i in range(self.values.rowCount()):
            if self.values.item(i, 0).text() == label:
                return tuple(self.values.item(i, j).text() for j in (1, 2, 3))  # type: ignore[return-value]
        return None
