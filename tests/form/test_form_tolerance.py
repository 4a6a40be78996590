"""ISO 10110-5 tolerance strings: parsing, units, wavelengths, verdicts in the tolerance's own unit.

Notation source: ISO 10110-5:2015, Optics and photonics — Preparation of drawings for optical elements and
systems — Part 5: Surface form tolerances, clause on the indication of surface form tolerances (the code
"3/A(B/C)", the RMS forms "RMSt/RMSi/RMSa < D", "λ = E", nanometres preferred, fringe spacings permitted with the
base wavelength stated, a dash for a term not specified; a value without a unit is in fringes). The three
examples marked "worked example" are the ones the LAYERTEC GmbH surface-form tolerance note uses to explain that
clause (3/ – (1); RMSa < 0.1; λ = 546 nm → B = 273 nm, 3/ 2(1/0.5); λ = 632.8 nm → 1 fringe = 316.4 nm,
3/ –; RMSt < 100 nm; RMSi < 30 nm; λ = 546 nm).
"""

import pytest

from ringgauge.errors import ToleranceSyntaxError
from ringgauge.form.tolerance import DEFAULT_WAVELENGTH_NM, convert_fringes, judge, parse_tolerance


@pytest.mark.parametrize(
    "text, A, B, C",
    [
        # ISO 10110-5:2015, surface form tolerance notation 3/A(B/C); typical drawing values (from memory)
        ("3/5(1)", 5.0, 1.0, None),
        ("3/2(0.5)", 2.0, 0.5, None),
        ("3/1(0.2)", 1.0, 0.2, None),
        # ISO 10110-5:2015, notation 3/A(B/C) with the rotationally symmetric part C
        ("3/2(0.5/0.2)", 2.0, 0.5, 0.2),
        # ISO 10110-5:2015, a dash (hyphen or en dash) for "not specified"
        ("3/-(0.5)", None, 0.5, None),
        ("3/–(0.5)", None, 0.5, None),
        ("3/2(-/0.1)", 2.0, None, 0.1),
        ("3/3", 3.0, None, None),
        (" 3 / 2 ( 0,5 ) ", 2.0, 0.5, None),  # spaces and a decimal comma as drawings are written
    ],
)
def test_parses_the_iso_notation(text, A, B, C):
    t = parse_tolerance(text)
    assert (t.power, t.irregularity, t.rot_sym_irregularity) == (A, B, C)
    # no λ stated: 546.07 nm (mercury e-line) is the usual default — from memory
    assert t.wavelength_nm == DEFAULT_WAVELENGTH_NM == 546.07 and not t.wavelength_stated
    assert all(lim.unit == "fringes" for lim in t.written)  # ISO 10110-5:2015: no unit means fringes
    assert "assumed" in t.to_dict()["wavelength_note"]


def test_rms_in_nanometres_worked_example():
    # worked example of ISO 10110-5:2015's RMS notation: "3/ –; RMSt < 100 nm; RMSi < 30 nm; λ = 546 nm"
    t = parse_tolerance("3/ –; RMSt < 100 nm; RMSi < 30 nm; λ = 546 nm")
    assert t.power is None and t.irregularity is None
    assert t.wavelength_nm == 546.0 and t.wavelength_stated
    assert {(lim.key, lim.value, lim.unit) for lim in t.written} == {("t", 100.0, "nm"), ("i", 30.0, "nm")}
    # in fringes of 546 nm (one fringe = λ/2 = 273 nm): 100/273 and 30/273
    assert t.rms_total == pytest.approx(100 / 273) and t.rms_irregularity == pytest.approx(30 / 273)
    assert t.limits_nm() == pytest.approx({"rms_total_fringes": 100.0, "rms_irregularity_fringes": 30.0})
    d = t.to_dict()
    assert d["unit"] == "nm" and d["rms_total_unit"] == "nm" and d["rms_total_nm"] == pytest.approx(100.0)


