"""Starting the bench window: the QApplication, its look, and the window with the paths given on the command
line."""

from __future__ import annotations

import os
import sys
from typing import Sequence

from PySide6.QtGui import QColor, QFont, QPalette
from PySide6.QtWidgets import QApplication

from .prefs import APPLICATION, ORGANISATION

#: calm and high-contrast: near-white panels, near-black text, one deep-blue accent; sized for a bench
STYLE = """
QWidget { font-size: 11pt; }
QMainWindow, QDialog { background: #f3f4f6; }
QGroupBox { font-weight: bold; border: 1px solid #b9bfc8; border-radius: 5px; margin-top: 12px; padding-top: 6px; }
QGroupBox::title { subcontrol-origin: margin; left: 8px; padding: 0 4px; color: #0b3d6e; }
QLabel#imageTitle { font-size: 12pt; font-weight: bold; color: #111; padding: 2px 4px; }
QLabel#modeHint { color: #333; padding: 2px 4px; }
QLabel#setupNote { color: #6b2a00; }
QWidget#notice { background: #fbe3d6; border: 1px solid #d99a7a; border-radius: 4px; }
QWidget#notice QLabel { color: #5a1400; }
QTabBar::tab { padding: 6px 16px; }
QTabBar::tab:selected { font-weight: bold; color: #0b3d6e; }
QTableView, QTableWidget { gridline-color: #d5d9df; selection-background-color: #0b4f8a; selection-color: white; }
QHeaderView::section { background: #e4e7eb; padding: 4px; border: 0; border-right: 1px solid #c9ced6; font-weight: bold; }
QPushButton { padding: 5px 12px; }
QToolBar { spacing: 4px; padding: 2px; }
QToolButton { padding: 4px 8px; }
QToolButton:checked { background: #0b4f8a; color: white; border-radius: 3px; }
QProgressBar { border: 1px solid #9aa3ad; border-radius: 3px; text-align: center; }
QProgressBar::chunk { background: #0b4f8a; }
"""


def make_app(argv: Sequence[str] | None = None) -> QApplication:
    app = QApplication.instance()
    if app is None:
        app = QApplication(list(argv) if argv is not None else [sys.argv[0]])
    app.setOrganizationName(ORGANISATION)
    app.setApplicationName(APPLICATION)
    app.setStyle("Fusion")
    pal = app.palette()
    pal.setColor(QPalette.ColorRole.Window, QColor("#f3f4f6"))
    pal.setColor(QPalette.ColorRole.Base, QColor("#ffffff"))
    pal.setColor(QPalette.ColorRole.AlternateBase, QColor("#eef1f5"))
    pal.setColor(QPalette.ColorRole.Text, QColor("#111111"))
    pal.setColor(QPalette.ColorRole.WindowText, QColor("#111111"))
    pal.setColor(QPalette.ColorRole.Highlight, QColor("#0b4f8a"))
    pal.setColor(QPalette.ColorRole.HighlightedText, QColor("#ffffff"))
    app.setPalette(pal)
    f = QFont(app.font())
    f.setPointSizeF(11)
    app.setFont(f)
    app.setStyleSheet(STYLE)
    return app


def run(paths: Sequence[str] = (), *, watch: str | None = None, lot: str | None = None,
        training: bool = False, camera: str | None = None) -> int:
    """Open the window (with ``paths`` loaded) and run until it closes; returns the exit status."""
    app = make_app()
    from .window import MainWindow

    win = MainWindow()
    win.show()
    if paths:
        win.open_paths([os.fspath(p) for p in paths])
    if watch:
        win.start_watch(watch)
    if lot:
        win.tabs.setCurrentWidget(win.lot)
        win.lot.open_folder(lot)
    if training:
        win.tabs.setCurrentWidget(win.training)
    if camera is not None:
        win.tabs.setCurrentWidget(win.live)
        win.live.start(camera)
    _close_on_interrupt(win)
    return int(app.exec())


def _close_on_interrupt(win) -> None:
    """Ctrl+C in the terminal closes the window properly (settings saved, workers finished). Qt's event loop
    does not return to Python on its own, so a timer lets the interpreter see the signal."""
    import signal

    from PySide6.QtCore import QTimer

    signal.signal(signal.SIGINT, lambda *_: win.close())
    timer = QTimer(win)
    timer.timeout.connect(lambda: None)
    timer.start(250)
