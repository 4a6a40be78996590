"""Settings that persist between runs (set-up, recent files, window layout), kept with QSettings in an INI
file under ``ringgauge.settings.home()`` — so ``RINGGAUGE_HOME`` moves them too."""

from __future__ import annotations

import json
import os

from PySide6.QtCore import QSettings

from ..settings import path
from .model import SetupState

ORGANISATION = "ringgauge"
APPLICATION = "bench-window"
MAX_RECENT = 10


class Prefs:
    def __init__(self, filename: str | None = None):
        self.file = filename or str(path(f"{APPLICATION}.ini"))
        self.qs = QSettings(self.file, QSettings.Format.IniFormat)

    # set-up -------------------------------------------------------------------------------------------
    def load_setup(self) -> SetupState:
        raw = self.qs.value("setup/state", "")
        try:
            data = json.loads(raw) if isinstance(raw, str) and raw else None
        except json.JSONDecodeError:
            data = None
        return SetupState.from_dict(data)

    def save_setup(self, state: SetupState) -> None:
        self.qs.setValue("setup/state", json.dumps(state.to_dict()))
        self.qs.sync()

    # recent files ---------------------------------------------------------------------------------------
    def recent(self) -> list[str]:
        raw = self.qs.value("files/recent", "")
        try:
            items = json.loads(raw) if isinstance(raw, str) and raw else []
        except json.JSONDecodeError:
            items = []
        return [p for p in items if isinstance(p, str)]

    def add_recent(self, p: str) -> list[str]:
        p = os.path.abspath(p)
        items = [p] + [q for q in self.recent() if q != p]
        items = items[:MAX_RECENT]
        self.qs.setValue("files/recent", json.dumps(items))
        self.qs.sync()
        return items

    # anything else ---------------------------------------------------------------------------------------
    def get(self, key: str, default=None):
        v = self.qs.value(key, default)
        return default if v is None else v

    def set(self, key: str, value) -> None:
        self.qs.setValue(key, value)
