"""The lot review page: a folder of images as a sortable, filterable table of status, key values and verdicts;
select a row to see its analysis; export CSV."""

from __future__ import annotations

import os

from PySide6.QtCore import QAbstractTableModel, QModelIndex, QSortFilterProxyModel, Qt, Signal
from PySide6.QtGui import QBrush, QColor, QPixmap
from PySide6.QtWidgets import (
    QAbstractItemView,
    QComboBox,
    QFileDialog,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QLineEdit,
    QPushButton,
    QSizePolicy,
    QScrollArea,
    QSplitter,
    QTableView,
    QTabWidget,
    QVBoxLayout,
    QWidget,
)

from ..errors import RinggaugeError
from ..presentation import value_and_U
from .lot import COLUMNS, DONE, FAILED, QUEUED, RUNNING, Lot
from .model import BenchSession, _Cancelled
from .results_panel import ResultsPanel
from .widgets import ElidedLabel
from .worker import Runner

SORT_ROLE = Qt.ItemDataRole.UserRole + 1

_STATUS_TEXT = {QUEUED: "waiting", RUNNING: "analysing…", DONE: "done", FAILED: "FAILED TO ANALYSE"}


class LotTableModel(QAbstractTableModel):
    def __init__(self, lot: Lot, parent=None):
        super().__init__(parent)
        self.lot = lot
        lot.changed.connect(self._lot_changed)

    def _lot_changed(self, what: str, i) -> None:
        if what == "rows":
            self.beginResetModel()
            self.endResetModel()
        elif what == "row":
            self.dataChanged.emit(self.index(i, 0), self.index(i, len(COLUMNS) - 1))

    def rowCount(self, parent=QModelIndex()):  # noqa: N802
        return 0 if parent.isValid() else len(self.lot.rows)

    def columnCount(self, parent=QModelIndex()):  # noqa: N802
        return 0 if parent.isValid() else len(COLUMNS)

    def headerData(self, section, orientation, role=Qt.ItemDataRole.DisplayRole):  # noqa: N802
        if role == Qt.ItemDataRole.DisplayRole and orientation == Qt.Orientation.Horizontal:
            return COLUMNS[section][1]
        return None

    def data(self, index, role=Qt.ItemDataRole.DisplayRole):
        if not index.isValid():
            return None
        key = COLUMNS[index.column()][0]
        v = self.lot.cell(index.row(), key)
        if role == Qt.ItemDataRole.DisplayRole:
            if key == "status":
                return _STATUS_TEXT.get(v, v)
            if key == "radius_mm" and isinstance(v, float):
                # as many digits as the uncertainty supports (U to two significant digits)
                return value_and_U(v, self.lot.cell(index.row(), "radius_U_mm"))[0]
            if key == "radius_U_mm" and isinstance(v, float):
                return value_and_U(v, v)[1] or "not available"
            if isinstance(v, float):
                return f"{v:.3f}"
            return "" if v is None else str(v)
        if role == SORT_ROLE:
            if v is None:
                return float("inf") if key not in ("name", "status", "verdict", "message") else ""
            return v
        if role == Qt.ItemDataRole.TextAlignmentRole and isinstance(v, float):
            return int(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
        if role == Qt.ItemDataRole.ForegroundRole and key in ("verdict", "status"):
            word = str(v or "")
            if "FAIL" in word.upper() and "CONDITIONAL" not in word.upper():
                return QBrush(QColor("#a3211c"))
            if word == "PASS":
                return QBrush(QColor("#1d6b3a"))
        if role == Qt.ItemDataRole.ToolTipRole and key == "message":
            return str(v or "")
        return None


#: the filter choices: label -> predicate on (status, verdict word)
FILTERS = {
    "All rows": lambda st, v: True,
    "PASS": lambda st, v: v == "PASS",
    "FAIL": lambda st, v: v == "FAIL",
    "Conditional": lambda st, v: v.startswith("CONDITIONAL"),
    "Failed to analyse": lambda st, v: st == FAILED,
    "Not yet analysed": lambda st, v: st in (QUEUED, RUNNING),
}


class LotFilter(QSortFilterProxyModel):
    def __init__(self, parent=None):
        super().__init__(parent)
        self.text = ""
        self.choice = "All rows"
        self.setSortRole(SORT_ROLE)

    def _refilter(self, change) -> None:
        if hasattr(self, "beginFilterChange"):  # Qt 6.10 and later
            self.beginFilterChange()
            change()
            self.endFilterChange(QSortFilterProxyModel.Direction.Rows)
        else:
            change()
            self.invalidateFilter()

    def set_text(self, text: str) -> None:
        self._refilter(lambda: setattr(self, "text", text.strip().lower()))

    def set_choice(self, choice: str) -> None:
        self._refilter(lambda: setattr(self, "choice", choice))

    def filterAcceptsRow(self, row, parent):  # noqa: N802
        lot: Lot = self.sourceModel().lot
        r = lot.rows[row]
        verdict = str((r.summary or {}).get("verdict", ""))
        if not FILTERS[self.choice](r.status, verdict):
            return False
        if self.text and self.text not in (r.name + " " + r.message + " " + verdict).lower():
            return False
        return True


class LotPage(QWidget):
    """Runs the lot with the bench's current set-up, one image at a time, on its own worker thread."""

    openInBench = Signal(str, object)

    def __init__(self, session: BenchSession, runner: Runner | None = None, parent=None):
        super().__init__(parent)
        self.session = session
        self.lot = Lot()
        self.runner = Runner(self)
        self.runner.signals.progress.connect(self._progress)
        self.runner.signals.finished.connect(self._finished)
        self.runner.signals.failed.connect(self._failed)
        self.runner.signals.cancelled.connect(lambda token: None)
        self.running = False
        self.statistics = (None, None)  # (LotSummary, lot_tables) of the finished rows

        lay = QVBoxLayout(self)
        top = QHBoxLayout()
        self.b_open = QPushButton("Open lot folder…")
        self.b_run = QPushButton("Analyse lot")
        self.b_stop = QPushButton("Stop")
        self.b_export = QPushButton("Export CSV…")
        self.b_keep = QPushButton("Keep in records")
        self.b_keep.setToolTip("Store every analysed image of the lot in the inspection records")
        self.b_keep.setEnabled(True)
        self.b_certs = QPushButton("Certificates…")
        self.b_certs.setEnabled(False)
        self.b_certs.setToolTip("Certificates of the kept records and a lot report, as PDF files")
        self.folder_label = ElidedLabel("No lot open")
        self.folder_label.setObjectName("imageTitle")
        self.folder_label.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Preferred)
        self.lot_name = QLineEdit()
        self.lot_name.setPlaceholderText("lot name")
        self.lot_name.setAccessibleName("Lot name")
        self.lot_name.setToolTip("The lot's name, kept with every record and printed on the lot report "
                                 "(from the folder's lot.json when it has one)")
        self.lot_name.setMaximumWidth(150)
        for w in (self.b_open, self.b_run, self.b_stop, self.b_export, self.b_keep, self.b_certs):
            top.addWidget(w)
        top.addWidget(QLabel("Lot"))
        top.addWidget(self.lot_name)
        top.addWidget(self.folder_label, 1)
        lay.addLayout(top)

        filt = QHBoxLayout()
        self.filter_text = QLineEdit()
        self.filter_text.setPlaceholderText("Filter by image name, verdict or note")
        self.filter_text.setClearButtonEnabled(True)
        self.filter_choice = QComboBox()
        self.filter_choice.addItems(list(FILTERS))
        self.counts = QLabel("")
        self.counts.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Preferred)
        filt.addWidget(QLabel("Show"))
        filt.addWidget(self.filter_choice)
        filt.addWidget(self.filter_text, 2)
        filt.addWidget(self.counts, 3)
        lay.addLayout(filt)

        self.model = LotTableModel(self.lot, self)
        self.proxy = LotFilter(self)
        self.proxy.setSourceModel(self.model)
        self.table = QTableView()
        self.table.setModel(self.proxy)
        self.table.setSortingEnabled(True)
        self.table.sortByColumn(0, Qt.SortOrder.AscendingOrder)  # by image name, as the lot report by serial
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.table.setAlternatingRowColors(True)
        self.table.verticalHeader().setVisible(False)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
        self.table.horizontalHeader().setStretchLastSection(True)
        self.detail = ResultsPanel()
        self.b_bench = QPushButton("Show on the bench")
        self.b_bench.setEnabled(False)
        right = QWidget()
        rl = QVBoxLayout(right)
        rl.setContentsMargins(0, 0, 0, 0)
        self.detail_title = QLabel("Select a row to see its analysis")
        self.detail_title.setObjectName("imageTitle")
        rl.addWidget(self.detail_title)
        rl.addWidget(self.detail, 1)
        rl.addWidget(self.b_bench)
        # the lot's statistics: the same figures, digits and chart as the lot report
        self.stats = QLabel("Analyse the lot to see its statistics")
        self.stats.setWordWrap(True)
        self.stats.setTextFormat(Qt.TextFormat.RichText)
        self.stats.setAlignment(Qt.AlignmentFlag.AlignTop | Qt.AlignmentFlag.AlignLeft)
        self.stats.setObjectName("lotStatistics")
        self.chart = QLabel("")
        self.chart.setAlignment(Qt.AlignmentFlag.AlignTop | Qt.AlignmentFlag.AlignHCenter)
        self._chart_pixmap: QPixmap | None = None
        sw = QWidget()
        sl = QVBoxLayout(sw)
        sl.setContentsMargins(4, 4, 4, 4)
        sl.addWidget(self.stats)
        sl.addWidget(self.chart)
        sl.addStretch(1)
        scroll = QScrollArea()
        scroll.setWidgetResizable(True)
        scroll.setWidget(sw)
        self.side = QTabWidget()
        self.side.addTab(right, "Part")
        self.side.addTab(scroll, "Lot statistics")
        split = QSplitter(Qt.Orientation.Horizontal)
        split.addWidget(self.table)
        split.addWidget(self.side)
        split.setStretchFactor(0, 3)
        split.setStretchFactor(1, 2)
        lay.addWidget(split, 1)
        self.message = QLabel("")
        self.message.setWordWrap(True)
        self.message.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Preferred)
        lay.addWidget(self.message)

        self.b_open.clicked.connect(self.open_dialog)
        self.b_run.clicked.connect(self.run_lot)
        self.b_stop.clicked.connect(self.stop)
        self.b_export.clicked.connect(self.export_dialog)
        self.b_keep.clicked.connect(self.keep_in_records)
        self.b_certs.clicked.connect(self.certificates_dialog)
        self.paper = Runner(self)  # records and PDFs: their own thread, so a long lot keeps analysing
        self.paper.signals.finished.connect(self._paper_done)
        self.paper.signals.failed.connect(self._paper_failed)
        self.paper.signals.progress.connect(lambda _t, f, m: self.message.setText(f"{m} ({100 * f:.0f} %)"))
        self.kept_paths: list = []
        self.b_bench.clicked.connect(self._to_bench)
        self.filter_text.textChanged.connect(self.proxy.set_text)
        self.filter_choice.currentTextChanged.connect(self.proxy.set_choice)
        self.table.selectionModel().selectionChanged.connect(lambda *_: self._show_selected())
        self.table.doubleClicked.connect(lambda *_: self._to_bench())
        self.lot.changed.connect(lambda *_: self._update_counts())
        self.lot_name.editingFinished.connect(self._name_edited)
        self.side.currentChanged.connect(lambda *_: self.update_statistics())
        self._update_counts()

    # -- loading and running -----------------------------------------------------------------------------------
    def open_dialog(self) -> None:
        d = QFileDialog.getExistingDirectory(self, "Folder of the lot's images")
        if d:
            self.open_folder(d)

    def open_folder(self, folder: str, *, run: bool = True) -> bool:
        self.stop()
        try:
            self.lot.load_folder(folder)
        except RinggaugeError as exc:
            self.message.setText(str(exc))
            return False
        self.folder_label.setText(f"{folder} — {len(self.lot.rows)} images")
        self.lot_name.setText(self.lot.name)
        self.update_statistics()
        self.b_certs.setEnabled(False)
        self.message.setText("")
        self.detail.clear()
        if run:
            self.run_lot()
        return True

    def run_lot(self) -> bool:
        if not self.lot.rows:
            self.message.setText("open a lot folder first")
            return False
        try:
            setup = self.session.setup.to_bench_setup()
        except RinggaugeError as exc:
            self.message.setText(f"the bench set-up is incomplete: {exc}")
            return False
        self.lot.cancel()
        gen = self.lot.generation
        analyse = self.session.analyse_fn
        todo = [i for i, r in enumerate(self.lot.rows) if r.status != DONE]
        for i in todo:
            path = self.lot.rows[i].path

            def job(progress, i=i, path=path):
                def checked(fraction: float, message: str) -> None:
                    if self.lot.generation != gen:  # the lot was stopped or replaced
                        raise _Cancelled()
                    progress(fraction, message)

                checked(0.0, "starting")
                return Lot.analyse_one(path, setup, analyse, checked)

            self.runner.submit((gen, i), job)
        self.running = bool(todo)
        self.message.setText(f"Analysing {len(todo)} images with the bench set-up ({setup.source.name}, "
                             f"pixel {setup.pixel_size_um:g} µm)" if todo else "Every image is analysed")
        return True

    def stop(self) -> None:
        self.lot.cancel()
        self.running = False
        for r in self.lot.rows:
            if r.status == RUNNING:
                r.status = QUEUED
        self._update_counts()

    def wait(self, msecs: int = 60000) -> bool:
        return self.runner.wait(msecs)

    def _progress(self, token, fraction: float, message: str) -> None:
        gen, i = token
        if gen == self.lot.generation and self.lot.rows[i].status != RUNNING:
            self.lot.mark_running(i)

    def _finished(self, token, result) -> None:
        gen, i = token
        if gen == self.lot.generation:
            self.lot.set_result(i, result)
            self._after_row(i)

    def _failed(self, token, message: str) -> None:
        gen, i = token
        if gen == self.lot.generation:
            self.lot.set_failure(i, message)
            self._after_row(i)

    def _after_row(self, i: int) -> None:
        c = self.lot.counts()
        if c[QUEUED] + c[RUNNING] == 0:
            self.running = False
            self.message.setText("Lot finished")
            self.update_statistics()
        elif self.side.currentIndex() == 1:
            self.update_statistics(chart=False)  # the chart is drawn again once the lot is finished
        sel = self._selected_row()
        if sel == i:
            self._show_selected()

    def _update_counts(self) -> None:
        c = self.lot.counts()
        n = len(self.lot.rows)
        verdicts: dict[str, int] = {}
        for r in self.lot.rows:
            if r.summary:
                verdicts[r.summary["verdict"]] = verdicts.get(r.summary["verdict"], 0) + 1
        vt = ", ".join(f"{k} {v}" for k, v in sorted(verdicts.items()))
        self.counts.setText(f"{c[DONE]} of {n} done, {c[FAILED]} failed" + (f" — {vt}" if vt else ""))
        # value columns that no analysed row fills (e.g. power for lenses on a flat) are hidden
        if c[DONE]:
            keys = [k for k, _ in COLUMNS]
            for key in ("radius_mm", "radius_U_mm", "power", "irregularity"):
                empty = all(self.lot.cell(i, key) is None for i in range(n))
                self.table.setColumnHidden(keys.index(key), empty)

    # -- the lot's name and statistics ---------------------------------------------------------------------------
    def _name_edited(self) -> None:
        self.lot.lot_name = self.lot_name.text().strip()
        if not self.lot.lot_name:
            self.lot_name.setText(self.lot.name)
        self.update_statistics(chart=False)

    def update_statistics(self, *, chart: bool = True) -> None:
        """Counts, radius tolerance and rule, mean and spread, Cp/Cpk with its caution, and the individuals
        chart with the specification limits — from ``ringgauge.records.lot``, as the lot report prints them."""
        summary, t = self.lot.statistics()
        self.statistics = (summary, t)
        if summary is None:
            self.stats.setText("Analyse the lot to see its statistics")
            self.chart.clear()
            self._chart_pixmap = None
            return
        from html import escape

        from ..conformity import RULE_NAMES

        def table(header, rows) -> str:
            h = "".join(f"<th align='left'>{escape(x)}</th>" for x in header)
            b = "".join("<tr>" + "".join(f"<td>{escape(str(c))}</td>" for c in r) + "</tr>" for r in rows)
            return f"<table cellspacing='0' cellpadding='3'><tr>{h}</tr>{b}</table>"

        parts = [f"<b>Lot {escape(summary.lot)}</b> — {summary.n_records} parts"]
        if summary.radius_tolerance:
            parts.append(f"Radius tolerance {escape(summary.radius_tolerance)}; decision rule: "
                         f"{escape(RULE_NAMES.get(summary.decision_rule, 'differs between parts'))}")
        parts.append(table(["Verdict", "Parts"], t["counts"]))
        if t["radius_counts"]:
            parts.append(table(["Radius verdict", "Parts"], t["radius_counts"])
                         + f"Accepted on radius: {escape(t['accepted'] or '—')}")
        parts.append(table(["Quantity", "n", "Mean", "s", "Range"],
                           [[q, x["n"], x["mean"], x["sd"], x["range"]]
                            for q, x in (("Radius", t["radius"]), ("Power", t["power"])) if x["n"] != "0"]))
        if t["capability"]:
            parts.append(table(["", "Specification", "Cp", "Cpk"],
                               [[x["quantity"], x["limits"], x["Cp"], x["Cpk"]] for x in t["capability"]]))
        parts += [f"<small>• {escape(n)}</small>" for n in summary.notes]
        self.stats.setText("<br/>".join(parts))
        if chart:
            self._draw_chart(summary)

    def _draw_chart(self, summary) -> None:
        import tempfile

        from ..records.lot import chart_png

        if not summary.charts:
            self.chart.setText("The control chart needs at least two measured parts.")
            self._chart_pixmap = None
            return
        with tempfile.TemporaryDirectory(prefix="rg-lotview-") as tmp:
            p = os.path.join(tmp, "chart.png")
            chart_png(summary.charts, p, title=f"Lot {summary.lot} — individuals chart")
            pm = QPixmap(p)
        self._chart_pixmap = pm
        width = max(200, self.side.width() - 40)
        self.chart.setPixmap(pm.scaledToWidth(width, Qt.TransformationMode.SmoothTransformation))

    def resizeEvent(self, event) -> None:  # noqa: N802 - Qt API
        super().resizeEvent(event)
        if self._chart_pixmap is not None:
            width = max(200, self.side.width() - 40)
            self.chart.setPixmap(self._chart_pixmap.scaledToWidth(width, Qt.TransformationMode.SmoothTransformation))

    # -- selection ------------------------------------------------------------------------------------------------
    def _selected_row(self) -> int | None:
        idx = self.table.selectionModel().selectedRows()
        if not idx:
            return None
        return self.proxy.mapToSource(idx[0]).row()

    def select_row(self, i: int) -> None:
        """Select source row ``i`` (it must pass the filter)."""
        pidx = self.proxy.mapFromSource(self.model.index(i, 0))
        self.table.selectRow(pidx.row())

    def _show_selected(self) -> None:
        i = self._selected_row()
        if i is None:
            self.b_bench.setEnabled(False)
            return
        r = self.lot.rows[i]
        self.detail_title.setText(r.name)
        self.b_bench.setEnabled(True)
        if r.result is not None:
            self.detail.show_result(r.result)
        elif r.status == FAILED:
            self.detail.show_error(r.message)
        else:
            self.detail.clear()
            self.detail.banner.show_busy(0.0, "waiting for its turn")

    def _to_bench(self) -> None:
        i = self._selected_row()
        if i is not None:
            r = self.lot.rows[i]
            self.openInBench.emit(r.path, r.result)

    # -- records and certificates -------------------------------------------------------------------------------
    def keep_in_records(self, *, target: str | None = None) -> bool:
        from .recording import ToRecord, save_records

        rows = self.lot.finished_rows()
        if not rows:
            self.message.setText("nothing to keep yet: analyse the lot first")
            return False
        items = [ToRecord(self.lot.rows[i].path, self.lot.rows[i].result, self.lot.rows[i].message) for i in rows]
        if self.lot_name.text().strip():
            self.lot.lot_name = self.lot_name.text().strip()
        lot, operator = self.lot.name, self.session.setup.operator
        details = self.session.setup.inspection_details()
        self.b_keep.setEnabled(False)
        self.paper.submit(("keep", self.lot.generation, rows),
                          lambda progress: save_records(items, lot=lot, operator=operator, setup=None,
                                                        target=target, progress=progress, details=details))
        return True

    def certificates_dialog(self) -> None:
        d = QFileDialog.getExistingDirectory(self, "Folder for the certificates")
        if d:
            self.issue_certificates(d)

    def issue_certificates(self, out_dir: str, *, target: str | None = None) -> bool:
        from .recording import issue_certificates

        ids = [r.record_id for r in self.lot.rows if r.record_id is not None]
        if not ids:
            self.message.setText("keep the lot in the records first; certificates are issued from records")
            return False
        lot = self.lot.name
        self.b_certs.setEnabled(False)
        self.paper.submit(("certs", out_dir),
                          lambda progress: issue_certificates(ids, out_dir, lot=lot, target=target,
                                                              progress=progress))
        return True

    def _paper_done(self, token, value) -> None:
        if token[0] == "keep":
            _, gen, rows = token
            if gen == self.lot.generation:
                for i, rid in zip(rows, value):
                    self.lot.rows[i].record_id = rid
            self.message.setText(f"Kept {len(value)} images of lot {self.lot.name} in the inspection records "
                                 f"(records {min(value)}–{max(value)})")
            self.b_certs.setEnabled(True)
            self.b_keep.setEnabled(True)
        else:
            self.kept_paths = list(value)
            self.message.setText(f"Wrote {len(value)} PDF files to {token[1]}")
            self.b_certs.setEnabled(True)

    def _paper_failed(self, token, message: str) -> None:
        self.message.setText(message)
        self.b_keep.setEnabled(True)
        self.b_certs.setEnabled(any(r.record_id is not None for r in self.lot.rows))

    def wait_paper(self, msecs: int = 60000) -> bool:
        return self.paper.wait(msecs)

    # -- export ---------------------------------------------------------------------------------------------------
    def export_dialog(self) -> None:
        base = os.path.join(self.lot.folder or "", "lot-results.csv")
        p, _ = QFileDialog.getSaveFileName(self, "Export the lot as CSV", base, "CSV (*.csv)")
        if p:
            self.export_csv(p)

    def export_csv(self, p: str) -> bool:
        try:
            n = self.lot.export_csv(p)
        except RinggaugeError as exc:
            self.message.setText(str(exc))
            return False
        self.message.setText(f"Wrote {n} rows to {p}")
        return True
