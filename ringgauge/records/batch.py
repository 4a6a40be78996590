"""Lot processing: analyse every image of a folder in parallel and record each result as it arrives.

The analyses run in worker processes; only this (the parent) process writes to the store, one transaction
per image, so an interruption — Ctrl-C, a kill, a crash, a power cut — loses at most the images still being
analysed and never leaves half a record. Running the same command again skips every image whose checksum the
lot already holds (finished or failed) and carries on with the rest. A bad image does not stop the lot: it is
recorded as failed, with the reason.
"""

from __future__ import annotations

import math
import os
import signal
import sys
import time
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, TextIO

from ..errors import InputError, RinggaugeError
from ..imaging import IMAGE_SUFFIXES, sha256_file
from .store import RecordMeta, Store


def find_images(folder: str | os.PathLike, *, recursive: bool = False) -> list[Path]:
    """Image files in ``folder`` (PNG, TIFF, JPEG, BMP, PGM/PPM), sorted by name."""
    p = Path(folder)
    if not p.exists():
        raise InputError(f"{p}: no such folder")
    if not p.is_dir():
        raise InputError(f"{p}: is a file; give the folder that holds the lot's images")
    pattern = "**/*" if recursive else "*"
    files = sorted(f for f in p.glob(pattern) if f.is_file() and f.suffix.lower() in IMAGE_SUFFIXES
                   and not f.name.startswith("."))
    if not files:
        raise InputError(f"{p}: no image files (PNG, TIFF, JPEG, BMP) in this folder")
    return files


def analyse_image(path: str, setup) -> dict:
    """Analyse one image file with the standard pipeline; returns ``AnalysisResult.to_dict()``."""
    from ..pipeline import analyse_files

    return analyse_files([path], setup).to_dict()


def _worker_init(parent_pid: int | None = None) -> None:
    # A worker must never outlive the lot run that started it (a killed parent used to leave its workers and
    # the multiprocessing helper running): see _die_with_parent.
    _die_with_parent(parent_pid)
    # Ctrl-C goes to the whole process group; only the parent decides what to do with it.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    # Each worker uses one core: numerical libraries must not start their own thread pools on top.
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")
    # a damaged file is recorded as failed with its reason; the decoder's own log line would only be noise
    os.environ.setdefault("OPENCV_LOG_LEVEL", "OFF")


#: how often a worker checks that its parent is still alive (seconds)
PARENT_WATCH_S = 0.5


def _die_with_parent(parent_pid: int | None) -> None:
    """Make this (worker) process end when ``parent_pid`` ends, however it ends (even SIGKILL).

    On Linux the kernel does it: ``prctl(PR_SET_PDEATHSIG, SIGKILL)``. Everywhere, a daemon thread also watches
    ``os.getppid()``: when the parent dies the worker is re-parented and the pid changes, and the worker exits
    at once. Workers write nothing (only the parent writes the store), so ending them abruptly loses nothing.
    Once the workers are gone, multiprocessing's resource tracker sees its last pipe close and exits too.
    """
    import threading

    parent = parent_pid if parent_pid is not None else os.getppid()
    if sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            pr_set_pdeathsig = 1
            libc.prctl(pr_set_pdeathsig, int(signal.SIGKILL), 0, 0, 0)
        except (OSError, AttributeError):  # pragma: no cover - no prctl: the watch thread still works
            pass
    if os.getppid() != parent:  # the parent died before the kernel watch was in place
        os._exit(1)

    def watch() -> None:
        while True:
            time.sleep(PARENT_WATCH_S)
            if os.getppid() != parent:
                os._exit(1)

    threading.Thread(target=watch, name="ringgauge-parent-watch", daemon=True).start()


def _run_one(fn: Callable, path: str, setup) -> tuple[dict | None, str | None]:
    try:
        return fn(path, setup), None
    except RinggaugeError as exc:
        return None, str(exc)
    except MemoryError:
        return None, "out of memory while analysing this image"
    except Exception as exc:  # noqa: BLE001 - one bad image must not stop the lot; the reason is recorded
        return None, f"internal error ({type(exc).__name__}: {exc})"


