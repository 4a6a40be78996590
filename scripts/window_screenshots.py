"""Screenshots of the bench window's main screens, taken from a real window on a virtual screen.

    QT_QPA_PLATFORM=xcb xvfb-run -a -s "-screen 0 1280x800x24" .venv/bin/python scripts/window_screenshots.py [OUT_DIR]
    QT_QPA_PLATFORM=xcb xvfb-run -a -s "-screen 0 1024x700x24" .venv/bin/python scripts/window_screenshots.py [OUT_DIR]

On a screen narrower than 1200 px the files get the ending "-1024" (bench-1024.png, ...).

Demo scenario (invented): the optics shop "Kestrel Lane Optics" checks lot KL-2611 of plano-convex lenses on bench 2
under a sodium lamp; operator initials "J.V.". Images come from ringgauge.synth, so nothing here is a check value.
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
from pathlib import Path

OUT = Path(sys.argv[1] if len(sys.argv) > 1 else "resources/screenshots")


def main() -> int:
    home = tempfile.mkdtemp(prefix="rg-shots-")
    os.environ["RINGGAUGE_HOME"] = home
    import cv2
    import numpy as np

    from ringgauge import synth

    lot = Path(home) / "lot-KL-2611"
    lot.mkdir()
    g = np.random.default_rng(2611)
    for i in range(8):
        R = float(g.normal(820.0, 6.0))
        cam = synth.Camera(width=800, height=640, pixel_um=9.8, blur_px=0.7)
        img = synth.newton_rings(R, camera=cam, centre_px=(float(g.uniform(360, 440)), float(g.uniform(290, 350))),
                                 contact_offset_nm=float(g.uniform(0, 80)), dust=synth.Dust(count=int(g.integers(0, 3))),
                                 rng=int(g.integers(1 << 30)))
        cv2.imwrite(str(lot / f"KL2611-{i + 1:03d}.png"), img.image)
    (lot / "KL2611-009.png").write_bytes(b"\x89PNG interrupted transfer")

    from PySide6.QtGui import QGuiApplication

    from ringgauge.gui.app import make_app
    from ringgauge.gui.model import SetupState
    from ringgauge.gui.window import MainWindow

    app = make_app()
    win = MainWindow()
    win.session.replace_setup(SetupState(source="sodium-d", pixel_size_um=9.8, pixel_size_u_um=0.01,
                                         operator="J.V."))
    win.bench.setup_panel.refresh()
    win.showMaximized()
    # without a window manager (Xvfb) "maximised" is not applied: fill the screen by hand
    win.setGeometry(QGuiApplication.primaryScreen().availableGeometry())
    OUT.mkdir(parents=True, exist_ok=True)

    def pump(seconds: float, until=None) -> None:
        t = time.time()
        while time.time() - t < seconds:
            app.processEvents()
            time.sleep(0.02)
            if until is not None and until():
                break
        for _ in range(10):
            app.processEvents()

    small = QGuiApplication.primaryScreen().size().width() < 1200

    def shot(name: str) -> None:
        if small:
            name = name.replace(".png", "-1024.png")
        pump(0.5)
        pix = QGuiApplication.primaryScreen().grabWindow(0)
        pix.save(str(OUT / name))
        try:  # a 256-colour palette keeps the files small; the screens use few colours
            from PIL import Image

            Image.open(OUT / name).convert("RGB").quantize(256, dither=Image.Dither.NONE).save(OUT / name,
                                                                                              optimize=True)
        except ImportError:
            pass
        print("wrote", OUT / name, pix.width(), "x", pix.height(), (OUT / name).stat().st_size // 1024, "kB")

    # 1. the bench: one lens analysed
    win.open_paths([str(lot / "KL2611-003.png")])
    pump(120, lambda: win.session.result is not None or win.session.error is not None)
    if win.session.error:
        print("analysis failed:", win.session.error)
    win.bench.view.fit()
    shot("bench.png")

    # 2. the residual view and the radial profile
    win.a_residual.trigger()
    win.bench.plots.setCurrentIndex(1)
    pump(60, lambda: "Residual view" in win.bench.hint.text())
    shot("bench-residual.png")
    win.a_residual.trigger()
    win.bench.plots.setCurrentIndex(0)

    # 3. a failed file: the message, not a crash
    win.open_paths([str(lot / "KL2611-009.png")])
    shot("bench-bad-file.png")

    # 4. form against a test plate: a frame pair (gap grown by λ/8 in the second) gives the sign
    from ringgauge.form import plates

    plates.add_plate({"id": "TP-KL-07", "radius_mm": 51.68, "kind": "concave", "radius_u_mm": 0.002,
                      "calibrated": "2026-05-12", "note": "bench 2 set"})
    part = Path(home) / "part-KL2611-041"
    part.mkdir()
    for i, step in enumerate((0.0, 0.25)):
        form = synth.SurfaceForm(power=1.7, astig=0.35, astig_axis_deg=25.0, piston=0.3 + step)
        img = synth.test_plate_fringes(form, aperture_diameter_mm=20.0, source="mercury-e",
                                       camera=synth.Camera(width=400, height=400, pixel_um=75.0), rng=41)
        cv2.imwrite(str(part / f"frame-{'AB'[i]}.png"), img.image)
    win.session.replace_setup(SetupState(source="mercury-e", pixel_size_um=75.0, pixel_size_u_um=0.05,
                                         operator="J.V.", test_plate="TP-KL-07", tolerance="3/2(0.5)",
                                         test_diameter_mm=18.0))
    win.bench.setup_panel.reload_lists()
    win.bench.setup_panel.refresh()
    win.open_paths([str(part / "frame-A.png"), str(part / "frame-B.png")])
    pump(300, lambda: win.session.result is not None or win.session.error is not None)
    if win.session.error:
        print("form analysis failed:", win.session.error)
    win.bench.plots.setCurrentIndex(2)
    win.bench.view.fit()
    shot("bench-form-verdict.png")
    win.bench.plots.setCurrentIndex(0)
    shot("bench-form-profile.png")  # a form job: the r² tab shows the form along the radius

    # 4b. the registers: test plates and bench calibration (Tools menu)
    win.plates_dialog()
    shot("tools-test-plates.png")
    win._plates.close()
    win.calibration_dialog()
    dlg = win._calibration
    # the bundled stage-micrometer photograph (100 µm divisions; invented sample data)
    target = Path(__file__).resolve().parents[1] / "sample_images" / "calibration" / "stage-micrometer-100um.png"
    dlg.images.setText(str(target))
    dlg.size.setText("100")
    dlg.size_u.setText("0.05")
    dlg.bench.setCurrentText("Bench 2")
    dlg.measure()
    pump(60, lambda: dlg.result is not None or "Measuring" not in dlg.message.text())
    shot("tools-calibration.png")
    dlg.close()

    # 5. the lot review (lenses on the optical flat again; the bench keeps its last result meanwhile)
    win.a_auto.trigger()  # automatic re-analysis off
    win.session.replace_setup(SetupState(source="sodium-d", pixel_size_um=9.8, pixel_size_u_um=0.01,
                                         operator="J.V."))
    win.tabs.setCurrentWidget(win.lot)
    win.lot.open_folder(str(lot))
    pump(600, lambda: not win.lot.running)
    win.lot.select_row(2)
    shot("lot-review.png")

    # 6. training: an exercise, a reading and its score
    win.tabs.setCurrentWidget(win.training)
    tp = win.training
    tp.trainee.setText("New starter 1")
    tp.level.setCurrentIndex(tp.level.findData("bench"))
    ex = tp.new_exercise(seed=14)
    shot("training-exercise.png")
    t = ex.truth
    tp.count.setValue(t["fringe_count"])
    tp.power.setValue(round(t["power_fringes"] + 0.5, 1))
    tp.astig.setValue(round(t["astigmatism_fringes"], 1))
    tp.sign_buttons[t["sign"]].setChecked(True)
    tp.radius.setValue(round(t["part_radius_mm"], 3))
    tp.irreg.setValue(round(t["irregularity_fringes"], 1))
    tp.score_reading()
    shot("training-scored.png")
    tp.tabs.setCurrentIndex(1)
    shot("training-review.png")
    tp.tabs.setCurrentIndex(0)

    # 7. help with the bench safety cautions
    win.tabs.setCurrentWidget(win.bench)
    win.show_help()
    shot("help-safety.png")
    win._help.close()
    win.close()
    return 0


if __name__ == "__main__":
    sys.exit(main())