def test_rmsa_with_a_dash_for_power_worked_example():
    # worked example of ISO 10110-5:2015's notation: "3/ – (1); RMSa < 0.1; λ = 546 nm"
    # -> B = 1 fringe = 273 nm, RMSa < 0.1 fringe (no unit: fringes)
    t = parse_tolerance("3/ – (1); RMSa < 0.1; λ = 546 nm")
    assert (t.power, t.irregularity, t.rms_asymmetric) == (None, 1.0, 0.1)
    assert t.to_dict()["irregularity_nm"] == pytest.approx(273.0)
    assert t.written[-1].unit == "fringes"
    # "RMS a" written with a space, as some drawings do
    assert parse_tolerance("3/-(1) RMS a < 0.1").rms_asymmetric == 0.1


def test_fringe_size_at_a_stated_wavelength_worked_example():
    # worked example: "3/ 2(1/0.5); λ = 632.8 nm" -> A = 2, B = 1, C = 0.5 fringes, 1 fringe = 316.4 nm
    t = parse_tolerance("3/ 2(1/0.5); λ = 632.8 nm")
    assert (t.power, t.irregularity, t.rot_sym_irregularity) == (2.0, 1.0, 0.5)
    assert t.fringe_nm == pytest.approx(316.4)
    assert t.to_dict()["power_nm"] == pytest.approx(632.8)


def test_mixed_units_and_other_spellings():
    # ISO 10110-5:2015: A, B, C may be given in nm, like the RMS values
    t = parse_tolerance("3/500 nm(100 nm/ -) RMSi<0.05; λ=632.8nm")
    assert t.power == pytest.approx(500 / 316.4) and t.irregularity == pytest.approx(100 / 316.4)
    assert [lim.unit for lim in t.written] == ["nm", "nm", "fringes"]
    assert t.to_dict()["unit"] == "mixed"
    assert parse_tolerance("3/0.2 µm").written[0] == parse_tolerance("3/200 nm").written[0]
    assert parse_tolerance("3/2 fringes(0.5 fr)").written[1].unit == "fringes"
    assert parse_tolerance("3/2(0.5); λ = 0.6328 µm").wavelength_nm == pytest.approx(632.8)
    t = parse_tolerance("3/1(0.5/0.2) RMSi < 0.05; λ = 632.8")
    assert t.rms_irregularity == 0.05 and t.rms_total is None and t.rms_asymmetric is None
    t = parse_tolerance("3/-(-) RMSt<0.1 RMSa ≤ 0.02")
    assert (t.rms_total, t.rms_asymmetric, t.power) == (0.1, 0.02, None)
    t = parse_tolerance("3/2(0.5) Ø 20 mm")
    assert t.test_diameter_mm == 20.0
    assert set(t.limits()) == {"power_fringes", "irregularity_fringes"}
    assert parse_tolerance("3/2(0.5); λ = 546.07;").wavelength_stated  # a trailing ';' is harmless


@pytest.mark.parametrize(
    "text, pos, words",
    [
        ("3/2(0.5", 7, "')' to close"),
        ("3/x(1)", 2, "power tolerance A"),
        ("2/2(0.5)", 0, "'3/'"),
        ("3/2(0.5) RMSq < 1", 12, "RMSt, RMSi or RMSa"),
        ("3/2(0.5) RMSi 0.1", 14, "'<'"),
        ("3/2(0.5); λ = 5", 14, "200-2000"),
        ("3/2(0.5) junk", 9, "unexpected text"),
        ("3/-(-)", 2, "every term is a dash"),
        ("3/ –; RMSt < 100 nm; RMSt < 30 nm", 24, "given twice"),
        ("3/ –; RMSt < 100 nm; λ = 546 nm; λ = 633", 33, "given twice"),
        ("3/ –; RMSt < nm", 13, "RMSt limit"),
        ("3/2(0.5); junk", 10, "after ';'"),
        ("3/2(0.5); λ = 546 fringes", 14, "in nm"),
        ("3/2(0.5) Ø 0 mm", 11, "positive"),
    ],
)
def test_malformed_strings_point_at_the_bad_character(text, pos, words):
    with pytest.raises(ToleranceSyntaxError) as exc:
        parse_tolerance(text)
    msg = str(exc.value)
    assert f"character {pos + 1} " in msg and words in msg, msg
    assert "\n" not in msg  # one line for the command line
    # the caret sits under the bad character, for displays that show two lines
    line, caret = exc.value.pointer.split("\n")
    assert line == text.strip() and caret == " " * pos + "^"


