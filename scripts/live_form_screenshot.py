"""Screenshots of the window's Live page following a part on a test plate, from a real window on a virtual screen.

    QT_QPA_PLATFORM=xcb xvfb-run -a -s "-screen 0 1280x800x24" .venv/bin/python scripts/live_form_screenshot.py [OUT]

Writes live-form-moving.png (the part pressed, the fringes moving) and live-form-settled.png (settled, power with
its sign). Demo scenario (invented): a convex test piece of lot PL-0417 on the mercury-lamp test-plate bench of a
fictional optics shop; the video comes from ringgauge's own generator, so nothing here is a check value.
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
from pathlib import Path

OUT = Path(sys.argv[1] if len(sys.argv) > 1 else "resources/screenshots")


def main() -> int:
    home = tempfile.mkdtemp(prefix="rg-live-form-shots-")
    os.environ["RINGGAUGE_HOME"] = home
    from ringgauge import synth
    from ringgauge.live.form_sequence import FormPlan, write_form_sequence
    from ringgauge.live.sequence import SequencePlan

    video = Path(home) / "pl0417-piece3.avi"
    plan = FormPlan(power_fringes=2.5, astigmatism_fringes=0.6, axis_deg=30.0, contact="centre",
                    base=SequencePlan(settle_frames=30, rest_frames=14, press_frames=14, after_frames=14))
    write_form_sequence(video, plan, camera=synth.Camera(width=512, height=512, pixel_um=50.0), rng=5)

    from PySide6.QtGui import QGuiApplication
    from PySide6.QtWidgets import QApplication

    from ringgauge.gui.app import make_app
    from ringgauge.gui.model import BenchSession, SetupState
    from ringgauge.gui.prefs import Prefs
    from ringgauge.gui.window import MainWindow

    app = make_app()
    s = BenchSession(None, SetupState(source="mercury-e", pixel_size_um=50.0, pixel_size_u_um=0.05,
                                      test_diameter_mm=16.0))
    w = MainWindow(s, prefs=Prefs(str(Path(home) / "shots.ini")), autosave=False)
    w.resize(1280, 800)
    w.show()
    w.tabs.setCurrentWidget(w.live)
    OUT.mkdir(parents=True, exist_ok=True)

    def pump(until, limit=300.0):
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
    pump(lambda: (st := w.live.session.latest) is not None and st.frame >= 47 and not st.settled and st.ok)
    w.live.stop()
    w.live.refresh()
    shot("live-form-moving.png")
    w.live.start(str(video))
    pump(lambda: w.live.session.ended)
    w.live.refresh()
    shot("live-form-settled.png")
    w.live.stop()
    w.close()
    QApplication.processEvents()
    return 0


if __name__ == "__main__":
    sys.exit(main())
