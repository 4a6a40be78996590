"""The lot sheet: a ``lot.json`` beside a lot's images holding its details, bench set-up and tolerances.

``ringgauge batch FOLDER`` reads ``FOLDER/lot.json`` when it exists (or the file given with ``--lot-sheet``);
options given on the command line override the sheet. Every field is optional; an unknown field or a value of the
wrong kind is refused with one line naming the file and the field.

Fields (JSON object)::

    lot, part, drawing, surface, operator, customer, order, notes       text: the lot's details, kept per record
    temperature_c                                                       number, °C at the bench
    source | wavelength_nm (+ wavelength_u_nm, bandwidth_nm)            the light source
    pixel_size_um (+ pixel_size_u_um, pixel_size_y_um, pixel_size_y_u_um) | bench   the pixel scale
    medium_index, medium_index_u, fringe_kind ("dark"/"bright"), mode ("auto"/"radius"/"form")
    radius_tolerance  ("1000 ± 0.5 %", "995..1005", ...) | radius_limits_mm [LO, HI]
    decision_rule     "simple" | "guard-banded"
    tolerance, test_diameter_mm, test_plate, test_plate_radius_mm       surface form against a test plate
    comment                                                             free text, ignored
"""

from __future__ import annotations

import difflib
import json
import math
from pathlib import Path

from ..errors import InputError

SHEET_NAME = "lot.json"
MAX_BYTES = 256_000  # a lot sheet is a few hundred bytes; anything this large is the wrong file

_TEXT, _NUM, _LIMITS = "text", "number", "limits"

#: sheet field -> (option destination on the parser, kind, choices)
FIELDS: dict[str, tuple[str | None, str, tuple | None]] = {
    "lot": ("lot", _TEXT, None),
    "part": ("part", _TEXT, None),
    "drawing": ("drawing", _TEXT, None),
    "surface": ("surface", _TEXT, None),
    "operator": ("operator", _TEXT, None),
    "customer": ("customer", _TEXT, None),
    "order": ("order_ref", _TEXT, None),
    "notes": ("notes", _TEXT, None),
    "temperature_c": ("temperature_c", _NUM, None),
    "source": ("source", _TEXT, None),
    "wavelength_nm": ("wavelength", _NUM, None),
    "wavelength_u_nm": ("wavelength_u", _NUM, None),
    "bandwidth_nm": ("bandwidth", _NUM, None),
    "pixel_size_um": ("pixel_size", _NUM, None),
    "pixel_size_u_um": ("pixel_size_u", _NUM, None),
    "pixel_size_y_um": ("pixel_size_y", _NUM, None),
    "pixel_size_y_u_um": ("pixel_size_y_u", _NUM, None),
    "bench": ("bench", _TEXT, None),
    "medium_index": ("medium_index", _NUM, None),
    "medium_index_u": ("medium_index_u", _NUM, None),
    "fringe_kind": ("fringe_kind", _TEXT, ("dark", "bright")),
    "mode": ("mode", _TEXT, ("auto", "radius", "form")),
    "radius_tolerance": ("radius_tolerance", _TEXT, None),
    "radius_limits_mm": ("radius_limits", _LIMITS, None),
    "decision_rule": ("decision_rule", _TEXT, ("simple", "guard-banded")),
    "tolerance": ("tolerance", _TEXT, None),
    "test_diameter_mm": ("test_diameter", _NUM, None),
    "test_plate": ("test_plate", _TEXT, None),
    "test_plate_radius_mm": ("test_plate_radius", _NUM, None),
    "comment": (None, _TEXT, None),
}

#: fields that say the same thing in another way: one given on the command line overrides all of its group
GROUPS = (
    {"source", "wavelength"},
    {"pixel_size", "bench"},
    {"radius_tolerance", "radius_limits"},
)


def find_sheet(folder: str | Path, given: str | None = None) -> Path | None:
    """The lot sheet to read: ``given`` (must exist), else FOLDER/lot.json if it exists, else None."""
    if given:
        p = Path(given)
        if not p.is_file():
            raise InputError(f"lot sheet {given} not found")
        return p
    p = Path(folder) / SHEET_NAME
    return p if p.is_file() else None


def read_sheet(path: str | Path) -> dict:
    """The sheet's fields, checked: one line naming the file and the field for anything wrong."""
    path = Path(path)
    try:
        if path.stat().st_size > MAX_BYTES:
            raise InputError(f"lot sheet {path}: {path.stat().st_size} bytes is too large for a lot sheet "
                             f"(at most {MAX_BYTES // 1000} kB)")
        from ..settings import read_regular_bytes

        text = read_regular_bytes(path, what="lot sheet", max_bytes=MAX_BYTES).decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(f"lot sheet {path}: not UTF-8 text") from None
    except OSError as exc:
        raise InputError(f"lot sheet {path}: cannot read it ({exc.strerror or exc})") from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"lot sheet {path}: not valid JSON ({exc.msg} at line {exc.lineno}, column {exc.colno})") \
            from None
    if not isinstance(data, dict):
        raise InputError(f"lot sheet {path}: expected a JSON object {{\"lot\": ..., ...}}, got {type(data).__name__}")
    out = {}
    for key, value in data.items():
        if key not in FIELDS:
            near = difflib.get_close_matches(key, FIELDS, n=1)
            hint = f" (did you mean '{near[0]}'?)" if near else f"; known fields: {', '.join(FIELDS)}"
            raise InputError(f"lot sheet {path}: unknown field '{key}'{hint}")
        if value is None:
            continue
        _dest, kind, choices = FIELDS[key]
        where = f"lot sheet {path}: field '{key}'"
        if kind == _TEXT:
            if not isinstance(value, str):
                raise InputError(f"{where} must be text, got {json.dumps(value)}")
            if choices and value not in choices:
                raise InputError(f"{where} must be one of {', '.join(choices)}, got '{value}'")
            if len(value) > 200 and key not in ("notes", "comment"):
                raise InputError(f"{where} is longer than 200 characters")
        elif kind == _NUM:
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
                raise InputError(f"{where} must be a number, got {json.dumps(value)}")
            value = float(value)
        else:
            ok = (isinstance(value, list) and len(value) == 2
                  and all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) for v in value))
            if not ok:
                raise InputError(f"{where} must be two numbers [LO, HI] in mm, got {json.dumps(value)}")
            if value[0] >= value[1]:
                raise InputError(f"{where}: the lower limit {value[0]:g} must be below the upper limit {value[1]:g}")
            value = [float(v) for v in value]
        out[key] = value
    if "radius_tolerance" in out and "radius_limits_mm" in out:
        raise InputError(f"lot sheet {path}: give either 'radius_tolerance' or 'radius_limits_mm', not both")
    if "radius_tolerance" in out:
        from ..conformity import parse_radius_tolerance

        try:
            parse_radius_tolerance(out["radius_tolerance"])
        except InputError as exc:
            raise InputError(f"lot sheet {path}: {exc}") from None
    return out
