"""One validation for every numeric option and setting: finite, in range, the option named in the message.

Command-line options use ``ringgauge.commands._options.number`` / ``integer`` (argparse ``type=`` built on the
same check); values that arrive another way (lot sheets, bench profiles, the window's fields) go through
:func:`check_number`, which raises the same message as a one-line :class:`~ringgauge.errors.InputError`.

Names (lot, serial, operator, part, customer, ...) go through :func:`check_name`: no control characters (a
newline would split the output and the records listing), no surrounding blanks, bounded length.
"""

from __future__ import annotations

import math
import unicodedata
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
