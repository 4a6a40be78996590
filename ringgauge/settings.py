"""Where ringgauge keeps the user's files, and how they are written safely.

``RINGGAUGE_HOME`` overrides the base folder (tests and demos use it); otherwise the platform's user data
folder is used.

Every settings, register and export file goes through :func:`write_text_atomic` / :func:`write_json_atomic`:
the text goes to a temporary file in the target's own folder, is flushed to disk (fsync) and then replaces the
target in one step (``os.replace``), all while holding a lock file beside the target (``<name>.lock``, via
``filelock``). A reader therefore sees the old file or the new one, never half of one, and a killed writer
leaves at most a stale temporary file that the next write ignores. Read-modify-write cycles (adding a plate to
the register while another process adds one too) hold :func:`locked` around the whole cycle so no update is
lost; the writers take the same lock re-entrantly.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import tempfile
import threading
from pathlib import Path
from typing import Any, Iterator

from .errors import InputError, RinggaugeError

#: How long a writer waits for another process's lock before giving up with a clear message (seconds).
LOCK_TIMEOUT_S = 30.0


def home() -> Path:
    env = os.environ.get("RINGGAUGE_HOME")
    if env:
        p = Path(env).expanduser()
        where = "RINGGAUGE_HOME"
    else:
        from platformdirs import user_data_dir

        p = Path(user_data_dir("ringgauge", appauthor=False))
        where = "the user data folder"
    if p.exists() and not p.is_dir():
        raise InputError(f"{where} {p} is not a folder; point RINGGAUGE_HOME at a folder (or unset it)")
    try:
        p.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create {where} {p}: {exc.strerror or exc}; point RINGGAUGE_HOME at a "
                         "writable folder") from None
    return p


def path(name: str) -> Path:
    """A file in the user's ringgauge folder, e.g. ``path('benches.json')``."""
    return home() / name


# ---------------------------------------------------------------------------------------------------------------
# locking and atomic writes

_held = threading.local()


def _lock_path(target: Path) -> Path:
    return target.with_name(target.name + ".lock")


@contextlib.contextmanager
def locked(target: str | os.PathLike, *, timeout: float | None = None) -> Iterator[Path]:
    """Hold the lock file beside ``target`` for a read-modify-write cycle.

    Re-entrant in one thread: the atomic writers below may be called inside the block. Raises a one-line
    :class:`RinggaugeError` when the lock cannot be had within ``timeout`` seconds (default
    :data:`LOCK_TIMEOUT_S`) or the folder cannot hold a lock file.
    """
    from filelock import FileLock, Timeout

    target = Path(target)
    key = str(target.resolve()) if target.parent.exists() else str(target.absolute())
    depth = getattr(_held, "locks", None)
    if depth is None:
        depth = _held.locks = {}
    if depth.get(key):
        depth[key] += 1
        try:
            yield target
        finally:
            depth[key] -= 1
        return
    parent = target.parent
    if parent.exists() and not parent.is_dir():
        raise InputError(f"{parent} is not a folder, so {target.name} cannot be written there")
    try:
        parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create folder {parent}: {exc.strerror or exc}") from None
    lock = FileLock(str(_lock_path(target)), timeout=LOCK_TIMEOUT_S if timeout is None else timeout)
    try:
        lock.acquire()
    except Timeout:
        raise RinggaugeError(f"{target} is being changed by another ringgauge process (lock {lock.lock_file} "
                             "held); try again in a moment") from None
    except OSError as exc:
        raise InputError(f"cannot lock {target}: {exc.strerror or exc}") from None
    depth[key] = 1
    try:
        yield target
    finally:
        depth.pop(key, None)
        lock.release()


def write_text_atomic(target: str | os.PathLike, text: str | bytes, *, encoding: str = "utf-8",
                      lock: bool = True) -> Path:
    """Write ``text`` to ``target`` atomically (temp file in the same folder, fsync, ``os.replace``) under its lock.

    ``text`` may also be ``bytes`` (written as they are). ``lock=False`` is for one-off outputs in the user's
    folders (exports, charts, result files): the replacement is just as atomic, and no ``.lock`` file is left
    beside them; settings files keep the lock (their read-modify-write cycles need it).

    The replaced file keeps the old file's permission bits (or 0o644 less the umask for a new file). A failure
    leaves the old file untouched and no temporary file behind, and is raised as one line.
    """
    target = Path(target)
    if target.is_dir():
        raise InputError(f"{target} is a folder; give a file name to write to")
    data = text if isinstance(text, bytes) else text.encode(encoding)
    with (locked(target) if lock else contextlib.nullcontext()):
        fd, tmp = None, None
        try:
            fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=str(target.parent))
            try:
                mode = target.stat().st_mode & 0o7777
            except FileNotFoundError:
                umask = os.umask(0)
                os.umask(umask)
                mode = 0o644 & ~umask
            os.fchmod(fd, mode)
            view = memoryview(data)
            while view:
                n = os.write(fd, view)
                view = view[n:]
            os.fsync(fd)
            os.close(fd)
            fd = None
            os.replace(tmp, target)
            tmp = None
            _fsync_dir(target.parent)
        except OSError as exc:
            raise InputError(f"cannot write {target}: {exc.strerror or exc}") from None
        finally:
            if fd is not None:
                os.close(fd)
            if tmp is not None:
                with contextlib.suppress(OSError):
                    os.unlink(tmp)
    return target


