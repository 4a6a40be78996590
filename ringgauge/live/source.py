"""Frame sources for the live view: a camera index, a stream address, a video file or a folder of numbered frames.

Cameras, streams and video files are read through OpenCV's ``VideoCapture`` (so any camera the operating system
exposes works). Opening is bounded in time: a source that does not answer within ``timeout_s`` gives a one-line
:class:`~ringgauge.errors.InputError`, never a hang.

A live source (camera, stream) is read by a background thread that keeps only the newest frame: the analysis
takes the newest frame when it is ready for one, and every frame it never saw is counted as dropped — the
analysis drops frames rather than lag behind the part. A file is read frame by frame (every frame analysed) or,
with ``pace=True``, played at its own frame rate with the same newest-frame rule, as a camera would deliver it.
"""

from __future__ import annotations

import os
import threading
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..imaging import IMAGE_SUFFIXES

#: longest wait for a source to open or deliver its first frame, seconds
OPEN_TIMEOUT_S = 8.0
#: longest wait for the next frame of a live source before it counts as lost, seconds
READ_TIMEOUT_S = 5.0
VIDEO_SUFFIXES = (".avi", ".mp4", ".mkv", ".mov", ".m4v", ".mjpg", ".mjpeg", ".webm", ".wmv", ".mpg", ".mpeg")


@dataclass(frozen=True)
class SourceFrame:
    """One frame as delivered: index in the source, 8/16-bit grey codes, time it arrived (monotonic s)."""

    index: int
    codes: np.ndarray  # (H, W) uint8 or uint16 grey
    t_arrived: float
    full_scale: float = 255.0

    @property
    def data(self) -> np.ndarray:
        """Intensity in [0, 1], float32."""
        return self.codes.astype(np.float32) * np.float32(1.0 / self.full_scale)


def _quiet_opencv():
    # FFmpeg's own log lines ("[http @ 0x…] …") would follow our one-line message on the terminal
    os.environ.setdefault("OPENCV_FFMPEG_LOGLEVEL", "-8")
    import cv2

    try:
        cv2.utils.logging.setLogLevel(cv2.utils.logging.LOG_LEVEL_SILENT)
    except AttributeError:  # pragma: no cover - older builds
        pass
    return cv2


def _grey(img: np.ndarray) -> np.ndarray:
    if img.ndim == 2:
        return img
    if img.shape[2] == 1:
        return img[:, :, 0]
    if img.shape[2] == 4:
        img = img[:, :, :3]
    b, g, r = img[:, :, 0], img[:, :, 1], img[:, :, 2]
    if np.array_equal(b, g) and np.array_equal(g, r):
        return g
    import cv2

    return cv2.cvtColor(np.ascontiguousarray(img), cv2.COLOR_BGR2GRAY)


def describe(spec: str) -> str:
    """What kind of source ``spec`` names: 'camera', 'stream', 'folder' or 'file'."""
    s = str(spec).strip()
    if s.isdigit():
        return "camera"
    if "://" in s:
        return "stream"
    if os.path.isdir(s):
        return "folder"
    return "file"


class FrameSource:
    """Base: ``read()`` returns the next :class:`SourceFrame` to analyse, or None at the end of the source."""

    kind = "file"
    live = False

    def __init__(self, spec: str):
        self.spec = str(spec)
        self.dropped = 0
        self.fps: float | None = None
        self.frame_count: int | None = None

    def read(self) -> SourceFrame | None:  # pragma: no cover - abstract
        raise NotImplementedError

    def close(self) -> None:
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def __iter__(self):
        while True:
            f = self.read()
            if f is None:
                return
            yield f


