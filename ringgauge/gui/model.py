"""The bench session as plain Python: set-up, frames, manual overrides, the latest result — no Qt.

The window observes a :class:`BenchSession` through its ``changed`` signal and only redraws; the analysis
itself runs through :meth:`BenchSession.make_job`, a snapshot that a worker thread can run while the operator
keeps editing. A result that arrives for an outdated snapshot is dropped, so what the window shows always
belongs to the set-up and frames it shows.
"""

from __future__ import annotations

import math
import os
from dataclasses import asdict, dataclass, fields, is_dataclass, replace
from typing import Any, Callable, Sequence

from ..bench_setup import BenchSetup
from ..errors import AnalysisError, InputError, RinggaugeError
from ..imaging import IMAGE_SUFFIXES, Frame, load_frame
from ..setup_options import SetupOptions, build_setup, inspection_pairs

ProgressFn = Callable[[float, str], None]
AnalyseFn = Callable[..., Any]


class Signal:
    """A minimal observer list: ``connect(fn)``, ``disconnect(fn)``, ``emit(*args)``."""

    def __init__(self):
        self._subscribers: list[Callable] = []

    def connect(self, fn: Callable) -> None:
        if fn not in self._subscribers:
            self._subscribers.append(fn)

    def disconnect(self, fn: Callable) -> None:
        if fn in self._subscribers:
            self._subscribers.remove(fn)

    def emit(self, *args) -> None:
        for fn in list(self._subscribers):
            fn(*args)


# Gap media offered by the set-up panel: (label, index, standard uncertainty). The wavelengths in
# ringgauge.sources are standard-air values, so an air gap has index 1 relative to them.
# Water: n_D = 1.333 at 20 °C — from memory; u covers temperature and dispersion over the visible lines.
MEDIA: dict[str, tuple[str, float, float]] = {
    "air": ("Air", 1.0, 0.0),
    "water": ("Water (20 °C)", 1.333, 0.001),
}

CUSTOM = "custom"


def _as_float(what: str, value, *, allow_none: bool = False) -> float | None:
    if value is None or (isinstance(value, str) and not value.strip()):
        if allow_none:
            return None
        raise InputError(f"{what} is empty; enter a number")
    try:
        v = float(str(value).replace(",", ".")) if isinstance(value, str) else float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what} must be a number, got {value!r}") from None
    if not math.isfinite(v):
        raise InputError(f"{what} must be a finite number, got {value!r}")
    return v


#: set-up fields that say who and what the part is, not how it is measured
DETAIL_FIELDS = frozenset({"serial", "part", "drawing", "surface", "customer", "order", "operator"})


