"""Plots of a result with matplotlib's Qt canvas: r² against fringe order with the fitted line and its
residuals, the radial profile with its extrema, and the surface-form map with a colour scale."""

from __future__ import annotations

import os

os.environ.setdefault("QT_API", "pyside6")

import numpy as np  # noqa: E402
from matplotlib.backends.backend_qtagg import FigureCanvasQTAgg  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from PySide6.QtCore import Qt  # noqa: E402
from PySide6.QtWidgets import QLabel, QStackedWidget, QTabWidget  # noqa: E402

from . import display  # noqa: E402

# Okabe & Ito (2008) colours, as in the image view
C_DARK = "#E69F00"
C_BRIGHT = "#0072B2"
C_LINE = "#222222"
C_OUT = "#D55E00"

_RC = {"font.size": 10.5, "axes.grid": True, "grid.alpha": 0.3}


class PlotCanvas(QStackedWidget):
    """A matplotlib figure with a plain-text stand-in while there is nothing to plot (cheap to show)."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.figure = Figure(figsize=(5, 3.2), dpi=96)
        self.canvas = FigureCanvasQTAgg(self.figure)
        self.label = QLabel("")
        self.label.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self.label.setWordWrap(True)
        self.label.setStyleSheet("color: #555555;")
        self.addWidget(self.label)
        self.addWidget(self.canvas)
        self.setMinimumHeight(140)
        self.has_data = False

    def empty(self, text: str) -> None:
        self.label.setText(text)
        self.setCurrentWidget(self.label)
        self.has_data = False

    def shown(self) -> None:
        self.has_data = True
        self.setCurrentWidget(self.canvas)
        self.canvas.draw_idle()


class PlotPanel(QTabWidget):
    """Three tabs of plots; :meth:`show_result` redraws them from a typed result. Only the tab in view is drawn
    at once; the others are drawn when they are opened (matplotlib drawing is the slow part)."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.rings = PlotCanvas(self)
        self.profile = PlotCanvas(self)
        self.form = PlotCanvas(self)
        self.addTab(self.rings, "r² against order")
        self.addTab(self.profile, "Radial profile")
        self.addTab(self.form, "Form map")
        self._pending: dict[int, tuple] = {}
        self.currentChanged.connect(self._draw_pending)
        self.clear()

    def clear(self) -> None:
        self._pending.clear()
        for c in (self.rings, self.profile, self.form):
            c.empty("no result yet")

    def show_result(self, result, *, shape=None) -> None:
        """``result``: an :class:`~ringgauge.result.AnalysisResult` or None; ``shape`` the image's (rows, columns)."""
        self._pending = {0: (self._rings, (result, shape)), 1: (self._profile, (result,)),
                         2: (self._form, (result, shape))}
        # state what each tab will hold now, draw the visible one now and the rest when opened
        self.rings.has_data = display.ring_plot_data(result) is not None
        self.profile.has_data = display.profile_plot_data(result) is not None
        self._draw_pending(self.currentIndex())

    def _draw_pending(self, index: int) -> None:
        job = self._pending.pop(index, None)
        if job is None:
            return
        import matplotlib

        fn, args = job
        with matplotlib.rc_context(_RC):
            fn(*args)

    def draw_all(self) -> None:
        for i in list(self._pending):
            self._draw_pending(i)

    def _rings(self, result, shape=None) -> None:
        data = display.ring_plot_data(result)
        c = self.rings
        if data is None:
            self._form_profile(result, shape)
            return
        c.figure.clear()
        ax, axr = c.figure.subplots(2, 1, sharex=True, height_ratios=[3, 1.3])
        c.figure.subplots_adjust(left=0.15, right=0.97, top=0.96, bottom=0.14, hspace=0.08)
        m, r2, used = data["order"], data["r2_mm2"], data["used"]
        ax.errorbar(m[used], r2[used], yerr=data["u_r2_mm2"][used], fmt="o", ms=4, color=C_DARK,
                    label="ring (used)", zorder=3)
        if (~used).any():
            ax.plot(m[~used], r2[~used], "x", ms=6, color=C_OUT, label="ring (left out)", zorder=3)
        if data["slope_mm2"] is not None and data["intercept_mm2"] is not None:
            xs = np.linspace(min(0.0, m.min()), m.max() + 0.5, 50)
            ax.plot(xs, data["slope_mm2"] * xs + data["intercept_mm2"], "-", color=C_LINE, lw=1.2,
                    label=f"fit: {data['slope_mm2']:.5g} mm² per fringe")
        ax.set_ylabel("r² / mm²")
        ax.legend(loc="upper left", fontsize=9)
        axr.axhline(0, color=C_LINE, lw=0.8)
        axr.plot(m[used], data["residual_um2"][used], "o", ms=4, color=C_DARK)
        if (~used).any():
            axr.plot(m[~used], data["residual_um2"][~used], "x", ms=6, color=C_OUT)
        axr.set_ylabel("residual / µm²")
        axr.set_xlabel("fringe order m")
        c.shown()

    def _form_profile(self, result, shape) -> None:
        """A form job has no ring orders: show the form along the radius instead, and say why."""
        c = self.rings
        has_form = result is not None and result.form is not None
        prof = display.form_profile(display.form_map(result, shape)) if has_form else None
        if prof is None:
            c.empty("Not a ring-radius job: r² against fringe order belongs to Newton's rings on an optical flat. "
                    "This result has no rings to plot." if result is not None else "no result yet")
            return
        c.figure.clear()
        ax = c.figure.add_subplot(111)
        c.figure.subplots_adjust(left=0.15, right=0.97, top=0.88, bottom=0.2)
        ax.fill_between(prof["r_mm"], prof["lo_nm"], prof["hi_nm"], color=C_BRIGHT, alpha=0.2,
                        label="lowest to highest around the ring")
        ax.plot(prof["r_mm"], prof["mean_nm"], "-", color=C_BRIGHT, lw=1.5, label="mean around the ring")
        ax.axhline(0, color=C_LINE, lw=0.8)
        ax.set_xlabel("radius on the part r / mm")
        ax.set_ylabel("form / nm")
        ax.set_title("Form job, no ring orders: the form map (less piston, tilt) along the radius", fontsize=9)
        ax.legend(loc="best", fontsize=8)
        try:
            c.figure.tight_layout(pad=0.3)  # a short strip: keep the axis titles inside it
        except ValueError:
            pass
        c.shown()

    def _profile(self, result) -> None:
        data = display.profile_plot_data(result)
        c = self.profile
        if data is None:
            c.empty("this result carries no radial profile")
            return
        c.figure.clear()
        ax = c.figure.add_subplot(111)
        c.figure.subplots_adjust(left=0.15, right=0.97, top=0.96, bottom=0.14)
        ax.plot(data["r_px"], data["intensity"], "-", color=C_BRIGHT, lw=1.0, label="mean intensity")
        ex = data["extrema_r_px"]
        if ex.size:
            yi = np.interp(ex, data["r_px"], data["intensity"])
            ax.plot(ex, yi, "v", color=C_DARK, ms=6, label="detected extrema")
        ax.set_xlabel(data["xlabel"])
        ax.set_ylabel("intensity (full scale = 1)")
        ax.legend(loc="upper right", fontsize=9)
        c.shown()

    def _form(self, result, shape) -> None:
        data = display.form_map(result, shape)
        c = self.form
        if data is None or not np.isfinite(data["gap_nm"]).any():
            c.empty("no form map for this result")
            return
        c.figure.clear()
        ax = c.figure.add_subplot(111)
        c.figure.subplots_adjust(left=0.12, right=0.92, top=0.88, bottom=0.16)
        if "extent_mm" in data:
            # millimetres on the part from the aperture's centre; +y up (image rows run down)
            im = ax.imshow(data["gap_nm"], extent=data["extent_mm"], cmap="cividis", interpolation="nearest")
            ax.set_xlabel("x / mm")
            ax.set_ylabel("y / mm (up)")
        else:
            im = ax.imshow(data["gap_nm"], extent=data["extent_px"], cmap="cividis", interpolation="nearest")
            ax.set_xlabel("x / px")
            ax.set_ylabel("y / px")
        ax.set_aspect("equal")
        ax.set_title(data["title"], fontsize=10)
        cb = c.figure.colorbar(im, ax=ax, shrink=0.9)
        cb.set_label("gap / nm")
        c.shown()
