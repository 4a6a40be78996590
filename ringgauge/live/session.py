"""A live session: frames from a source, tracked, with the settle indicator and the sign from the rings' motion.

Used alike by ``ringgauge watch`` (one line per analysed frame) and the window's Live page (a background thread
keeps the newest state for the page to draw). No Qt here.
"""

from __future__ import annotations

import math
import threading
import time
from collections import deque
from dataclasses import asdict, dataclass, field

import numpy as np

from ..bench_setup import BenchSetup
from ..errors import InputError, RinggaugeError
from ..pipeline import wants_form
from .motion import SETTLE_FRAMES, SETTLE_FRINGES, SIGN_MIN_FRINGES, MotionSign, SettleDetector, rings_direction
from .source import FrameSource, SourceFrame
from .tracker import TRACK_PIXELS, RingTracker

#: states kept as the motion evidence of a capture (small); only the last few frames themselves are kept
HISTORY_FRAMES = 240
#: frames (images) kept beyond the settle window, for a capture of the frame the page showed
SPARE_FRAMES = 6


@dataclass(frozen=True)
class LiveState:
    """What the live analysis knows after one frame. Lengths in mm, times in s (latency in ms)."""

    frame: int
    ok: bool
    message: str = ""
    centre_px: tuple[float, float] | None = None
    r_fit_px: float | None = None
    q: float | None = None  # rad/px², the ring model's phase rate
    phase: float | None = None  # rad, unwrapped
    radius_mm: float | None = None
    radius_u_mm: float | None = None
    radius_U_mm: float | None = None  # noqa: N815
    k: float = 2.0
    settled: bool = False
    motion_fringes: float | None = None  # peak-to-peak fringe motion over the settle window
    rings: str = "unknown"  # "in", "out", "still" or "unknown" (not tracked)
    gap: str = "unknown"  # "closing", "opening", "steady" or "unknown" (needs the sign)
    power_sign: str = "unknown"
    sign_detail: str = ""
    dropped: int = 0
    latency_ms: float | None = None
    analysed_fps: float | None = None
    contrast: float | None = None
    episode: int = 0  # motion episodes seen so far (settling, presses): a new settled state once per episode

    def to_json(self) -> dict:
        d = asdict(self)
        for k, v in d.items():
            if isinstance(v, float) and not math.isfinite(v):
                d[k] = None
        if d["centre_px"] is not None:
            d["centre_px"] = [float(v) for v in d["centre_px"]]
        return d


@dataclass
class LiveOptions:
    settle_frames: int = SETTLE_FRAMES
    settle_fringes: float = SETTLE_FRINGES
    sign_min_fringes: float = SIGN_MIN_FRINGES
    track_pixels: int = TRACK_PIXELS
    history: int = HISTORY_FRAMES
    extra: dict = field(default_factory=dict)