@dataclass
class SetupState:
    """What the set-up panel edits, as plain values (persisted between runs as a dict)."""

    source: str = "mercury-e"  # a key of ringgauge.sources.SOURCES, or "custom"
    custom_wavelength_nm: float = 589.0
    custom_wavelength_u_nm: float = 0.01
    custom_fwhm_nm: float = 0.0
    bench_profile: str = ""  # name of a saved bench calibration profile; "" = typed pixel size
    pixel_size_um: float = 10.0
    pixel_size_u_um: float = 0.05
    medium: str = "air"  # a key of MEDIA, or "custom"
    medium_index: float = 1.0
    medium_index_u: float = 0.0
    fringe_kind: str = "dark"
    test_plate: str = ""  # id in the test-plate register; "" = none (radius against an optical flat)
    tolerance: str = ""  # ISO 10110-5 form tolerance, e.g. "3/2(0.5)"
    test_diameter_mm: float | None = None
    decision_rule: str = "simple"  # "simple" or "guard-banded"
    press_test: str = ""  # "", "rings-spread" or "rings-shrink": what the rings did when the part was pressed
    gap_change: str = "increasing"  # how the gap changed from frame to frame in a frame set
    operator: str = ""
    radius_tolerance: str = ""  # e.g. "1000 ± 5", "1000 ± 0.5 %", "995..1005" (ringgauge.conformity)
    # inspection details kept with the record and printed on the certificate; serial "" = the image's name
    serial: str = ""
    part: str = ""
    drawing: str = ""
    surface: str = ""
    customer: str = ""
    order: str = ""

    def to_dict(self) -> dict:
        return asdict(self)

    def inspection_details(self) -> dict:
        """The inspection details the operator typed, as record fields (``order`` -> ``order_ref``)."""
        pairs = {"serial": self.serial, "part": self.part, "drawing": self.drawing, "surface": self.surface,
                 "customer": self.customer, "order_ref": self.order}
        return {k: v.strip() for k, v in pairs.items() if isinstance(v, str) and v.strip()}

    @classmethod
    def from_dict(cls, data: dict | None) -> "SetupState":
        """Rebuild from saved values; unknown keys and values of the wrong type fall back to the defaults."""
        base = cls()
        if not isinstance(data, dict):
            return base
        kw = {}
        for f in fields(cls):
            if f.name not in data:
                continue
            v, default = data[f.name], getattr(base, f.name)
            if isinstance(default, str):
                ok = isinstance(v, str)
            elif default is None or isinstance(default, float):
                ok = v is None and f.name == "test_diameter_mm" or isinstance(v, (int, float)) and not isinstance(v, bool)
                if ok and v is not None:
                    v = float(v)
                    ok = math.isfinite(v)
            else:
                ok = False
            if ok:
                kw[f.name] = v
        return replace(base, **kw)

    # -- derived values -------------------------------------------------------------------------------
    def index(self) -> tuple[float, float]:
        if self.medium in MEDIA:
            _, n, u = MEDIA[self.medium]
            return n, u
        if self.medium != CUSTOM:
            raise InputError(f"unknown gap medium '{self.medium}'; choose {', '.join(MEDIA)} or custom")
        return _as_float("gap medium index", self.medium_index), _as_float("index uncertainty", self.medium_index_u)

    def to_options(self, *, overrides: "Overrides | None" = None, motion_sign: dict | None = None) -> SetupOptions:
        """The panel's choices (and the hand settings, and the live view's sign evidence) as typed set-up options;
        raises :class:`InputError` with the panel's wording for a field that is not a number."""
        src: dict[str, Any] = {"source": self.source}
        if self.source == CUSTOM:
            src = dict(wavelength_nm=_as_float("wavelength", self.custom_wavelength_nm),
                       wavelength_u_nm=_as_float("wavelength uncertainty", self.custom_wavelength_u_nm),
                       bandwidth_nm=_as_float("source bandwidth", self.custom_fwhm_nm) or 0.0)
        scale: dict[str, Any] = {"bench": self.bench_profile}
        if not self.bench_profile:
            scale = dict(pixel_size_um=_as_float("pixel size", self.pixel_size_um),
                         pixel_size_u_um=_as_float("pixel size uncertainty", self.pixel_size_u_um))
        n, nu = self.index()  # the panel's gap medium wins over a bench profile's suggestion
        diameter = _as_float("test diameter", self.test_diameter_mm, allow_none=True)
        if diameter is not None and diameter <= 0:
            diameter = None  # no test diameter: the form is evaluated over the clear aperture found, as on the CLI
        ov = overrides or Overrides()
        return SetupOptions(
            **src, **scale, medium_index=n, medium_index_u=nu, fringe_kind=self.fringe_kind,
            test_diameter_mm=diameter, tolerance=self.tolerance.strip() or None,
            test_plate=self.test_plate or None, press_test=self.press_test or None,
            decision_rule=self.decision_rule or "simple", gap_change=self.gap_change,
            radius_tolerance=self.radius_tolerance.strip() or None,
            centre_px=ov.centre_px, aperture_px=ov.aperture_px, aperture_size="radius",
            operator=self.operator.strip() or None, inspection=tuple(self.inspection_details().items()), motion_sign=motion_sign,
        )

    def to_bench_setup(self, *, overrides: "Overrides | None" = None, motion_sign: dict | None = None) -> BenchSetup:
        """Build the engine's :class:`BenchSetup` through the one set-up builder (the command line's too); raises
        :class:`InputError` with a one-line message. A bench profile's warnings travel in ``bench_warnings``."""
        setup, _warnings = build_setup(self.to_options(overrides=overrides, motion_sign=motion_sign))
        return setup


@dataclass(frozen=True)
class Overrides:
    """Manual help for hard images: the ring centre and the evaluated aperture, in pixels (x = column)."""

    centre_px: tuple[float, float] | None = None
    aperture_px: tuple[float, float, float] | None = None  # centre x, centre y, radius

    @property
    def empty(self) -> bool:
        return self.centre_px is None and self.aperture_px is None

    def describe(self) -> str:
        parts = []
        if self.centre_px is not None:
            parts.append(f"centre set by hand at x = {self.centre_px[0]:.1f} px, y = {self.centre_px[1]:.1f} px")
        if self.aperture_px is not None:
            x, y, r = self.aperture_px
            parts.append(f"aperture set by hand: radius {r:.1f} px about ({x:.1f}, {y:.1f}) px")
        return "; ".join(parts) or "no manual settings"


