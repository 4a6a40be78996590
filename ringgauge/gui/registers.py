"""The shop's registers in the window: bench calibration (pixel scale from a calibration target, saved as a bench
profile) and the test-plate register. Both call the very functions ``ringgauge calibrate`` and
``ringgauge plates`` call, so the window checks and stores exactly what the command line does."""

from __future__ import annotations

import datetime as _dt
import math

from PySide6.QtCore import QDate, Qt, Signal
from PySide6.QtGui import QFont
from PySide6.QtWidgets import (
    QAbstractItemView,
    QCheckBox,
    QComboBox,
    QDateEdit,
    QDialog,
    QDialogButtonBox,
    QFileDialog,
    QFormLayout,
    QGroupBox,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QLineEdit,
    QPushButton,
    QSpinBox,
    QTableWidget,
    QTableWidgetItem,
    QTextBrowser,
    QVBoxLayout,
)

from ..errors import InputError, RinggaugeError
from . import integrations
from .worker import Runner


def _number(what: str, text: str, *, allow_empty: bool = False) -> float | None:
    t = text.strip().replace(",", ".")
    if not t:
        if allow_empty:
            return None
        raise InputError(f"{what} is empty; enter a number")
    try:
        v = float(t)
    except ValueError:
        raise InputError(f"{what} must be a number, got {text!r}") from None
    if not math.isfinite(v):
        raise InputError(f"{what} must be a finite number")
    return v


class _Message(QLabel):
    def __init__(self):
        super().__init__("")
        self.setWordWrap(True)
        self.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)

    def say(self, text: str, *, bad: bool = False) -> None:
        self.setStyleSheet("color: #8a1c00;" if bad else "color: #1d4f2a;")
        self.setText(text)


