"""ISO 10110-5 surface form tolerances: ``3/A(B/C)``, ``3/A(B/C) RMSx < D``, values in nm or fringes, ``λ = E``.

Grammar accepted (spaces are free; "λ", "lambda" and "L" name the wavelength; "RMS t" and "RMSt" alike; a
semicolon may separate the items after the A(B/C) group)::

    tolerance := "3/" term [ "(" term [ "/" term ] ")" ] { [";"] item }
    item      := rms | "λ" "=" number [ "nm" | "µm" ] | ( "Ø" | "@" | "over" ) number "mm"
    term      := number [ unit ] | "-" | "–"
    rms       := "RMS" ("t" | "i" | "a") ( "<" | "<=" | "≤" ) number [ unit ]
    unit      := "nm" | "µm" | "um" | "fr" | "fringe" | "fringes"

A = sagitta (power) deviation, B = irregularity, C = rotationally symmetric irregularity, RMSt / RMSi / RMSa =
RMS of the total form less tilt, of the irregularity, and of the irregularity less its rotationally symmetric
part. Each value keeps the unit it was written in: nanometres of surface height, or fringes (one fringe =
λ/2 of surface height) of the tolerance's wavelength. A value without a unit is in fringes. A dash means "not
specified". When no wavelength is stated, 546.07 nm (mercury e-line) is assumed and the result says so.

Verdicts (:func:`judge`) compare in the tolerance's own unit: a limit in nm against the measured height in nm,
a limit in fringes against the measured value converted to fringes of the tolerance's λ (measured height / (λ_t/2)).

References
----------
ISO 10110-5:2015, Optics and photonics — Preparation of drawings for optical elements and systems —
Part 5: Surface form tolerances: notation 3/A(B/C) RMSx < D; λ = E, nanometres preferred, fringe spacings
permitted with the base wavelength stated.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

from ..errors import ToleranceSyntaxError
from ..physics import fringe_height_nm
from .terms import FORM_TERMS

#: wavelength assumed when the tolerance names none (mercury e-line, 546.07 nm)
DEFAULT_WAVELENGTH_NM = 546.07

#: ISO 10110-5 letter -> (result key, how messages name the limit), from the one list of form terms
TERMS = {t.iso: (t.key, t.limit_name) for t in FORM_TERMS if t.iso}
_ATTR = {t.iso: t.name for t in FORM_TERMS if t.iso}


@dataclass(frozen=True)
class Limit:
    """One specified term as written: value and unit ("nm" or "fringes")."""

    key: str  # A, B, C, t, i, a
    value: float
    unit: str

    @property
    def field(self) -> str:
        return TERMS[self.key][0]


@dataclass(frozen=True)
class Tolerance:
    """A parsed surface-form tolerance.

    ``power`` … ``rms_asymmetric`` are the limits in fringes of ``wavelength_nm`` (None = not specified), whatever
    unit they were written in; ``written`` keeps each as written (value and unit) for verdicts and reports.
    """

    text: str
    power: float | None = None  # A
    irregularity: float | None = None  # B
    rot_sym_irregularity: float | None = None  # C
    rms_total: float | None = None  # RMSt
    rms_irregularity: float | None = None  # RMSi
    rms_asymmetric: float | None = None  # RMSa
    wavelength_nm: float = DEFAULT_WAVELENGTH_NM
    wavelength_stated: bool = False
    test_diameter_mm: float | None = None
    written: tuple[Limit, ...] = field(default_factory=tuple)

    @property
    def fringe_nm(self) -> float:
        """One fringe of the tolerance's wavelength: λ/2 of surface height, nm."""
        return fringe_height_nm(self.wavelength_nm)

    def limits(self) -> dict[str, float]:
        """The specified limits by result field name, in fringes of the tolerance's wavelength."""
        pairs = {TERMS[k][0]: getattr(self, a) for k, a in _ATTR.items()}
        return {k: v for k, v in pairs.items() if v is not None}

    def limits_nm(self) -> dict[str, float]:
        """The specified limits by result field name, in nm of surface height."""
        return {k: v * self.fringe_nm for k, v in self.limits().items()}

    def to_dict(self) -> dict:
        fr = self.fringe_nm
        units = {lim.key: lim.unit for lim in self.written}
        d = {
            "text": self.text,
            "unit": "fringes" if set(units.values()) <= {"fringes"} else
                    ("nm" if set(units.values()) == {"nm"} else "mixed"),
            "fringe_nm": fr,
            "wavelength_nm": self.wavelength_nm,
            "wavelength_stated": self.wavelength_stated,
            "wavelength_note": None if self.wavelength_stated else
                f"no wavelength stated: {DEFAULT_WAVELENGTH_NM} nm (mercury e-line) assumed",
            "test_diameter_mm": self.test_diameter_mm,
        }
        for key, attr in _ATTR.items():
            v = getattr(self, attr)
            d[f"{attr}_fringes"] = v
            d[f"{attr}_nm"] = None if v is None else v * fr
            d[f"{attr}_unit"] = units.get(key)
        return d


