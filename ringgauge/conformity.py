"""Decision rules: is a measured value within its tolerance, and how sure are we?

One home for the conformity decision of every measured quantity (the lens radius, the surface radius against a
test plate, the form terms), so the radius verdict, the form verdict, the record, the certificate and the lot
report all say the same thing in the same words.

The measured value x with its expanded uncertainty U (k = 2) is compared with the tolerance limits TL (a lower
and/or an upper limit). The verdict names the zone the result falls in:

``pass``               the whole interval x ± U lies inside the limits
``conditional pass``   x lies inside the limits, but x ± U straddles a limit
``conditional fail``   x lies beyond a limit, but x ± U still reaches back inside
``fail``               the whole interval x ± U lies beyond a limit

Whether a part is *accepted* depends on the decision rule:

``simple``        simple acceptance (guard band w = 0): accepted when x lies within the limits; the risk of a
                  false accept reaches about 50 % for a value at a limit.
``guard-banded``  guarded acceptance with w = U: accepted only when x lies inside the limits by at least U (the
                  acceptance limits AL = TL ∓ w); the risk of a false accept is at most about 2.5 % per limit
                  for a normal distribution at k = 2.

A value exactly at a limit is within it (the tolerance zone includes its limits), and an interval that just
touches a limit does not straddle it.

References
----------
ILAC-G8:09/2019, Guidelines on Decision Rules and Statements of Conformity: §4.2.1 binary statement for simple
acceptance (its figure 3), §4.2.2 binary statement with guard band w = U (figure 4), §4.2.3 non-binary statement
with guard band: pass / conditional pass / conditional fail / fail (figure 5).
ISO 14253-1:2017, Geometrical product specifications — Inspection by measurement of workpieces and measuring
equipment — Part 1: Decision rules for verifying conformity or nonconformity with specifications.
JCGM 106:2012, Evaluation of measurement data — The role of measurement uncertainty in conformity assessment
(conformance probability of a normal measurand, §7).
ISO/IEC 17025:2017 §7.1.3 and §7.8.6: a statement of conformity names its decision rule and the risk it implies.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from .errors import InputError, ToleranceSyntaxError

#: the verdicts, best first
VERDICTS = ("pass", "conditional pass", "conditional fail", "fail")
RULES = ("simple", "guard-banded")
_RULE_ALIASES = {
    "simple": "simple", "simple acceptance": "simple", "shared risk": "simple",
    "guard-banded": "guard-banded", "guard banded": "guard-banded", "guardbanded": "guard-banded",
    "guarded": "guard-banded", "guard": "guard-banded", "guarded acceptance": "guard-banded",
}

#: short names of the rules, as printed beside a verdict
RULE_NAMES = {
    "simple": "simple acceptance (w = 0)",
    "guard-banded": "guarded acceptance (w = U)",
}

#: the wording of each rule for reports and certificates: the rule, the guard band and the risk it implies
RULE_WORDING = {
    "simple": (
        "Simple acceptance (ILAC-G8:09/2019 §4.2.1, guard band w = 0): a part is accepted when the measured value "
        "lies within the tolerance limits. A result whose expanded uncertainty interval (k = 2) straddles a limit "
        "is marked conditional; for a value at a limit the risk of a false accept or a false reject is up to "
        "about 50 %."
    ),
    "guard-banded": (
        "Guarded acceptance with guard band w = U (ILAC-G8:09/2019 §4.2.2-4.2.3, ISO 14253-1:2017): a part is "
        "accepted only when the measured value lies inside the tolerance limits by at least its expanded "
        "uncertainty U (k = 2); a result whose U interval straddles a limit is conditional and not accepted. "
        "The risk of a false accept is at most about 2.5 % per limit."
    ),
}


def normalise_rule(rule: str | None) -> str:
    """'simple' or 'guard-banded' from the names a user may type; None means simple acceptance."""
    if rule is None or (isinstance(rule, str) and not rule.strip()):
        return "simple"
    key = " ".join(str(rule).strip().lower().replace("_", " ").split())
    if key in _RULE_ALIASES:
        return _RULE_ALIASES[key]
    if key.replace(" ", "-") in _RULE_ALIASES:
        return _RULE_ALIASES[key.replace(" ", "-")]
    raise InputError(f"decision rule must be 'simple' or 'guard-banded', got {rule!r}")


def _norm_cdf(z: float) -> float:
    return 0.5 * math.erfc(-z / math.sqrt(2.0))


@dataclass(frozen=True)
class Conformity:
    """The verdict on one measured value against its limits under one decision rule."""

    verdict: str  # one of VERDICTS, or "not evaluated"
    accepted: bool | None  # accepted under the rule; None when not evaluated
    value: float | None
    U: float | None  # noqa: N815 - GUM symbol; expanded uncertainty (k = 2) in ``unit``
    unit: str
    lower: float | None
    upper: float | None
    rule: str  # "simple" or "guard-banded"
    guard_band: float  # w, in ``unit``: 0 for simple acceptance, U for guarded acceptance
    note: str = ""
    p_conform: float | None = None  # probability that the true value is within the limits (normal, k = 2)

    @property
    def state(self) -> str:
        """'pass', 'fail', 'conditional' or 'not evaluated'."""
        return "conditional" if self.verdict.startswith("conditional") else self.verdict

    @property
    def rule_name(self) -> str:
        return RULE_NAMES[self.rule]

    @property
    def rule_wording(self) -> str:
        return RULE_WORDING[self.rule]

    @property
    def acceptance_limits(self) -> tuple[float | None, float | None]:
        """The limits a value must lie within to be accepted (TL moved inwards by the guard band)."""
        w = self.guard_band
        return (None if self.lower is None else self.lower + w, None if self.upper is None else self.upper - w)

    def to_dict(self) -> dict:
        al = self.acceptance_limits
        return {
            "verdict": self.verdict,
            "state": self.state,
            "accepted": self.accepted,
            "value": self.value,
            "U": self.U,
            "unit": self.unit,
            "lower": self.lower,
            "upper": self.upper,
            "rule": self.rule,
            "rule_name": self.rule_name,
            "rule_wording": self.rule_wording,
            "guard_band": self.guard_band,
            "acceptance_lower": al[0],
            "acceptance_upper": al[1],
            "p_conform": self.p_conform,
            "note": self.note,
        }


def judge(value: float | None, U: float | None, lower: float | None = None, upper: float | None = None, *,  # noqa: N803
          rule: str | None = "simple", unit: str = "") -> Conformity:
    """The verdict on ``value`` ± ``U`` against ``lower`` / ``upper`` (either may be None: a one-sided limit).

    ``U`` is the expanded uncertainty (k = 2); None means it is not known, and then the value alone decides
    (pass or fail) with a note saying so.
    """
    rule = normalise_rule(rule)
    if lower is None and upper is None:
        raise InputError("a tolerance needs at least one limit")
    if lower is not None and upper is not None and lower > upper:
        raise InputError(f"the lower limit {lower:g} is above the upper limit {upper:g}")
    if value is None or not math.isfinite(value):
        return Conformity("not evaluated", None, None, U, unit, lower, upper, rule, 0.0,
                          note="no measured value")
    inside = (lower is None or value >= lower) and (upper is None or value <= upper)
    if U is None or not math.isfinite(U):
        return Conformity("pass" if inside else "fail", inside, value, None, unit, lower, upper, rule, 0.0,
                          note="uncertainty not available: the value alone decided")
    if U < 0:
        raise InputError(f"expanded uncertainty cannot be negative, got {U:g}")
    lo_ok = lower is None or value - U >= lower  # interval clear of the lower limit (touching is clear)
    hi_ok = upper is None or value + U <= upper
    beyond = (lower is not None and value + U < lower) or (upper is not None and value - U > upper)
    if lo_ok and hi_ok:
        verdict = "pass"
    elif beyond:
        verdict = "fail"
    else:
        verdict = "conditional pass" if inside else "conditional fail"
    w = U if rule == "guard-banded" else 0.0
    accepted = (lower is None or value >= lower + w) and (upper is None or value <= upper - w)
    note = ""
    if lower is not None and upper is not None and upper - lower < 2 * U:
        note = (f"the expanded uncertainty U = {U:.3g} {unit} is more than half the tolerance width "
                f"{upper - lower:.3g} {unit}: no value can be proven to pass").replace(" ,", ",")
    p = None
    if U > 0:
        u = U / 2.0
        p = (_norm_cdf((upper - value) / u) if upper is not None else 1.0) - (
            _norm_cdf((lower - value) / u) if lower is not None else 0.0)
        p = min(1.0, max(0.0, p))
    elif U == 0:
        p = 1.0 if inside else 0.0
    return Conformity(verdict, accepted, value, U, unit, lower, upper, rule, w, note=note, p_conform=p)


def worst(verdicts) -> str:
    """The worst of several verdicts ('fail' before 'conditional fail' ...); 'not evaluated' when none count."""
    vs = [v for v in verdicts if v in VERDICTS]
    if not vs:
        return "not evaluated"
    return max(vs, key=VERDICTS.index)


# --- radius tolerances -------------------------------------------------------------------------------------

@dataclass(frozen=True)
class RadiusTolerance:
    """A radius of curvature tolerance in mm: nominal with limits, or limits alone."""

    text: str
    lower: float
    upper: float
    nominal: float | None = None

    def describe(self) -> str:
        """The tolerance as printed: 'R 1000 mm +5/-5 mm (995 … 1005 mm)'."""
        rng = f"{_g(self.lower)} … {_g(self.upper)} mm"
        if self.nominal is None:
            return f"R {rng}"
        hi, lo = self.upper - self.nominal, self.nominal - self.lower
        if math.isclose(hi, lo, rel_tol=1e-9, abs_tol=1e-12):
            return f"R {_g(self.nominal)} ± {_g(hi)} mm ({rng})"
        return f"R {_g(self.nominal)} +{_g(hi)}/−{_g(lo)} mm ({rng})"

    def to_dict(self) -> dict:
        return {"text": self.text, "nominal_mm": self.nominal, "lower_mm": self.lower, "upper_mm": self.upper,
                "described": self.describe()}


def _g(x: float) -> str:
    s = f"{x:.6f}".rstrip("0").rstrip(".")
    return "0" if s in ("-0", "") else s


_N = r"[-−+]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][-+]?\d+)?"
_MM = r"(?:\s*mm)?"
_PM = r"(?:±|\+/-|\+-|\+/−|\+−)"
_EXAMPLES = "give it like 1000 ± 5, 1000 ± 0.5 %, 995..1005 or 1000 +5/-3 (mm)"


def _num(s: str) -> float:
    return float(s.replace("−", "-").replace(",", "."))


def radius_limits(lower, upper, text: str | None = None) -> RadiusTolerance:
    """A tolerance from its limits in mm (``--radius-limits LO HI``)."""
    try:
        lo, hi = float(lower), float(upper)
    except (TypeError, ValueError):
        raise InputError(f"radius limits must be two numbers in mm, got {lower!r} {upper!r}") from None
    if not (math.isfinite(lo) and math.isfinite(hi)):
        raise InputError("radius limits must be finite numbers in mm")
    if lo >= hi:
        raise InputError(f"radius limits: the lower limit {lo:g} mm must be below the upper limit {hi:g} mm")
    if lo < 0 < hi:
        raise InputError(f"radius limits {lo:g} … {hi:g} mm span zero: give both with the same sign")
    return RadiusTolerance(text or f"{_g(lo)}..{_g(hi)}", lo, hi, None)


def parse_radius_tolerance(text: str) -> RadiusTolerance:
    """Parse a radius tolerance in mm: ``1000 ± 5``, ``1000 +/- 5``, ``1000 ± 0.5 %``, ``995..1005``,
    ``1000 +5/-3``; a leading ``R`` and ``mm`` after numbers are allowed.

    Raises
    ------
    ToleranceSyntaxError
        One line saying what does not fit and how to write it.
    """
    if not isinstance(text, str) or not text.strip():
        raise ToleranceSyntaxError(f"radius tolerance is empty; {_EXAMPLES}")
    raw = " ".join(text.strip().split())
    s = re.sub(r"^\s*R\s*(?:=\s*)?", "", raw, flags=re.I)
    shown = raw if len(raw) <= 40 else raw[:37] + "..."

    def bad(why: str):
        raise ToleranceSyntaxError(f"radius tolerance '{shown}': {why}; {_EXAMPLES}")

    m = re.fullmatch(rf"({_N}){_MM}\s*(?:\.\.\.|\.\.|…|to)\s*({_N}){_MM}", s, flags=re.I)
    if m:
        try:
            return radius_limits(_num(m.group(1)), _num(m.group(2)), text=raw)
        except InputError as exc:
            bad(str(exc).replace("radius limits: ", "").replace("radius limits ", "limits "))
    m = re.fullmatch(rf"({_N}){_MM}\s*{_PM}\s*({_N})\s*(%|mm)?", s, flags=re.I)
    if m:
        nom, dv = _num(m.group(1)), _num(m.group(2))
        if dv <= 0:
            bad("the ± value must be positive")
        if m.group(3) == "%":
            if dv >= 100:
                bad(f"{_g(dv)} % is not a tolerance")
            dv = abs(nom) * dv / 100.0
        return _nominal(raw, nom, dv, dv, bad)
    m = re.fullmatch(rf"({_N}){_MM}\s*\+\s*({_N})\s*(%|mm)?\s*/?\s*[-−]\s*({_N})\s*(%|mm)?", s, flags=re.I)
    if m:
        nom, up, dn = _num(m.group(1)), _num(m.group(2)), _num(m.group(4))
        pct = "%" in (m.group(3), m.group(5))
        if pct and m.group(3) != m.group(5) and None not in (m.group(3), m.group(5)):
            bad("give both deviations in % or both in mm")
        if up < 0 or dn < 0 or up + dn == 0:
            bad("the deviations must not be negative and not both zero")
        if pct:
            up, dn = abs(nom) * up / 100.0, abs(nom) * dn / 100.0
        return _nominal(raw, nom, up, dn, bad)
    # say what is missing rather than only "no"
    if not re.match(rf"\s*{_N}", s):
        bad("expected the nominal radius (a number in mm) first")
    if re.search(_PM + r"\s*$", s) or s.rstrip().endswith("+"):
        bad("expected the tolerance value after '±'")
    if re.search(r"(\.\.|…)\s*$", s):
        bad("expected the upper limit after '..'")
    if re.fullmatch(rf"{_N}{_MM}", s):
        bad("a nominal radius alone is no tolerance")
    unit = re.search(r"\b(cm|m|µm|um|in|inch)\b", s, flags=re.I)
    if unit:
        bad(f"give it in mm, not {unit.group(1)}")
    bad("cannot read it")
    raise AssertionError  # unreachable


def _nominal(raw, nom, up, dn, bad) -> RadiusTolerance:
    if not all(math.isfinite(x) for x in (nom, up, dn, nom - dn, nom + up)):
        bad("the numbers must be finite")
    if nom == 0:
        bad("the nominal radius cannot be 0")
    lo, hi = nom - dn, nom + up
    if lo < 0 < hi:
        bad("the limits span zero")
    return RadiusTolerance(raw, lo, hi, nom)


def radius_tolerance_from(tolerance: str | None = None, limits=None) -> RadiusTolerance | None:
    """The tolerance from ``--radius-tolerance TEXT`` or ``--radius-limits LO HI`` (not both); None if neither."""
    if tolerance and limits:
        raise InputError("give either --radius-tolerance or --radius-limits, not both")
    if tolerance:
        return parse_radius_tolerance(tolerance)
    if limits:
        lo, hi = limits
        return radius_limits(lo, hi)
    return None


def judge_radius(radius_mm: float | None, U_mm: float | None, tol: RadiusTolerance,  # noqa: N803
                 rule: str | None = "simple", *, what: str = "radius of curvature") -> dict:
    """The radius verdict as stored with a result: the conformity fields plus what was judged and the tolerance.

    Radii are compared by magnitude when the tolerance is positive and the measured radius carries no sign
    (convex and concave parts read the same from rings on a flat)."""
    v = radius_mm
    if v is not None and tol.lower > 0 and v < 0:
        v = -v
    c = judge(v, U_mm, tol.lower, tol.upper, rule=rule, unit="mm")
    d = c.to_dict()
    d.update(quantity=what, tolerance=tol.to_dict())
    if radius_mm is None:
        d["note"] = f"no {what} measured"
    return d


# --- the verdict of a whole result -------------------------------------------------------------------------

def combined_verdict(form_verdict: dict | None, radius: dict | None, rule: str | None) -> dict | None:
    """The result's verdict: the form verdict (if any) and the radius verdict (if any), worst one overall.

    The form verdict's own fields are kept as they were (``terms``, ``decision_rule``, ...); the radius verdict
    sits under ``radius`` and the form's own overall under ``form_overall``."""
    if radius is None:
        return form_verdict
    rule = normalise_rule(rule)
    out = dict(form_verdict or {})
    form_overall = out.get("overall") if form_verdict else None
    if form_verdict:
        out["form_overall"] = form_overall
    out.setdefault("terms", [])
    # "name: wording" — the window shows the part before the colon and the rest as its tooltip
    out.setdefault("decision_rule", f"{RULE_NAMES[rule]}: {RULE_WORDING[rule]}")
    out["rule"] = rule
    out["rule_name"] = RULE_NAMES[rule]
    out["radius"] = radius
    out["overall"] = worst([form_overall, radius["verdict"]])
    if out["overall"] == "not evaluated":
        out["reason"] = radius.get("note") or out.get("reason") or "no tolerance evaluated"
    tol = radius["tolerance"]["described"]
    if radius["verdict"] in VERDICTS:
        word = radius["verdict"]
        acc = "accepted" if radius["accepted"] else "not accepted"
        out["radius_meaning"] = (f"{radius['quantity']} {word} against {tol} under {RULE_NAMES[rule]}: {acc}")
        if not out.get("meaning") or not form_verdict or form_overall == "not evaluated":
            if word.startswith("conditional"):
                out["meaning"] = (f"the {radius['quantity']} lies within its expanded uncertainty (k = 2) of a "
                                  f"limit of {tol}: conformity is neither proven nor disproven; "
                                  f"{acc} under {RULE_NAMES[rule]}")
            else:
                out["meaning"] = f"the {radius['quantity']} is {'within' if word == 'pass' else 'outside'} {tol}"
    return out


