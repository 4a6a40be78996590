"""Running work off the GUI thread: a QThreadPool task that reports progress and hands back its outcome by
queued signals, so the window never freezes and widgets only redraw."""

from __future__ import annotations

import traceback
from typing import Any, Callable

from PySide6.QtCore import QObject, QRunnable, QThreadPool, Signal

from ..errors import RinggaugeError
from .model import _Cancelled


class TaskSignals(QObject):
    progress = Signal(object, float, str)  # token, fraction, message
    finished = Signal(object, object)  # token, result
    failed = Signal(object, str)  # token, one-line message
    cancelled = Signal(object)


def describe_failure(exc: BaseException) -> str:
    """One line for the operator: the engine's own message, or an internal error with a log file."""
    if isinstance(exc, RinggaugeError):
        return str(exc)
    if isinstance(exc, MemoryError):
        return "out of memory; try a smaller image"
    try:
        from ..settings import path

        log = path("crash.log")
        with open(log, "a", encoding="utf-8") as fh:
            fh.write("".join(traceback.format_exception(exc)))
            fh.write("\n")
        where = f"details in {log}"
    except Exception:  # noqa: BLE001 - logging must never hide the message itself
        where = "no log could be written"
    return f"internal error ({type(exc).__name__}: {exc}); {where} — please report it"


class _Task(QRunnable):
    def __init__(self, token, fn: Callable[[Callable[[float, str], None]], Any], signals: TaskSignals):
        super().__init__()
        self.setAutoDelete(True)
        self.token = token
        self.fn = fn
        self.signals = signals

    def run(self) -> None:  # runs in a pool thread
        s = self.signals
        try:
            result = self.fn(lambda f, m: s.progress.emit(self.token, float(f), str(m)))
        except _Cancelled:
            s.cancelled.emit(self.token)
        except BaseException as exc:  # noqa: BLE001 - every failure becomes a message, never a crash
            s.failed.emit(self.token, describe_failure(exc))
        else:
            s.finished.emit(self.token, result)


class Runner(QObject):
    """Runs callables ``fn(progress)`` one at a time (the machine is shared) on its own thread pool.

    Connect to ``signals.progress / finished / failed / cancelled``; each carries the token given to
    :meth:`submit`.
    """

    def __init__(self, parent: QObject | None = None, *, threads: int = 1):
        super().__init__(parent)
        self.pool = QThreadPool(self)
        self.pool.setMaxThreadCount(threads)
        self.signals = TaskSignals(self)

    def submit(self, token, fn) -> None:
        self.pool.start(_Task(token, fn, self.signals))

    def wait(self, msecs: int = 30000) -> bool:
        return self.pool.waitForDone(msecs)