class Progress:
    """A progress line on stderr: count, rate, time left. On a terminal it redraws in place; otherwise it
    writes a line every ``every_s`` seconds (and at the end) so logs stay short."""

    def __init__(self, total: int, stream: TextIO | None = None, *, every_s: float = 10.0, width: int = 24):
        self.total = total
        self.stream = stream if stream is not None else sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.every_s = every_s
        self.width = width
        self.start = time.monotonic()
        self.last = 0.0
        self.done = 0
        self.failed = 0

    def line(self) -> str:
        el = time.monotonic() - self.start
        rate = self.done / el if el > 0 else 0.0
        left = (self.total - self.done) / rate if rate > 0 else math.inf
        frac = self.done / self.total if self.total else 1.0
        bar = "#" * int(round(frac * self.width))
        eta = "--" if not math.isfinite(left) else _duration(left)
        return (f"[{bar:<{self.width}}] {self.done}/{self.total} images  {rate:.2f} images/s  "
                f"time left {eta}  failed {self.failed}")

    def update(self, *, failed: bool = False, final: bool = False) -> None:
        if not final:
            self.done += 1
            self.failed += int(failed)
        now = time.monotonic()
        if self.tty:
            self.stream.write("\r" + self.line() + ("\n" if final else ""))
            self.stream.flush()
        elif final or now - self.last >= self.every_s:
            self.stream.write(self.line() + "\n")
            self.stream.flush()
            self.last = now


def _duration(s: float) -> str:
    s = int(round(s))
    if s < 60:
        return f"{s} s"
    if s < 3600:
        return f"{s // 60} min {s % 60:02d} s"
    return f"{s // 3600} h {(s % 3600) // 60:02d} min"


@dataclass
class LotRun:
    """What one run of a lot did."""

    lot: str
    images: int
    skipped: int = 0
    recorded: int = 0
    failed: int = 0
    interrupted: bool = False
    record_ids: list[int] = field(default_factory=list)
    elapsed_s: float = 0.0

    @property
    def remaining(self) -> int:
        return self.images - self.skipped - self.recorded


class _Stop(Exception):
    pass