class FolderSource(FrameSource):
    """Numbered frames in a folder, in name order (frame_00000.png, frame_00001.png, ...)."""

    kind = "folder"

    def __init__(self, spec: str, *, pace: bool = False, fps: float = 25.0):
        super().__init__(spec)
        files = sorted(p for p in Path(spec).iterdir() if p.suffix.lower() in IMAGE_SUFFIXES)
        if not files:
            raise InputError(f"{spec}: the folder holds no frames (PNG, TIFF, JPEG, BMP)")
        self.files = files
        self.frame_count = len(files)
        self.fps = fps
        self.pace = pace
        self._i = 0
        self._t0 = None

    def read(self) -> SourceFrame | None:
        if self.pace:
            now = time.monotonic()
            if self._t0 is None:
                self._t0 = now
            due = int((now - self._t0) * self.fps)
            if due > self._i:
                self.dropped += due - self._i
                self._i = due
        if self._i >= len(self.files):
            return None
        p = self.files[self._i]
        from ..imaging import read_image_codes

        img = read_image_codes(p)  # a pipe, device or size bomb among the frames is refused in one line
        g = _grey(img)
        full = 255.0 if g.dtype == np.uint8 else 65535.0
        f = SourceFrame(self._i, g, time.monotonic(), full)
        self._i += 1
        return f


def _open_capture(spec, timeout_s: float):
    """Open a VideoCapture and read its first frame in a helper thread, waiting at most ``timeout_s``."""
    from ..imaging import pixel_budget

    cv2 = _quiet_opencv()
    box: dict = {}
    budget = pixel_budget()

    def work():
        try:
            arg = int(spec) if str(spec).isdigit() else str(spec)
            params = [cv2.CAP_PROP_OPEN_TIMEOUT_MSEC, int(timeout_s * 1000),
                      cv2.CAP_PROP_READ_TIMEOUT_MSEC, int(READ_TIMEOUT_S * 1000)]
            try:
                cap = cv2.VideoCapture(arg, cv2.CAP_ANY, params)
            except cv2.error:
                cap = cv2.VideoCapture(arg)
            ok = cap.isOpened()
            first = None
            if ok:
                w, h = cap.get(cv2.CAP_PROP_FRAME_WIDTH), cap.get(cv2.CAP_PROP_FRAME_HEIGHT)
                if w * h > budget * 1e6:  # refused before the first frame is decoded
                    box["too_big"] = (int(w), int(h))
                    ok = False
            if ok:
                ok, first = cap.read()
            box["cap"], box["ok"], box["first"] = cap, ok, first
        except Exception as exc:  # noqa: BLE001 - reported as one line below
            box["error"] = exc

    th = threading.Thread(target=work, name="ringgauge-open-source", daemon=True)
    t0 = time.monotonic()
    th.start()
    # the backend honours the open timeout itself; the wait here is the backstop for one that does not
    th.join(timeout_s + 3.0)
    if th.is_alive():
        global STUCK_OPEN
        STUCK_OPEN = True
        raise InputError(f"{spec}: the source did not answer within {timeout_s:g} s; check the address or cable")
    if "error" in box:
        raise InputError(f"{spec}: cannot open it ({box['error']})")
    if "too_big" in box:
        w, h = box["too_big"]
        box["cap"].release()
        raise InputError(f"{spec}: frames of {w}×{h} px exceed the limit of {budget:g} megapixels "
                         "(--max-megapixels)")
    return box["cap"], box["ok"], box["first"], time.monotonic() - t0 >= 0.9 * timeout_s


#: set when a backend ignored the open timeout and its thread is still blocked: a command-line run then ends
#: with os._exit so the blocked native thread cannot abort the interpreter's shutdown
STUCK_OPEN = False


