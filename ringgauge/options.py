"""One validation for every numeric option and setting: finite, in range, the option named in the message.

Command-line options use :func:`number` / :func:`integer` as their argparse ``type=``::

    p.add_argument("--pixel-size-u", type=number("--pixel-size-u", lo=0, hi=1000), ...)

argparse then prints ``ringgauge: argument --pixel-size-u: 'nan' is not a finite number ...`` and exits 2 before
any work is done. Values that arrive another way (lot sheets, bench profiles, the window's fields) go through
:func:`check_number`, which raises the same message as a one-line :class:`~ringgauge.errors.InputError`.

Names (lot, serial, operator, part, customer, ...) go through :func:`check_name`: no control characters (a
newline would split the output and the records listing), no surrounding blanks, bounded length.
"""

from __future__ import annotations

import argparse
import math
import unicodedata
from typing import Callable

from .errors import InputError

#: default largest image decoded, megapixels (ringgauge.imaging checks it from the file header before decoding)
DEFAULT_MAX_MEGAPIXELS = 100.0
#: largest budget that can be asked for; OpenCV's decoders stop at 2**30 pixels anyway
MAX_MEGAPIXELS_CEILING = 1000.0

#: longest accepted name (lot, serial, operator, part, customer, order, drawing, surface)
NAME_MAX = 120
#: longest accepted free text (notes)
TEXT_MAX = 2000


def _fmt(x: float) -> str:
    return str(x) if isinstance(x, int) else f"{x:g}"


def _range_text(lo, hi, lo_open, hi_open, unit) -> str:
    u = f" {unit}" if unit else ""
    if lo == 0 and lo_open:
        return "a positive number" + (f" up to {_fmt(hi)}{u}" if hi is not None and not hi_open else
                                      f" below {_fmt(hi)}{u}" if hi is not None else "")
    if lo is not None and hi is not None:
        left = "above" if lo_open else "from"
        right = "below" if hi_open else "to"
        if not lo_open and not hi_open:
            return f"between {_fmt(lo)} and {_fmt(hi)}{u}"
        return f"{left} {_fmt(lo)} and {right} {_fmt(hi)}{u}"
    if lo is not None:
        return f"{'above' if lo_open else 'at least'} {_fmt(lo)}{u}"
    if hi is not None:
        return f"{'below' if hi_open else 'at most'} {_fmt(hi)}{u}"
    return "finite"


def _check(text_or_value, option: str, *, lo, hi, lo_open, hi_open, integer: bool, unit: str,
           named: bool) -> float | int:
    """Parse and check one value; raises ValueError with the message (without the option when not ``named``)."""
    who = f"{option} " if named else ""
    shown = text_or_value if isinstance(text_or_value, str) else repr(text_or_value)
    if isinstance(text_or_value, bool):
        raise ValueError(f"{who}must be a number, got {shown}")
    if integer:
        try:
            if isinstance(text_or_value, str):
                v = int(text_or_value.strip().replace("_", ""), 10)
            elif isinstance(text_or_value, float):
                if not math.isfinite(text_or_value) or text_or_value != int(text_or_value):
                    raise ValueError
                v = int(text_or_value)
            else:
                v = int(text_or_value)
        except (TypeError, ValueError, OverflowError):
            raise ValueError(f"{who}must be a whole number, got '{shown}'") from None
    else:
        try:
            v = float(text_or_value.strip() if isinstance(text_or_value, str) else text_or_value)
        except (TypeError, ValueError, OverflowError):
            raise ValueError(f"{who}must be a number, got '{shown}'") from None
        if not math.isfinite(v):
            raise ValueError(f"'{shown}' is not a finite number" if not named else
                             f"{option} must be a finite number, got '{shown}'")
    bad = ((lo is not None and (v <= lo if lo_open else v < lo))
           or (hi is not None and (v >= hi if hi_open else v > hi)))
    if bad:
        raise ValueError(f"{who}must be {_range_text(lo, hi, lo_open, hi_open, unit)}, got {shown}")
    return v