class CalibrationDialog(QDialog):
    """Photograph of a calibration target → pixel scale with its budget → saved as a bench profile."""

    saved = Signal(str)  # bench name

    KINDS = (("lines", "Line scale or grating: certified pitch"), ("disc", "Reference disc or ring gauge: "
                                                                          "certified diameter"))

    def __init__(self, parent=None, *, operator: str = ""):
        super().__init__(parent)
        self.setWindowTitle("Bench calibration")
        self.runner = Runner(self)
        self.runner.signals.finished.connect(self._done)
        self.runner.signals.failed.connect(self._failed)
        self.result = None
        lay = QVBoxLayout(self)
        intro = QLabel("Photograph the calibration target at the focus and magnification used for the parts. "
                       "Two images of a line scale, turned by about 90° in between, measure x and y separately.")
        intro.setWordWrap(True)
        lay.addWidget(intro)
        g = QGroupBox("Target")
        f = QFormLayout(g)
        row = QHBoxLayout()
        self.images = QLineEdit()
        self.images.setPlaceholderText("calibration image(s); several separated by ';'")
        browse = QPushButton("Browse…")
        browse.clicked.connect(self._browse)
        row.addWidget(self.images, 1)
        row.addWidget(browse)
        f.addRow("Image(s)", row)
        self.kind = QComboBox()
        for key, text in self.KINDS:
            self.kind.addItem(text, key)
        f.addRow("Target", self.kind)
        self.size = QLineEdit()
        self.size_label = QLabel("Pitch (µm)")
        f.addRow(self.size_label, self.size)
        self.size_u = QLineEdit()
        self.size_u.setPlaceholderText("from the certificate; empty = the default")
        self.size_u_label = QLabel("Its standard uncertainty u (k = 1, µm)")
        f.addRow(self.size_u_label, self.size_u)
        self.pattern = QComboBox()
        for key, text in (("auto", "find out"), ("lines", "parallel lines"), ("grid", "crossed grid"),
                          ("dots", "dot grid")):
            self.pattern.addItem(text, key)
        f.addRow("Pattern", self.pattern)
        self.target_id = QLineEdit()
        f.addRow("Target id", self.target_id)
        lay.addWidget(g)
        g = QGroupBox("Save as bench profile")
        f = QFormLayout(g)
        self.bench = QComboBox()
        self.bench.setEditable(True)
        self.bench.addItems(integrations.profile_names())
        self.bench.setCurrentText("")
        self.bench.lineEdit().setPlaceholderText("name; empty = measure only, do not save")
        f.addRow("Bench", self.bench)
        self.operator = QLineEdit(operator)
        f.addRow("Operator", self.operator)
        self.months = QSpinBox()
        self.months.setRange(1, 120)
        self.months.setValue(6)
        self.months.setSuffix(" months")
        f.addRow("Recalibrate every", self.months)
        lay.addWidget(g)
        self.message = _Message()
        lay.addWidget(self.message)
        self.report = QTextBrowser()
        self.report.setMinimumHeight(160)
        self.report.setLineWrapMode(QTextBrowser.LineWrapMode.NoWrap)  # the command line's columns stay aligned
        self.report.setFont(QFont("DejaVu Sans Mono", 9))
        lay.addWidget(self.report, 1)
        bb = QDialogButtonBox(QDialogButtonBox.StandardButton.Close)
        self.b_run = bb.addButton("Measure", QDialogButtonBox.ButtonRole.ActionRole)
        self.b_run.clicked.connect(self.measure)
        bb.rejected.connect(self.reject)
        lay.addWidget(bb)
        self.kind.currentIndexChanged.connect(self._kind_changed)
        self._kind_changed()
        self.resize(640, 640)

    def _kind_changed(self, *_a) -> None:
        disc = self.kind.currentData() == "disc"
        self.size_label.setText("Diameter (mm)" if disc else "Pitch (µm)")
        self.size_u_label.setText(f"Its standard uncertainty u (k = 1, {'mm' if disc else 'µm'})")
        self.pattern.setEnabled(not disc)

    def _browse(self) -> None:
        ps, _ = QFileDialog.getOpenFileNames(self, "Calibration image(s)", "",
                                             "Images (*.png *.tif *.tiff *.jpg *.jpeg *.bmp);;All files (*)")
        if ps:
            self.images.setText(";".join(ps))

    def request(self) -> dict:
        """The keyword arguments of :func:`ringgauge.calibration.procedure.calibrate` from the fields."""
        paths = [p.strip() for p in self.images.text().split(";") if p.strip()]
        disc = self.kind.currentData() == "disc"
        size = _number("the diameter" if disc else "the pitch", self.size.text())
        u = _number("its uncertainty", self.size_u.text(), allow_empty=True)
        kw = {"target": self.pattern.currentData() if not disc else "auto",
              "target_id": self.target_id.text().strip() or None,
              "bench": self.bench.currentText().strip() or None, "operator": self.operator.text().strip(),
              "recalibration_days": int(round(self.months.value() * 365.25 / 12))}
        if disc:
            kw.update(disc_diameter_mm=size, diameter_u_mm=u)
        else:
            kw.update(grating_pitch_um=size, pitch_u_um=u)
        return {"images": paths, **kw}

    def measure(self) -> bool:
        from ..calibration.procedure import calibrate, check_request

        try:
            req = self.request()
            images = req.pop("images")
            check_request(images, **{k: req[k] for k in ("grating_pitch_um", "pitch_u_um", "disc_diameter_mm",
                                                         "diameter_u_mm", "target", "bench") if k in req})
        except RinggaugeError as exc:
            self.message.say(str(exc), bad=True)
            return False
        self.b_run.setEnabled(False)
        self.message.say("Measuring…")
        self.runner.submit("calibrate", lambda progress: calibrate(images, progress=lambda m: progress(0.5, m),
                                                                   **req))
        return True

    def _done(self, _token, run) -> None:
        from ..report.calibration_text import format_calibration  # the command line's own report

        self.b_run.setEnabled(True)
        self.result = run
        text = format_calibration(run.calibration)
        if run.profile is not None:
            self.message.say(f"Saved as bench '{run.profile.name}' (calibrated {run.profile.calibrated}).")
            self.saved.emit(run.profile.name)
        else:
            self.message.say("Measured; not saved (no bench name given).")
        self.report.setPlainText(text)

    def _failed(self, _token, message: str) -> None:
        self.b_run.setEnabled(True)
        self.message.say(message, bad=True)