_NUM = re.compile(r"(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][-+]?\d+)?")
_DASHES = "-–—‒−"
# longest first: "fringes" before "fringe" before "fr"
_UNITS = (("fringes", "fringes"), ("fringe", "fringes"), ("fr", "fringes"), ("nm", "nm"), ("µm", "µm"),
          ("μm", "µm"), ("um", "µm"))


class _Scanner:
    def __init__(self, text: str):
        self.text = text
        self.pos = 0

    def skip(self):
        while self.pos < len(self.text) and self.text[self.pos].isspace():
            self.pos += 1

    def peek(self, s: str) -> bool:
        self.skip()
        return self.text[self.pos : self.pos + len(s)].lower() == s.lower()

    def take(self, s: str) -> bool:
        if self.peek(s):
            self.pos += len(s)
            return True
        return False

    def expect(self, s: str, what: str):
        if not self.take(s):
            self.fail(f"expected {what}")

    def number(self, what: str, allow_dash: bool = False) -> float | None:
        self.skip()
        if allow_dash and self.pos < len(self.text) and self.text[self.pos] in _DASHES:
            self.pos += 1
            return None
        m = _NUM.match(self.text, self.pos)
        if not m:
            self.fail(f"expected {what} (a number{' or a dash' if allow_dash else ''})")
        val = float(m.group(0).replace(",", "."))
        if not math.isfinite(val):
            self.fail(f"{what} must be finite")
        self.pos = m.end()
        return val

    def unit(self) -> str | None:
        """An optional unit after a value: "nm", "µm" or fringes; None when none is written."""
        self.skip()
        for word, unit in _UNITS:
            end = self.pos + len(word)
            if self.text[self.pos : end].lower() == word and not (end < len(self.text) and self.text[end].isalpha()):
                self.pos = end
                return unit
        return None

    def fail(self, msg: str, at: int | None = None):
        pos = self.pos if at is None else at
        raise _error(self.text, pos, msg)


def _error(text: str, pos: int, msg: str) -> ToleranceSyntaxError:
    shown = text if len(text) < 60 else text[:57] + "..."
    near = text[pos : pos + 12] or "end of text"
    exc = ToleranceSyntaxError(
        f"tolerance '{shown}': {msg} at character {pos + 1} ('{near}'); "
        "expected ISO 10110-5 form like 3/2(0.5), 3/1(0.5/0.2) RMSi < 0.05; λ = 632.8 nm, or 3/ –; RMSt < 100 nm"
    )
    exc.text = text  # type: ignore[attr-defined]
    exc.position = pos  # type: ignore[attr-defined]
    exc.pointer = pointer(text, pos)  # type: ignore[attr-defined]
    return exc


def pointer(text: str, pos: int) -> str:
    """Two lines for a display that can show them: the text and a caret under character ``pos`` (0-based)."""
    return f"{text}\n{' ' * pos}^"


def _value(s: _Scanner, key: str, allow_dash: bool) -> Limit | None:
    s.skip()
    start = s.pos
    v = s.number(TERMS[key][1], allow_dash=allow_dash)
    if v is None:
        return None
    u = s.unit() or "fringes"
    if u == "µm":
        v, u = v * 1000.0, "nm"
    if v < 0:
        s.fail(f"{TERMS[key][1]} cannot be negative", at=start)
    return Limit(key, v, u)


