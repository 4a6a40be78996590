"""The bench set-up panel: light source, pixel scale, gap medium, test plate, tolerance, operator.

Bound to a :class:`~ringgauge.gui.model.BenchSession` in both directions: an edit updates the session, a
change of the session (loaded settings, undo, a test) updates the widgets.
"""

from __future__ import annotations

from contextlib import contextmanager

from PySide6.QtWidgets import (
    QComboBox,
    QDoubleSpinBox,
    QFormLayout,
    QGroupBox,
    QLabel,
    QLineEdit,
    QVBoxLayout,
    QWidget,
)

from ..errors import RinggaugeError
from ..sources import SOURCES
from . import integrations
from .model import CUSTOM, MEDIA, BenchSession, SetupState


def _spin(lo: float, hi: float, decimals: int, step: float, suffix: str, tip: str) -> QDoubleSpinBox:
    s = QDoubleSpinBox()
    s.setRange(lo, hi)
    s.setDecimals(decimals)
    s.setSingleStep(step)
    s.setSuffix(suffix)
    s.setToolTip(tip)
    s.setKeyboardTracking(False)  # commit when the operator stops typing, not at every digit
    s.setAccessibleName(tip)
    return s


class SetupPanel(QWidget):
    def __init__(self, session: BenchSession, parent=None):
        super().__init__(parent)
        self.session = session
        self._syncing = False
        lay = QVBoxLayout(self)
        lay.setContentsMargins(6, 6, 6, 6)

        # light --------------------------------------------------------------------------------------------
        g = QGroupBox("Light")
        f = QFormLayout(g)
        self.source = QComboBox()
        for key, s in SOURCES.items():
            self.source.addItem(s.name, key)  # its wavelength shows in the row below (short enough to read whole)
        self.source.addItem("Custom wavelength…", CUSTOM)
        self.source.setToolTip("Lamp or laser; its standard air wavelength and uncertainty enter the result")
        f.addRow("Source", self.source)
        self.wavelength = _spin(200, 2000, 4, 0.1, " nm", "Custom source wavelength (standard air), nm")
        self.wavelength_u = _spin(0, 50, 4, 0.001, " nm", "Standard uncertainty of the custom wavelength, nm")
        f.addRow("Wavelength", self.wavelength)
        f.addRow("u(λ)", self.wavelength_u)
        lay.addWidget(g)

        # camera ---------------------------------------------------------------------------------------------
        g = QGroupBox("Camera scale")
        f = QFormLayout(g)
        self.profile = QComboBox()
        f.addRow("Bench profile", self.profile)
        self.pixel = _spin(0.01, 10000, 4, 0.01, " µm", "Object-space pixel size, micrometres per pixel")
        self.pixel_u = _spin(0, 1000, 4, 0.001, " µm", "Standard uncertainty of the pixel size (k = 1)")
        f.addRow("Pixel size", self.pixel)
        f.addRow("u(pixel)", self.pixel_u)
        lay.addWidget(g)

        # gap -----------------------------------------------------------------------------------------------
        g = QGroupBox("Gap")
        f = QFormLayout(g)
        self.medium = QComboBox()
        for key, (label, n, _u) in MEDIA.items():
            self.medium.addItem(f"{label} (n = {n:g})", key)
        self.medium.addItem("Other liquid…", CUSTOM)
        f.addRow("Medium", self.medium)
        self.index = _spin(1.0, 2.5, 4, 0.001, "", "Refractive index of the gap medium")
        self.index_u = _spin(0, 0.1, 4, 0.0005, "", "Standard uncertainty of the index")
        f.addRow("Index n", self.index)
        f.addRow("u(n)", self.index_u)
        self.kind = QComboBox()
        self.kind.addItem("Dark rings (r² = mλR/n)", "dark")
        self.kind.addItem("Bright rings (r² = (m − ½)λR/n)", "bright")
        self.kind.setToolTip("Which rings are counted as fringe orders (in reflection, contact is dark)")
        f.addRow("Count", self.kind)
        lay.addWidget(g)

        # tolerance and decision rule ---------------------------------------------------------------------------
        g = QGroupBox("Verdict")
        f = QFormLayout(g)
        self.radius_tol = QLineEdit()
        self.radius_tol.setPlaceholderText("e.g. 1000 ± 0.5 %")
        self.radius_tol.setToolTip("Radius of curvature tolerance in mm: 1000 ± 5, 1000 ± 0.5 %, 995..1005 or "
                                   "1000 +5/-3. Each part gets pass, fail or conditional (U straddles a limit).")
        self.radius_tol.setAccessibleName("Radius tolerance")
        f.addRow("Radius tol.", self.radius_tol)
        self.rule = QComboBox()
        self.rule.addItem("Simple acceptance", "simple")
        self.rule.addItem("Guard-banded (w = U)", "guard-banded")
        self.rule.setToolTip("Simple acceptance: accepted when the value is within the limits (risk up to about "
                             "50 % at a limit). Guard-banded: accepted only inside the limits by at least U "
                             "(false-accept risk at most about 2.5 %). Either way a result whose U interval "
                             "straddles a limit is marked conditional.")
        f.addRow("Decision rule", self.rule)
        lay.addWidget(g)

        # form --------------------------------------------------------------------------------------------------
        g = QGroupBox("Form against a test plate")
        f = QFormLayout(g)
        self.plate = QComboBox()
        f.addRow("Test plate", self.plate)
        self.tolerance = QLineEdit()
        self.tolerance.setPlaceholderText("e.g. 3/2(0.5)")
        self.tolerance.setToolTip("ISO 10110-5 form tolerance A/B(C), in fringes at the stated wavelength")
        f.addRow("Tolerance", self.tolerance)
        self.diameter = _spin(0, 1000, 2, 0.5, " mm", "Test diameter over which the form is evaluated, mm")
        self.diameter.setSpecialValueText("not set")
        f.addRow("Test diameter", self.diameter)
        self.press = QComboBox()
        self.press.addItem("not done", "")
        self.press.addItem("rings spread outward", "rings-spread")
        self.press.addItem("rings shrink inward", "rings-shrink")
        self.press.setToolTip("What the rings did when the part was pressed gently at its centre; gives the "
                              "sign of power from one frame")
        f.addRow("Press test", self.press)
        self.gap = QComboBox()
        self.gap.addItem("gap grows frame to frame", "increasing")
        self.gap.addItem("gap shrinks frame to frame", "decreasing")
        self.gap.setToolTip("For a frame set: how the gap changed between the frames (gives the sign of power)")
        f.addRow("Frame set", self.gap)
        lay.addWidget(g)

        # who ----------------------------------------------------------------------------------------------------
        g = QGroupBox("Inspection")
        f = QFormLayout(g)
        self.operator = QLineEdit()
        self.operator.setPlaceholderText("initials or name")
        self.details: dict[str, QLineEdit] = {}
        cells = (("serial", "Serial", "image name"), ("part", "Part", ""), ("drawing", "Drawing", ""),
                 ("surface", "Surface", "S1"), ("customer", "Customer", ""), ("order", "Order", ""))
        for key, label, hint in cells:
            e = QLineEdit()
            e.setPlaceholderText(hint)
            e.setAccessibleName(label)
            e.setToolTip(f"{label}: kept with the record and printed on the certificate"
                         + (" (empty: the image's file name)" if key == "serial" else ""))
            self.details[key] = e
            f.addRow(label, e)
        f.addRow("Operator", self.operator)
        lay.addWidget(g)

        for combo in (self.source, self.profile, self.medium, self.kind, self.plate, self.rule, self.press, self.gap):
            # a list shows its choice whole: when it does not fit beside its label it moves below it (rows wrap)
            combo.setSizeAdjustPolicy(QComboBox.SizeAdjustPolicy.AdjustToContents)
        for grp in self.findChildren(QGroupBox):
            if isinstance(grp.layout(), QFormLayout):
                grp.layout().setRowWrapPolicy(QFormLayout.RowWrapPolicy.WrapLongRows)
        self.note = QLabel("")
        self.note.setWordWrap(True)
        self.note.setObjectName("setupNote")
        lay.addWidget(self.note)
        lay.addStretch(1)

        self.reload_lists()
        self.refresh()
        self.source.currentIndexChanged.connect(self._edited)
        self.profile.currentIndexChanged.connect(self._edited)
        self.medium.currentIndexChanged.connect(self._edited)
        self.kind.currentIndexChanged.connect(self._edited)
        self.plate.currentIndexChanged.connect(self._edited)
        for combo in (self.rule, self.press, self.gap):
            combo.currentIndexChanged.connect(self._edited)
        for s in (self.wavelength, self.wavelength_u, self.pixel, self.pixel_u, self.index, self.index_u,
                  self.diameter):
            s.valueChanged.connect(self._edited)
        self.tolerance.editingFinished.connect(self._edited)
        self.radius_tol.editingFinished.connect(self._edited)
        self.operator.editingFinished.connect(self._edited)
        for e in self.details.values():
            e.editingFinished.connect(self._edited)
        session.changed.connect(self._on_session)

    # lists that come from other modules -------------------------------------------------------------------------
    def reload_lists(self) -> None:
        with self._quiet():
            self.profile.clear()
            self.profile.addItem("(none: type the pixel size)", "")
            names = integrations.profile_names()
            for n in names:
                self.profile.addItem(n, n)
            self.profile.setEnabled(bool(names))
            self.profile.setToolTip("Saved calibration of a camera on a bench" if names
                                    else "No bench calibration saved yet: measure one with Tools > Bench "
                                    "calibration…")
            if not names:
                self.profile.setItemText(0, "(none saved: Tools menu)")
            self.plate.clear()
            self.plate.addItem("(none: lens on an optical flat)", "")
            ids = integrations.plate_ids()
            for p in ids:
                self.plate.addItem(p, p)
            self.plate.setEnabled(bool(ids))
            self.plate.setToolTip("Test plate from the register" if ids else "The test-plate register is empty: "
                                  "add plates with Tools > Test plates…")
            if not ids:
                self.plate.setItemText(0, "(none: add in Tools menu)")

    @contextmanager
    def _quiet(self):
        old = self._syncing
        self._syncing = True
        try:
            yield
        finally:
            self._syncing = old

    # session -> widgets -------------------------------------------------------------------------------------
    def _on_session(self, what: str) -> None:
        if what in ("setup", "details", "frames"):  # a new image clears the serial typed for the last one
            self.refresh()

    @staticmethod
    def _select(combo: QComboBox, data) -> None:
        i = combo.findData(data)
        if i < 0 and data:
            combo.addItem(f"{data} (not found)", data)
            i = combo.count() - 1
        combo.setCurrentIndex(max(i, 0))

    def refresh(self) -> None:
        s = self.session.setup
        with self._quiet():
            self._select(self.source, s.source)
            self.wavelength.setValue(s.custom_wavelength_nm)
            self.wavelength_u.setValue(s.custom_wavelength_u_nm)
            custom = s.source == CUSTOM
            self.wavelength.setEnabled(custom)
            self.wavelength_u.setEnabled(custom)
            if not custom:
                src = SOURCES[s.source] if s.source in SOURCES else None
                if src is not None:
                    self.wavelength.setValue(src.wavelength_nm)
                    self.wavelength_u.setValue(src.wavelength_u_nm)
            self._select(self.profile, s.bench_profile)
            px, pu = s.pixel_size_um, s.pixel_size_u_um
            if s.bench_profile:
                try:
                    kw, _ = integrations.profile_setup_kwargs(s.bench_profile)
                    px, pu = kw["pixel_size_um"], kw["pixel_size_u_um"]
                except (RinggaugeError, KeyError):
                    pass
            self.pixel.setValue(px)
            self.pixel_u.setValue(pu)
            self.pixel.setEnabled(not s.bench_profile)
            self.pixel_u.setEnabled(not s.bench_profile)
            self._select(self.medium, s.medium)
            cm = s.medium == CUSTOM
            n, nu = (s.medium_index, s.medium_index_u) if cm else MEDIA.get(s.medium, ("", 1.0, 0.0))[1:]
            self.index.setValue(n)
            self.index_u.setValue(nu)
            self.index.setEnabled(cm)
            self.index_u.setEnabled(cm)
            for w in (self.index, self.index_u):  # a listed medium states its index in the list itself
                w.parentWidget().layout().setRowVisible(w, cm)
            self._select(self.kind, s.fringe_kind)
            self._select(self.plate, s.test_plate)
            self._select(self.rule, s.decision_rule)
            self._select(self.press, s.press_test)
            self._select(self.gap, s.gap_change)
            if self.tolerance.text() != s.tolerance:
                self.tolerance.setText(s.tolerance)
            self.diameter.setValue(s.test_diameter_mm or 0.0)
            if self.operator.text() != s.operator:
                self.operator.setText(s.operator)
            if self.radius_tol.text() != s.radius_tolerance:
                self.radius_tol.setText(s.radius_tolerance)
            for key, e in self.details.items():
                if e.text() != getattr(s, key):
                    e.setText(getattr(s, key))
        self.note.setText(self._note(s))

    def _note(self, s: SetupState) -> str:
        lines = []
        if s.bench_profile:
            try:
                kw, warnings = integrations.profile_setup_kwargs(s.bench_profile)
                lines.append(f"Bench '{s.bench_profile}' calibrated {kw.get('bench_calibrated') or '(no date)'}.")
                lines.extend(warnings)
            except RinggaugeError as exc:
                lines.append(str(exc))
        if s.test_plate:
            try:
                lines.extend(integrations.plate_notes(s.test_plate))
            except RinggaugeError as exc:
                lines.append(str(exc))
        if s.tolerance:
            try:
                integrations.check_tolerance(s.tolerance)
            except RinggaugeError as exc:
                lines.append(f"Tolerance: {exc}")
        if s.radius_tolerance.strip():
            from ..conformity import parse_radius_tolerance

            try:
                lines.append(f"Radius judged against {parse_radius_tolerance(s.radius_tolerance).describe()}.")
            except RinggaugeError as exc:
                lines.append(f"Radius tolerance: {exc}")
        if s.source in SOURCES and SOURCES[s.source].hazard:
            lines.append("Caution: " + SOURCES[s.source].hazard)
        return "\n".join(lines)

    # widgets -> session -------------------------------------------------------------------------------------
    def state_from_widgets(self) -> dict:
        d = {
            "source": self.source.currentData(),
            "bench_profile": self.profile.currentData() or "",
            "medium": self.medium.currentData(),
            "fringe_kind": self.kind.currentData(),
            "test_plate": self.plate.currentData() or "",
            "decision_rule": self.rule.currentData(),
            "press_test": self.press.currentData() or "",
            "gap_change": self.gap.currentData(),
            "tolerance": self.tolerance.text().strip(),
            "test_diameter_mm": self.diameter.value() or None,
            "operator": self.operator.text().strip(),
            "radius_tolerance": self.radius_tol.text().strip(),
            **{key: e.text().strip() for key, e in self.details.items()},
        }
        if not d["bench_profile"]:  # with a profile the fields show its scale and are not the operator's
            d["pixel_size_um"] = self.pixel.value()
            d["pixel_size_u_um"] = self.pixel_u.value()
        if d["source"] == CUSTOM:
            d["custom_wavelength_nm"] = self.wavelength.value()
            d["custom_wavelength_u_nm"] = self.wavelength_u.value()
        if d["medium"] == CUSTOM:
            d["medium_index"] = self.index.value()
            d["medium_index_u"] = self.index_u.value()
        return d

    def _edited(self, *_args) -> None:
        if self._syncing:
            return
        changes = self.state_from_widgets()
        if self.session.setup.bench_profile and not changes["bench_profile"]:
            # leaving a profile: the fields still show its scale; go back to the operator's own values
            changes.pop("pixel_size_um", None)
            changes.pop("pixel_size_u_um", None)
        if changes["bench_profile"] and changes["bench_profile"] != self.session.setup.bench_profile:
            try:  # a newly chosen bench brings its usual lamp and gap medium along
                changes.update(integrations.profile_defaults(changes["bench_profile"]))
            except RinggaugeError:
                pass
        self.session.update_setup(**changes)
