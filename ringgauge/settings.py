"""Where ringgauge keeps the user's files: settings, bench profiles, test-plate register, records store.

``RINGGAUGE_HOME`` overrides the base folder (tests and demos use it); otherwise the platform's user data
folder is used.
"""

from __future__ import annotations

import os
from pathlib import Path


def home() -> Path:
    env = os.environ.get("RINGGAUGE_HOME")
    if env:
        p = Path(env).expanduser()
    else:
        from platformdirs import user_data_dir

        p = Path(user_data_dir("ringgauge", appauthor=False))
    p.mkdir(parents=True, exist_ok=True)
    return p


def path(name: str) -> Path:
    """A file in the user's ringgauge folder, e.g. ``path('benches.json')``."""
    return home() / name
