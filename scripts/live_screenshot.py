"""Screenshots of the window's Live page playing a generated bench sequence, from a real window on a virtual screen.

    QT_QPA_PLATFORM=xcb xvfb-run -a -s "-screen 0 1280x800x24" .venv/bin/python scripts/live_screenshot.py [OUT_DIR]

Writes live-moving.png (rings moving out while the part is pressed) and live-settled.png (settled, sign read).
Demo scenario (invented): a plano-convex lens laid on the optical flat of bench 2 under a sodium lamp; the video
is drawn by ringgauge's own generator, so nothing here is a check value.
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
from pathlib import Path

OUT = Path(sys.argv[1] if len(sys.argv) > 1 else "resources/screenshots")


def main() -> int:
    home = tempfile.mkdtemp(prefix="rg-live-shots-")
    os.environ["RINGGAUGE_HOME"] = home
    from ringgauge import synth
    from ringgauge.live.sequence import SequencePlan, write_sequence

    video = Path(home) / "bench2-lens.avi"
    write_sequence(video, SequencePlan(radius_mm=400.0, contact="centre"), source="sodium-d",
                   camera=synth.Camera(width=640, height=512, pixel_um=8.0), rng=7)

    from PySide6.QtGui import QGuiApplication
    from PySide6.QtWidgets import QApplication

    from ringgauge.gui.app import make_app
    from ringgauge.gui.model import BenchSession, SetupState
    from ringgauge.gui.prefs import Prefs
    from ringgauge.gui.window import MainWindow

    app = make_app()
    s = BenchSession(None, SetupState(source="sodium-d", pixel_size_um=8.0, pixel_size_u_um=0.004))
    w = MainWindow(s, prefs=Prefs(str(Path(home) / "shots.ini")), autosave=False)
    w.resize(1280, 800)
    w.show()
    w.tabs.setCurrentWidget(w.live)
    OUT.mkdir(parents=True, exist_ok=True)

    def pump(until, limit=120.0):
        t = time.monotonic()
        while not until() and time.monotonic() - t < limit:
            app.processEvents()
            time.sleep(0.01)

    def shot(name):
        for _ in range(10):
            app.processEvents()
            time.sleep(0.02)
        QGuiApplication.primaryScreen().grabWindow(0).save(str(OUT / name))
        print(f"wrote {OUT / name}")

    w.live.start(str(video))
    # mid-press: the rings moving out, the sign already read while the part settled
    pump(lambda: (st := w.live.session.latest) is not None and st.frame >= 59 and st.rings == "out")
    w.live.stop()
    w.live.refresh()
    shot("live-moving.png")
    w.live.start(str(video))
    pump(lambda: w.live.session.ended)
    w.live.refresh()
    shot("live-settled.png")
    w.live.stop()
    w.close()
    QApplication.processEvents()
    return 0


if __name__ == "__main__":
    sys.exit(main())
