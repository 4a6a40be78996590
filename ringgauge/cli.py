"""The ``ringgauge`` command line: a thin layer over :mod:`ringgauge.pipeline` and friends.

Each sub-command lives in ``ringgauge/commands/<name>.py`` and provides ``register(subparsers)``, which adds
its parser and sets ``func`` to a callable ``run(args) -> int``.
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import sys
import traceback

from . import __version__
from .errors import RinggaugeError

#: sub-commands in the order ``--help`` lists them
COMMANDS = (
    "analyze",
    "simulate",
    "calibrate",
    "bench",
    "plates",
    "batch",
    "records",
    "certificate",
    "gui",
    "watch",
    "sources",
)


#: exit statuses of every command (printed by ``ringgauge --help``; the README lists the same)
EXIT_CODES = (
    (0, "success (for checks: everything verified)"),
    (1, "a check found a problem: an altered record ('records check'), a document that did not verify"),
    (2, "unusable input: a missing or unreadable file, a bad option or value (usage errors too)"),
    (3, "no trustworthy measurement could be made from the image(s), or no usable calibration"),
    (4, "the records store cannot be opened or written"),
    (5, "out of memory"),
    (70, "internal error (a bug): one line on the terminal, details in crash.log in the settings folder"),
    (130, "interrupted (Ctrl+C); work already recorded is kept"),
)


def _exit_codes_text() -> str:
    return "exit status:\n" + "\n".join(f"  {code:<4d} {what}" for code, what in EXIT_CODES)


class _Parser(argparse.ArgumentParser):
    """argparse that reports a usage error as one line plus a hint, exit 2."""

    def error(self, message: str):  # noqa: D401
        self.exit(2, f"ringgauge: {message} (see '{self.prog} --help')\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="ringgauge",
        description=(
            "Lens metrology with interference rings: radius of curvature from Newton's rings on an optical\n"
            "flat, surface form against a test plate (ISO 10110-5), uncertainty budgets, records, certificates."
        ),
        epilog=_exit_codes_text(),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"ringgauge {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in COMMANDS:
        modname = f"ringgauge.commands.{name}"
        if importlib.util.find_spec(modname) is None:
            continue
        importlib.import_module(modname).register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help(sys.stderr)
        return 2
    try:
        return int(args.func(args) or 0)
    except RinggaugeError as exc:
        print(f"ringgauge: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("ringgauge: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
    except MemoryError:
        print("ringgauge: out of memory; try a smaller image or fewer workers", file=sys.stderr)
        return 5
    except Exception as exc:  # noqa: BLE001 - last line of defence: one line, details to a log file
        log = _write_crash_log()
        print(
            f"ringgauge: internal error ({type(exc).__name__}: {exc}); details in {log} — please report it",
            file=sys.stderr,
        )
        return 70


def _write_crash_log() -> str:
    try:
        from .settings import path

        p = path("crash.log")
        with open(p, "a", encoding="utf-8") as fh:
            fh.write(traceback.format_exc())
            fh.write("\n")
        return str(p)
    except Exception:  # noqa: BLE001
        return "(no log could be written)"


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
