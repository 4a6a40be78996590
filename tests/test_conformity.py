"""Decision rules and radius tolerances (ringgauge.conformity).

The zones checked here are those ILAC-G8:09/2019 draws for a two-sided tolerance with the measured value x and
its expanded uncertainty U (k = 2); clause and figure numbers are from memory of that document:
  §4.2.1 / figure 3 — binary statement, simple acceptance: accept when x lies within the tolerance limits (TL);
  §4.2.2 / figure 4 — binary statement with guard band w = U: accept only when x lies within the acceptance
                      limits AL = TL ∓ w;
  §4.2.3 / figure 5 — non-binary statement with guard band w = U: pass (x ± U inside), conditional pass (x inside,
                      x ± U straddles TL), conditional fail (x outside, x ± U straddles TL), fail (x ± U outside).
ISO 14253-1:2017 states the same zones for proving conformity (x + U inside the specification zone) and
non-conformity (x − U beyond it).
"""

import math

import pytest

from ringgauge.conformity import (
    RULE_WORDING,
    judge,
    judge_radius,
    normalise_rule,
    parse_radius_tolerance,
    radius_limits,
    radius_tolerance_from,
    worst,
)
from ringgauge.errors import InputError, ToleranceSyntaxError

LO, HI, U = 995.0, 1005.0, 2.0  # a 1000 mm ± 5 mm radius measured with U = 2 mm


# (x, verdict (figure-5 zone), accepted under simple acceptance (figure 3), accepted under w = U (figure 4), case)
CASES = [
    (1000.0, "pass", True, True, "mid-tolerance: x ± U well inside TL (fig. 3/4/5 accept zone)"),
    (1003.0, "pass", True, True, "upper AL exactly: x + U touches TL, still inside (fig. 4 AL = TL - w)"),
    (997.0, "pass", True, True, "lower AL exactly: x - U touches TL (fig. 4 AL = TL + w)"),
    (1003.5, "conditional pass", True, False, "between AL and upper TL: U interval straddles TL (fig. 5 "
                                              "conditional pass; fig. 3 accepts, fig. 4 rejects)"),
    (996.0, "conditional pass", True, False, "between lower TL and AL (fig. 5 conditional pass)"),
    (1005.0, "conditional pass", True, False, "at the upper TL: within the zone (fig. 3 accepts at the limit)"),
    (995.0, "conditional pass", True, False, "at the lower TL (fig. 3 accepts at the limit)"),
    (1006.0, "conditional fail", False, False, "just beyond upper TL, x - U reaches back inside (fig. 5 "
                                               "conditional fail)"),
    (993.5, "conditional fail", False, False, "just beyond lower TL (fig. 5 conditional fail)"),
    (1007.0, "conditional fail", False, False, "x - U touches upper TL: not yet proven beyond (ISO 14253-1)"),
    (1007.5, "fail", False, False, "x - U beyond upper TL: whole interval in the reject zone (fig. 5 fail)"),
    (990.0, "fail", False, False, "x + U below lower TL: reject zone (fig. 3/4/5 fail)"),
]


@pytest.mark.parametrize("x,verdict,acc_simple,acc_guard,case", CASES, ids=[c[-1][:40] for c in CASES])
def test_zones_ilac_g8(x, verdict, acc_simple, acc_guard, case):
    # ILAC-G8:09/2019 §4.2.1-4.2.3, figures 3-5 (case named in the table above)
    s = judge(x, U, LO, HI, rule="simple", unit="mm")
    g = judge(x, U, LO, HI, rule="guard-banded", unit="mm")
    assert s.verdict == verdict, case
    assert g.verdict == verdict, case  # the zone does not depend on the rule, only acceptance does
    assert s.accepted is acc_simple, case
    assert g.accepted is acc_guard, case
    assert s.guard_band == 0.0 and g.guard_band == U
    assert g.acceptance_limits == (LO + U, HI - U)
    assert s.state == ("conditional" if verdict.startswith("conditional") else verdict)