def with_radius_verdict(result):
    """``result`` (an AnalysisResult) with the radius verdict joined to its verdict when its set-up carries a
    radius tolerance: the measured radius in radius mode, the surface radius against the test plate in form
    mode. Unchanged when no radius tolerance is given."""
    from dataclasses import replace

    setup = result.setup
    text = getattr(setup, "radius_tolerance", None)
    if not text:
        return result
    tol = parse_radius_tolerance(text)
    rule = normalise_rule(setup.decision_rule)
    if result.form is None:
        radius = judge_radius(result.radius_mm, result.radius_U_mm, tol, rule, what="radius of curvature")
    else:
        block = result.form.radius
        r = None if block is None else block.surface_radius_mm
        U = None if block is None else block.surface_radius_U_mm
        radius = judge_radius(r, U, tol, rule, what="surface radius")
        if r is None:
            radius["note"] = ((block.surface_radius_note if block is not None else None) or
                              "no test-plate radius given: the surface radius (plate radius ± ΔR) is not known")
    prior = None if result.verdict is None else result.verdict.to_dict()
    return replace(result, verdict=Verdict.from_dict(combined_verdict(prior, radius, rule)))


def verdict_lines(radius: dict) -> list[str]:
    """The radius verdict as printed by the text report (one block, every number with its unit)."""
    tol = radius["tolerance"]["described"]
    lines = [f"Radius verdict ({radius['quantity']} against {tol})"]
    if radius.get("value") is None:
        lines.append(f"  NOT EVALUATED — {radius.get('note') or 'no value'}")
        return lines
    U = radius.get("U")
    from .uncertainty import format_value

    meas = f"{radius['value']:.6g} mm (U not available)" if U is None else \
        f"{format_value(float(radius['value']), float(U), 'mm')} (k = 2)"
    acc = radius.get("accepted")
    lines.append(f"  {radius['verdict'].upper()}: measured {meas}"
                 + ("" if acc is None else f" — {'accepted' if acc else 'not accepted'}"))
    lines.append(f"  decision rule: {radius['rule_name']}")
    al = (radius.get("acceptance_lower"), radius.get("acceptance_upper"))
    if radius["rule"] == "guard-banded" and None not in al:
        lines.append(f"  acceptance limits (TL ∓ U): {al[0]:.6g} … {al[1]:.6g} mm")
    if radius.get("p_conform") is not None:
        lines.append(f"  probability that the radius is within the tolerance: {100 * radius['p_conform']:.1f} % "
                     "(normal distribution)")
    if radius.get("note"):
        lines.append(f"  note: {radius['note']}")
    return lines