def run_lot(
    store: Store,
    images: list[Path],
    setup,
    meta: RecordMeta,
    *,
    workers: int | None = None,
    analyse_fn: Callable = analyse_image,
    retry_failed: bool = False,
    serial_from_name: bool = True,
    progress: Progress | None | bool = True,
    max_images: int | None = None,
    warnings: list[str] | tuple[str, ...] = (),
) -> LotRun:
    """Analyse ``images`` in parallel and record each result in ``store`` under ``meta.lot``.

    Images the lot already holds (same SHA-256) are skipped; with ``retry_failed`` a failed one is analysed
    again and its new record supersedes the failed one. ``analyse_fn(path, setup) -> dict`` must be a
    module-level function (it is sent to worker processes). ``max_images`` stops after that many new records
    (for trials). ``warnings`` (e.g. an overdue bench calibration) are added to every result. Returns counts;
    ``interrupted`` is set after Ctrl-C or SIGTERM (the records written so far are kept).
    """
    if not meta.lot:
        raise InputError("a lot run needs a lot name (--lot)")
    t0 = time.monotonic()
    n_workers = max(1, min(workers or os.cpu_count() or 1, 61))
    done = store.done_in_lot(meta.lot)
    todo: list[tuple[str, str | None, int | None]] = []  # (path, sha256, failed record to supersede)
    run = LotRun(meta.lot, len(images))
    seen: set[str] = set()
    for p in images:
        p = Path(p).resolve()  # records keep absolute paths: certificates are printed from anywhere
        try:
            sha = sha256_file(p)
        except (OSError, RinggaugeError):  # unreadable, or swapped for a pipe: recorded as failed by its worker
            todo.append((str(p), None, None))
            continue
        if sha in seen:  # the same image twice in the folder (a copy): analyse once
            run.skipped += 1
            continue
        seen.add(sha)
        prior = done.get(sha)
        if prior is not None and not (retry_failed and prior.status == "failed"):
            run.skipped += 1
            continue
        todo.append((str(p), sha, prior.id if prior is not None else None))
    if max_images is not None:
        todo = todo[: max(0, int(max_images))]
    bar = progress if isinstance(progress, Progress) else (Progress(len(todo)) if progress else None)
    if not todo:
        run.elapsed_s = time.monotonic() - t0
        return run

    def on_term(signum, frame):  # SIGTERM: stop taking new images, like Ctrl-C
        raise _Stop()

    old_term = signal.signal(signal.SIGTERM, on_term) if _main_thread() else None
    import multiprocessing

    ctx = multiprocessing.get_context("spawn")

    def new_pool(n: int) -> ProcessPoolExecutor:
        return ProcessPoolExecutor(max_workers=n, mp_context=ctx, initializer=_worker_init,
                                   initargs=(os.getpid(),))

    pool = new_pool(min(n_workers, len(todo)))
    pending: dict = {}
    queue = list(reversed(todo))
    # Images in flight when a worker process crashed (a native crash takes the whole pool down) are analysed
    # again one at a time at the end, so the crash is pinned on the image that causes it and no other.
    suspects: list = []
    serial = False

    def submit(job) -> None:
        nonlocal pool
        try:
            fut = pool.submit(_run_one, analyse_fn, job[0], setup)
        except BrokenProcessPool:
            pool.shutdown(wait=False, cancel_futures=True)
            pool = new_pool(1 if serial else min(n_workers, len(todo)))
            fut = pool.submit(_run_one, analyse_fn, job[0], setup)
        pending[fut] = job

    def collect(fut) -> None:
        job = pending.pop(fut)
        try:
            result, failure = fut.result()
        except BrokenProcessPool:
            if not serial:
                suspects.append(job)
                return
            result, failure = None, "the analysis process crashed on this image (it was tried on its own)"
        except Exception as exc:  # noqa: BLE001 - anything else from the worker is this image's failure
            result, failure = None, f"analysis process failed ({type(exc).__name__}: {exc})"
        _record(store, run, meta, job, result, failure, serial_from_name, bar, warnings)

    try:
        try:
            # keep at most two images per worker in flight, so a stop loses little and memory stays flat
            while queue or pending or suspects:
                if not queue and not pending and suspects and not serial:
                    serial = True
                    queue = list(reversed(suspects))
                    suspects.clear()
                limit = 1 if serial else 2 * n_workers
                while queue and len(pending) < limit:
                    submit(queue.pop())
                if not pending:
                    continue
                finished, _ = wait(list(pending), return_when=FIRST_COMPLETED)
                for fut in finished:
                    collect(fut)
        except (KeyboardInterrupt, _Stop):
            run.interrupted = True
            queue.clear()
            suspects.clear()
            for fut in list(pending):
                if fut.cancel():
                    pending.pop(fut)
            if bar:
                bar.stream.write("\nringgauge: stopping — finishing the images already being analysed "
                                 "(press Ctrl-C again to stop at once)\n")
            # record what is already running: nothing that was analysed is thrown away
            while pending:
                finished, _ = wait(list(pending), return_when=FIRST_COMPLETED)
                for fut in finished:
                    collect(fut)
            suspects.clear()
    finally:
        pool.shutdown(wait=not run.interrupted, cancel_futures=True)
        if old_term is not None:
            signal.signal(signal.SIGTERM, old_term)
        if bar:
            bar.update(final=True)
    run.elapsed_s = time.monotonic() - t0
    return run


def _main_thread() -> bool:
    import threading

    return threading.current_thread() is threading.main_thread()


def _record(store: Store, run: LotRun, meta: RecordMeta, job, result, failure, serial_from_name: bool, bar,
            warnings=()) -> None:
    path, sha, prior = job
    if failure is None and not isinstance(result, dict):
        result, failure = None, "analysis returned no result"
    if result is not None and warnings:
        result = {**result, "warnings": list(warnings) + list(result.get("warnings") or [])}
    if serial_from_name and not meta.serial:
        from ..options import clean_name

        m = meta.with_(serial=clean_name(Path(path).stem))  # a file name may hold characters a name may not
    else:
        m = meta
    if prior is not None:
        rec = store.supersede(prior, "analysed again after a failure (--retry-failed)", result=result,
                              failure=failure, image_path=path, image_sha256=sha)
    else:
        rec = store.add(m, result, image_path=path, image_sha256=sha, failure=failure, once_per_lot=True)
    run.recorded += 1
    run.failed += int(failure is not None)
    run.record_ids.append(rec.id)
    import logging

    logging.getLogger("ringgauge.batch").info("%s: record %d%s", path, rec.id,
                                              f" (failed: {failure})" if failure is not None else "")
    if bar:
        bar.update(failed=failure is not None)
