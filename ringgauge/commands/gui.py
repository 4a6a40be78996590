"""``ringgauge gui [PATH ...]``: open the bench window, optionally with images, a watched camera folder, a lot
folder or the training page."""

from __future__ import annotations

import os

from ..errors import InputError


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "gui",
        help="open the bench window",
        description="Open the bench window. PATH may be one image, several frames of one measurement, or a "
                    "folder of frames. Settings persist between runs (under RINGGAUGE_HOME when set).",
    )
    p.add_argument("paths", nargs="*", metavar="PATH", help="image file(s) or a folder of frames to open")
    p.add_argument("--watch", metavar="FOLDER", help="analyse each new image the bench camera saves in FOLDER")
    p.add_argument("--lot", metavar="FOLDER", help="open the lot review page on the images in FOLDER and analyse them")
    p.add_argument("--training", action="store_true", help="start on the training page")
    p.add_argument("--camera", metavar="SOURCE",
                   help="start on the Live page with this camera: an index (0), a stream address, a video file or a "
                   "folder of numbered frames")
    p.add_argument("--db", metavar="PATH|URL", default=None,
                   help="records store the window keeps results in: a SQLite file or a postgresql:// server "
                        "(default: $RINGGAUGE_DB, else records.sqlite in the ringgauge folder)")
    from ._options import add_max_megapixels

    add_max_megapixels(p)
    p.set_defaults(func=run)


def run(args) -> int:
    db = getattr(args, "db", None)
    if db or os.environ.get("RINGGAUGE_DB"):
        from ..records.address import parse_address

        # checked now (one line, password never shown) rather than at the first Ctrl+K; the window opens its
        # store with open_store(None), which follows RINGGAUGE_DB — the same store the command line uses
        parse_address(db if db else os.environ["RINGGAUGE_DB"], option="--db" if db else "RINGGAUGE_DB")
        if db:
            os.environ["RINGGAUGE_DB"] = db
    cam = getattr(args, "camera", None)
    if cam is not None and not cam.strip().isdigit() and "://" not in cam and not os.path.exists(cam):
        raise InputError(f"--camera {cam}: no such file or folder (give a camera index, a stream address, a video "
                         "file or a folder of frames)")
    for p in args.paths:
        if not os.path.exists(p):
            raise InputError(f"{p}: no such file or folder")
    for opt in ("watch", "lot"):
        folder = getattr(args, opt)
        if folder and not os.path.isdir(folder):
            raise InputError(f"--{opt} {folder}: no such folder")
    if (os.name == "posix" and not os.environ.get("DISPLAY") and not os.environ.get("WAYLAND_DISPLAY")
            and not os.environ.get("QT_QPA_PLATFORM") and not _is_macos()):
        raise InputError("no display to open the window on; run it on a desktop, or under xvfb-run")
    try:
        from ..gui.app import run as run_window
    except ImportError as exc:
        raise InputError(f"the window cannot start: PySide6 is not installed or broken ({exc})") from None
    return run_window(args.paths, watch=args.watch, lot=args.lot, training=args.training,
                      camera=getattr(args, "camera", None))


def _is_macos() -> bool:
    import sys

    return sys.platform == "darwin"
