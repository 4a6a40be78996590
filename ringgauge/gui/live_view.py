"""The Live page: frames at camera rate with the ring overlay, the tracked radius, the settle indicator and the sign
read from the rings' motion; Capture keeps the settled frame (with the motion seen before it as evidence) as a
normal analysis on the Bench page.

All the measuring happens in :mod:`ringgauge.live` (no Qt); this page only opens the source, starts the live
session's background thread and draws its newest state on a timer.
"""

from __future__ import annotations

import datetime as _dt
import html
import json
import math
import os
from dataclasses import replace

import numpy as np
from PySide6.QtCore import QEvent, QObject, QPointF, QRectF, Qt, QTimer, Signal
from PySide6.QtGui import QAction, QColor, QImage, QKeySequence, QPainter, QPen, QPixmap
from PySide6.QtWidgets import (
    QCheckBox,
    QFileDialog,
    QFrame,
    QGridLayout,
    QGroupBox,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPushButton,
    QSizePolicy,
    QVBoxLayout,
    QWidget,
)

from ..errors import RinggaugeError
from ..sources import SAFETY_NOTES

#: page refresh, ms (the analysis runs at its own pace in the background)
REFRESH_MS = 40

_SETTLED_STYLE = "background:#1f7a3a;color:white;font-weight:bold;font-size:14pt;padding:6px;border-radius:4px"
_MOVING_STYLE = "background:#b8860b;color:white;font-weight:bold;font-size:14pt;padding:6px;border-radius:4px"
_IDLE_STYLE = "background:#7b8794;color:white;font-weight:bold;font-size:14pt;padding:6px;border-radius:4px"


def _live_cautions() -> list[str]:
    """The lamp and laser cautions (the first notes of the shop's safety list) for the live page."""
    keep = [n for n in SAFETY_NOTES if any(w in n.lower() for w in ("laser", "mercury", "sodium"))]
    keep.append("Press gently, on clean surfaces only: grit and hard pressure scratch and chip both parts. Your "
                "shop's procedures and local regulations come first.")
    return keep


