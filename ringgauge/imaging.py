"""Loading and validating frames: 8/16-bit greyscale or colour PNG, TIFF and JPEG, with a checksum.

Coordinate convention used throughout ringgauge: ``x`` = column, ``y`` = row, pixel centres at integer
coordinates, origin at the centre of the top-left pixel. Arrays are indexed ``image[y, x]``.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import ImageError

#: file endings ringgauge reads as images
IMAGE_SUFFIXES = (".png", ".tif", ".tiff", ".jpg", ".jpeg", ".bmp", ".pgm", ".ppm")

MIN_SIDE_PX = 32


@dataclass(frozen=True)
class Frame:
    """One camera frame as floating-point intensity in [0, 1] (full scale of the stored bit depth).

    Attributes
    ----------
    data : (H, W) float32 array
        Intensity, 0 = black, 1 = the file's full scale.
    path : str or None
        Where it came from.
    sha256 : str
        Checksum of the file's bytes (of the array bytes when made in memory).
    bit_depth : int
        Effective bit depth of the data (12 for 12-bit data stored in 16-bit files).
    saturated_fraction : float
        Fraction of pixels at the file's maximum code.
    channel : str
        How a colour image was reduced to one channel.
    """

    data: np.ndarray
    path: str | None = None
    sha256: str = ""
    bit_depth: int = 8
    saturated_fraction: float = 0.0
    channel: str = "grey"
    notes: tuple[str, ...] = field(default_factory=tuple)

    @property
    def shape(self) -> tuple[int, int]:
        return self.data.shape  # type: ignore[return-value]

    @property
    def name(self) -> str:
        return os.path.basename(self.path) if self.path else "(in memory)"


def sha256_file(path: str | os.PathLike) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _effective_bits(raw: np.ndarray) -> int:
    if raw.dtype == np.uint8:
        return 8
    mx = int(raw.max()) if raw.size else 0
    for bits in (10, 12, 14):
        if mx < (1 << bits):
            return bits
    return 16


def _to_grey(raw: np.ndarray) -> tuple[np.ndarray, str, list[str]]:
    """Reduce a colour image (OpenCV BGR order) to one channel.

    A monochromatic lamp lights mainly one colour channel; mixing in the dark channels adds noise but no fringe
    signal. Pick the channel with the largest fringe modulation (robust spread), and fall back to a luminance
    mix when the channels modulate alike (a grey image stored as colour).
    """
    notes: list[str] = []
    if raw.ndim == 2:
        return raw, "grey", notes
    if raw.shape[2] == 4:
        raw = raw[:, :, :3]
    chans = [raw[:, :, i].astype(np.float64) for i in range(raw.shape[2])]
    names = ["blue", "green", "red"]
    spreads = []
    for c in chans:
        sub = c[:: max(1, c.shape[0] // 256), :: max(1, c.shape[1] // 256)]
        p5, p95 = np.percentile(sub, [5, 95])
        spreads.append(p95 - p5)
    spreads = np.asarray(spreads)
    if spreads.max() <= 0:
        return chans[1].astype(raw.dtype), "green", notes
    if spreads.min() > 0.8 * spreads.max():
        grey = 0.114 * chans[0] + 0.587 * chans[1] + 0.299 * chans[2]
        return grey, "luminance", notes
    best = int(np.argmax(spreads))
    notes.append(f"colour image: used the {names[best]} channel (strongest fringe modulation)")
    return chans[best], names[best], notes


def frame_from_array(
    data: np.ndarray, *, full_scale: float | None = None, path: str | None = None, sha256: str | None = None
) -> Frame:
    """Wrap an array (any numeric dtype, greyscale or colour in BGR order) as a validated :class:`Frame`."""
    raw = np.asarray(data)
    if raw.ndim not in (2, 3) or (raw.ndim == 3 and raw.shape[2] not in (1, 3, 4)):
        raise ImageError(f"expected a 2-D greyscale or colour image, got an array of shape {raw.shape}")
    if raw.ndim == 3 and raw.shape[2] == 1:
        raw = raw[:, :, 0]
    if not np.issubdtype(raw.dtype, np.number):
        raise ImageError(f"image data must be numeric, got {raw.dtype}")
    bits = _effective_bits(raw) if raw.dtype in (np.uint8, np.uint16) else 16
    if full_scale is None:
        if raw.dtype == np.uint8:
            full_scale = 255.0
        elif raw.dtype == np.uint16:
            full_scale = float((1 << bits) - 1)
        else:
            full_scale = 1.0
    grey, channel, notes = _to_grey(raw)
    grey = np.asarray(grey, dtype=np.float64)
    if not np.all(np.isfinite(grey)):
        raise ImageError("image contains NaN or infinite values")
    top = float(grey.max()) if grey.size else 0.0
    sat = float(np.mean(grey >= full_scale - 0.5)) if raw.dtype in (np.uint8, np.uint16) else float(np.mean(grey >= full_scale))
    out = (grey / full_scale).astype(np.float32)
    if sha256 is None:
        sha256 = hashlib.sha256(np.ascontiguousarray(raw).tobytes()).hexdigest()
    frame = Frame(out, path, sha256, bits, sat, channel, tuple(notes))
    validate_frame(frame)
    del top
    return frame


def validate_frame(frame: Frame) -> None:
    """Refuse frames that cannot hold a ring system: too small, or without any contrast."""
    h, w = frame.data.shape
    if min(h, w) < MIN_SIDE_PX:
        raise ImageError(
            f"{frame.name}: image is {w}x{h} pixels; ringgauge needs at least {MIN_SIDE_PX} pixels on each side"
        )
    d = frame.data
    sub = d[:: max(1, h // 512), :: max(1, w // 512)]
    lo, hi = np.percentile(sub, [1, 99])
    if hi - lo < 2.0 / 255.0:
        level = float(np.mean(sub))
        what = "all black" if level < 0.02 else "all white" if level > 0.98 else "uniform"
        raise ImageError(
            f"{frame.name}: the image is {what} (no fringe contrast); check the lamp, exposure and focus"
        )


def load_frame(path: str | os.PathLike) -> Frame:
    """Read an image file into a :class:`Frame`.

    Reads 8- and 16-bit PNG and TIFF (12-bit data stored in 16-bit files is scaled to its own full scale),
    JPEG, and colour images (the channel with the strongest modulation is used).
    """
    import cv2

    _quiet_opencv(cv2)
    p = Path(path)
    if not p.exists():
        raise ImageError(f"{p}: no such file; check the path")
    if p.is_dir():
        raise ImageError(f"{p}: is a folder, not an image file; name an image (PNG, TIFF or JPEG)")
    try:
        size = p.stat().st_size
        buf = np.fromfile(str(p), dtype=np.uint8)
    except OSError as exc:
        raise ImageError(f"{p}: cannot be read ({exc.strerror or exc})") from None
    if size == 0:
        raise ImageError(f"{p}: the file is empty (0 bytes)")
    with _native_stderr_silenced():
        raw = cv2.imdecode(buf, cv2.IMREAD_UNCHANGED)
        if raw is None and p.suffix.lower() in (".tif", ".tiff"):
            raw = _read_tiff_fallback(p)
    if raw is not None and (raw.size == 0 or raw.ndim not in (2, 3)):
        raw = None  # a decoder that gave up half-way
    if raw is None:
        kind = "image" if p.suffix.lower() in IMAGE_SUFFIXES else "file"
        raise ImageError(
            f"{p}: cannot decode this {kind} (truncated, damaged, or not an image); save it again as PNG or TIFF"
        )
    if raw.dtype not in (np.uint8, np.uint16, np.float32):
        raw = raw.astype(np.float64)
    digest = hashlib.sha256(buf.tobytes()).hexdigest()
    return frame_from_array(raw, path=str(p), sha256=digest)


@contextlib.contextmanager
def _native_stderr_silenced():
    """Hold back what the C image libraries (libpng, libtiff) print on file descriptor 2 while decoding, so a
    damaged file gives ringgauge's one-line message only. Python-level stderr is untouched."""
    try:
        saved = os.dup(2)
    except OSError:  # no usable descriptor 2 (embedded use): nothing to silence
        yield
        return
    try:
        with open(os.devnull, "wb") as null:
            os.dup2(null.fileno(), 2)
            try:
                yield
            finally:
                os.dup2(saved, 2)
    finally:
        os.close(saved)