def test_empty_string():
    with pytest.raises(ToleranceSyntaxError, match="empty"):
        parse_tolerance("  ")


def test_one_fringe_is_half_a_wavelength():
    # one fringe = λ/2 of surface height (ISO 10110-5:2015 fringe spacing): 1 fringe at 632.8 nm = 316.4 nm
    # = 1.1587 fringes at 546.07 nm
    assert convert_fringes(1.0, 632.8, 546.07) == pytest.approx(632.8 / 546.07)
    assert convert_fringes(1.0, 632.8, 546.07) * 546.07 / 2 == pytest.approx(316.4)


def _judge(text, terms, u, lam):
    full = {k: 0.0 for k in ("power_fringes", "irregularity_fringes", "rot_sym_irregularity_fringes",
                             "rms_total_fringes", "rms_irregularity_fringes", "rms_asymmetric_fringes")}
    full.update(terms)
    return judge(parse_tolerance(text), full, {k: u for k in full}, measured_fringe_nm=lam / 2,
                 measured_wavelength_nm=lam)


def test_verdict_in_nanometres_compares_height():
    # RMSi measured 0.1 fringe at 589.29 nm = 29.46 nm of height: passes RMSi < 30 nm whatever the tolerance's λ
    v = _judge("3/ –; RMSt < 100 nm; RMSi < 30 nm; λ = 546 nm",
               {"rms_irregularity_fringes": 0.1, "rms_total_fringes": 0.3}, 0.0005, 589.29)
    rows = {r["term"]: r for r in v["terms"]}
    assert rows["rms_irregularity"]["unit"] == "nm"
    assert rows["rms_irregularity"]["value"] == pytest.approx(0.1 * 589.29 / 2)
    assert rows["rms_irregularity"]["U"] == pytest.approx(2 * 0.0005 * 589.29 / 2)
    assert rows["rms_irregularity"]["verdict"] == "pass" and rows["rms_total"]["verdict"] == "pass"
    # the same 0.1 fringe measured at 632.8 nm is 31.6 nm: fails
    v = _judge("3/ –; RMSi < 30 nm; λ = 546 nm", {"rms_irregularity_fringes": 0.1}, 0.0005, 632.8)
    assert v["terms"][0]["verdict"] == "fail" and v["terms"][0]["value"] == pytest.approx(31.64)


def test_verdict_in_fringes_of_another_wavelength_says_so():
    # 1.0 fringe measured at 546.07 nm = 273.0 nm = 0.8630 fringe of 632.8 nm: passes 3/0.9, fails 3/0.85
    v = _judge("3/0.9; λ = 632.8", {"power_fringes": 1.0}, 0.001, 546.07)
    assert v["terms"][0]["value"] == pytest.approx(546.07 / 632.8) and v["overall"] == "pass"
    assert "632.8" in v["terms"][0]["note"] and "546.07" in v["wavelength_note"]
    assert _judge("3/0.85; λ = 632.8", {"power_fringes": 1.0}, 0.001, 546.07)["overall"] == "fail"
    # no λ in the tolerance: fringes of 546.07 nm assumed (from memory) and the verdict says so
    v = _judge("3/2(0.5)", {"power_fringes": 1.0, "irregularity_fringes": 0.2}, 0.01, 546.07)
    assert v["overall"] == "pass" and "assumed" in v["wavelength_note"]


def test_verdict_rules_and_no_tolerance():
    assert judge(None, {}, {}, measured_fringe_nm=273.0, measured_wavelength_nm=546.0)["overall"] == "not evaluated"
    # within U of the limit: conditional under simple acceptance (ILAC-G8:09/2019 decision rules)
    v = _judge("3/ –; RMSt < 100 nm; λ = 546 nm", {"rms_total_fringes": 99.0 / 273.0}, 2.0 / 273.0, 546.0)
    assert v["overall"] == "conditional pass" and v["terms"][0]["U"] == pytest.approx(4.0)