class CaptureSource(FrameSource):
    """A camera index, stream address or video file through OpenCV's VideoCapture."""

    def __init__(self, spec: str, *, pace: bool = False, timeout_s: float = OPEN_TIMEOUT_S):
        super().__init__(spec)
        self.kind = describe(spec)
        if self.kind == "file":
            if not os.path.exists(spec):
                raise InputError(f"{spec}: no such file")
            if not os.path.isfile(spec):
                raise InputError(f"{spec}: not a file")
        cap, ok, first, slow = _open_capture(spec, timeout_s)
        if not ok or first is None:
            if cap is not None:
                cap.release()
            if slow:
                raise InputError(f"{spec}: the source did not answer within {timeout_s:g} s; check the address "
                                 "or cable")
            if self.kind == "camera":
                raise InputError(f"camera {spec}: no such camera, or it is in use by another program")
            if self.kind == "stream":
                raise InputError(f"{spec}: the stream could not be opened; check the address")
            raise InputError(f"{spec}: not a video this installation can read (try an MJPG .avi or numbered frames)")
        import cv2

        self.cap = cap
        fps = cap.get(cv2.CAP_PROP_FPS)
        self.fps = float(fps) if fps and np.isfinite(fps) and 0 < fps < 1000 else None
        n = cap.get(cv2.CAP_PROP_FRAME_COUNT)
        self.frame_count = int(n) if self.kind == "file" and n and n > 0 else None
        self.live = self.kind in ("camera", "stream")
        self.pace = pace or self.live
        self._first = first
        self._next_index = 0
        self._lock = threading.Condition()
        self._latest: SourceFrame | None = None
        self._ended = False
        self._error: str | None = None
        self._last_taken = -1
        self._stop = False
        self._thread = None
        if self.pace:
            self._thread = threading.Thread(target=self._pump, name="ringgauge-frames", daemon=True)
            self._thread.start()

    def _grab(self) -> SourceFrame | None:
        if self._first is not None:
            img, self._first = self._first, None
        else:
            ok, img = self.cap.read()
            if not ok or img is None:
                return None
        g = _grey(img)
        full = 255.0 if g.dtype == np.uint8 else 65535.0
        f = SourceFrame(self._next_index, g, time.monotonic(), full)
        self._next_index += 1
        return f

    def _pump(self) -> None:
        """Background reader: keeps the newest frame; for a file, waits out the file's frame interval."""
        interval = 1.0 / self.fps if (self.kind == "file" and self.fps) else 0.0
        t_start = time.monotonic()
        n = 0
        while not self._stop:
            if interval:
                wait = t_start + n * interval - time.monotonic()
                if wait > 0:
                    time.sleep(wait)
            try:
                f = self._grab()
            except Exception as exc:  # noqa: BLE001
                with self._lock:
                    self._error = str(exc)
                    self._ended = True
                    self._lock.notify_all()
                return
            n += 1
            with self._lock:
                if f is None:
                    self._ended = True
                else:
                    self._latest = f
                self._lock.notify_all()
            if f is None:
                return

    def read(self) -> SourceFrame | None:
        if not self.pace:
            return self._grab()
        with self._lock:
            deadline = time.monotonic() + READ_TIMEOUT_S
            while (self._latest is None or self._latest.index <= self._last_taken) and not self._ended:
                left = deadline - time.monotonic()
                if left <= 0:
                    raise InputError(f"{self.spec}: no new frame for {READ_TIMEOUT_S:g} s; the camera stopped")
                self._lock.wait(left)
            if self._latest is None or self._latest.index <= self._last_taken:
                return None
            f = self._latest
            self.dropped += f.index - self._last_taken - 1
            self._last_taken = f.index
            return f

    def close(self) -> None:
        self._stop = True
        if self._thread is not None:
            self._thread.join(2.0)
        try:
            self.cap.release()
        except Exception:  # noqa: BLE001
            pass


def open_source(spec, *, pace: bool = False, timeout_s: float = OPEN_TIMEOUT_S, fps: float = 25.0) -> FrameSource:
    """Open ``spec``: a camera index ("0"), a stream address ("rtsp://..."), a video file or a folder of frames.

    ``pace=True`` plays a file or folder at its frame rate, dropping frames the analysis cannot keep up with
    (cameras and streams are always read that way).
    """
    s = str(spec).strip()
    if not s:
        raise InputError("no camera given: --camera takes an index (0), a stream address, a video file or a folder")
    if describe(s) == "folder":
        return FolderSource(s, pace=pace, fps=fps)
    return CaptureSource(s, pace=pace, timeout_s=timeout_s)
