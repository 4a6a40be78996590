"""The main window: the bench page (set-up, photograph with overlay, plots, results), the lot review page and
the training page, with menus, shortcuts, recent files, drag and drop and a watched camera folder."""

from __future__ import annotations

import html
import json
import os

from PySide6.QtCore import QSize, Qt, QTimer
from PySide6.QtGui import QAction, QActionGroup, QKeySequence
from PySide6.QtWidgets import (
    QDialog,
    QDialogButtonBox,
    QFileDialog,
    QGroupBox,
    QHBoxLayout,
    QLabel,
    QMainWindow,
    QMessageBox,
    QProgressBar,
    QPushButton,
    QScrollArea,
    QSizePolicy,
    QSplitter,
    QTabWidget,
    QTextBrowser,
    QToolBar,
    QVBoxLayout,
    QWidget,
)

from .. import __version__
from ..errors import RinggaugeError
from ..imaging import IMAGE_SUFFIXES
from ..sources import SAFETY_NOTES
from . import display
from .image_view import LAYERS, ImageView
from .lot_view import LotPage
from .model import BenchSession, FolderWatch, Job
from .plots import PlotPanel
from .widgets import ElidedLabel
from .prefs import Prefs
from .results_panel import ResultsPanel
from .setup_panel import SetupPanel
from .training_view import TrainingPage
from .worker import Runner

APP_TITLE = "ringgauge bench"
IMAGE_FILTER = "Interferograms (" + " ".join(f"*{s}" for s in IMAGE_SUFFIXES) + ");;All files (*)"

SHORTCUTS = (
    ("Ctrl+O", "Open an image"),
    ("Ctrl+Shift+O", "Open a set of frames"),
    ("F5", "Analyse again"),
    ("C", "Pick the ring centre by hand (click on the image)"),
    ("A", "Pick the aperture by hand (press at its centre, drag to its edge)"),
    ("Esc", "Back to looking (pan with the mouse)"),
    ("Ctrl+Z / Ctrl+Shift+Z", "Undo / redo a manual centre or aperture"),
    ("R", "Residual view (fit minus image) on and off"),
    ("1 … 5", "Overlay layers on and off: rings, aperture, masks, meridians, centre"),
    ("F or Ctrl+0", "Fit the image to the window"),
    ("Ctrl++ / Ctrl+−, mouse wheel", "Zoom in / out"),
    ("Ctrl+1 / Ctrl+2 / Ctrl+3", "Bench, lot review, training"),
    ("Ctrl+S", "Save the result as JSON"),
    ("Ctrl+K", "Keep the result in the inspection records"),
    ("Ctrl+P", "Print the result"),
    ("Ctrl+Shift+P", "Issue a certificate (PDF) of the kept record"),
    ("F1", "Help and bench safety"),
)