def number(option: str, *, lo: float | None = None, hi: float | None = None, lo_open: bool = False,
           hi_open: bool = False, unit: str = "") -> Callable[[str], float]:
    """An argparse ``type=`` for a finite float in [lo, hi] (open ends with ``lo_open`` / ``hi_open``)."""

    def parse(text: str) -> float:
        try:
            return _check(text, option, lo=lo, hi=hi, lo_open=lo_open, hi_open=hi_open, integer=False, unit=unit,
                          named=False)
        except ValueError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None

    parse.__name__ = "number"
    return parse


def integer(option: str, *, lo: int | None = None, hi: int | None = None, unit: str = "") -> Callable[[str], int]:
    """An argparse ``type=`` for a whole number in [lo, hi]."""

    def parse(text: str) -> int:
        try:
            return _check(text, option, lo=lo, hi=hi, lo_open=False, hi_open=False, integer=True, unit=unit,
                          named=False)
        except ValueError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None

    parse.__name__ = "integer"
    return parse


def check_number(value, option: str, *, lo: float | None = None, hi: float | None = None, lo_open: bool = False,
                 hi_open: bool = False, unit: str = "", integer: bool = False):
    """Check a value that did not come through argparse; a one-line :class:`InputError` naming ``option``."""
    try:
        return _check(value, option, lo=lo, hi=hi, lo_open=lo_open, hi_open=hi_open, integer=integer, unit=unit,
                      named=True)
    except ValueError as exc:
        raise InputError(str(exc)) from None


def is_finite_number(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


# ---------------------------------------------------------------------------------------------------- names


def _bad_char(text: str) -> str | None:
    for ch in text:
        cat = unicodedata.category(ch)
        # Cc: control characters (newline, tab, escape, DEL...); Cf: invisible format characters (bidi overrides,
        # zero-width joiners) that make a printed name differ from what is stored; Zl/Zp: line/paragraph separators
        if cat in ("Cc", "Cf", "Zl", "Zp", "Cs", "Co", "Cn"):
            return ch
    return None


def check_name(value, what: str, *, max_len: int = NAME_MAX, allow_empty: bool = False,
               free_text: bool = False) -> str | None:
    """A lot / serial / operator / part / customer name, or free text (``free_text=True``: tabs and newlines
    allowed, up to :data:`TEXT_MAX` characters). ``None`` stays ``None``. One-line :class:`InputError` otherwise."""
    if value is None:
        return None
    if not isinstance(value, str):
        raise InputError(f"{what} must be text, got {type(value).__name__}")
    if free_text:
        max_len = max(max_len, TEXT_MAX)
        probe = value.replace("\n", "").replace("\t", "")
    else:
        probe = value
    ch = _bad_char(probe)
    if ch is not None:
        raise InputError(f"{what} contains a control or invisible character (U+{ord(ch):04X}); use printable "
                         "characters only")
    if not free_text and value != value.strip():
        raise InputError(f"{what} {value.strip()!r} has blanks at its start or end; remove them")
    if not value.strip() and not allow_empty:
        raise InputError(f"{what} is empty")
    if len(value) > max_len:
        raise InputError(f"{what} is {len(value)} characters long; at most {max_len} are allowed")
    return value


def clean_name(text: str, *, max_len: int = NAME_MAX) -> str:
    """A usable name made from untrusted text (e.g. a file name used as the serial): control and invisible
    characters become U+FFFD, surrounding blanks go, and it is cut to ``max_len``."""
    out = "".join("\ufffd" if _bad_char(ch) else ch for ch in str(text)).strip()
    return out[:max_len] or "\ufffd"


def check_meta_fields(values: dict, *, max_len: int = 200) -> None:
    """Check record details (lot, serial, operator, part, customer, ...; ``notes`` is free text)."""
    for key, value in values.items():
        label = {"order_ref": "order reference", "lot": "lot name"}.get(key, key.replace("_", " "))
        if key == "temperature_c":
            continue
        check_name(value, f"the {label}", max_len=max_len, free_text=(key == "notes"))


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
