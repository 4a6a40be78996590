"""The training page: practice interferograms with hidden truth, the trainee's reading, the score with an
explanation in fringes, and the trainer's review of a trainee's log."""

from __future__ import annotations

import html

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtWidgets import (
    QAbstractItemView,
    QButtonGroup,
    QComboBox,
    QDoubleSpinBox,
    QFormLayout,
    QGroupBox,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QLineEdit,
    QPushButton,
    QRadioButton,
    QSpinBox,
    QTableWidget,
    QTableWidgetItem,
    QTabWidget,
    QTextBrowser,
    QVBoxLayout,
    QWidget,
)

from ..errors import RinggaugeError
from .display import image_to_u8
from .image_view import ImageView
from .training import LEVELS, SIGNS, Exercise, Reading, Score, TraineeLog, make_exercise, score, truth_overlay


class TrainingPage(QWidget):
    #: asks the window to play a generated bench sequence (a part settling and pressed) on the Live page
    playSequence = Signal()

    def __init__(self, prefs=None, parent=None, *, log: TraineeLog | None = None):
        super().__init__(parent)
        self.prefs = prefs
        self.log = log or TraineeLog()
        self.exercise: Exercise | None = None
        self.last_score: Score | None = None
        self.frame = 0
        self.revealed = False
        lay = QVBoxLayout(self)
        self.tabs = QTabWidget()
        lay.addWidget(self.tabs)

        # practice -------------------------------------------------------------------------------------------------
        practice = QWidget()
        pl = QHBoxLayout(practice)
        left = QVBoxLayout()
        top = QHBoxLayout()
        self.trainee = QLineEdit()
        self.trainee.setPlaceholderText("Trainee name")
        self.trainee.setMinimumWidth(self.trainee.fontMetrics().horizontalAdvance("New starter 10") + 16)
        if prefs is not None:
            self.trainee.setText(str(prefs.get("training/trainee", "")))
        self.level = QComboBox()
        for k, lv in LEVELS.items():
            self.level.addItem(lv.title, k)
        self.level.setSizeAdjustPolicy(QComboBox.SizeAdjustPolicy.AdjustToContents)  # the level's name whole
        self.b_new = QPushButton("New exercise")
        # two rows, so the trainee's name and the level's full name both fit on a 1024 px screen
        top.addWidget(QLabel("Trainee"))
        top.addWidget(self.trainee, 1)
        top.addWidget(self.b_new)
        left.addLayout(top)
        row = QHBoxLayout()
        row.addWidget(QLabel("Level"))
        row.addWidget(self.level, 0)
        row.addStretch(1)
        self.b_sequence = QPushButton("Bench sequence…")
        self.b_sequence.setToolTip("Play a generated sequence — a part settling and pressed, the contact hidden — "
                                   "on the Live page, and read the sign from the moving rings yourself")
        self.b_sequence.clicked.connect(self.playSequence.emit)
        row.addWidget(self.b_sequence)
        left.addLayout(row)
        self.brief = QLabel("Press “New exercise” to get a practice interferogram.")
        self.brief.setWordWrap(True)
        self.brief.setObjectName("imageTitle")
        left.addWidget(self.brief)
        self.view = ImageView()
        left.addWidget(self.view, 1)
        fr = QHBoxLayout()
        self.b_a = QPushButton("Frame A: as laid")
        self.b_b = QPushButton("Frame B: gap grown by λ/8")
        self.b_flip = QPushButton("Alternate A/B")
        for b in (self.b_a, self.b_b, self.b_flip):
            b.setCheckable(True)
            fr.addWidget(b)
        self.b_a.setChecked(True)
        left.addLayout(fr)
        pl.addLayout(left, 3)

        right = QVBoxLayout()
        g = QGroupBox("Your reading")
        f = QFormLayout(g)
        self.count = QSpinBox()
        self.count.setRange(-1, 50)
        self.count.setSpecialValueText("—")
        self.count.setValue(-1)
        self.count.setToolTip("Dark fringes crossed along the blue line from the centre of the part to its edge")
        f.addRow("Fringe count", self.count)
        self.power = self._spin(0, 30, 2, 0.25, " fringes", "Power: sagitta difference over the test diameter")
        f.addRow("Power", self.power)
        self.astig = self._spin(0, 20, 2, 0.25, " fringes", "Astigmatism: difference between the principal meridians")
        f.addRow("Astigmatism", self.astig)
        self.irreg = self._spin(0, 20, 2, 0.25, " fringes", "Irregularity: how far the fringes depart from evenly "
                                "spaced circles once the best-fit sphere is taken away (astigmatism and zones)")
        f.addRow("Irregularity", self.irreg)
        self.sign_group = QButtonGroup(self)
        sl = QVBoxLayout()
        self.sign_buttons = {}
        for key, text in SIGNS.items():
            head, _, tail = text.partition(" (")
            rb = QRadioButton(head[0].upper() + head[1:])
            rb.setToolTip(text[0].upper() + text[1:])
            self.sign_group.addButton(rb)
            self.sign_buttons[key] = rb
            sl.addWidget(rb)
        f.addRow("Sign", sl)
        self.radius = self._spin(0, 100000, 4, 0.001, " mm", "Radius of the part from the plate radius and power "
                                 "(work it out: the box starts empty)")
        self.radius.setSpecialValueText("—")  # at 0: not given
        f.addRow("Part radius", self.radius)
        right.addWidget(g)
        self.b_score = QPushButton("Score my reading")
        self.b_score.setEnabled(False)
        right.addWidget(self.b_score)
        self.debrief = QTextBrowser()
        self.debrief.setMinimumWidth(300)
        right.addWidget(self.debrief, 1)
        pl.addLayout(right, 2)
        self.tabs.addTab(practice, "Practice")

        # trainer review ---------------------------------------------------------------------------------------------
        review = QWidget()
        rl = QVBoxLayout(review)
        rt = QHBoxLayout()
        self.review_who = QComboBox()
        self.b_reload = QPushButton("Reload")
        rt.addWidget(QLabel("Trainee"))
        rt.addWidget(self.review_who, 1)
        rt.addWidget(self.b_reload)
        rl.addLayout(rt)
        self.review_summary = QLabel("")
        self.review_summary.setWordWrap(True)
        rl.addWidget(self.review_summary)
        self.review_table = QTableWidget(0, 5)
        self.review_table.setHorizontalHeaderLabels(["When (local time)", "Level", "Exercise", "Score", "Missed"])
        self.review_table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.review_table.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.review_table.setToolTip("Double-click an attempt to open it again on the Practice tab")
        self.review_table.verticalHeader().setVisible(False)
        self.review_table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.review_table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
        self.review_table.horizontalHeader().setStretchLastSection(True)
        rl.addWidget(self.review_table, 1)
        rb = QHBoxLayout()
        self.b_reopen = QPushButton("Reopen attempt")
        self.b_export = QPushButton("Export CSV…")
        self.review_message = QLabel("")
        self.review_message.setWordWrap(True)
        rb.addWidget(self.b_reopen)
        rb.addWidget(self.b_export)
        rb.addWidget(self.review_message, 1)
        rl.addLayout(rb)
        self.tabs.addTab(review, "Trainer review")
        self._review_entries: list[dict] = []

        self._flip = QTimer(self)
        self._flip.setInterval(700)
        self._flip.timeout.connect(lambda: self.show_frame(1 - self.frame, keep_flip=True))
        self.b_new.clicked.connect(lambda: self.new_exercise())
        self.b_a.clicked.connect(lambda: self.show_frame(0))
        self.b_b.clicked.connect(lambda: self.show_frame(1))
        self.b_flip.toggled.connect(self._toggle_flip)
        self.b_score.clicked.connect(self.score_reading)
        self.b_reload.clicked.connect(self.reload_review)
        self.review_who.currentTextChanged.connect(self.show_review)
        self.b_reopen.clicked.connect(lambda: self.reopen(self.review_table.currentRow()))
        self.review_table.cellDoubleClicked.connect(lambda r, _c: self.reopen(r))
        self.b_export.clicked.connect(self.export_dialog)
        self.reload_review()

    @staticmethod
    def _spin(lo, hi, dec, step, suffix, tip) -> QDoubleSpinBox:
        s = QDoubleSpinBox()
        s.setRange(lo, hi)
        s.setDecimals(dec)
        s.setSingleStep(step)
        s.setSuffix(suffix)
        s.setToolTip(tip)
        return s

    # -- exercise -------------------------------------------------------------------------------------------------
    def new_exercise(self, seed: int | None = None) -> Exercise:
        self.exercise = make_exercise(self.level.currentData(), seed)
        self.revealed = False
        self.last_score = None
        self.brief.setText(self.exercise.brief())
        self.count.setValue(-1)
        self.power.setValue(0)
        self.astig.setValue(0)
        self.irreg.setValue(0)
        self.radius.setValue(0)  # empty: prefilling the plate's radius would give the answer away
        self.sign_group.setExclusive(False)
        for b in self.sign_buttons.values():
            b.setChecked(False)
        self.sign_group.setExclusive(True)
        self.debrief.setHtml("<p>Read the fringes, fill in your reading and press <b>Score my reading</b>. "
                             "The blue line marks where to count.</p>")
        self.b_score.setEnabled(True)
        self.show_frame(0)
        self.view.fit()
        return self.exercise

    def show_frame(self, i: int, *, keep_flip: bool = False) -> None:
        if not keep_flip and self.b_flip.isChecked():
            self.b_flip.setChecked(False)
        self.frame = i
        self.b_a.setChecked(i == 0)
        self.b_b.setChecked(i == 1)
        ex = self.exercise
        if ex is None:
            return
        if self.revealed:
            self.view.set_image(truth_overlay(ex, i))
        else:
            img = image_to_u8(ex.frames[i].astype("float32"))
            self.view.set_image(_with_count_line(img, ex))

    def _toggle_flip(self, on: bool) -> None:
        if on:
            self._flip.start()
        else:
            self._flip.stop()

    def reading(self) -> Reading:
        sign = next((k for k, b in self.sign_buttons.items() if b.isChecked()), None)
        return Reading(
            fringe_count=None if self.count.value() < 0 else self.count.value(),
            power_fringes=self.power.value(),
            astigmatism_fringes=self.astig.value(),
            sign=sign,
            part_radius_mm=self.radius.value() or None,
            irregularity_fringes=self.irreg.value(),
        )

    def score_reading(self) -> Score | None:
        if self.exercise is None:
            return None
        name = self.trainee.text().strip()
        sc = score(self.exercise, self.reading())
        logged = ""
        if self.revealed:  # a reopened attempt: shown again, not logged twice
            self._debrief(sc, "A past attempt, opened again from the trainer review (not logged again).")
            return sc
        try:
            if name:
                self.log.record(name, self.exercise, self.reading(), sc)
                logged = f"Saved to {html.escape(name)}’s training log."
                if self.prefs is not None:
                    self.prefs.set("training/trainee", name)
            else:
                logged = "Not logged: enter the trainee's name to keep a record."
        except RinggaugeError as exc:
            logged = html.escape(str(exc))
        self._debrief(sc, logged)
        self.reload_review()
        return sc

    def _debrief(self, sc: Score, logged: str) -> None:
        self.last_score = sc
        self.revealed = True
        self.b_score.setEnabled(False)
        rows = "".join(
            f"<tr><td style='font-size:16pt'>{'✔' if i.correct else '✖'}</td><td><b>{html.escape(i.item)}</b><br>"
            f"you: {html.escape(i.given)}<br>truth: {html.escape(i.truth)}<br><i>{html.escape(i.comment)}</i></td></tr>"
            for i in sc.items
        )
        t = self.exercise.truth
        extra = []
        if t.get("zonal_fringes"):
            extra.append(f"a zone of {t['zonal_fringes']:+.2f} fringe")
        if any(t.get("tilt_fringes", [0, 0])):
            extra.append("tilt of {:+.2f} / {:+.2f} fringe (x / y)".format(*t["tilt_fringes"]))
        self.debrief.setHtml(
            f"<h2>{sc.points} of {len(sc.items)} right ({sc.percent:.0f} %)</h2>"
            f"<table cellpadding='4'>{rows}</table>"
            + (f"<p>Also in this part: {html.escape(', '.join(extra))}.</p>" if extra else "")
            + "<p>The picture now shows the true dark-fringe lines (orange), the part's edge (green) and the "
            f"counting line (blue).</p><p>{logged}</p>"
        )
        self.show_frame(self.frame)

    # -- review ---------------------------------------------------------------------------------------------------------
    def reload_review(self) -> None:
        cur = self.review_who.currentText()
        self.review_who.blockSignals(True)
        self.review_who.clear()
        self.review_who.addItems(self.log.trainees())
        i = self.review_who.findText(cur)
        self.review_who.setCurrentIndex(max(i, 0))
        self.review_who.blockSignals(False)
        self.show_review(self.review_who.currentText())

    def show_review(self, who: str) -> None:
        self.review_table.setRowCount(0)
        if not who:
            self.review_summary.setText("No training logs yet.")
            return
        from ..report.text import local_time

        es = self.log.entries(who)
        s = self.log.summary(who)
        per = "; ".join(f"{k}: {_attempts(v['attempts'])}, mean {v['mean_percent']:.0f} %"
                        for k, v in s["levels"].items())
        self.review_summary.setText(f"{_attempts(s['attempts'])}. {per}."
                                    + (f" Most often missed: {s['most_missed']}." if s["most_missed"] else ""))
        self._review_entries = list(reversed(es))
        self.review_table.setRowCount(len(es))
        for r, e in enumerate(self._review_entries):
            missed = ", ".join(i["item"] for i in e["score"]["items"] if not i["correct"]) or "—"
            vals = [local_time(e.get("when")), e.get("level", ""), e.get("exercise", ""),
                    f"{e['score']['points']} / {e['score']['of']}", missed]
            for c, v in enumerate(vals):
                it = QTableWidgetItem(str(v))
                if c == 3:
                    it.setTextAlignment(Qt.AlignmentFlag.AlignCenter)
                self.review_table.setItem(r, c, it)


    # -- reopening and exporting ----------------------------------------------------------------------------------
    def reopen(self, row: int) -> bool:
        """Open a logged attempt again: the same exercise (level and seed), the reading as given, the score."""
        if not 0 <= row < len(self._review_entries):
            self.review_message.setText("Select an attempt in the list first.")
            return False
        e = self._review_entries[row]
        level, _, seed = str(e.get("exercise", "")).rpartition("-")
        try:
            ex = make_exercise(level, int(seed))
        except (ValueError, RinggaugeError):
            self.review_message.setText(f"Attempt {e.get('exercise')!r} cannot be opened again (unknown exercise).")
            return False
        self.exercise = ex
        self.brief.setText(ex.brief())
        rd = e.get("reading") or {}
        self.count.setValue(-1 if rd.get("fringe_count") is None else int(rd["fringe_count"]))
        self.power.setValue(float(rd.get("power_fringes") or 0))
        self.astig.setValue(float(rd.get("astigmatism_fringes") or 0))
        self.irreg.setValue(float(rd.get("irregularity_fringes") or 0))
        self.radius.setValue(float(rd.get("part_radius_mm") or 0))
        self.sign_group.setExclusive(False)
        for k, b in self.sign_buttons.items():
            b.setChecked(rd.get("sign") == k)
        self.sign_group.setExclusive(True)
        self.revealed = True
        self.tabs.setCurrentIndex(0)
        self.score_reading()
        self.view.fit()
        return True

    def export_dialog(self) -> None:
        from PySide6.QtWidgets import QFileDialog

        who = self.review_who.currentText()
        if not who:
            self.review_message.setText("No training log to export yet.")
            return
        p, _ = QFileDialog.getSaveFileName(self, "Export the training log", f"training-{who}.csv", "CSV (*.csv)")
        if p:
            self.export_csv(p)

    def export_csv(self, path: str) -> bool:
        who = self.review_who.currentText()
        try:
            n = self.log.write_csv(who, path)
        except RinggaugeError as exc:
            self.review_message.setText(str(exc))
            return False
        self.review_message.setText(f"Exported {_attempts(n)} of {who} to {path}")
        return True


def _attempts(n: int) -> str:
    return f"{n} attempt" + ("" if n == 1 else "s")


def _with_count_line(grey, ex: Exercise):
    """The grey frame as RGB with the counting line (sky blue) from the centre of the part to its edge."""
    import numpy as np

    rgb = np.repeat(grey[..., None], 3, axis=2)
    cx, cy, r = ex.aperture_px
    y = int(round(cy))
    x0, x1 = int(round(cx)), int(round(cx + r))
    rgb[y - 1:y + 1, x0:x1 + 1] = (86, 180, 233)
    return np.ascontiguousarray(rgb)