# --- the verdict as a result keeps it ------------------------------------------------------------------------

def _omit_none(d: dict, always: tuple[str, ...] = ()) -> dict:
    return {k: v for k, v in d.items() if v is not None or k in always}


@dataclass(frozen=True)
class TermVerdict:
    """The verdict on one toleranced form term (ISO 10110-5), compared in the tolerance's own unit."""

    term: str
    value: float | None
    U: float | None  # noqa: N815 - expanded uncertainty (k = 2), in ``unit``
    limit: float
    unit: str
    value_fringes: float | None
    U_fringes: float | None  # noqa: N815
    limit_fringes: float | None
    value_nm: float | None
    wavelength_nm: float
    wavelength_stated: bool
    verdict: str
    note: str = ""

    def to_dict(self) -> dict:
        return dict(self.__dict__)

    @classmethod
    def from_dict(cls, d: dict) -> "TermVerdict":
        from .serialise import build

        return build(cls, d)


@dataclass(frozen=True)
class RadiusVerdict:
    """The verdict on a radius of curvature (measured, or the surface radius against a test plate)."""

    quantity: str  # "radius of curvature" or "surface radius"
    tolerance: RadiusTolerance
    verdict: str
    state: str
    accepted: bool | None
    value: float | None
    U: float | None  # noqa: N815
    unit: str
    lower: float | None
    upper: float | None
    rule: str
    rule_name: str
    rule_wording: str
    guard_band: float
    acceptance_lower: float | None
    acceptance_upper: float | None
    p_conform: float | None = None
    note: str = ""

    def to_dict(self) -> dict:
        d = {k: v for k, v in self.__dict__.items() if k not in ("quantity", "tolerance")}
        d.update(quantity=self.quantity, tolerance=self.tolerance.to_dict())
        return d

    @classmethod
    def from_dict(cls, d: dict) -> "RadiusVerdict":
        from .serialise import build

        t = d["tolerance"]
        tol = RadiusTolerance(t["text"], float(t["lower_mm"]), float(t["upper_mm"]),
                              None if t.get("nominal_mm") is None else float(t["nominal_mm"]))
        return build(cls, d, tolerance=tol)


@dataclass(frozen=True)
class Verdict:
    """A result's verdict: the form terms against their ISO 10110-5 tolerance and/or the radius against its
    tolerance, under one decision rule; ``overall`` is the worst of them."""

    overall: str
    terms: tuple[TermVerdict, ...] = ()
    decision_rule: str | None = None  # the rule's name and wording, as printed
    rule: str | None = None
    rule_name: str | None = None
    reason: str | None = None
    meaning: str | None = None
    power_note: str | None = None
    wavelength_note: str | None = None
    form_overall: str | None = None
    radius: RadiusVerdict | None = None
    radius_meaning: str | None = None

    def to_dict(self) -> dict:
        d = dict(self.__dict__)
        d["terms"] = [t.to_dict() for t in self.terms]
        d["radius"] = None if self.radius is None else self.radius.to_dict()
        return _omit_none(d, always=("terms",))

    @classmethod
    def from_dict(cls, d: dict | None) -> "Verdict | None":
        from .serialise import build

        return None if d is None else build(cls, d)