class FrameView(QLabel):
    """One camera frame scaled to the widget, with the tracked dark rings and centre drawn over it."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setMinimumSize(320, 240)
        self.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Expanding)
        self.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self.setStyleSheet("background:#111;color:#ddd")
        self.setText("No camera running")
        self._img: QImage | None = None
        self._state = None
        self._buf = None
        self.rings_drawn = 0

    def show_frame(self, codes: np.ndarray | None, state) -> None:
        if codes is None:
            return
        a = codes if codes.dtype == np.uint8 else (codes >> 8).astype(np.uint8)
        self._buf = np.ascontiguousarray(a)
        h, w = self._buf.shape
        self._img = QImage(self._buf.data, w, h, w, QImage.Format.Format_Grayscale8)
        self._state = state
        self._render()

    def resizeEvent(self, event):  # noqa: N802
        super().resizeEvent(event)
        self._render()

    def _render(self) -> None:
        if self._img is None:
            return
        size = self.size()
        w, h = self._img.width(), self._img.height()
        k = min(size.width() / w, size.height() / h)
        pix = QPixmap(max(1, int(w * k)), max(1, int(h * k)))
        p = QPainter(pix)
        p.drawImage(QRectF(0, 0, w * k, h * k), self._img)
        st = self._state
        n = 0
        if st is not None and st.ok and st.q:
            p.setRenderHint(QPainter.RenderHint.Antialiasing)
            colour = QColor("#3ddc84") if st.settled else QColor("#ffb000")
            p.setPen(QPen(colour, 1.2))
            cx, cy = st.centre_px
            # dark rings where q s + phase = (2 m + 1) pi
            m0 = math.ceil((st.phase - math.pi) / (2 * math.pi))
            for m in range(m0, m0 + 400):
                s = ((2 * m + 1) * math.pi - st.phase) / st.q
                if s <= 0:
                    continue
                r = math.sqrt(s)
                if r > st.r_fit_px or n >= 60:
                    break
                p.drawEllipse(QPointF((cx + 0.5) * k, (cy + 0.5) * k), r * k, r * k)
                n += 1
            p.setPen(QPen(QColor("#ff4040"), 2))
            x, y = (cx + 0.5) * k, (cy + 0.5) * k
            p.drawLine(QPointF(x - 8, y), QPointF(x + 8, y))
            p.drawLine(QPointF(x, y - 8), QPointF(x, y + 8))
        elif st is not None and st.ok and getattr(st, "aperture_radius_px", None):
            # against a test plate: the part's clear aperture the form is fitted over
            p.setRenderHint(QPainter.RenderHint.Antialiasing)
            p.setPen(QPen(QColor("#3ddc84") if st.settled else QColor("#ffb000"), 1.5))
            cx, cy = st.centre_px
            r = st.aperture_radius_px
            p.drawEllipse(QPointF((cx + 0.5) * k, (cy + 0.5) * k), r * k, r * k)
        p.end()
        self.rings_drawn = n
        self.setPixmap(pix)


def _form_text(st, *, hide_sign: bool = False) -> str:
    """Power and astigmatism against a test plate, ± U (k = 2), in fringes and nm (rich text for the page)."""
    known = st.power_sign != "unknown" and not hide_sign
    sg = "+" if known else ""
    pw = abs(st.power_fringes) if not known else st.power_fringes
    pnm = abs(st.power_nm) if not known else st.power_nm
    note = "" if known else "power: size only, sign not yet read · "
    big, small, end = "<span style='font-size:12pt'>", "<span style='font-size:10pt;font-weight:normal'>", "</span>"
    return (f"{big}power {pw:{sg}.3f} ± {2 * st.power_u_fringes:.3f} fringe{end} {small}({pnm:{sg}.0f} ± "
            f"{2 * st.power_u_nm:.0f} nm){end}<br>{big}astigmatism {st.astigmatism_fringes:.3f} ± "
            f"{2 * st.astigmatism_u_fringes:.3f} fringe{end} {small}({st.astigmatism_nm:.0f} ± "
            f"{2 * st.astigmatism_u_nm:.0f} nm){end}<br>{small}{note}axis {st.astigmatism_axis_deg:.0f}° · U with "
            f"k = 2 · 1 fringe = {st.fringe_nm:.1f} nm{end}")


class LivePage(QWidget):
    """Start a camera (index, stream address, video file or folder), watch the readouts, capture when settled.

    ``setup_fn()`` returns the bench set-up to measure with (the Bench page's); ``captured`` is emitted with the
    written frame files and the sign evidence after a capture.
    """

    captured = Signal(list, dict)

    def __init__(self, setup_fn, parent=None, *, capture_dir_fn=None):
        super().__init__(parent)
        self.setup_fn = setup_fn
        self.capture_dir_fn = capture_dir_fn or _default_capture_dir
        self.session = None
        self._shown_frame = -1
        self._auto_done_episode = None
        self.last_capture: dict | None = None

        lay = QHBoxLayout(self)
        left = QVBoxLayout()
        row = QHBoxLayout()
        row.addWidget(QLabel("Camera:"))
        self.source_edit = QLineEdit()
        self.source_edit.setPlaceholderText("camera index (0), stream address (rtsp://…), video file or frame folder")
        self.source_edit.setAccessibleName("Camera source")
        row.addWidget(self.source_edit, 1)
        browse = QPushButton("File…")
        browse.clicked.connect(self._browse)
        row.addWidget(browse)
        self.start_btn = QPushButton("Start")
        self.start_btn.clicked.connect(lambda: self.start(self.source_edit.text()))
        self.stop_btn = QPushButton("Stop")
        self.stop_btn.clicked.connect(self.stop)
        self.stop_btn.setEnabled(False)
        row.addWidget(self.start_btn)
        row.addWidget(self.stop_btn)
        left.addLayout(row)
        self.problem = QLabel("")
        self.problem.setObjectName("setupNote")
        self.problem.setWordWrap(True)
        self.problem.setVisible(False)
        left.addWidget(self.problem)
        self.view = FrameView()
        left.addWidget(self.view, 1)
        self.rate = QLabel("—")
        self.rate.setObjectName("modeHint")
        left.addWidget(self.rate)
        lay.addLayout(left, 3)

        right = QVBoxLayout()
        g = QGroupBox("Live reading")
        gl = QGridLayout(g)
        self.settle_label = QLabel("NOT RUNNING")
        self.settle_label.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self.settle_label.setStyleSheet(_IDLE_STYLE)
        gl.addWidget(self.settle_label, 0, 0, 1, 2)
        self.radius_label = QLabel("R = —")
        self.radius_label.setStyleSheet("font-size:15pt;font-weight:bold")
        self.radius_label.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        gl.addWidget(self.radius_label, 1, 0, 1, 2)
        gl.addWidget(QLabel("Rings:"), 2, 0)
        self.rings_label = QLabel("—")
        self.rings_label.setStyleSheet("font-size:13pt;font-weight:bold")
        gl.addWidget(self.rings_label, 2, 1)
        gl.addWidget(QLabel("Gap:"), 3, 0)
        self.gap_label = QLabel("—")
        gl.addWidget(self.gap_label, 3, 1)
        gl.addWidget(QLabel("Sign:"), 4, 0)
        self.sign_label = QLabel("unknown")
        self.sign_label.setStyleSheet("font-size:13pt;font-weight:bold")
        gl.addWidget(self.sign_label, 4, 1)
        self.sign_detail = QLabel("Let the part settle, or press it gently: the way the rings move gives the sign.")
        self.sign_detail.setWordWrap(True)
        self.sign_detail.setStyleSheet("font-size:10pt")
        self.sign_detail.setMinimumHeight(self.sign_detail.fontMetrics().lineSpacing() * 3 + 4)
        gl.addWidget(self.sign_detail, 5, 0, 1, 2)
        self.settle_rule = QLabel("")
        self.settle_rule.setWordWrap(True)
        self.settle_rule.setObjectName("modeHint")
        gl.addWidget(self.settle_rule, 6, 0, 1, 2)
        right.addWidget(g)

        cap = QGroupBox("Capture")
        cl = QVBoxLayout(cap)
        self.capture_btn = QPushButton("Capture settled frame  (Space)")
        self.capture_btn.setEnabled(False)
        self.capture_btn.setToolTip("Keep the settled frame, with the ring motion seen before it, as a normal "
                                    "analysis on the Bench page")
        self.capture_btn.clicked.connect(lambda: self.capture())
        cl.addWidget(self.capture_btn)
        self.auto_box = QCheckBox("Capture automatically when settled")
        cl.addWidget(self.auto_box)
        self.capture_note = QLabel("")
        self.capture_note.setWordWrap(True)
        cl.addWidget(self.capture_note)
        right.addWidget(cap)

        prac = QGroupBox("Practice: read the sign yourself")
        pl = QGridLayout(prac)
        self.practice_btn = QPushButton("New practice sequence")
        self.practice_btn.setToolTip("A generated part settles and is pressed; the machine's reading stays hidden "
                                     "until you give yours")
        self.practice_btn.clicked.connect(self.new_practice)
        pl.addWidget(self.practice_btn, 0, 0)
        self.call_plus = QPushButton("+  centre contact")
        self.call_minus = QPushButton("−  edge contact")
        self.call_plus.clicked.connect(lambda: self.answer_practice("+"))
        self.call_minus.clicked.connect(lambda: self.answer_practice("-"))
        self.call_plus.setEnabled(False)
        self.call_minus.setEnabled(False)
        pl.addWidget(self.call_plus, 0, 1)
        pl.addWidget(self.call_minus, 0, 2)
        self.practice_note = QLabel("")
        self.practice_note.setWordWrap(True)
        self.practice_note.setStyleSheet("font-size:10pt")
        pl.addWidget(self.practice_note, 1, 0, 1, 3)
        left.addWidget(prac)
        self.practice: dict | None = None  # {"truth": ..., "answer": None} while a practice runs
        self._practice_job = None
        self.a_capture = QAction("Capture settled frame", self)
        self.a_capture.setShortcut(QKeySequence(Qt.Key.Key_Space))
        self.a_capture.setShortcutContext(Qt.ShortcutContext.WidgetWithChildrenShortcut)
        self.a_capture.triggered.connect(lambda: self.capture())
        self.addAction(self.a_capture)

        safety = QGroupBox("Bench safety")
        sl = QVBoxLayout(safety)
        notes = "".join(f"<li>{html.escape(n)}</li>" for n in _live_cautions())
        self.safety_label = QLabel(f"<ul style='margin-left:-20px'>{notes}</ul>")
        self.safety_label.setStyleSheet("font-size:9.5pt")
        self.safety_label.setWordWrap(True)
        self.safety_label.setTextFormat(Qt.TextFormat.RichText)
        sl.addWidget(self.safety_label)
        right.addWidget(safety)
        right.addStretch(1)
        side = QFrame()
        side.setLayout(right)
        side.setMinimumWidth(360)
        side.setMaximumWidth(460)
        lay.addWidget(side, 2)

        self.timer = QTimer(self)
        self.timer.setInterval(REFRESH_MS)
        self.timer.timeout.connect(self.refresh)

    # -- running ---------------------------------------------------------------------------------------------
    def _browse(self) -> None:
        p, _ = QFileDialog.getOpenFileName(self, "Play a video as the camera", "",
                                           "Videos (*.avi *.mp4 *.mkv *.mov);;All files (*)")
        if p:
            self.source_edit.setText(p)

    def show_problem(self, text: str) -> None:
        self.problem.setText(text)
        self.problem.setVisible(bool(text))

    def start(self, spec: str) -> bool:
        """Open ``spec`` and start the live analysis; a bad source shows one line and nothing else changes."""
        from ..live.form_tracker import FormLiveSession, open_session
        from ..live.source import open_source

        self.stop()
        if self.practice is not None and os.path.basename(str(spec)) != "practice.avi":
            self.practice = None  # a real source ends the practice
            self.call_plus.setEnabled(False)
            self.call_minus.setEnabled(False)
        self.source_edit.setText(str(spec))
        try:
            setup = self.setup_fn()
            # a camera or stream delivers its newest frame (older ones are dropped); a file or folder is played
            # frame by frame at its own rate, so a demonstration or a training sequence shows all of its motion
            source = open_source(str(spec).strip(), pace=False)
        except RinggaugeError as exc:
            self.show_problem(str(exc))
            return False
        try:
            self.session = open_session(source, setup)
        except RinggaugeError as exc:
            source.close()
            self.show_problem(str(exc))
            return False
        o = self.session.options
        what = "the gap at fixed points of the part" if isinstance(self.session, FormLiveSession) else "fringes"
        self.settle_rule.setText(f"Settled = {what} still within {o.settle_fringes:g} fringe over the last "
                                 f"{o.settle_frames} frames.")
        self.show_problem("")
        self._shown_frame = -1
        self._auto_done_episode = None
        self.session.start(throttle_fps=None if source.live else (source.fps or 25.0))
        self.start_btn.setEnabled(False)
        self.stop_btn.setEnabled(True)
        self.timer.start()
        return True

    def stop(self) -> None:
        self.timer.stop()
        if self.session is not None:
            self.session.stop()
        self.start_btn.setEnabled(True)
        self.stop_btn.setEnabled(False)

    def refresh(self) -> None:
        s = self.session
        if s is None:
            return
        f, st = s.snapshot()
        if st is not None and f is not None and st.frame != self._shown_frame:
            self._shown_frame = st.frame
            self.view.show_frame(f.codes, st)
            self._show_state(st)
            # once per settling: the episode count travels with the state (the analysis thread may already be
            # on the next episode when the page draws this one)
            if self.auto_box.isChecked() and st.settled and self._auto_done_episode != st.episode:
                if self.capture(st.frame):
                    self._auto_done_episode = st.episode
        if s.error:
            self.show_problem(s.error)
        if s.ended:
            self.timer.stop()
            self.start_btn.setEnabled(True)
            self.stop_btn.setEnabled(False)
            if not s.error and st is not None and s.exhausted and not self.rate.text().endswith("source"):
                self.rate.setText(self.rate.text() + " — end of the source")

    def _show_state(self, st) -> None:
        fps = f"{st.analysed_fps:.1f}" if st.analysed_fps else "—"
        lat = f"{st.latency_ms:.0f} ms" if st.latency_ms is not None else "—"
        self.rate.setText(f"frame {st.frame} · {fps} analysed frames/s · latency {lat} · {st.dropped} dropped")
        if not st.ok:
            self.settle_label.setText("NO FRINGES FOLLOWED" if hasattr(st, "power_fringes") else "NO RINGS TRACKED")
            self.settle_label.setStyleSheet(_IDLE_STYLE)
            self.radius_label.setText("power —" if hasattr(st, "power_fringes") else "R = —")
            self.rings_label.setText("—")
            self.capture_btn.setEnabled(False)
            self.capture_note.setText(st.message)
            return
        if st.settled:
            self.settle_label.setText("SETTLED — ready to capture")
            self.settle_label.setStyleSheet(_SETTLED_STYLE)
        else:
            mv = "" if st.motion_fringes is None else f" ({st.motion_fringes:.2f} fringe)"
            self.settle_label.setText(f"MOVING{mv}")
            self.settle_label.setStyleSheet(_MOVING_STYLE)
        if getattr(st, "power_fringes", None) is not None:
            self.radius_label.setText(_form_text(st, hide_sign=self.hidden))
            # four lines instead of one: the panel must make room rather than clip them
            self.radius_label.setMinimumHeight(self.radius_label.sizeHint().height())
        else:
            self.radius_label.setText(f"R = {st.radius_mm:.4f} mm ± {st.radius_U_mm:.2g} mm  (k = {st.k:.2g})")
        if self.hidden:
            for lab in (self.rings_label, self.gap_label, self.sign_label):
                lab.setText("hidden — your call")
            self.sign_detail.setText("Watch the rings while the film thins and when the part is pressed, then "
                                     "give your reading below.")
        else:
            self.rings_label.setText({"in": "moving in ↘ (toward the centre)",
                                      "out": "moving out ↗ (away from the centre)",
                                      "still": "still"}.get(st.rings, st.rings))
            self.gap_label.setText(st.gap)
            self.sign_label.setText({"+": "+  centre contact", "-": "−  edge contact"}.get(st.power_sign, "unknown"))
            self.sign_detail.setText(st.sign_detail)
        self.capture_btn.setEnabled(st.settled)

    # -- practice ----------------------------------------------------------------------------------------------
    @property
    def hidden(self) -> bool:
        return self.practice is not None and self.practice.get("answer") is None

    def new_practice(self, seed: int | None = None, *, wait: bool = False) -> None:
        """Generate a sequence with a hidden contact (centre or edge) in the background, then play it."""
        import tempfile
        import threading

        from .. import synth
        from ..live.sequence import SequencePlan, write_sequence

        g = np.random.default_rng(seed)
        contact = str(g.choice(["centre", "edge"]))
        plan = SequencePlan(radius_mm=float(g.uniform(500.0, 900.0)), contact=contact, settle_frames=30,
                            rest_frames=12, press_frames=14, after_frames=12)
        self.stop()
        self._drop_practice_dir()
        folder = tempfile.mkdtemp(prefix="rg-practice-")
        self._practice_dir = folder
        out = os.path.join(folder, "practice.avi")
        job: dict = {"done": False, "error": None}

        def work():
            try:
                write_sequence(out, plan, source="mercury-e", camera=synth.Camera(width=480, height=384,
                                                                                  pixel_um=12.0),
                               rng=int(g.integers(1 << 30)))
            except Exception as exc:  # noqa: BLE001 - shown as one line
                job["error"] = str(exc)
            job["done"] = True

        self.practice_btn.setEnabled(False)
        self.practice_note.setText("Making a practice sequence …")
        self._practice_job = job
        th = threading.Thread(target=work, name="ringgauge-practice", daemon=True)
        th.start()
        if wait:
            th.join()
            self._practice_ready(job, out, contact)
            return

        def poll():
            if job["done"]:
                self._practice_ready(job, out, contact)
            else:
                QTimer.singleShot(100, poll)

        QTimer.singleShot(100, poll)

    def _drop_practice_dir(self) -> None:
        import shutil

        d = getattr(self, "_practice_dir", None)
        if d:
            shutil.rmtree(d, ignore_errors=True)
            self._practice_dir = None

    def _practice_ready(self, job, out, contact) -> None:
        self.practice_btn.setEnabled(True)
        if job["error"]:
            self.practice_note.setText(f"the practice sequence could not be made: {job['error']}")
            return
        self.practice = {"truth": "+" if contact == "centre" else "-", "answer": None}
        self.practice_note.setText("Watch the rings, then press + or −.")
        self.call_plus.setEnabled(True)
        self.call_minus.setEnabled(True)
        if not self.start(out):
            self.practice = None

    def answer_practice(self, sign: str) -> str:
        if self.practice is None:
            return ""
        self.practice["answer"] = sign
        self.call_plus.setEnabled(False)
        self.call_minus.setEnabled(False)
        truth = self.practice["truth"]
        machine = self.session.sign.sign if self.session is not None else "unknown"
        name = {"+": "+ (centre contact)", "-": "− (edge contact)", "unknown": "unknown (not read yet)"}
        verdict = "Right." if sign == truth else "Not this time."
        text = (f"{verdict} You read {name[sign]}; the part was {name[truth]}; the machine read {name[machine]}. "
                "Closing gap: rings moving out mean centre contact, moving in mean edge contact.")
        self.practice_note.setText(text)
        _f, st = self.session.snapshot() if self.session is not None else (None, None)
        if st is not None:
            self._show_state(st)
        return text

    # -- capture -----------------------------------------------------------------------------------------------
    def capture(self, at_frame: int | None = None) -> list[str]:
        """Write the settled frame and the sign evidence; emits ``captured(paths, evidence)``.

        ``at_frame``: capture the settled run that holds this frame (auto-capture names the frame it saw)."""
        import cv2

        if self.session is None:
            self.capture_note.setText("Start a camera first.")
            return []
        try:
            got = self.session.capture_set(1, at_frame=at_frame)
        except RinggaugeError as exc:
            self.capture_note.setText(str(exc))
            return []
        folder = self.capture_dir_fn()
        try:
            os.makedirs(folder, exist_ok=True)
            stamp = _dt.datetime.now().strftime("%Y%m%d-%H%M%S")
            paths = []
            for f in got["frames"]:
                p = os.path.join(folder, f"live-{stamp}-frame{f.index:06d}.png")
                if not cv2.imwrite(p, f.codes):
                    raise OSError(f"cannot write {p}")
                paths.append(p)
            ev = dict(got["evidence"], frames_written=[os.path.basename(p) for p in paths])
            with open(os.path.splitext(paths[0])[0] + ".motion.json", "w", encoding="utf-8") as fh:
                json.dump(ev, fh, indent=2, ensure_ascii=False)
        except OSError as exc:
            self.capture_note.setText(f"the capture could not be written: {exc}")
            return []
        self.last_capture = {"paths": paths, "evidence": ev}
        self.capture_note.setText(f"Captured frame {got['frames'][-1].index} → {os.path.basename(paths[-1])}; "
                                  "analysed on the Bench page.")
        self.captured.emit(paths, ev)
        return paths

    def closeEvent(self, event):  # noqa: N802
        self.stop()
        super().closeEvent(event)


class _StopOnClose(QObject):
    """Stops the live session (its thread and the camera) when the main window closes, and removes a practice
    sequence's temporary files."""

    def __init__(self, page: LivePage, parent):
        super().__init__(parent)
        self.page = page

    def eventFilter(self, obj, event):  # noqa: N802
        if event.type() == QEvent.Type.Close:
            self.page.stop()
            self.page._drop_practice_dir()
        return False


def _default_capture_dir() -> str:
    from ..settings import home

    return os.fspath(home() / "captures")


def evidence_note(ev: dict) -> str:
    """One line for the result: what the rings did before the capture."""
    sign = ev.get("power_sign", "unknown")
    return (f"live capture (frame {', '.join(str(i) for i in ev.get('captured_frames', []))} of {ev.get('source')}); "
            f"settled: {ev.get('settle_rule')}; sign from the rings' motion: {sign} — {ev.get('detail', '')}")


def attach(window) -> LivePage:
    """Add the Live page to the main window: captures open on the Bench page as a normal analysis."""
    from ..imaging import load_frame

    page = LivePage(lambda: window.session.setup.to_bench_setup())

    def on_capture(paths, ev):
        try:
            frames = [load_frame(p) for p in paths]
        except RinggaugeError as exc:
            window.show_problem(str(exc))
            return
        frames[0] = replace(frames[0], notes=tuple(frames[0].notes) + (evidence_note(ev),))
        window.tabs.setCurrentWidget(window.bench)
        sign = {"+": 1, "-": -1}.get(str(ev.get("power_sign")))
        evidence = {"sign": sign, "detail": ev.get("detail", ""), "source": ev.get("source")} if sign else None
        window.session.set_frames(frames, sign_evidence=evidence)
        window.set_status(f"live capture {os.path.basename(paths[-1])} analysed; sign from the motion: "
                          f"{ev.get('power_sign')}")

    page.captured.connect(on_capture)
    page._close_filter = _StopOnClose(page, window)
    window.installEventFilter(page._close_filter)
    window.live = page
    window.tabs.addTab(page, "Live")
    training = getattr(window, "training", None)
    if training is not None and hasattr(training, "playSequence"):
        def play_from_training():
            window.tabs.setCurrentWidget(page)
            page.new_practice()

        training.playSequence.connect(play_from_training)
    return page