def with_bench_warnings(result):
    """The result with its set-up's bench-profile warnings (calibration overdue, y scale not measured) at the head
    of its own, as the command line prints them: the window's warnings list, the saved JSON and the record then
    show them. A result that already carries them (a lot's stored one) is returned as it is."""
    setup = getattr(result, "setup", None)
    have = tuple(getattr(result, "warnings", None) or ())
    extra = tuple(w for w in (getattr(setup, "bench_warnings", None) or ()) if w not in have)
    if not extra or not is_dataclass(result) or not hasattr(result, "warnings"):
        return result
    return replace(result, warnings=extra + have)


class _Cancelled(Exception):
    pass


def progress_adapter(progress: ProgressFn | None, cancelled: Callable[[], bool] | None = None):
    """The callback handed to the engine: ``report(fraction, message)``, or ``report(message)`` from a step
    that knows no fraction (the last fraction is kept). Raises the private cancel exception once
    ``cancelled()`` turns true, so outdated work stops at its next report."""
    last = [0.0]

    def report(fraction, message=None) -> None:
        if cancelled is not None and cancelled():
            raise _Cancelled()
        if message is None and isinstance(fraction, str):
            fraction, message = last[0], fraction
        try:
            f = float(fraction)
        except (TypeError, ValueError):
            f = last[0]
        f = min(max(f, 0.0), 1.0) if math.isfinite(f) else last[0]  # a bar never jumps to NaN or past 100 %
        last[0] = f
        if progress is not None:
            progress(f, str(message))

    return report


@dataclass
class Job:
    """A snapshot of one analysis: run it anywhere, hand the outcome back to the session."""

    generation: int
    frames: tuple[Frame, ...]
    setup: BenchSetup
    overrides: Overrides
    analyse: AnalyseFn
    cancelled: bool = False

    def run(self, progress: ProgressFn | None = None):
        return self.analyse(list(self.frames), self.setup,
                            progress=progress_adapter(progress, lambda: self.cancelled))


def default_analyse() -> AnalyseFn:
    """The engine's ``analyse``; a clear error when this build has no engine yet."""
    try:
        from ..pipeline import analyse  # noqa: PLC0415 - optional until the engine lands
    except ImportError:
        def analyse(frames, setup, *, progress=None):  # noqa: ARG001
            raise AnalysisError("this ringgauge build has no analysis engine (ringgauge.pipeline is missing)")
    return analyse


def image_files(folder: str | os.PathLike) -> list[str]:
    """Image files directly inside ``folder``, sorted by name."""
    try:
        names = sorted(os.listdir(folder))
    except FileNotFoundError:
        raise InputError(f"{folder}: no such folder") from None
    except NotADirectoryError:
        raise InputError(f"{folder}: is a file, not a folder") from None
    except PermissionError:
        raise InputError(f"{folder}: cannot be read (permission denied)") from None
    return [os.path.join(folder, n) for n in names
            if n.lower().endswith(IMAGE_SUFFIXES) and os.path.isfile(os.path.join(folder, n))]