def write_private(target: Path, data: bytes) -> None:
    """Write a secret file readable by its owner only (0600), atomically, refusing to follow a symlink."""
    target = Path(target)
    with locked(target):
        tmp = target.with_name(f".{target.name}.{os.getpid()}.tmp")
        try:
            fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0), 0o600)
            try:
                os.fchmod(fd, 0o600)
                os.write(fd, data)
                os.fsync(fd)
            finally:
                os.close(fd)
            os.replace(tmp, target)
        except OSError as exc:
            try:
                tmp.unlink()
            except OSError:
                pass
            raise InputError(f"cannot write {target}: {exc.strerror or exc}") from None


def _fsync_dir(folder: Path) -> None:
    try:
        dfd = os.open(str(folder), os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(dfd)
    except OSError:
        pass
    finally:
        os.close(dfd)


def read_regular_bytes(source: str | os.PathLike, *, what: str, max_bytes: int | None = None) -> bytes:
    """The bytes of a file the user named, refusing anything but a regular file without blocking on it (a named
    pipe or device given as a lot sheet, result or document used to hang the command). One-line errors."""
    import stat as _stat

    p = Path(source)
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_NOCTTY", 0)
    try:
        fd = os.open(p, flags)
    except FileNotFoundError:
        raise InputError(f"{what} {p}: no such file") from None
    except IsADirectoryError:
        raise InputError(f"{what} {p} is a folder; give a file") from None
    except OSError as exc:
        raise InputError(f"cannot read {what} {p}: {exc.strerror or exc}") from None
    try:
        st = os.fstat(fd)
        if _stat.S_ISDIR(st.st_mode):
            raise InputError(f"{what} {p} is a folder; give a file")
        if not _stat.S_ISREG(st.st_mode):
            raise InputError(f"{what} {p} is not a regular file (a named pipe or device?); give a file")
        if max_bytes is not None and st.st_size > max_bytes:
            raise InputError(f"{what} {p} is {st.st_size} bytes, more than the {max_bytes} allowed")
        chunks, total = [], 0
        while True:
            chunk = os.read(fd, 1 << 20)
            if not chunk:
                break
            total += len(chunk)
            if max_bytes is not None and total > max_bytes:
                raise InputError(f"{what} {p} is more than the {max_bytes} bytes allowed")
            chunks.append(chunk)
        return b"".join(chunks)
    except OSError as exc:
        raise InputError(f"cannot read {what} {p}: {exc.strerror or exc}") from None
    finally:
        os.close(fd)


def check_target(target: str | os.PathLike, what: str) -> Path:
    """Refuse an output file that cannot be written, before any work is done (one-line message naming ``what``):
    a folder, a special file, a missing or read-only folder."""
    p = Path(target)
    if p.is_dir():
        raise InputError(f"{what} {p} is a folder; give a file name in it, e.g. {p / 'out'}")
    if p.exists() and not p.is_file():
        raise InputError(f"{what} {p} is not a regular file")
    parent = p.parent
    if not parent.is_dir():
        raise InputError(f"{what} {p}: folder {parent} does not exist")
    if not os.access(parent, os.W_OK | os.X_OK) or (p.exists() and not os.access(p, os.W_OK)):
        raise InputError(f"{what} {p}: no permission to write there")
    return p


def dumps_json(obj: Any, *, what: str = "output", indent: int | None = 2) -> str:
    """``json.dumps`` that never writes NaN or Infinity (invalid JSON); a non-finite number is a one-line error."""
    try:
        return json.dumps(obj, indent=indent, ensure_ascii=False, allow_nan=False)
    except ValueError as exc:
        if "not JSON compliant" in str(exc) or "Out of range float" in str(exc):
            raise RinggaugeError(f"{what} holds a number that is not finite (NaN or infinity); "
                                 "check the options and input that produced it") from None
        raise


def write_json_atomic(target: str | os.PathLike, obj: Any, *, what: str | None = None) -> Path:
    """Write ``obj`` as indented UTF-8 JSON (with a final newline) through :func:`write_text_atomic`."""
    text = dumps_json(obj, what=what or str(target)) + "\n"
    return write_text_atomic(target, text)


def read_json(target: str | os.PathLike, *, what: str, missing: Any = ...) -> Any:
    """Read a JSON file; any failure is a one-line :class:`RinggaugeError` naming ``what``.

    ``missing`` is returned when the file does not exist (when given); otherwise a missing file is an error too.
    """
    target = Path(target)
    try:
        if not target.exists() and missing is not ...:
            return missing
        if target.exists() and not target.is_file():
            raise InputError(f"{what} {target} is not a regular file")
        raw = target.read_bytes()
    except FileNotFoundError:
        raise InputError(f"{what} {target} does not exist") from None
    except OSError as exc:
        raise InputError(f"cannot read {what} {target}: {exc.strerror or exc}") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise InputError(f"{what} {target} is damaged (not UTF-8 text); restore it from a backup or remove it") \
            from None

    def _no_constant(name: str) -> float:
        raise ValueError(f"non-finite number {name}")

    try:
        return json.loads(text, parse_constant=_no_constant)
    except (ValueError, RecursionError) as exc:
        line = getattr(exc, "lineno", None)
        at = f" at line {line}" if line else ""
        raise InputError(f"{what} {target} is damaged (not valid JSON{at}); restore it from a backup or "
                         "remove it") from None


def finite_json(obj: Any) -> bool:
    """True when ``obj`` holds no NaN or infinity anywhere (for checks before a record is kept)."""
    if isinstance(obj, float):
        return math.isfinite(obj)
    if isinstance(obj, dict):
        return all(finite_json(v) for v in obj.values())
    if isinstance(obj, (list, tuple)):
        return all(finite_json(v) for v in obj)
    return True