def test_one_sided_upper_limit_like_a_form_term():
    # ILAC-G8:09/2019 figure 5 with a single upper TL (a form term |value| <= limit)
    assert judge(0.3, 0.1, upper=0.5).verdict == "pass"
    assert judge(0.45, 0.1, upper=0.5).verdict == "conditional pass"
    assert judge(0.55, 0.1, upper=0.5).verdict == "conditional fail"
    assert judge(0.7, 0.1, upper=0.5).verdict == "fail"
    assert judge(0.45, 0.1, upper=0.5, rule="guard-banded").accepted is False
    assert judge(0.45, 0.1, upper=0.5, rule="simple").accepted is True


def test_no_uncertainty_value_alone_decides():
    c = judge(1004.9, None, LO, HI)
    assert c.verdict == "pass" and "uncertainty" in c.note
    assert judge(1005.1, None, LO, HI).verdict == "fail"


def test_uncertainty_wider_than_half_the_tolerance_is_said():
    c = judge(1000.0, 6.0, LO, HI, rule="guard-banded", unit="mm")
    assert c.verdict == "conditional pass" and c.accepted is False
    assert "no value can be proven to pass" in c.note


def test_conformance_probability_normal_jcgm106():
    # JCGM 106:2012 §7: p_c = Φ((TU - x)/u) - Φ((TL - x)/u) for a normal PDF; at a limit p_c ≈ 0.5
    assert judge(HI, U, LO, HI).p_conform == pytest.approx(0.5, abs=1e-6)
    # x + U = TU with U = 2u: p_c = Φ(2) - Φ(-8) = 0.97725 (standard normal table)
    assert judge(HI - U, U, LO, HI).p_conform == pytest.approx(0.97725, abs=1e-4)


def test_rule_names_and_wording_name_the_rule_and_the_risk():
    assert normalise_rule("Guard banded") == "guard-banded" and normalise_rule(None) == "simple"
    with pytest.raises(InputError, match="decision rule"):
        normalise_rule("lenient")
    assert "50 %" in RULE_WORDING["simple"] and "2.5 %" in RULE_WORDING["guard-banded"]
    assert "ILAC-G8:09/2019" in RULE_WORDING["simple"]


def test_worst_verdict():
    assert worst(["pass", "conditional pass"]) == "conditional pass"
    assert worst(["conditional fail", "fail", "pass"]) == "fail"
    assert worst(["not evaluated"]) == "not evaluated"


@pytest.mark.parametrize("text,lo,hi,nom", [
    ("1000 ± 5", 995, 1005, 1000),
    ("1000 +/- 5", 995, 1005, 1000),
    ("1000 +- 5 mm", 995, 1005, 1000),
    ("1000 ± 0.5 %", 995, 1005, 1000),
    ("R = 1000 mm ± 0.5 %", 995, 1005, 1000),
    ("995..1005", 995, 1005, None),
    ("995 ... 1005", 995, 1005, None),
    ("1000 +5/-3", 997, 1005, 1000),
    ("1000,5 ± 0,5", 1000, 1001, 1000.5),
    ("-250 ± 1", -251, -249, -250),
])
def test_radius_tolerance_forms(text, lo, hi, nom):
    t = parse_radius_tolerance(text)
    assert math.isclose(t.lower, lo) and math.isclose(t.upper, hi)
    assert t.nominal == nom


@pytest.mark.parametrize("text,says", [
    ("", "empty"),
    ("1000 ±", "after '±'"),
    ("1000", "nominal radius alone"),
    ("1005..995", "must be below"),
    ("1000 ± 0", "must be positive"),
    ("1000 ± 150 %", "not a tolerance"),
    ("995..", "upper limit"),
    ("1 ± 0.5 m", "in mm"),
    ("about a metre", "nominal radius"),
    ("-5..5", "span zero"),
    ("1e308 ± 1e308", "finite"),
    ("1e400..1e401", "finite"),
])
def test_radius_tolerance_errors_are_pointed_and_one_line(text, says):
    with pytest.raises(ToleranceSyntaxError) as e:
        parse_radius_tolerance(text)
    msg = str(e.value)
    assert says in msg and "\n" not in msg and "1000 ± 5" in msg