def _quiet_opencv(cv2) -> None:
    """OpenCV prints its own warnings for damaged files on stderr; ringgauge reports them in one line itself."""
    try:
        cv2.utils.logging.setLogLevel(cv2.utils.logging.LOG_LEVEL_ERROR)
    except AttributeError:  # pragma: no cover - older OpenCV
        pass


def _read_tiff_fallback(p: Path):
    try:
        import tifffile  # optional: OpenCV reads the usual TIFFs itself
    except ImportError:
        return None
    try:
        return tifffile.imread(str(p))
    except Exception:  # noqa: BLE001 - any decoding failure means "not usable"
        return None


def save_png(path: str | os.PathLike, image01: np.ndarray, bits: int = 8) -> None:
    """Write intensity in [0, 1] as an 8- or 16-bit greyscale PNG (16-bit files may carry 12-bit data)."""
    import cv2

    if bits not in (8, 10, 12, 14, 16):
        raise ValueError("bits must be 8, 10, 12, 14 or 16")
    full = (1 << bits) - 1
    arr = np.clip(np.rint(np.asarray(image01, dtype=np.float64) * full), 0, full)
    arr = arr.astype(np.uint8 if bits == 8 else np.uint16)
    ok, enc = cv2.imencode(Path(path).suffix or ".png", arr)
    if not ok:
        raise ImageError(f"{path}: could not encode image")
    Path(path).write_bytes(enc.tobytes())