class PlatesDialog(QDialog):
    """The test-plate register: list, add, retire — the functions behind ``ringgauge plates``."""

    changed = Signal()
    HEADERS = ("Id", "Kind", "Radius ± U (k = 2)", "Calibrated", "Due", "State", "Notes")

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setWindowTitle("Test plates")
        lay = QVBoxLayout(self)
        top = QHBoxLayout()
        self.show_retired = QCheckBox("Show retired plates")
        top.addWidget(self.show_retired)
        top.addStretch(1)
        self.b_retire = QPushButton("Retire selected…")
        top.addWidget(self.b_retire)
        lay.addLayout(top)
        self.table = QTableWidget(0, len(self.HEADERS))
        self.table.setHorizontalHeaderLabels(self.HEADERS)
        self.table.verticalHeader().setVisible(False)
        self.table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
        self.table.horizontalHeader().setStretchLastSection(True)
        lay.addWidget(self.table, 1)
        g = QGroupBox("Add a plate")
        f = QFormLayout(g)
        self.pid = QLineEdit()
        self.pid.setPlaceholderText("identifier engraved on the plate, e.g. TP-0412")
        f.addRow("Id", self.pid)
        self.kind = QComboBox()
        for k in ("concave", "convex", "flat"):
            self.kind.addItem(k, k)
        f.addRow("Working surface", self.kind)
        self.radius = QLineEdit()
        f.addRow("Certified radius (mm)", self.radius)
        self.radius_u = QLineEdit()
        f.addRow("Its standard uncertainty u (k = 1, mm)", self.radius_u)
        self.calibrated = QDateEdit(QDate.currentDate())
        self.calibrated.setCalendarPopup(True)
        self.calibrated.setDisplayFormat("yyyy-MM-dd")
        f.addRow("Calibrated on", self.calibrated)
        self.months = QSpinBox()
        self.months.setRange(1, 240)
        self.months.setValue(24)
        self.months.setSuffix(" months")
        f.addRow("Recalibrate every", self.months)
        self.diameter = QLineEdit()
        self.diameter.setPlaceholderText("optional")
        f.addRow("Plate diameter (mm)", self.diameter)
        self.notes = QLineEdit()
        f.addRow("Notes", self.notes)
        self.b_add = QPushButton("Add to the register")
        f.addRow("", self.b_add)
        lay.addWidget(g)
        self.message = _Message()
        lay.addWidget(self.message)
        bb = QDialogButtonBox(QDialogButtonBox.StandardButton.Close)
        bb.rejected.connect(self.reject)
        lay.addWidget(bb)
        self.b_add.clicked.connect(self.add)
        self.b_retire.clicked.connect(lambda: self.retire())
        self.show_retired.toggled.connect(self.reload)
        self.kind.currentIndexChanged.connect(self._kind_changed)
        self._kind_changed()
        self.reload()
        self.resize(760, 600)

    def _kind_changed(self, *_a) -> None:
        flat = self.kind.currentData() == "flat"
        self.radius.setEnabled(not flat)
        self.radius_u.setEnabled(not flat)

    def reload(self, *_a) -> None:
        from ..form import plates as reg

        try:
            every = reg.load_register()
        except RinggaugeError as exc:
            self.message.say(str(exc), bad=True)
            every = []
        today = _dt.date.today()
        shown = [p for p in every if self.show_retired.isChecked() or not p.retired]
        self.table.setRowCount(len(shown))
        for i, pl in enumerate(shown):
            r = "flat" if pl.kind == "flat" else f"{pl.radius_mm:.4f} ± {2 * pl.radius_u_mm:.4f} mm"
            state = ("retired " + pl.retired if pl.retired else
                     "CALIBRATION OVERDUE" if pl.overdue(today) else "in date")
            for j, text in enumerate((pl.id, pl.kind, r, pl.calibrated, pl.due().isoformat(), state, pl.note)):
                self.table.setItem(i, j, QTableWidgetItem(str(text)))
        if not every:
            self.message.say("No test plates in the register yet: add the first below.")

    def plate_ids(self) -> list[str]:
        return [self.table.item(i, 0).text() for i in range(self.table.rowCount())]

    def add(self) -> bool:
        from ..form import plates as reg

        try:
            flat = self.kind.currentData() == "flat"
            entry = {
                "id": self.pid.text().strip(), "kind": self.kind.currentData(),
                "radius_mm": 0.0 if flat else _number("the radius", self.radius.text()),
                "radius_u_mm": 0.0 if flat else _number("the radius uncertainty", self.radius_u.text()),
                "calibrated": self.calibrated.date().toString("yyyy-MM-dd"), "interval_months": self.months.value(),
                "diameter_mm": _number("the plate diameter", self.diameter.text(), allow_empty=True),
                "note": self.notes.text().strip(),
            }
            pl = reg.add_plate(entry)
        except RinggaugeError as exc:
            self.message.say(str(exc), bad=True)
            return False
        warns = reg.plate_warnings(pl)
        self.message.say(f"Added {pl.id}." + (" " + " ".join(warns) if warns else ""), bad=bool(warns))
        for w in (self.pid, self.radius, self.radius_u, self.diameter, self.notes):
            w.clear()
        self.reload()
        self.changed.emit()
        return True

    def retire(self, plate_id: str | None = None, when: str | None = None) -> bool:
        from ..form import plates as reg

        if plate_id is None:
            row = self.table.currentRow()
            if row < 0:
                self.message.say("Select a plate in the list first.", bad=True)
                return False
            plate_id = self.table.item(row, 0).text()
        try:
            pl = reg.retire_plate(plate_id, when)
        except RinggaugeError as exc:
            self.message.say(str(exc), bad=True)
            return False
        self.message.say(f"Retired {pl.id} ({pl.retired}); it stays in the register.")
        self.reload()
        self.changed.emit()
        return True

