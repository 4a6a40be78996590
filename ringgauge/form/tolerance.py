"""ISO 10110-5 surface form tolerances: ``3/A(B/C)``, ``3/A(B/C) RMSx < D``, dashes, ``; λ = E``.

Grammar accepted (spaces are free; "λ", "lambda" and "L" name the wavelength; "RMS t" and "RMSt" alike)::

    tolerance := "3/" term [ "(" term [ "/" term ] ")" ] { rms } [ ";" "λ" "=" number [ "nm" ] ]
                 [ "@" | "over" | "Ø" ] number "mm" ]
    term      := number | "-"
    rms       := "RMS" ("t" | "i" | "a") ( "<" | "<=" | "≤" ) number

A = sagitta (power) deviation, B = irregularity, C = rotationally symmetric irregularity, all in fringes
(one fringe = λ/2) unless a wavelength is given — the tolerance values stay in fringes of that λ. A dash means
"not specified". The "3/" code number identifies the surface-form tolerance in drawing notation.

References
----------
ISO 10110-5:2015, Optics and photonics — Preparation of drawings for optical elements and systems —
Part 5: Surface form tolerances (notation as summarised in the project's domain notes, section 3).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from ..errors import ToleranceSyntaxError

#: wavelength assumed when the tolerance names none (Hg e-line) — from memory, see DOMAIN notes §3
DEFAULT_WAVELENGTH_NM = 546.07


@dataclass(frozen=True)
class Tolerance:
    """A parsed surface-form tolerance. Values in fringes of ``wavelength_nm``; None = not specified."""

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

    def limits(self) -> dict[str, float]:
        """The specified limits by result field name (fringes)."""
        pairs = {
            "power_fringes": self.power,
            "irregularity_fringes": self.irregularity,
            "rot_sym_irregularity_fringes": self.rot_sym_irregularity,
            "rms_total_fringes": self.rms_total,
            "rms_irregularity_fringes": self.rms_irregularity,
            "rms_asymmetric_fringes": self.rms_asymmetric,
        }
        return {k: v for k, v in pairs.items() if v is not None}

    def to_dict(self) -> dict:
        fr = self.wavelength_nm / 2
        d = {
            "text": self.text,
            "unit": "fringes",
            "fringe_nm": fr,
            "wavelength_nm": self.wavelength_nm,
            "wavelength_stated": self.wavelength_stated,
            "test_diameter_mm": self.test_diameter_mm,
        }
        for name, v in (
            ("power", self.power),
            ("irregularity", self.irregularity),
            ("rot_sym_irregularity", self.rot_sym_irregularity),
            ("rms_total", self.rms_total),
            ("rms_irregularity", self.rms_irregularity),
            ("rms_asymmetric", self.rms_asymmetric),
        ):
            d[f"{name}_fringes"] = v
            d[f"{name}_nm"] = None if v is None else v * fr
        return d


_NUM = r"(?:\d+(?:[.,]\d*)?|[.,]\d+)"


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
        if allow_dash and self.pos < len(self.text) and self.text[self.pos] in "-–—":
            self.pos += 1
            return None
        m = re.compile(_NUM).match(self.text, self.pos)
        if not m:
            self.fail(f"expected {what} (a number{' or -' if allow_dash else ''})")
        self.pos = m.end()
        val = float(m.group(0).replace(",", "."))
        if not math.isfinite(val):
            self.fail(f"{what} must be finite")
        return val

    def fail(self, msg: str):
        shown = self.text if len(self.text) < 60 else self.text[:57] + "..."
        near = self.text[self.pos : self.pos + 12] or "end of text"
        raise ToleranceSyntaxError(
            f"tolerance '{shown}': {msg} at character {self.pos + 1} ('{near}'); "
            "expected ISO 10110-5 form like 3/2(0.5) or 3/1(0.5/0.2) RMSi < 0.05; λ = 632.8"
        )


def parse_tolerance(text: str) -> Tolerance:
    """Parse an ISO 10110-5 surface-form tolerance string.

    Raises
    ------
    ToleranceSyntaxError
        With a message pointing at the first character that does not fit the notation.
    """
    if not isinstance(text, str) or not text.strip():
        raise ToleranceSyntaxError("tolerance is empty; give it like 3/2(0.5)")
    raw = text.strip()
    s = _Scanner(raw)
    s.expect("3", "the code number '3/' at the start")
    s.expect("/", "the code number '3/' at the start")
    A = s.number("the power tolerance A", allow_dash=True)
    B = C = None
    if s.take("("):
        B = s.number("the irregularity tolerance B", allow_dash=True)
        if s.take("/"):
            C = s.number("the rotationally symmetric irregularity tolerance C", allow_dash=True)
        s.expect(")", "')' to close the irregularity part")
    rms: dict[str, float] = {}
    while s.peek("rms"):
        s.take("rms")
        s.skip()
        kind = s.text[s.pos : s.pos + 1].lower()
        if kind not in ("t", "i", "a"):
            s.fail("expected RMSt, RMSi or RMSa")
        s.pos += 1
        if kind in rms:
            s.fail(f"RMS{kind} given twice")
        if not (s.take("<=") or s.take("≤") or s.take("<")):
            s.fail("expected '<' after the RMS kind")
        rms[kind] = s.number(f"the RMS{kind} limit")
    lam = DEFAULT_WAVELENGTH_NM
    lam_stated = False
    diam = None
    while True:
        if s.take(";"):
            if s.take("λ") or s.take("lambda") or s.take("l"):
                s.expect("=", "'=' after λ")
                lam = s.number("the wavelength E")
                s.take("nm")
                if not 200 <= lam <= 2000:
                    s.fail(f"wavelength {lam:g} nm is outside 200-2000 nm")
                lam_stated = True
                continue
            if s.take("ø") or s.take("⌀") or s.take("@") or s.take("over"):
                diam = s.number("the test diameter")
                s.expect("mm", "'mm' after the test diameter")
                continue
            s.fail("expected 'λ = …' or a test diameter like 'Ø 20 mm' after ';'")
        if s.take("ø") or s.take("⌀") or s.take("@") or s.take("over"):
            diam = s.number("the test diameter")
            s.expect("mm", "'mm' after the test diameter")
            continue
        break
    s.skip()
    if s.pos != len(s.text):
        s.fail("unexpected text")
    if diam is not None and diam <= 0:
        raise ToleranceSyntaxError(f"tolerance '{raw}': the test diameter must be positive")
    if A is None and B is None and C is None and not rms:
        raise ToleranceSyntaxError(f"tolerance '{raw}': specifies nothing (every term is a dash)")
    return Tolerance(
        text=raw,
        power=A,
        irregularity=B,
        rot_sym_irregularity=C,
        rms_total=rms.get("t"),
        rms_irregularity=rms.get("i"),
        rms_asymmetric=rms.get("a"),
        wavelength_nm=lam,
        wavelength_stated=lam_stated,
        test_diameter_mm=diam,
    )


def convert_fringes(value_fringes: float, from_nm: float, to_nm: float) -> float:
    """The same surface height in fringes of another wavelength (one fringe = λ/2)."""
    return value_fringes * from_nm / to_nm