def test_limits_option_and_not_both():
    assert radius_limits(995, 1005).describe() == "R 995 … 1005 mm"
    assert radius_tolerance_from(limits=(995, 1005)).upper == 1005
    assert radius_tolerance_from() is None
    with pytest.raises(InputError, match="not both"):
        radius_tolerance_from("1000 ± 5", (995, 1005))
    with pytest.raises(InputError, match="below"):
        radius_limits(1005, 995)


def test_judge_radius_magnitude_and_record_fields():
    t = parse_radius_tolerance("1000 ± 0.5 %")
    d = judge_radius(-1006.0, 2.0, t, "guard-banded")  # a concave part read as a magnitude
    assert d["verdict"] == "conditional fail" and d["value"] == 1006.0
    assert d["lower"] == 995 and d["upper"] == 1005 and d["rule"] == "guard-banded"
    assert d["tolerance"]["described"] == "R 1000 ± 5 mm (995 … 1005 mm)"
    assert judge_radius(None, None, t)["verdict"] == "not evaluated"


def test_surface_radius_against_a_test_plate_is_judged_beside_the_form_verdict():
    # form mode: the surface radius (plate radius ± ΔR) is judged against the radius tolerance, and the overall
    # verdict is the worse of the form verdict and the radius verdict (ILAC-G8:09/2019 figure 5 zones)
    from dataclasses import dataclass
    from types import SimpleNamespace

    from ringgauge.conformity import TermVerdict, Verdict, with_radius_verdict

    @dataclass(frozen=True)
    class R:  # the fields of an AnalysisResult the verdict reads
        setup: object
        form: object
        verdict: Verdict | None
        radius_mm: float | None = None
        radius_U_mm: float | None = None  # noqa: N815

    power = TermVerdict("power", 1.2, 0.1, 2.0, "fringes", 1.2, 0.1, 2.0, 330.0, 546.07, False, "pass")
    form_verdict = Verdict("pass", (power,), "simple acceptance: ...", "simple")
    setup = SimpleNamespace(radius_tolerance="51.68 ± 0.02", decision_rule="simple")

    def block(r, U=None, note=None):  # the surface-radius fields of a form result
        return SimpleNamespace(surface_radius_mm=r, surface_radius_U_mm=U, surface_radius_note=note)

    out = with_radius_verdict(R(setup, SimpleNamespace(radius=block(51.695, 0.004)), form_verdict))
    v = out.verdict
    assert v.radius.quantity == "surface radius" and v.radius.verdict == "pass"
    assert v.form_overall == "pass" and v.overall == "pass" and v.terms == form_verdict.terms
    # 51.698 .. 51.706 straddles 51.70
    v = with_radius_verdict(R(setup, SimpleNamespace(radius=block(51.702, 0.004)), form_verdict)).verdict
    assert v.radius.verdict == "conditional fail" and v.overall == "conditional fail"
    # sign of power unknown: no surface radius, so no radius verdict — said, not guessed
    v = with_radius_verdict(R(setup, SimpleNamespace(radius=block(None, note="sign unknown")), form_verdict)).verdict
    assert v.radius.verdict == "not evaluated" and "sign unknown" in v.radius.note
    assert v.overall == "pass"  # the form verdict still stands
    # no radius tolerance: the result is untouched
    plain = R(SimpleNamespace(radius_tolerance=None, decision_rule="simple"), None, None, 1000.0, 2.0)
    assert with_radius_verdict(plain) is plain