def parse_tolerance(text: str) -> Tolerance:
    """Parse an ISO 10110-5 surface-form tolerance string.

    Raises
    ------
    ToleranceSyntaxError
        With a one-line message pointing at the first character that does not fit the notation; the exception
        also carries ``position`` (0-based) and ``pointer`` (the text with a caret under that character).
    """
    if not isinstance(text, str) or not text.strip():
        raise ToleranceSyntaxError("tolerance is empty; give it like 3/2(0.5) or 3/ –; RMSt < 100 nm; λ = 546 nm")
    raw = text.strip()
    s = _Scanner(raw)
    s.expect("3", "the code number '3/' at the start")
    s.expect("/", "the code number '3/' at the start")
    got: dict[str, Limit | None] = {"A": _value(s, "A", True)}
    if s.take("("):
        got["B"] = _value(s, "B", True)
        if s.take("/"):
            got["C"] = _value(s, "C", True)
        s.expect(")", "')' to close the irregularity part")
    lam = DEFAULT_WAVELENGTH_NM
    lam_stated = False
    diam = None
    while True:
        s.skip()
        if s.pos >= len(s.text):
            break
        sep = s.take(";")
        s.skip()
        if s.pos >= len(s.text):
            if sep:
                break  # a trailing semicolon is harmless
        if s.peek("rms"):
            s.take("rms")
            s.skip()
            kind = s.text[s.pos : s.pos + 1].lower()
            if kind not in ("t", "i", "a"):
                s.fail("expected RMSt, RMSi or RMSa")
            if kind in got:
                s.fail(f"RMS{kind} given twice")
            s.pos += 1
            if not (s.take("<=") or s.take("≤") or s.take("<")):
                s.fail("expected '<' after the RMS kind")
            got[kind] = _value(s, kind, False)
            continue
        here = s.pos
        if s.take("λ") or s.take("lambda") or s.take("l"):
            if lam_stated:
                s.fail("the wavelength is given twice", at=here)
            s.expect("=", "'=' after λ")
            s.skip()
            at = s.pos
            lam = s.number("the wavelength E")
            u = s.unit()
            if u == "µm":
                lam *= 1000.0
            elif u not in (None, "nm"):
                s.fail("the wavelength is in nm (or µm)", at=at)
            if not 200 <= lam <= 2000:
                s.fail(f"wavelength {lam:g} nm is outside 200-2000 nm", at=at)
            lam_stated = True
            continue
        if s.take("ø") or s.take("⌀") or s.take("@") or s.take("over"):
            s.skip()
            at = s.pos
            diam = s.number("the test diameter")
            s.expect("mm", "'mm' after the test diameter")
            if diam <= 0:
                s.fail("the test diameter must be positive", at=at)
            continue
        if sep:
            s.fail("expected RMSt/RMSi/RMSa < value, 'λ = …' or a test diameter like 'Ø 20 mm' after ';'")
        s.fail("unexpected text")
    written = tuple(v for v in got.values() if v is not None)
    if not written:
        raise _error(raw, 2, "specifies nothing (every term is a dash)")
    fr = fringe_height_nm(lam)
    kw = {_ATTR[lim.key]: (lim.value if lim.unit == "fringes" else lim.value / fr) for lim in written}
    return Tolerance(text=raw, wavelength_nm=lam, wavelength_stated=lam_stated, test_diameter_mm=diam,
                     written=written, **kw)


def convert_fringes(value_fringes: float, from_nm: float, to_nm: float) -> float:
    """The same surface height in fringes of another wavelength (one fringe = λ/2)."""
    return value_fringes * from_nm / to_nm


# -- verdicts --------------------------------------------------------------------------------------------------
RULES = {
    "simple": "simple acceptance: a term passes when the measured value is within the limit; results "
    "within the expanded uncertainty U (k = 2) of the limit are marked conditional",
    "guard-banded": "guard-banded acceptance: a term passes only when value + U is within the limit and "
    "fails when value - U exceeds it; in between it is conditional and not accepted",
}


