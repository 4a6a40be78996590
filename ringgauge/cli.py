"""The ``ringgauge`` command line: a thin layer over :mod:`ringgauge.pipeline` and friends.

Each sub-command lives in ``ringgauge/commands/<name>.py`` and provides ``register(subparsers)``, which adds
its parser and sets ``func`` to a callable ``run(args) -> int``.
"""

from __future__ import annotations

import argparse
import importlib
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
    "shop",
    "gui",
    "watch",
    "sources",
    "paths",
)


#: exit statuses of every command (printed by ``ringgauge --help``; the README lists the same)
EXIT_CODES = (
    (0, "success (for checks: everything verified)"),
    (1, "a check found a problem: an altered record ('records check'), a document that did not verify"),
    (2, "unusable input: a missing or unreadable file, a bad option or value (usage errors too)"),
    (3, "no trustworthy measurement could be made from the image(s), or no usable calibration"),
    (4, "the records store cannot be opened or written"),
    (5, "out of memory"),
    (70, "internal error (a bug): one line on the terminal, details in crash.log (see 'ringgauge paths')"),
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
    _add_log_options(parser, top=True)
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in COMMANDS:
        importlib.import_module(f"ringgauge.commands.{name}").register(sub)
    _add_log_options_below(parser)
    from .commands._options import guard_parser

    guard_parser(parser)  # no option of any command lets NaN or infinity through
    return parser


def _add_log_options(p: argparse.ArgumentParser, *, top: bool = False) -> None:
    """-v / --debug / --quiet, accepted before or after the command (a sub-command's own --quiet is kept)."""
    taken = p._option_string_actions
    kw = {} if top else {"default": argparse.SUPPRESS}
    g = p.add_argument_group("logging")
    if "-v" not in taken and "--verbose" not in taken:
        g.add_argument("-v", "--verbose", dest="log_verbose", action="count",
                       help="more messages on the terminal (progress details)", **({"default": 0} if top else kw))
    if "--debug" not in taken:
        g.add_argument("--debug", dest="log_debug", action="store_true",
                       help="everything on the terminal and in the log file", **kw)
    if "--quiet" not in taken:
        g.add_argument("--quiet", dest="log_quiet", action="store_true", help="errors only on the terminal", **kw)


def _add_log_options_below(parser: argparse.ArgumentParser) -> None:
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for sp in dict.fromkeys(action.choices.values()):  # aliases map to the same parser
                _add_log_options(sp)
                _add_log_options_below(sp)


def _verbosity(args) -> int:
    if getattr(args, "log_debug", False):
        return 2
    if getattr(args, "log_quiet", False) or getattr(args, "quiet", False) is True:
        return -1
    return min(int(getattr(args, "log_verbose", 0) or 0), 1)


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # a usage error is an exit status like any other; --help / --version still exit
        if exc.code in (0, None):
            raise
        return exc.code if isinstance(exc.code, int) else 2
    if not getattr(args, "func", None):
        parser.print_help(sys.stderr)
        return 2
    import logging

    from . import logs

    log = logs.setup(_verbosity(args))
    log.info("ringgauge %s: %s started", __version__, getattr(args, "command", ""), extra={logs.FILE_ONLY: True})
    try:
        if getattr(args, "max_megapixels", None) is not None:
            from .imaging import set_pixel_budget

            set_pixel_budget(args.max_megapixels)
        code = int(args.func(args) or 0)
        log.info("%s finished (exit %d)", getattr(args, "command", ""), code)
        return code
    except RinggaugeError as exc:
        print(f"ringgauge: {exc}", file=sys.stderr)
        log.error("%s (exit %d)", exc, exc.exit_code, extra={logs.FILE_ONLY: True})
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
        where = _write_crash_log()
        what = logs.redact_text(" ".join(f"{type(exc).__name__}: {exc}".split()))[:300]
        print(f"ringgauge: internal error ({what}); details in {where} — please report it", file=sys.stderr)
        logging.getLogger("ringgauge").error("internal error %s", what, extra={logs.FILE_ONLY: True})
        return 70


def _write_crash_log() -> str:
    """The traceback goes to the bounded crash log in the log folder (never fails; says where it went)."""
    from .logs import write_crash

    return write_crash(traceback.format_exc())


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