class BenchPage(QWidget):
    """Set-up on the left, the photograph in the middle, verdict, values and plots on the right."""

    def __init__(self, session: BenchSession, parent=None):
        super().__init__(parent)
        self.session = session
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        self.setup_panel = SetupPanel(session)
        # what changes with every part (operator, serial, ...) goes first, above the fold of a 800 px screen; the
        # bench set-up below it is set once a day
        for grp in self.setup_panel.findChildren(QGroupBox):
            if grp.title() == "Inspection" and grp.parentWidget() is self.setup_panel:
                self.setup_panel.layout().removeWidget(grp)
                self.setup_panel.layout().insertWidget(0, grp)
        scroll = QScrollArea()
        scroll.setWidget(self.setup_panel)
        scroll.setWidgetResizable(True)
        scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        # narrow enough for 1024 px screens: long lists move below their labels (the panel's rows wrap)
        scroll.setMinimumWidth(min(self.setup_panel.minimumSizeHint().width(), 320) + 24)
        self.setup_scroll = scroll
        self.view = ImageView()
        self.plots = PlotPanel()
        self.results = ResultsPanel()
        self.title = ElidedLabel("No image open")
        self.title.setObjectName("imageTitle")
        self.title.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Preferred)
        self.hint = QLabel("")
        self.hint.setObjectName("modeHint")
        self.hint.setWordWrap(True)
        self.hint.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Preferred)
        middle = QWidget()
        ml = QVBoxLayout(middle)
        ml.setContentsMargins(0, 0, 0, 0)
        ml.addWidget(self.title)
        notice_row = QWidget()
        notice_row.setObjectName("notice")
        nl = QHBoxLayout(notice_row)
        nl.setContentsMargins(8, 4, 4, 4)
        self.notice = QLabel("")
        self.notice.setWordWrap(True)
        self.notice.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Preferred)
        close = QPushButton("✕")
        close.setFlat(True)
        close.setToolTip("Dismiss")
        close.setAccessibleName("Dismiss the message")
        close.clicked.connect(lambda: self.show_notice(""))
        nl.addWidget(self.notice, 1)
        nl.addWidget(close, 0, Qt.AlignmentFlag.AlignTop)
        self.notice_row = notice_row
        notice_row.setVisible(False)
        ml.addWidget(notice_row)
        ml.addWidget(self.view, 1)
        ml.addWidget(self.hint)
        right = QSplitter(Qt.Orientation.Vertical)
        right.addWidget(self.results)
        right.addWidget(self.plots)
        right.setSizes([560, 200])  # the numbers first; the plots keep a readable strip
        right.setStretchFactor(0, 3)
        right.setStretchFactor(1, 1)
        self.split = QSplitter(Qt.Orientation.Horizontal)
        self.split.addWidget(scroll)
        self.split.addWidget(middle)
        self.split.addWidget(right)
        self.split.setStretchFactor(0, 0)
        self.split.setStretchFactor(1, 3)
        self.split.setStretchFactor(2, 2)
        self.split.setSizes([scroll.minimumWidth(), 420, 540])
        lay.addWidget(self.split)

    def show_notice(self, message: str) -> None:
        """A message about the last request (a file that would not open, a bad position) above the image;
        what was open stays open and its result stays valid."""
        self.notice.setText(message)
        self.notice_row.setVisible(bool(message))


