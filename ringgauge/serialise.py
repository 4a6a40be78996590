"""Reading stored results back: the typed records' ``from_dict`` share these helpers.

A record's ``to_dict()`` only serialises; ``from_dict()`` is its inverse, rebuilding nested records, tuples and
optional values from the field types, so that ``Record.from_dict(r.to_dict()) == r``.
"""

from __future__ import annotations

import dataclasses
import math
import types
import typing
from functools import lru_cache
from typing import Any, Union

import numpy as np


def jsonable(x):
    """A plain JSON value for one number: numpy scalars to Python, non-finite floats to None."""
    if x is None:
        return None
    if isinstance(x, (np.floating, float)):
        x = float(x)
        return x if math.isfinite(x) else None
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, np.bool_):
        return bool(x)
    return x


def finite_or_none(x) -> float | None:
    """A float, or None for a missing or non-finite number (what the JSON keeps)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


@lru_cache(maxsize=None)
def _hints(cls) -> dict:
    return typing.get_type_hints(cls)


def convert(tp, v):
    """``v`` (as read from JSON) as a value of the annotated type ``tp``."""
    if v is None:
        return None
    origin = typing.get_origin(tp)
    args = typing.get_args(tp)
    if origin in (Union, types.UnionType):
        inner = [a for a in args if a is not type(None)]
        if len(inner) == 1:
            return convert(inner[0], v)
        for a in inner:  # e.g. float | str: keep the value as it came
            if isinstance(v, a if isinstance(a, type) else ()):
                return v
        return v
    if origin is tuple:
        if len(args) == 2 and args[1] is Ellipsis:
            return tuple(convert(args[0], x) for x in v)
        return tuple(convert(a, x) for a, x in zip(args, v))
    if origin is dict or tp is dict or tp is Any:
        return v
    if isinstance(tp, type) and dataclasses.is_dataclass(tp):
        return tp.from_dict(v)
    if tp is float:
        return float(v)
    if tp is int and isinstance(v, (int, float)):
        return int(v)
    return v


def build(cls, d: dict, keys: dict[str, str] | None = None, **given):
    """An instance of the dataclass ``cls`` from the dict ``d``: each field from its key (``keys`` maps a field
    to a different key), converted to the field's type; missing keys keep the field's default; ``given``
    overrides."""
    keys = keys or {}
    hints = _hints(cls)
    kw = {}
    for f in dataclasses.fields(cls):
        if not f.init or f.name in given:
            continue
        key = keys.get(f.name, f.name)
        if key in d:
            kw[f.name] = convert(hints[f.name], d[key])
    kw.update(given)
    return cls(**kw)