class BenchSession:
    """Set-up, frames, overrides and the latest result of one bench, with undo for the manual overrides.

    ``changed`` emits one word saying what changed: ``"setup"``, ``"frames"``, ``"overrides"``,
    ``"result"``, ``"error"``, ``"busy"``.
    """

    def __init__(self, analyse: AnalyseFn | None = None, setup: SetupState | None = None):
        self._analyse = analyse
        self.setup = setup or SetupState()
        self.frames: tuple[Frame, ...] = ()
        #: what the live view saw before a capture (the sign from the rings' motion); belongs to these frames
        self.sign_evidence: dict | None = None
        self.overrides = Overrides()
        self.result = None
        self.error: str | None = None
        #: the result on show was made with inputs that have changed since (automatic analysis off)
        self.stale = False
        self.busy = False
        self.progress: tuple[float, str] = (0.0, "")
        self.generation = 0
        self._undo: list[Overrides] = []
        self._redo: list[Overrides] = []
        self._job: Job | None = None
        self.changed = Signal()

    # -- inputs ---------------------------------------------------------------------------------------
    @property
    def analyse_fn(self) -> AnalyseFn:
        return self._analyse or default_analyse()

    def _bump(self, what: str) -> None:
        self.generation += 1
        if self._job is not None:
            self._job.cancelled = True
        if what in ("setup", "overrides") and self.result is not None:
            self.stale = True  # kept on show until analysed again, but no longer the answer to these inputs
        self.changed.emit(what)

    def update_setup(self, **changes) -> None:
        """Change set-up values (names of :class:`SetupState` fields). Unknown names raise ``TypeError``.

        Inspection details alone (serial, part, ..., operator) change no measurement: the result on show keeps
        its values, takes the new details, and ``changed`` emits ``"details"`` instead of ``"setup"``."""
        new = replace(self.setup, **changes)
        if new == self.setup:
            return
        changed = {k for k in changes if getattr(new, k) != getattr(self.setup, k)}
        self.setup = new
        if changed <= DETAIL_FIELDS:
            self._details_to_result()
            self.changed.emit("details")
            return
        self._bump("setup")

    def _details_to_result(self) -> None:
        res = self.result
        setup = getattr(res, "setup", None)
        if res is None or not isinstance(setup, BenchSetup) or not is_dataclass(res):
            return
        self.result = replace(res, setup=replace(setup, operator=self.setup.operator.strip() or None,
                                                 inspection=inspection_pairs(self.setup.inspection_details())))

    def replace_setup(self, state: SetupState) -> None:
        if state != self.setup:
            self.setup = state
            self._bump("setup")

    def open_paths(self, paths: Sequence[str | os.PathLike]) -> None:
        """Load one image or a set of frames (several files, or a folder of them); keeps the old ones on error."""
        paths = [os.fspath(p) for p in paths]
        if not paths:
            raise InputError("no image given; choose a PNG, TIFF or JPEG file")
        files: list[str] = []
        for p in paths:
            files.extend(image_files(p) if os.path.isdir(p) else [p])
        if not files:
            raise InputError(f"{paths[0]}: the folder holds no images (PNG, TIFF, JPEG, BMP)")
        frames = tuple(load_frame(p) for p in files)
        shapes = {f.shape for f in frames}
        if len(shapes) > 1:
            raise InputError("the frames of one set must all have the same size; these differ: "
                             + ", ".join(f"{f.name} {f.shape[1]}x{f.shape[0]}" for f in frames))
        self.set_frames(frames)

    def set_frames(self, frames: Sequence[Frame], *, sign_evidence: dict | None = None) -> None:
        """Show new frames. ``sign_evidence`` ({"sign": +1 or -1, "detail": ...}) is the live view's reading of
        the rings' motion before a capture; it travels with these frames only."""
        self.frames = tuple(frames)
        self.sign_evidence = dict(sign_evidence) if sign_evidence else None
        if self.setup.serial:  # a serial belongs to one part: the next image gets its own (default: its name)
            self.setup = replace(self.setup, serial="")
        self.result = None
        self.stale = False
        self.error = None
        self.overrides = Overrides()
        self._undo.clear()
        self._redo.clear()
        self._bump("frames")

    @property
    def title(self) -> str:
        if not self.frames:
            return ""
        if len(self.frames) == 1:
            return self.frames[0].name
        return f"{self.frames[0].name} + {len(self.frames) - 1} more frames"

    # -- manual overrides with undo -----------------------------------------------------------------------
    def _set_overrides(self, new: Overrides, *, record: bool = True) -> None:
        if new == self.overrides:
            return
        if record:
            self._undo.append(self.overrides)
            self._redo.clear()
        self.overrides = new
        self._bump("overrides")

    def _check_inside(self, x: float, y: float) -> None:
        if not self.frames:
            raise InputError("open an image before setting the centre or aperture")
        h, w = self.frames[0].shape
        if not (math.isfinite(x) and math.isfinite(y)):
            raise InputError("the position must be finite")
        # a contact point may lie a little outside the frame (rings cut by the edge), not far off
        if not (-w <= x <= 2 * w and -h <= y <= 2 * h):
            raise InputError(f"position ({x:.0f}, {y:.0f}) px is far outside the {w}x{h} image")

    def set_centre(self, x: float, y: float) -> None:
        self._check_inside(x, y)
        self._set_overrides(replace(self.overrides, centre_px=(float(x), float(y))))

    def set_aperture(self, x: float, y: float, radius_px: float) -> None:
        self._check_inside(x, y)
        if not (math.isfinite(radius_px) and radius_px >= 8):
            raise InputError("the aperture must be at least 8 px in radius")
        self._set_overrides(replace(self.overrides, aperture_px=(float(x), float(y), float(radius_px))))

    def clear_overrides(self) -> None:
        self._set_overrides(Overrides())

    @property
    def can_undo(self) -> bool:
        return bool(self._undo)

    @property
    def can_redo(self) -> bool:
        return bool(self._redo)

    def undo(self) -> None:
        if self._undo:
            self._redo.append(self.overrides)
            self._set_overrides(self._undo.pop(), record=False)

    def redo(self) -> None:
        if self._redo:
            self._undo.append(self.overrides)
            self._set_overrides(self._redo.pop(), record=False)

    # -- analysis ---------------------------------------------------------------------------------------
    def make_job(self) -> Job:
        """Snapshot the inputs for one analysis. Raises :class:`InputError` when they are incomplete."""
        if not self.frames:
            raise InputError("no image open; open an interferogram first (File > Open, or drop a file)")
        setup = self.setup.to_bench_setup(overrides=self.overrides, motion_sign=self.sign_evidence)
        job = Job(self.generation, self.frames, setup, self.overrides, self.analyse_fn)
        if self._job is not None and self._job.generation != job.generation:
            self._job.cancelled = True
        self._job = job
        self.busy = True
        self.progress = (0.0, "starting")
        self.changed.emit("busy")
        return job

    def cancel(self) -> None:
        """Stop the running analysis at its next progress report (closing the window, say)."""
        if self._job is not None:
            self._job.cancelled = True
        self.busy = False

    def is_current(self, job: Job) -> bool:
        return job.generation == self.generation and not job.cancelled

    def report_progress(self, job: Job, fraction: float, message: str) -> None:
        if self.is_current(job):
            self.progress = (fraction, message)
            self.changed.emit("busy")

    def accept(self, job: Job, result) -> bool:
        """Take a finished result; returns False (and drops it) when the inputs changed meanwhile."""
        if not self.is_current(job):
            return False
        self._job = None
        self.busy = False
        self.result = with_bench_warnings(result)
        self.stale = False
        self.error = None
        self.changed.emit("result")
        return True

    def fail(self, job: Job, message: str) -> bool:
        if job.generation != self.generation:
            return False
        self._job = None
        self.busy = False
        self.result = None
        self.stale = False
        self.error = message
        self.changed.emit("error")
        return True

    def refuse(self, message: str) -> None:
        """A new image could not be opened: what was on show belongs to another part, so it goes — frames,
        result and hand settings — and ``error`` says why (a watched camera folder must never leave the last
        part's verdict beside a file that failed)."""
        self.frames = ()
        self.sign_evidence = None
        self.result = None
        self.stale = False
        self.overrides = Overrides()
        self._undo.clear()
        self._redo.clear()
        self.busy = False
        self._bump("frames")
        self.error = message
        self.changed.emit("error")

    def run_now(self):
        """Run the analysis in this thread (command line, tests); returns the result or raises."""
        job = self.make_job()
        try:
            result = job.run()
        except RinggaugeError as exc:
            self.fail(job, str(exc))
            raise
        return self.result if self.accept(job, result) else result


class FolderWatch:
    """New image files in a folder where a camera drops them, reported once each file has stopped growing.

    Call :meth:`poll` regularly (the window does every second): a file is reported when its size was the same
    at two polls in a row, so a half-written frame is never opened. Files present when watching began are
    not reported.
    """

    def __init__(self, folder: str | os.PathLike):
        self.folder = os.fspath(folder)
        if not os.path.isdir(self.folder):
            raise InputError(f"{self.folder}: no such folder to watch")
        self._seen: set[str] = set(image_files(self.folder))
        self._pending: dict[str, int] = {}

    def poll(self) -> list[str]:
        try:
            now = image_files(self.folder)
        except InputError:
            return []  # the folder went away (network share); keep watching quietly
        ready = []
        for p in now:
            if p in self._seen:
                continue
            try:
                size = os.path.getsize(p)
            except OSError:
                continue
            if size > 0 and self._pending.get(p) == size:
                ready.append(p)
                self._seen.add(p)
                self._pending.pop(p, None)
            else:
                self._pending[p] = size
        return ready