def decide(value: float, U: float | None, limit: float, rule: str) -> str:
    """The state of one upper limit: pass, conditional pass, conditional fail or fail (ringgauge.conformity)."""
    from ..conformity import judge as conformity_judge  # the one home of the decision rules

    return conformity_judge(value, U, upper=limit, rule=rule).verdict


def judge(tol: Tolerance | None, terms: dict, terms_u: dict, *, measured_fringe_nm: float,
          measured_wavelength_nm: float, rule: str = "simple", sign_known: bool = True, k: float = 2.0) -> dict:
    """Verdict per specified term, compared in the tolerance's own unit.

    ``terms`` / ``terms_u`` are the measured values and standard uncertainties in fringes of the measurement
    (one measured fringe = ``measured_fringe_nm`` of surface height). A limit in nm is compared with the
    measured height in nm; a limit in fringes with the height in fringes of the tolerance's λ (λ_t / 2 each).
    """
    if rule not in RULES:
        raise ValueError(f"decision rule must be 'simple' or 'guard-banded', got {rule!r}")
    if tol is None:
        return {"overall": "not evaluated", "terms": [], "decision_rule": RULES[rule], "reason": "no tolerance given"}
    to_tol_fringes = measured_fringe_nm / tol.fringe_nm
    rows = []
    for lim in tol.written:
        name = lim.field
        meas = abs(terms[name])
        u = terms_u.get(name)
        v_fr = meas * to_tol_fringes
        U_fr = None if u is None else k * u * to_tol_fringes
        if lim.unit == "nm":
            v, U = meas * measured_fringe_nm, None if u is None else k * u * measured_fringe_nm
        else:
            v, U = v_fr, U_fr
        state = decide(v, U, lim.value, rule)
        note = "uncertainty not available" if U is None else ""
        if lim.unit == "fringes" and abs(tol.wavelength_nm - measured_wavelength_nm) > 0.005:
            note = (f"measured at {measured_wavelength_nm:g} nm, converted to fringes of the tolerance's "
                    f"{tol.wavelength_nm:g} nm (x{to_tol_fringes:.4f})" + (f"; {note}" if note else ""))
        rows.append({
            "term": name.replace("_fringes", ""),
            "value": v, "U": U, "limit": lim.value, "unit": lim.unit,
            "value_fringes": v_fr, "U_fringes": U_fr, "limit_fringes": getattr(tol, _ATTR[lim.key]),
            "value_nm": meas * measured_fringe_nm,
            "wavelength_nm": tol.wavelength_nm,
            "wavelength_stated": tol.wavelength_stated,
            "verdict": state,
            "note": note,
        })
    order = ["fail", "conditional fail", "conditional pass", "pass"]
    overall = next((st for st in order if any(r["verdict"] == st for r in rows)), "pass")
    out = {"overall": overall, "terms": rows, "decision_rule": RULES[rule], "rule": rule}
    if rule == "guard-banded" and overall.startswith("conditional"):
        out["meaning"] = "under guard-banded acceptance a conditional result is not accepted"
    elif overall.startswith("conditional"):
        out["meaning"] = ("the result lies within the expanded uncertainty (k = 2, about 95 %) of a limit: "
                          "conformity is neither proven nor disproven at that confidence")
    if any(r["term"] == "power" for r in rows) and not sign_known:
        out["power_note"] = "power compared by magnitude (sign unknown)"
    if not tol.wavelength_stated:
        out["wavelength_note"] = (f"the tolerance states no wavelength: fringes of {DEFAULT_WAVELENGTH_NM} nm "
                                  "(mercury e-line) assumed")
    elif (any(lim.unit == "fringes" for lim in tol.written)
          and abs(tol.wavelength_nm - measured_wavelength_nm) > 0.005):
        out["wavelength_note"] = (f"tolerance at λ = {tol.wavelength_nm:g} nm, measured at "
                                  f"{measured_wavelength_nm:g} nm: values converted by surface height")
    return out