class MainWindow(QMainWindow):
    def __init__(self, session: BenchSession | None = None, *, prefs: Prefs | None = None, autosave: bool = True):
        super().__init__()
        self.prefs = prefs or Prefs()
        self.session = session or BenchSession(setup=self.prefs.load_setup())
        self.autosave = autosave
        self.runner = Runner(self)
        self.runner.signals.progress.connect(self._job_progress)
        self.runner.signals.finished.connect(self._job_finished)
        self.runner.signals.failed.connect(self._job_failed)
        self.runner.signals.cancelled.connect(self._job_cancelled)
        self.residual_on = False
        self.auto_analyse = True
        self.watch: FolderWatch | None = None
        self._residual_cache = None
        self.drawing = Runner(self)  # pictures that take a moment (the residual view)
        self.drawing.signals.finished.connect(self._drawing_done)
        self.drawing.signals.failed.connect(lambda _t, msg: self.show_problem(msg))
        self.paper = Runner(self)  # records and PDFs
        self.paper.signals.finished.connect(self._paper_done)
        self.paper.signals.failed.connect(lambda _t, msg: self.show_problem(msg))
        self.kept_record: tuple | None = None  # (result, record id)
        self.last_certificate = None

        self.setWindowTitle(APP_TITLE)
        self.setAcceptDrops(True)
        self.tabs = QTabWidget()
        self.tabs.setDocumentMode(True)
        self.bench = BenchPage(self.session)
        self.lot = LotPage(self.session, self.runner)
        self.training = TrainingPage(self.prefs)
        self.tabs.addTab(self.bench, "Bench")
        self.tabs.addTab(self.lot, "Lot review")
        self.tabs.addTab(self.training, "Training")
        self.setCentralWidget(self.tabs)
        self.lot.openInBench.connect(self._open_lot_row)
        from . import live_view  # the Live page: camera at its own rate, captures come to the Bench page

        live_view.attach(self)

        self.progress = QProgressBar()
        self.progress.setRange(0, 100)
        self.progress.setMaximumWidth(220)
        self.progress.setVisible(False)
        self.status = QLabel("Ready")
        # a long message must never widen the window: it is cut at the edge (the full text is the tooltip)
        self.status.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Preferred)
        self.statusBar().addWidget(self.status, 1)
        self.statusBar().addPermanentWidget(self.progress)

        self._debounce = QTimer(self)
        self._debounce.setSingleShot(True)
        self._debounce.setInterval(350)
        self._debounce.timeout.connect(self.analyse)
        self._watch_timer = QTimer(self)
        self._watch_timer.setInterval(1000)
        self._watch_timer.timeout.connect(self.poll_watch)

        self._build_actions()
        self.bench.view.centrePicked.connect(self._centre_picked)
        self.bench.view.aperturePicked.connect(self._aperture_picked)
        self.session.changed.connect(self._on_session)
        screen = self.screen().availableGeometry() if self.screen() is not None else None
        # 1280 x 800 where the screen allows, never larger than the screen (a 1024 x 700 bench PC)
        self.resize(QSize(min(1280, screen.width()) if screen else 1280, min(800, screen.height()) if screen else 800))
        geo = self.prefs.get("window/geometry")
        if geo is not None:
            self.restoreGeometry(geo)

    # -- actions ------------------------------------------------------------------------------------------
    def _act(self, text: str, slot, shortcut=None, *, checkable=False, tip: str = "", short: str = "") -> QAction:
        a = QAction(text, self)
        if short:
            a.setIconText(short)  # what the tool bar shows
        if shortcut:
            if isinstance(shortcut, (list, tuple)):
                a.setShortcuts([QKeySequence(s) for s in shortcut])
            else:
                a.setShortcut(QKeySequence(shortcut))
        a.setCheckable(checkable)
        if tip:
            a.setStatusTip(tip)
            a.setToolTip(f"{text.replace('&', '').replace('…', '')} ({a.shortcut().toString()})" if shortcut else tip)
        a.triggered.connect(slot)
        self.addAction(a)  # shortcuts work whichever widget has the focus
        return a

    def _build_actions(self) -> None:
        mb = self.menuBar()
        m = mb.addMenu("&File")
        self.a_open = self._act("&Open image…", self.open_dialog, QKeySequence.StandardKey.Open,
                                tip="Open one interferogram", short="Open")
        self.a_open_set = self._act("Open &frame set…", self.open_set_dialog, "Ctrl+Shift+O",
                                    tip="Open several frames of one measurement (e.g. a sign pair)")
        m.addAction(self.a_open)
        m.addAction(self.a_open_set)
        self.recent_menu = m.addMenu("Open &recent")
        self._fill_recent()
        m.addSeparator()
        self.a_watch = self._act("&Watch camera folder…", self.watch_dialog, "Ctrl+Shift+W",
                                 tip="Analyse each new image the bench camera drops into a folder")
        self.a_unwatch = self._act("Stop watching", self.stop_watch)
        self.a_unwatch.setEnabled(False)
        m.addAction(self.a_watch)
        m.addAction(self.a_unwatch)
        m.addSeparator()
        self.a_save = self._act("&Save result as JSON…", self.save_json, QKeySequence.StandardKey.Save)
        m.addAction(self.a_save)
        self.a_keep = self._act("&Keep in inspection records", self.keep_result, "Ctrl+K",
                                tip="Store this result in the inspection records")
        self.a_cert = self._act("Issue &certificate…", self.certificate_dialog, "Ctrl+Shift+P",
                                tip="A PDF certificate of the kept record")
        self.a_print = self._act("&Print result…", lambda: self.print_dialog("result"),
                                 QKeySequence.StandardKey.Print, tip="Print the result on a printer (or to PDF)")
        self.a_print_cert = self._act("Print certi&ficate…", lambda: self.print_dialog("certificate"),
                                      tip="Print the certificate issued last")
        self.a_keep.setEnabled(True)
        self.a_cert.setEnabled(False)
        self.a_print.setEnabled(False)
        self.a_print_cert.setEnabled(False)
        m.addAction(self.a_keep)
        m.addAction(self.a_cert)
        m.addSeparator()
        m.addAction(self.a_print)
        m.addAction(self.a_print_cert)
        m.addSeparator()
        m.addAction(self._act("&Quit", self.close, QKeySequence.StandardKey.Quit))

        m = mb.addMenu("&Edit")
        self.a_undo = self._act("&Undo manual setting", self.session.undo, QKeySequence.StandardKey.Undo, short="Undo")
        self.a_redo = self._act("&Redo manual setting", self.session.redo, ["Ctrl+Shift+Z", "Ctrl+Y"])
        m.addAction(self.a_undo)
        m.addAction(self.a_redo)
        m.addSeparator()
        grp = QActionGroup(self)
        self.a_look = self._act("&Look and pan", lambda: self.set_mode("look"), "Esc", checkable=True, short="Pan")
        self.a_pick_centre = self._act("Set &centre by hand", lambda: self.set_mode("centre"), "C",
                                       checkable=True, tip="Click on the ring centre", short="Centre")
        self.a_pick_aperture = self._act("Set &aperture by hand", lambda: self.set_mode("aperture"), "A",
                                         checkable=True, tip="Press at the aperture centre and drag to its edge", short="Aperture")
        for a in (self.a_look, self.a_pick_centre, self.a_pick_aperture):
            grp.addAction(a)
            m.addAction(a)
        self.a_look.setChecked(True)
        self.a_clear = self._act("Clear manual settings", self.session.clear_overrides)
        m.addAction(self.a_clear)

        m = mb.addMenu("&Analysis")
        self.a_analyse = self._act("&Analyse now", self.analyse, "F5", tip="Run the analysis again", short="Analyse")
        self.a_auto = self._act("Analyse &automatically on every change", self._toggle_auto, checkable=True)
        self.a_auto.setChecked(True)
        m.addAction(self.a_analyse)
        m.addAction(self.a_auto)

        m = mb.addMenu("&View")
        self.layer_actions = {}
        for i, (key, label) in enumerate(LAYERS.items(), start=1):
            a = self._act(label, lambda on, k=key: self.set_layer(k, on), str(i), checkable=True)
            a.setChecked(True)
            self.layer_actions[key] = a
            m.addAction(a)
        m.addSeparator()
        self.a_residual = self._act("&Residual view (fit minus image)", self.toggle_residual, "R", checkable=True, short="Residual")
        m.addAction(self.a_residual)
        m.addSeparator()
        self.a_fit = self._act("&Fit to window", self.bench.view.fit, ["F", "Ctrl+0"], short="Fit")
        self.a_zoom_in = self._act("Zoom &in", lambda: self.bench.view.zoom_by(1.25), QKeySequence.StandardKey.ZoomIn)
        self.a_zoom_out = self._act("Zoom &out", lambda: self.bench.view.zoom_by(0.8),
                                    QKeySequence.StandardKey.ZoomOut)
        for a in (self.a_fit, self.a_zoom_in, self.a_zoom_out):
            m.addAction(a)
        m.addSeparator()
        for i, name in enumerate(("Bench", "Lot review", "Training")):
            m.addAction(self._act(name, lambda _=False, i=i: self.tabs.setCurrentIndex(i), f"Ctrl+{i + 1}"))

        m = mb.addMenu("&Tools")
        self.a_calibrate = self._act("Bench &calibration…", self.calibration_dialog,
                                     tip="Measure a bench's pixel scale from a calibration target and save it")
        self.a_plates = self._act("&Test plates…", self.plates_dialog, tip="The register of the shop's test plates")
        m.addAction(self.a_calibrate)
        m.addAction(self.a_plates)

        m = mb.addMenu("&Help")
        self.a_help = self._act("Help and bench &safety", self.show_help, "F1", short="Help")
        m.addAction(self.a_help)
        m.addAction(self._act("&About", self.show_about))

        tb = QToolBar("Bench")
        tb.setObjectName("benchToolbar")
        tb.setMovable(False)
        tb.setToolButtonStyle(Qt.ToolButtonStyle.ToolButtonTextOnly)
        for a in (self.a_open, self.a_analyse, None, self.a_look, self.a_pick_centre, self.a_pick_aperture,
                  self.a_undo, None, self.a_residual, self.a_fit, None, self.a_help):
            if a is None:
                tb.addSeparator()
            else:
                tb.addAction(a)
        self.addToolBar(tb)
        self.bench_toolbar = tb
        # the bench tools act on the photograph: shown on the bench page only
        self.tabs.currentChanged.connect(self._page_changed)
        self._page_changed()
        self._sync_undo()

    def _page_changed(self, *_args) -> None:
        on_bench = self.tabs.currentWidget() is self.bench
        self.bench_toolbar.setVisible(on_bench)

    # -- opening -------------------------------------------------------------------------------------------
    def open_dialog(self) -> None:
        start = self.prefs.get("files/last_folder", "")
        p, _ = QFileDialog.getOpenFileName(self, "Open interferogram", start, IMAGE_FILTER)
        if p:
            self.open_paths([p])

    def open_set_dialog(self) -> None:
        start = self.prefs.get("files/last_folder", "")
        ps, _ = QFileDialog.getOpenFileNames(self, "Open the frames of one measurement", start, IMAGE_FILTER)
        if ps:
            self.open_paths(ps)

    def open_paths(self, paths) -> bool:
        """Open files (or a folder of frames); on a bad file show its message and keep what was open."""
        self.tabs.setCurrentWidget(self.bench)
        try:
            self.session.open_paths(paths)
        except Exception as exc:  # noqa: BLE001 - a file the loader chokes on is a message, never a dead window
            from .worker import describe_failure

            why = describe_failure(exc)  # the loader's own words; anything unexpected is logged as well
            name = os.path.basename(os.fspath(paths[0])) if paths else ""
            if name and name not in why:
                why = f"{name}: {why}"
            # what was on show belongs to another part: it goes, and the banner says why
            self.session.refuse(f"image not opened: {why}")
            self.show_problem(f"{why} — the previous image and its result were closed")
            return False
        self.bench.show_notice("")
        for p in paths:
            self.prefs.add_recent(os.fspath(p))
        self.prefs.set("files/last_folder", os.path.dirname(os.path.abspath(os.fspath(paths[0]))))
        self._fill_recent()
        return True

    def _fill_recent(self) -> None:
        self.recent_menu.clear()
        items = self.prefs.recent()
        for p in items:
            a = self.recent_menu.addAction(p)
            a.triggered.connect(lambda _=False, p=p: self.open_paths([p]))
        self.recent_menu.setEnabled(bool(items))

    def dragEnterEvent(self, event):  # noqa: N802
        if event.mimeData().hasUrls() and any(u.isLocalFile() for u in event.mimeData().urls()):
            event.acceptProposedAction()

    def dropEvent(self, event):  # noqa: N802
        paths = [u.toLocalFile() for u in event.mimeData().urls() if u.isLocalFile()]
        if paths:
            self.open_paths(paths)
            event.acceptProposedAction()

    # -- watching a camera folder ---------------------------------------------------------------------------------
    def watch_dialog(self) -> None:
        d = QFileDialog.getExistingDirectory(self, "Folder where the bench camera saves images",
                                             self.prefs.get("files/watch_folder", ""))
        if d:
            self.start_watch(d)

    def start_watch(self, folder: str) -> bool:
        try:
            self.watch = FolderWatch(folder)
        except RinggaugeError as exc:
            self.show_problem(str(exc))
            return False
        self.prefs.set("files/watch_folder", folder)
        self._watch_timer.start()
        self.a_unwatch.setEnabled(True)
        self.set_status(f"Watching {folder} for new images")
        return True

    def stop_watch(self) -> None:
        self._watch_timer.stop()
        self.watch = None
        self.a_unwatch.setEnabled(False)
        self.set_status("Stopped watching")

    def poll_watch(self) -> list[str]:
        if self.watch is None:
            return []
        new = self.watch.poll()
        if new:
            self.open_paths([new[-1]])  # the newest frame; the bench looks at one part at a time
            self.set_status(f"New image from the camera: {os.path.basename(new[-1])}")
        return new

    # -- analysis -------------------------------------------------------------------------------------------------
    def _toggle_auto(self, on: bool) -> None:
        self.auto_analyse = bool(on)

    def analyse(self) -> bool:
        self._debounce.stop()
        try:
            job = self.session.make_job()
        except RinggaugeError as exc:
            self.session.error = str(exc)
            self.session.busy = False  # an earlier job, if any, is outdated and dropped
            self.progress.setVisible(False)
            self.bench.results.show_error(str(exc))
            self.bench.plots.clear()
            self.set_status(str(exc))
            return False
        self.progress.setValue(0)
        self.progress.setVisible(True)
        self.runner.submit(job, job.run)
        return True

    def _job_progress(self, job: Job, fraction: float, message: str) -> None:
        self.session.report_progress(job, fraction, message)

    def _job_finished(self, job: Job, result) -> None:
        self.session.accept(job, result)

    def _job_failed(self, job: Job, message: str) -> None:
        self.session.fail(job, message)

    def _job_cancelled(self, job: Job) -> None:
        if job.generation == self.session.generation:
            self.progress.setVisible(False)

    def _on_session(self, what: str) -> None:
        s = self.session
        page = self.bench
        if what in ("frames", "setup", "overrides"):
            self._residual_cache = None
            if what == "frames":
                self.residual_on = False
                self.a_residual.setChecked(False)
                page.title.setText(s.title or "No image open")
                self._show_photo(refit=True)
                page.results.clear()
                page.plots.clear()
            if what == "setup" and self.autosave:
                self.prefs.save_setup(s.setup)
            page.view.set_overlay(display.overlay_from(s.result, s.overrides))
            self._sync_undo()
            if what == "overrides":
                page.hint.setText(s.overrides.describe())
            if s.frames and self.auto_analyse:
                page.results.show_busy(0.0, "the inputs changed; analysing again")
                self._debounce.start()
            elif s.stale:
                page.results.mark_stale()
                self.a_print.setEnabled(False)
                self.set_status("The result on show is out of date: press F5 to analyse again")
        elif what == "busy":
            f, msg = s.progress
            self.progress.setVisible(True)
            self.progress.setValue(int(round(100 * f)))
            page.results.show_busy(f, msg)
            self.set_status(f"Analysing: {msg}")
        elif what == "result":
            self.progress.setVisible(False)
            self.a_cert.setEnabled(False)
            self.a_print.setEnabled(s.result is not None)
            self.show_result()
        elif what == "error":
            self.progress.setVisible(False)
            self.a_print.setEnabled(False)
            page.results.show_error(s.error or "")
            page.plots.clear()
            page.view.set_overlay(display.overlay_from(None, s.overrides))
            self.set_status(f"Analysis failed: {s.error}" if s.frames else f"No measurement: {s.error}")

    def show_result(self) -> None:
        s, page = self.session, self.bench
        r = s.result
        self._residual_cache = None
        page.results.show_result(r)
        page.view.set_overlay(display.overlay_from(r, s.overrides))
        page.plots.show_result(r, shape=s.frames[0].shape if s.frames else None)
        if self.residual_on:
            self._show_photo()
        ignored = display.overrides_ignored(r, s.overrides)
        if ignored:
            self.bench.show_notice("The analysis did not use your hand-set " + " and ".join(ignored)
                                   + ": this engine finds its own. Treat the result with care or clear the "
                                   "manual settings (Edit menu).")
        v = display.verdict_view(r)
        extra = ""
        if r is not None and r.radius is not None:
            row = display.value_rows(r)[0]
            extra = f"R = {row.value} {row.uncertainty} mm (k = {r.k:g})"
        self.set_status(f"Analysed {s.title}: {v.word}" + (f", {extra}" if extra else ""))

    def _show_photo(self, *, refit: bool = False) -> None:
        s, view = self.session, self.bench.view
        if not s.frames:
            view.set_image(None)
            return
        if self.residual_on:
            cache = self._residual_cache
            if s.result is None:
                self.bench.hint.setText("No residual yet: analyse the image first")
            elif cache is not None and cache[0] is s.result:
                if cache[1] is not None:
                    view.set_image(cache[1], refit=refit)
                    self.bench.hint.setText("Residual view: fit minus image (orange: fit brighter, blue: image "
                                            "brighter, grey: not fitted)")
                    return
                self.bench.hint.setText("No residual for this result (nothing was fitted)")
            else:
                # a full frame takes a moment: worked out on a worker thread, shown when ready
                result, data = s.result, s.frames[0].data
                self.drawing.submit(("residual", result), lambda _p: _residual_rgb(data, result))
                self.bench.hint.setText("Working out the residual view…")
        view.set_image(display.image_to_u8(s.frames[0].data), refit=refit)

    def _drawing_done(self, token, rgb) -> None:
        if token[0] == "residual":
            self._residual_cache = (token[1], rgb)
            if self.residual_on and token[1] is self.session.result:
                self._show_photo()

    def toggle_residual(self, on: bool) -> None:
        self.residual_on = bool(on)
        if not on:
            self.bench.hint.setText(self.session.overrides.describe() if not self.session.overrides.empty else "")
        self._show_photo()

    def set_layer(self, key: str, on: bool) -> None:
        self.bench.view.set_layer_visible(key, on)
        self.layer_actions[key].setChecked(bool(on))

    # -- manual overrides -------------------------------------------------------------------------------------------
    def set_mode(self, mode: str) -> None:
        self.bench.view.set_mode(mode)
        {"look": self.a_look, "centre": self.a_pick_centre, "aperture": self.a_pick_aperture}[mode].setChecked(True)
        self.bench.hint.setText({
            "look": "Drag to pan, wheel to zoom",
            "centre": "Click on the ring centre (Esc to stop)",
            "aperture": "Press at the aperture centre and drag to its edge (Esc to stop)",
        }[mode])

    def _centre_picked(self, x: float, y: float) -> None:
        try:
            self.session.set_centre(x, y)
        except RinggaugeError as exc:
            self.show_problem(str(exc))
        self.set_mode("look")

    def _aperture_picked(self, x: float, y: float, r: float) -> None:
        try:
            self.session.set_aperture(x, y, r)
        except RinggaugeError as exc:
            self.show_problem(str(exc))
        self.set_mode("look")

    def _sync_undo(self) -> None:
        self.a_undo.setEnabled(self.session.can_undo)
        self.a_redo.setEnabled(self.session.can_redo)
        self.a_clear.setEnabled(not self.session.overrides.empty)

    # -- lot rows ---------------------------------------------------------------------------------------------------
    def _open_lot_row(self, path: str, result) -> None:
        if self.open_paths([path]) and result is not None:
            # show the lot's own result (made with the set-up it records) instead of analysing again
            self._debounce.stop()
            try:
                job = self.session.make_job()
            except RinggaugeError:
                return
            self.session.accept(job, result)
            self.progress.setVisible(False)

    # -- saving, messages, help ------------------------------------------------------------------------------------------
    def save_json(self) -> None:
        if self.session.result is None:
            self.show_problem("nothing to save yet: analyse an image first")
            return
        base = os.path.splitext(self.session.frames[0].path or "result")[0] + ".json"
        p, _ = QFileDialog.getSaveFileName(self, "Save result", base, "JSON (*.json)")
        if p:
            self.write_json(p)

    def keep_result(self, *, target: str | None = None) -> bool:
        from .recording import ToRecord, save_records

        s = self.session
        if s.result is None:
            self.show_problem("nothing to keep yet: analyse an image first")
            return False
        item = ToRecord(s.frames[0].path or s.title, s.result)
        operator = s.setup.operator
        result = s.result
        self.paper.submit(("keep", result), lambda progress: save_records([item], lot=None, operator=operator,
                                                                          setup=None, target=target,
                                                                          progress=progress))
        return True

    def certificate_dialog(self) -> None:
        d = QFileDialog.getExistingDirectory(self, "Folder for the certificate", self.prefs.get("files/cert_folder", ""))
        if d:
            self.prefs.set("files/cert_folder", d)
            self.issue_certificate(d)

    def issue_certificate(self, out_dir: str, *, target: str | None = None) -> bool:
        from .recording import issue_certificates

        if self.kept_record is None or self.kept_record[0] is not self.session.result:
            self.show_problem("keep the result in the records first (Ctrl+K); certificates are issued from records")
            return False
        rid = self.kept_record[1]
        self.paper.submit(("certificate", rid), lambda progress: issue_certificates([rid], out_dir, target=target,
                                                                                   progress=progress))
        return True

    def _paper_done(self, token, value) -> None:
        if token[0] == "keep":
            self.kept_record = (token[1], value[0])
            self.a_cert.setEnabled(token[1] is self.session.result)
            self.set_status(f"Kept as inspection record {value[0]}")
        else:
            self.last_certificate = value[0]
            self.a_print_cert.setEnabled(True)
            self.set_status(f"Certificate written: {value[0]}")

    # -- printing --------------------------------------------------------------------------------------------------
    def print_dialog(self, what: str = "result") -> None:
        from PySide6.QtPrintSupport import QPrintDialog, QPrinter

        printer = QPrinter(QPrinter.PrinterMode.HighResolution)
        dlg = QPrintDialog(printer, self)
        dlg.setWindowTitle("Print the result" if what == "result" else "Print the certificate")
        if dlg.exec() == QDialog.DialogCode.Accepted:
            self.print_to(printer, what)

    def print_to(self, printer, what: str = "result") -> bool:
        """Print the result on show (or the certificate issued last) on ``printer`` — a real printer from the
        print dialog, or a PDF file (``QPrinter.OutputFormat.PdfFormat``)."""
        from . import printing

        try:
            if what == "certificate":
                if not self.last_certificate:
                    raise RinggaugeError("no certificate issued yet: keep the result (Ctrl+K), then issue one")
                pages = printing.print_pdf_text(self.last_certificate, printer)
                self.set_status(f"Printed certificate {os.path.basename(str(self.last_certificate))} "
                                f"({pages} page(s))")
                return True
            s = self.session
            if s.result is None:
                raise RinggaugeError("nothing to print yet: analyse an image first")
            picture = self.bench.view.grab().toImage()
            printing.print_result(s.result, printer, picture=picture, title=s.title,
                                  stale=self.bench.results.stale)
        except RinggaugeError as exc:
            self.show_problem(str(exc))
            return False
        self.set_status(f"Printed the result of {self.session.title}")
        return True

    # -- registers: bench calibration and test plates -----------------------------------------------------------------
    def calibration_dialog(self) -> None:
        from .registers import CalibrationDialog

        dlg = CalibrationDialog(self, operator=self.session.setup.operator)
        dlg.saved.connect(lambda _name: self._registers_changed())
        self._calibration = dlg
        dlg.show()

    def _registers_changed(self) -> None:
        # refill the lists, then show the session's own choices again (a refill alone would show the first item)
        self.bench.setup_panel.reload_lists()
        self.bench.setup_panel.refresh()

    def plates_dialog(self) -> None:
        from .registers import PlatesDialog

        dlg = PlatesDialog(self)
        dlg.changed.connect(self._registers_changed)
        self._plates = dlg
        dlg.show()

    def write_json(self, p: str) -> None:
        try:
            with open(p, "w", encoding="utf-8") as fh:
                json.dump(self.session.result.to_dict(), fh, indent=2, ensure_ascii=False)
        except OSError as exc:
            self.show_problem(f"{p}: cannot write ({exc.strerror or exc})")
            return
        self.set_status(f"Saved {p}")

    def set_status(self, text: str) -> None:
        self.status.setText(text)
        self.status.setToolTip(text)

    def show_problem(self, message: str) -> None:
        """A one-line message above the image and in the status bar; never a modal dialog."""
        self.set_status(message)
        self.bench.show_notice(message)

    def help_html(self) -> str:
        rows = "".join(f"<tr><td><b>{html.escape(k)}</b></td><td>{html.escape(v)}</td></tr>" for k, v in SHORTCUTS)
        notes = "".join(f"<li>{html.escape(n)}</li>" for n in SAFETY_NOTES)
        return (
            "<h2>Bench safety</h2><ul>" + notes + "</ul>"
            "<h2>Working at the bench</h2><ol>"
            "<li>Fill in the bench set-up on the left: light source, pixel size with its uncertainty (or a saved "
            "bench profile), gap medium, and — for form against a test plate — the plate, tolerance and test "
            "diameter. The set-up is kept for the next session.</li>"
            "<li>Open an image (Ctrl+O), drop it on the window, or watch the camera folder. The analysis runs "
            "by itself; the banner on the right says PASS, FAIL or CONDITIONAL in words.</li>"
            "<li>Check the overlay: fitted rings in orange (dark) or blue (bright), the centre cross, the "
            "aperture in green. Dotted rings were left out of the fit.</li>"
            "<li>On a hard image set the centre (C) or the aperture (A) by hand; Ctrl+Z undoes it.</li>"
            "<li>The plots below the image show r² against fringe order with residuals, the radial profile "
            "and the fitted gap map.</li></ol>"
            "<h2>Keys</h2><table cellpadding='3'>" + rows + "</table>"
        )

    def show_help(self) -> None:
        dlg = QDialog(self)
        dlg.setWindowTitle("Help and bench safety")
        lay = QVBoxLayout(dlg)
        tb = QTextBrowser(dlg)
        tb.setHtml(self.help_html())
        lay.addWidget(tb)
        bb = QDialogButtonBox(QDialogButtonBox.StandardButton.Close)
        bb.rejected.connect(dlg.reject)
        lay.addWidget(bb)
        dlg.resize(720, 640)
        self._help = dlg
        dlg.show()

    def show_about(self) -> None:
        QMessageBox.about(self, "About", f"<b>ringgauge {__version__}</b><br>Lens metrology with interference "
                                         "rings: radius of curvature, surface form, uncertainty.")

    def closeEvent(self, event):  # noqa: N802
        self.prefs.set("window/geometry", self.saveGeometry())
        if self.autosave:
            self.prefs.save_setup(self.session.setup)
        self.session.changed.disconnect(self._on_session)
        self.session.cancel()
        self.lot.stop()
        self.runner.wait(5000)
        self.drawing.wait(10000)
        self.paper.wait(30000)
        super().closeEvent(event)


def _residual_rgb(data, result):
    """Fit minus image as an RGB picture, or None when the result has nothing fitted (worker thread)."""
    res = display.residual_image(data, result)
    return None if res is None else display.signed_to_rgb(res)
