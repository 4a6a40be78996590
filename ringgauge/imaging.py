"""Loading and validating frames: 8/16-bit greyscale or colour PNG, TIFF and JPEG, with a checksum.

Coordinate convention used throughout ringgauge: ``x`` = column, ``y`` = row, pixel centres at integer
coordinates, origin at the centre of the top-left pixel. Arrays are indexed ``image[y, x]``.
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import logging
import os
import stat
import struct
import threading
import warnings
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
    with _open_regular(Path(path)) as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


# ---------------------------------------------------------------------------------------------------------------
# pixel budget: checked from the file's header before anything is decoded

# default largest image ringgauge decodes, in megapixels (a 100 MP 16-bit colour frame already needs ~1.4 GB),
# and the largest that can be asked for (OpenCV's decoders stop at 2**30 pixels anyway)
from .options import DEFAULT_MAX_MEGAPIXELS, MAX_MEGAPIXELS_CEILING  # noqa: E402

#: environment variable carrying the budget to worker processes (set by ``--max-megapixels``)
MAX_MEGAPIXELS_ENV = "RINGGAUGE_MAX_MEGAPIXELS"
#: file bytes allowed per budgeted pixel (16-bit RGBA uncompressed is 8) plus room for metadata
_BYTES_PER_PIXEL_LIMIT = 8
_METADATA_SLACK_BYTES = 64 << 20

_budget_override: float | None = None


def set_pixel_budget(megapixels: float | None) -> None:
    """Set this process's pixel budget (``None`` = default); worker processes inherit it through the environment."""
    global _budget_override
    if megapixels is None:
        _budget_override = None
        os.environ.pop(MAX_MEGAPIXELS_ENV, None)
        return
    mp = float(megapixels)
    if not (0 < mp <= MAX_MEGAPIXELS_CEILING):
        raise ImageError(f"--max-megapixels must be above 0 and at most {MAX_MEGAPIXELS_CEILING:g}, got {megapixels}")
    _budget_override = mp
    os.environ[MAX_MEGAPIXELS_ENV] = repr(mp)


def pixel_budget() -> float:
    """The largest image (megapixels) this process decodes."""
    if _budget_override is not None:
        return _budget_override
    env = os.environ.get(MAX_MEGAPIXELS_ENV)
    if env:
        try:
            mp = float(env)
        except ValueError:
            mp = float("nan")
        if not (0 < mp <= MAX_MEGAPIXELS_CEILING):
            raise ImageError(f"{MAX_MEGAPIXELS_ENV}={env!r} is not a number of megapixels in (0, "
                             f"{MAX_MEGAPIXELS_CEILING:g}]; fix or unset it")
        return mp
    return DEFAULT_MAX_MEGAPIXELS


@dataclass(frozen=True)
class ImageHeader:
    """What a file's header declares, read without decoding the pixels."""

    format: str
    width: int
    height: int
    pages: int  # 0 when there are several but counting them was not possible
    complex_valued: bool = False

    @property
    def megapixels(self) -> float:
        return self.width * self.height / 1e6


_PIL_LOCK = threading.Lock()
_KNOWN_FORMATS = "PNG, TIFF, JPEG, BMP or PGM/PPM"


def _probe_pillow(data: bytes) -> ImageHeader | None:
    from PIL import Image, UnidentifiedImageError

    # ringgauge applies its own (configurable) pixel budget below; Pillow's fixed bomb check would otherwise
    # refuse a genuine image the user allowed with --max-megapixels
    with _PIL_LOCK:
        saved = Image.MAX_IMAGE_PIXELS
        Image.MAX_IMAGE_PIXELS = None
        try:
            with Image.open(io.BytesIO(data), formats=("PNG", "TIFF", "JPEG", "BMP", "PPM")) as im:
                w, h = im.size
                fmt = im.format or "image"
                pages = 1
                if getattr(im, "is_animated", False):
                    try:
                        pages = int(im.n_frames)
                    except Exception:  # noqa: BLE001 - a damaged page chain: several pages, count unknown
                        pages = 0
        except (UnidentifiedImageError, OSError, SyntaxError, ValueError, EOFError, struct.error, KeyError,
                IndexError, TypeError, ZeroDivisionError, OverflowError, MemoryError):
            return None
        finally:
            Image.MAX_IMAGE_PIXELS = saved
    return ImageHeader(fmt, int(w), int(h), pages)


