"""The argparse side of option checking: ``type=`` converters built on :mod:`ringgauge.options`' checks, the
``--max-megapixels`` option and the parser-wide guard against non-finite numbers.

Options use :func:`number` / :func:`integer` as their argparse ``type=``::

    p.add_argument("--pixel-size-u", type=number("--pixel-size-u", lo=0, hi=1000), ...)

argparse then prints ``ringgauge: argument --pixel-size-u: 'nan' is not a finite number ...`` and exits 2 before
any work is done.
"""

from __future__ import annotations

import argparse
import math
from typing import Callable

from ..errors import InputError
from ..options import DEFAULT_MAX_MEGAPIXELS, MAX_MEGAPIXELS_CEILING, NAME_MAX, _check, check_name


def _converter(name: str, option: str, **check) -> Callable[[str], float]:
    """An argparse ``type=`` applying :func:`ringgauge.options._check` (its message without the option's name,
    which argparse puts in front)."""

    def parse(text: str):
        try:
            return _check(text, option, named=False, **check)
        except ValueError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None

    parse.__name__ = name  # guard_parser knows these as checked already
    return parse


def number(option: str, *, lo: float | None = None, hi: float | None = None, lo_open: bool = False,
           hi_open: bool = False, unit: str = "") -> Callable[[str], float]:
    """An argparse ``type=`` for a finite float in [lo, hi] (open ends with ``lo_open`` / ``hi_open``)."""
    return _converter("number", option, lo=lo, hi=hi, lo_open=lo_open, hi_open=hi_open, integer=False, unit=unit)


def integer(option: str, *, lo: int | None = None, hi: int | None = None, unit: str = "") -> Callable[[str], int]:
    """An argparse ``type=`` for a whole number in [lo, hi]."""
    return _converter("integer", option, lo=lo, hi=hi, lo_open=False, hi_open=False, integer=True, unit=unit)


def name_type(what: str, *, max_len: int = NAME_MAX, free_text: bool = False) -> Callable[[str], str]:
    """An argparse ``type=`` applying :func:`check_name`."""

    def parse(text: str) -> str:
        try:
            return check_name(text, what, max_len=max_len, free_text=free_text)
        except InputError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None

    parse.__name__ = "name"
    return parse


# ---------------------------------------------------------------------------------------------- image budget


def add_max_megapixels(parser: argparse.ArgumentParser) -> None:
    """``--max-megapixels``: the largest image this command decodes (checked from the file header first).

    ``ringgauge.cli.main`` applies it to the process (and, through the environment, to its workers)."""
    if "--max-megapixels" in parser._option_string_actions:
        return
    parser.add_argument(
        "--max-megapixels", type=number("--max-megapixels", lo=0, hi=MAX_MEGAPIXELS_CEILING, lo_open=True),
        default=argparse.SUPPRESS, metavar="MP",
        help=f"refuse images larger than MP megapixels before decoding them (default {DEFAULT_MAX_MEGAPIXELS:g}; "
             "a crafted small file can declare a huge image)")


# ------------------------------------------------------------------------------------ a guard for every option


def guard_parser(parser: argparse.ArgumentParser) -> None:
    """Make every option of ``parser`` and its sub-parsers refuse a non-finite number, whatever its ``type=``.

    Called once by the command line after all commands registered: an option whose own type converter lets
    ``nan`` or ``inf`` through (``type=float``, a hand-written converter) is refused in one line naming it,
    before any work is done. Options using :func:`number` / :func:`integer` are checked (and ranged) already.
    """
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for sub in dict.fromkeys(action.choices.values()):
                guard_parser(sub)
            continue
        convert = action.type
        if convert is None or getattr(convert, "_finite_guard", False) or \
                getattr(convert, "__name__", "") in ("number", "integer", "name"):
            continue
        if isinstance(convert, type) and not issubclass(convert, (int, float)):
            continue  # str, Path...: nothing numeric to guard
        action.type = _guarded(convert)


def _guarded(convert):
    def guarded(text):
        value = convert(text)
        if isinstance(value, float) and not math.isfinite(value):
            raise argparse.ArgumentTypeError(f"'{text}' is not a finite number")
        return value

    guarded.__name__ = getattr(convert, "__name__", "value")  # argparse names it in "invalid ... value" messages
    guarded._finite_guard = True
    return guarded