class LiveSession:
    """Runs the live analysis over one source.

    ``step()`` analyses the next frame and returns its :class:`LiveState` (None at the end of the source);
    ``start()`` runs the same loop in a background thread, keeping the newest state in ``latest``.
    """

    #: a subclass that follows a part on a test plate sets this (ringgauge.live.form_tracker.FormLiveSession)
    handles_form = False

    def __init__(self, source: FrameSource, setup: BenchSetup, options: LiveOptions | None = None):
        if wants_form(setup, 1) and not self.handles_form:
            raise InputError(
                "the live view follows a lens on an optical flat (radius); analyse the form against a test plate "
                "from frames on the Bench page or with 'ringgauge analyze' (drop the form options here)"
            )
        self.source = source
        self.setup = setup
        self.options = options or LiveOptions()
        o = self.options
        self.tracker = RingTracker(setup, n_pixels=o.track_pixels)
        self.settle = SettleDetector(o.settle_frames, o.settle_fringes)
        self.sign = MotionSign(o.sign_min_fringes)
        self.history: deque = deque(maxlen=o.history)  # (frame index, LiveState)
        # images are large (1 MB per megapixel): only those a capture can take are kept
        self.recent_frames: deque = deque(maxlen=o.settle_frames + SPARE_FRAMES)
        self._phases: deque = deque(maxlen=4)
        self._times: deque = deque(maxlen=20)
        self.latest: LiveState | None = None
        self.latest_frame: SourceFrame | None = None
        self.error: str | None = None
        self.ended = False
        self.exhausted = False  # the source had no more frames (a file's end), as opposed to being stopped
        self.analysed = 0
        self._lock = threading.Lock()
        self._thread = None
        self._stop = threading.Event()

    # -- one frame -------------------------------------------------------------------------------------------
    def _pace(self, f: SourceFrame) -> tuple[int, float, float | None]:
        """Frames dropped so far, this frame's latency (ms) and the analysed frames per second, as of now."""
        now = time.monotonic()
        self._times.append(now)
        fps = (len(self._times) - 1) / (self._times[-1] - self._times[0]) if len(self._times) > 2 else None
        return self.source.dropped, 1e3 * (now - f.t_arrived), fps

    def analyse(self, f: SourceFrame) -> LiveState:
        pt = self.tracker.update(f.codes, f.full_scale)
        dropped, latency, fps = self._pace(f)
        if not pt.ok:
            self.settle.reset()
            self._phases.clear()
            st = LiveState(f.index, False, pt.message, power_sign=self.sign.sign, sign_detail=self.sign.detail,
                           dropped=dropped, latency_ms=latency, analysed_fps=fps)
        else:
            if pt.reinitialised or self.settle.probes is None:
                self.settle.reset()
                self.settle.set_probes(pt.x0, pt.y0, pt.r_fit_px, self.tracker.aspect)
                self._phases.clear()
                if self.sign._last_phase is not None:  # a new track has its own phase origin
                    self.sign._open = None
                    self.sign._last_phase = None
            settled, motion = self.settle.update(pt.x0, pt.y0, pt.q, pt.phase)
            self.sign.update(f.index, pt.phase, settled)
            self._phases.append(pt.phase)
            o = self.options
            rings = "still" if settled else rings_direction(list(self._phases), o.settle_fringes / o.settle_frames)
            sign = self.sign.sign
            if rings == "still":
                gap = "steady"
            elif sign == "unknown":
                gap = "unknown"
            else:
                closing = (rings == "out") == (sign == "+")
                gap = "closing" if closing else "opening"
            st = LiveState(
                f.index, True, pt.message, (pt.x0, pt.y0), pt.r_fit_px, pt.q, pt.phase, pt.radius_mm,
                pt.radius_u_mm, pt.radius_U_mm, pt.k, settled, None if math.isnan(motion) else motion, rings, gap,
                sign, self.sign.detail, dropped, latency, fps, pt.contrast, len(self.sign.episodes),
            )
        self.analysed += 1
        with self._lock:
            self.history.append((f.index, st))
            self.recent_frames.append(f)
            self.latest = st
            self.latest_frame = f
        return st

    def step(self) -> LiveState | None:
        f = self.source.read()
        if f is None:
            self.ended = self.exhausted = True
            return None
        return self.analyse(f)

    def __iter__(self):
        while True:
            st = self.step()
            if st is None:
                return
            yield st

    # -- in the background --------------------------------------------------------------------------------------
    def start(self, *, throttle_fps: float | None = None) -> None:
        """Run in a background thread. ``throttle_fps`` holds a file read frame by frame to that rate (a file
        can wait; a camera cannot — a live source drops frames instead)."""
        self._throttle = throttle_fps if throttle_fps and throttle_fps > 0 else None
        self._thread = threading.Thread(target=self._run, name="ringgauge-live", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        t0 = time.monotonic()
        n = 0
        try:
            while not self._stop.is_set():
                if self._throttle:
                    wait = t0 + n / self._throttle - time.monotonic()
                    if wait > 0:
                        self._stop.wait(wait)
                    elif wait < -1.0 / self._throttle:
                        t0 -= wait  # behind (a slow first frame): keep the file's pace from here, do not rush
                    n += 1
                if self.step() is None:
                    return
        except RinggaugeError as exc:
            self.error = str(exc)
        except Exception as exc:  # noqa: BLE001 - shown on the page as one line
            self.error = f"the live analysis stopped ({type(exc).__name__}: {exc})"
        finally:
            self.ended = True

    def stop(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(5.0)
        self.source.close()

    def snapshot(self) -> tuple[SourceFrame | None, LiveState | None]:
        with self._lock:
            return self.latest_frame, self.latest

    # -- capture -------------------------------------------------------------------------------------------
    def capture_set(self, n_frames: int = 1, *, at_frame: int | None = None) -> dict:
        """The newest settled frame(s) and the motion seen before them, for a capture.

        ``at_frame`` takes the settled run ending at that frame instead of the newest frame (the page names the
        frame it showed; the analysis may have moved on). Returns ``{"frames": [SourceFrame...], "states":
        [LiveState...], "evidence": dict}``; raises :class:`InputError` when the part is not settled.
        """
        with self._lock:
            hist = list(self.history)
        if at_frame is not None:
            upto = [i for i, (idx, _st) in enumerate(hist) if idx == at_frame]
            if upto:
                hist = hist[: upto[0] + 1]
        if not hist or not hist[-1][1].settled:
            raise InputError("the part is not settled: wait until the rings stand still, then capture")
        with self._lock:
            kept = {f.index: f for f in self.recent_frames}
        settled = []
        for idx, st in reversed(hist):
            if not st.settled:
                break
            if idx in kept:
                settled.append((kept[idx], st))
        if not settled:
            raise InputError("the settled frame is no longer held (the camera moved on); capture again")
        settled = list(reversed(settled))[-max(1, n_frames):]
        last = settled[-1][1]
        motion = [
            {"frame": st.frame, "phase_fringes": round(st.phase / (2 * math.pi), 4), "rings": st.rings,
             "settled": st.settled}
            for _i, st in hist if st.ok
        ]
        evidence = {
            "power_sign": last.power_sign,
            "detail": last.sign_detail,
            "readings": self.sign.readings,
            "settle_rule": (f"fringes still within {self.options.settle_fringes:g} fringe over the last "
                            f"{self.options.settle_frames} frames"),
            "tracked_radius_mm": last.radius_mm,
            "tracked_radius_U_mm": last.radius_U_mm,
            "captured_frames": [st.frame for _f, st in settled],
            "motion_before": motion,
            "source": self.source.spec,
        }
        return {"frames": [f for f, _ in settled], "states": [st for _, st in settled], "evidence": evidence}


def settled_mean(states: list[LiveState]) -> tuple[float, float] | None:
    """Mean tracked radius over settled frames with the standard uncertainty of one frame (not divided: the
    frames share their calibration)."""
    rs = [s for s in states if s.ok and s.settled and s.radius_mm is not None]
    if not rs:
        return None
    return float(np.mean([s.radius_mm for s in rs])), float(np.mean([s.radius_u_mm for s in rs]))