def _probe_tifffile(data: bytes) -> ImageHeader | None:
    try:
        import tifffile
    except ImportError:  # pragma: no cover - optional
        return None
    log = logging.getLogger("tifffile")
    was = log.disabled
    log.disabled = True
    try:
        with tifffile.TiffFile(io.BytesIO(data)) as tf:
            page = tf.pages.first
            w, h = int(page.imagewidth), int(page.imagelength)
            cplx = page.dtype is not None and np.dtype(page.dtype).kind == "c" or int(page.sampleformat) in (5, 6)
            try:
                pages = len(tf.pages)
            except Exception:  # noqa: BLE001
                pages = 0
    except Exception:  # noqa: BLE001 - any header failure means "not a TIFF we can read"
        return None
    finally:
        log.disabled = was
    return ImageHeader("TIFF", w, h, pages, cplx)


def _mp(megapixels: float) -> str:
    return f"{megapixels:.0f}" if megapixels >= 10 else f"{megapixels:.2g}"


def probe_header(data: bytes) -> ImageHeader | None:
    """Read the image header from the file's bytes without decoding pixels; ``None`` when no header is known."""
    head = bytes(data[:4])
    if head in (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+"):
        # tifffile sees sample formats (complex) and page chains that Pillow refuses outright
        return _probe_tifffile(data) or _probe_pillow(data)
    return _probe_pillow(data)


def _open_regular(p: Path):
    """Open ``p`` for binary reading only if it is a regular file: a FIFO, device or socket is refused without
    ever blocking on it (the open itself is non-blocking and the type is checked on the opened descriptor)."""
    try:
        st = os.stat(p)
    except FileNotFoundError:
        raise ImageError(f"{p}: no such file; check the path") from None
    except OSError as exc:
        raise ImageError(f"{p}: cannot be read ({exc.strerror or exc})") from None
    _refuse_irregular(p, st.st_mode)
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_NOCTTY", 0)
    try:
        fd = os.open(p, flags)
    except OSError as exc:
        raise ImageError(f"{p}: cannot be read ({exc.strerror or exc})") from None
    try:
        _refuse_irregular(p, os.fstat(fd).st_mode)  # the path may have been swapped since the stat above
    except BaseException:
        os.close(fd)
        raise
    return os.fdopen(fd, "rb")


def check_image_path(path: str | os.PathLike) -> Path:
    """Refuse a missing file, a folder, a pipe or a device by its path alone (nothing is opened), so that no
    other code that peeks at the image first (a header read for option checks) can block on it."""
    p = Path(path)
    try:
        st = os.stat(p)
    except FileNotFoundError:
        raise ImageError(f"{p}: no such file; check the path") from None
    except OSError as exc:
        raise ImageError(f"{p}: cannot be read ({exc.strerror or exc})") from None
    _refuse_irregular(p, st.st_mode)
    return p


def _refuse_irregular(p: Path, mode: int) -> None:
    if stat.S_ISREG(mode):
        return
    if stat.S_ISDIR(mode):
        raise ImageError(f"{p}: is a folder, not an image file; name an image (PNG, TIFF or JPEG)")
    kind = ("a named pipe (FIFO)" if stat.S_ISFIFO(mode) else "a device" if stat.S_ISCHR(mode) or stat.S_ISBLK(mode)
            else "a socket" if stat.S_ISSOCK(mode) else "not a regular file")
    raise ImageError(f"{p}: is {kind}, not an image file; save the frame to a file and give that")


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
    mix when the channels modulate alike (a grey image stored as colour). The chosen channel is returned as a
    view in the input's dtype; the luminance mix is made in float32, one channel at a time (no full-size
    float64 copies of a large colour frame).
    """
    notes: list[str] = []
    if raw.ndim == 2:
        return raw, "grey", notes
    if raw.shape[2] == 4:
        raw = raw[:, :, :3]
    names = ["blue", "green", "red"]
    spreads = []
    step_y, step_x = max(1, raw.shape[0] // 256), max(1, raw.shape[1] // 256)
    for i in range(raw.shape[2]):
        sub = raw[::step_y, ::step_x, i].astype(np.float64)
        p5, p95 = np.percentile(sub, [5, 95])
        spreads.append(p95 - p5)
    spreads = np.asarray(spreads)
    if not np.all(np.isfinite(spreads)):
        raise ImageError("image contains NaN or infinite values")
    if spreads.max() <= 0:
        return raw[:, :, 1], "green", notes
    if spreads.min() > 0.8 * spreads.max():
        grey = np.multiply(raw[:, :, 0], np.float32(0.114), dtype=np.float32)
        grey += np.multiply(raw[:, :, 1], np.float32(0.587), dtype=np.float32)
        grey += np.multiply(raw[:, :, 2], np.float32(0.299), dtype=np.float32)
        return grey, "luminance", notes
    best = int(np.argmax(spreads))
    notes.append(f"colour image: used the {names[best]} channel (strongest fringe modulation)")
    return raw[:, :, best], names[best], notes


def frame_from_array(
    data: np.ndarray, *, full_scale: float | None = None, path: str | None = None, sha256: str | None = None
) -> Frame:
    """Wrap an array (any numeric dtype, greyscale or colour in BGR order) as a validated :class:`Frame`.

    The result is made in float32 directly (no float64 copy of the frame): peak memory is the input plus one
    float32 frame (plus one more for a luminance mix of a colour image).
    """
    raw = np.asarray(data)
    if raw.ndim not in (2, 3) or (raw.ndim == 3 and raw.shape[2] not in (1, 3, 4)):
        raise ImageError(f"expected a 2-D greyscale or colour image, got an array of shape {raw.shape}")
    if raw.ndim == 3 and raw.shape[2] == 1:
        raw = raw[:, :, 0]
    if np.issubdtype(raw.dtype, np.complexfloating):
        raise ImageError("image data are complex numbers (a complex-valued TIFF?); ringgauge needs real "
                         "intensities — save the intensity (magnitude squared) as a greyscale image")
    if not np.issubdtype(raw.dtype, np.number):
        raise ImageError(f"image data must be numeric, got {raw.dtype}")
    integer_codes = raw.dtype in (np.uint8, np.uint16)
    bits = _effective_bits(raw) if integer_codes else 16
    if full_scale is None:
        if raw.dtype == np.uint8:
            full_scale = 255.0
        elif raw.dtype == np.uint16:
            full_scale = float((1 << bits) - 1)
        else:
            full_scale = 1.0
    if not (np.isfinite(full_scale) and full_scale > 0):
        raise ImageError(f"full scale of the image must be a positive finite number, got {full_scale}")
    grey, channel, notes = _to_grey(raw)
    if grey.dtype.kind == "f" and not np.isfinite(grey).all():
        raise ImageError("image contains NaN or infinite values")
    limit = full_scale - 0.5 if integer_codes else full_scale
    sat = float(np.count_nonzero(grey >= limit)) / grey.size if grey.size else 0.0
    if grey.dtype == np.float32 and not np.shares_memory(grey, raw):
        out = grey  # a fresh float32 array made by _to_grey: scale it in place
    else:
        out = grey.astype(np.float32)
    if grey.dtype.kind == "f" and grey.dtype.itemsize > 4 and not np.isfinite(out).all():
        raise ImageError("image values are too large for single precision")
    np.divide(out, np.float32(full_scale), out=out)
    if sha256 is None:
        sha256 = hashlib.sha256(np.ascontiguousarray(raw)).hexdigest()
    frame = Frame(out, path, sha256, bits, sat, channel, tuple(notes))
    validate_frame(frame)
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


def load_frame(path: str | os.PathLike, *, max_megapixels: float | None = None) -> Frame:
    """Read an image file into a :class:`Frame`.

    Reads 8- and 16-bit PNG and TIFF (12-bit data stored in 16-bit files is scaled to its own full scale),
    JPEG, BMP and PGM/PPM, and colour images (the channel with the strongest modulation is used).

    Hostile files are refused with a one-line :class:`ImageError` before they can cost memory or time: only
    regular files are opened (a FIFO or device never blocks), the header's declared size is checked against
    the pixel budget (``max_megapixels``, default :func:`pixel_budget`) before any pixel is decoded, a
    complex-valued TIFF is refused, a multi-page TIFF is read from its first page with a note saying so, and
    every decoder failure or limit becomes one line; library warnings are not printed.

    Parameters
    ----------
    path : str or path-like
        The image file.
    max_megapixels : float, optional
        Largest image accepted, in millions of pixels (default: :func:`pixel_budget`, 100 unless set).

    Returns
    -------
    Frame
        ``data``: float32 intensities scaled to 0-1 (rows = y, columns = x, pixel centres at integers), with the
        file's SHA-256, bit depth, the channel used, the saturated fraction (0-1) and notes.

    Raises
    ------
    ImageError
        The file cannot be read or is refused; the message is one line naming the file.
    """
    p = Path(path)
    raw, digest, notes = _read_raw(p, max_megapixels)
    frame = frame_from_array(raw, path=str(p), sha256=digest)
    if notes:
        frame = Frame(frame.data, frame.path, frame.sha256, frame.bit_depth, frame.saturated_fraction,
                      frame.channel, frame.notes + tuple(notes))
    return frame


def read_image_codes(path: str | os.PathLike, *, max_megapixels: float | None = None) -> np.ndarray:
    """The decoded pixel codes of an image file (uint8 / uint16 / float32, grey or BGR), read with every check
    of :func:`load_frame` (regular file, pixel budget from the header, one-line errors) — for code that needs
    the codes themselves, e.g. frames of a camera folder."""
    return _read_raw(Path(path), max_megapixels)[0]


def _read_raw(p: Path, max_megapixels: float | None) -> tuple[np.ndarray, str, list[str]]:
    import cv2

    _quiet_opencv(cv2)
    budget = pixel_budget() if max_megapixels is None else float(max_megapixels)
    max_bytes = int(budget * 1e6 * _BYTES_PER_PIXEL_LIMIT) + _METADATA_SLACK_BYTES
    with _open_regular(p) as fh:
        try:
            size = os.fstat(fh.fileno()).st_size
            if size > max_bytes:
                raise ImageError(f"{p}: the file is {size / 1e6:.0f} MB, too large for an image within the limit "
                                 f"of {budget:g} megapixels; raise it with --max-megapixels if the image is genuine")
            data = fh.read(max_bytes + 1)
        except OSError as exc:
            raise ImageError(f"{p}: cannot be read ({exc.strerror or exc})") from None
    if not data:
        raise ImageError(f"{p}: the file is empty (0 bytes)")
    if len(data) > max_bytes:
        raise ImageError(f"{p}: the file is too large for an image within the limit of {budget:g} megapixels")
    kind = "image" if p.suffix.lower() in IMAGE_SUFFIXES else "file"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        header = probe_header(data)
    if header is None:
        raise ImageError(f"{p}: cannot decode this {kind} (truncated, damaged, or not a {_KNOWN_FORMATS} image); "
                         "save it again as PNG or TIFF")
    if header.width <= 0 or header.height <= 0:
        raise ImageError(f"{p}: the {header.format} header declares an empty image ({header.width}x{header.height})")
    if header.megapixels > budget:
        raise ImageError(
            f"{p}: the {header.format} header declares {header.width}x{header.height} pixels "
            f"({_mp(header.megapixels)} megapixels), more than the limit of {budget:g} megapixels; "
            "raise it with --max-megapixels if the image is genuine"
        )
    if header.complex_valued:
        raise ImageError(f"{p}: the TIFF holds complex numbers, not intensities; save the intensity as a greyscale "
                         "image")
    logging.getLogger("ringgauge.imaging").debug("%s: %s header %dx%d, %s page(s), %d bytes", p, header.format,
                                                 header.width, header.height, header.pages or "several", len(data))
    notes: list[str] = []
    if header.pages != 1:
        count = f"{header.pages} pages" if header.pages else "several pages"
        notes.append(f"{p.name}: the {header.format} file holds {count}; only the first was used (give one frame "
                     "per file)")
    buf = np.frombuffer(data, dtype=np.uint8)
    with _native_stderr_silenced(), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            raw = cv2.imdecode(buf, cv2.IMREAD_UNCHANGED)
        except cv2.error as exc:
            raw = None
            decoder_msg = " ".join(str(exc).split())[-160:]
        else:
            decoder_msg = ""
        if raw is None and header.format == "TIFF":
            raw = _read_tiff_fallback(data)
    if raw is not None and (raw.size == 0 or raw.ndim not in (2, 3)):
        raw = None  # a decoder that gave up half-way
    if raw is None:
        why = f" (decoder: {decoder_msg})" if decoder_msg else ""
        raise ImageError(
            f"{p}: cannot decode this {kind} (truncated, damaged, or not an image){why}; save it again as PNG or TIFF"
        )
    if raw.shape[0] * raw.shape[1] > budget * 1e6:  # a decoder that disagreed with its header
        raise ImageError(f"{p}: the decoded image has {raw.shape[1]}x{raw.shape[0]} pixels, more than the limit of "
                         f"{budget:g} megapixels; raise it with --max-megapixels if the image is genuine")
    if np.issubdtype(raw.dtype, np.complexfloating):
        raise ImageError(f"{p}: the image holds complex numbers, not intensities; save the intensity as a greyscale "
                         "image")
    if raw.dtype == np.bool_:
        raw = raw.astype(np.uint8) * np.uint8(255)
    elif raw.dtype not in (np.uint8, np.uint16, np.float32):
        with np.errstate(all="ignore"):
            raw = raw.astype(np.float32)
    digest = hashlib.sha256(data).hexdigest()
    return raw, digest, notes


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


def _read_tiff_fallback(data: bytes):
    try:
        import tifffile  # optional: OpenCV reads the usual TIFFs itself
    except ImportError:
        return None
    log = logging.getLogger("tifffile")
    was = log.disabled
    log.disabled = True
    try:
        return tifffile.imread(io.BytesIO(data), key=0, maxworkers=1)
    except Exception:  # noqa: BLE001 - any decoding failure means "not usable"
        return None
    finally:
        log.disabled = was


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
