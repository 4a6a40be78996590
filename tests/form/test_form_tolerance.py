"""ISO 10110-5 tolerance strings.

Source of the notation examples: the project's domain notes §3, which summarise ISO 10110-5:2015 (3/A(B/C),
3/A(B/C) RMSx < D, dashes, "; λ = E") and name typical drawing tolerances 3/5(1), 3/2(0.5), 3/1(0.2)
("from memory" in those notes).
"""

import pytest

from ringgauge.errors import ToleranceSyntaxError
from ringgauge.form.tolerance import DEFAULT_WAVELENGTH_NM, convert_fringes, parse_tolerance


@pytest.mark.parametrize(
    "text, A, B, C",
    [
        # typical drawing tolerances, domain notes §3 (from memory there)
        ("3/5(1)", 5.0, 1.0, None),
        ("3/2(0.5)", 2.0, 0.5, None),
        ("3/1(0.2)", 1.0, 0.2, None),
        # the full 3/A(B/C) form, ISO 10110-5 via domain notes §3
        ("3/2(0.5/0.2)", 2.0, 0.5, 0.2),
        # a dash means "not specified", ISO 10110-5 via domain notes §3
        ("3/-(0.5)", None, 0.5, None),
        ("3/2(-/0.1)", 2.0, None, 0.1),
        ("3/3", 3.0, None, None),
        (" 3 / 2 ( 0,5 ) ", 2.0, 0.5, None),  # spaces and a decimal comma as drawings are written
    ],
)
def test_parses_the_iso_notation(text, A, B, C):
    t = parse_tolerance(text)
    assert (t.power, t.irregularity, t.rot_sym_irregularity) == (A, B, C)
    assert t.wavelength_nm == DEFAULT_WAVELENGTH_NM and not t.wavelength_stated


def test_rms_variants_and_wavelength():
    # 3/A(B/C) RMSx < D and "; λ = E", ISO 10110-5:2015 via domain notes §3
    t = parse_tolerance("3/1(0.5/0.2) RMSi < 0.05; λ = 632.8")
    assert t.rms_irregularity == 0.05 and t.rms_total is None and t.rms_asymmetric is None
    assert t.wavelength_nm == 632.8 and t.wavelength_stated
    t = parse_tolerance("3/-(-) RMSt<0.1 RMSa ≤ 0.02")
    assert (t.rms_total, t.rms_asymmetric, t.power) == (0.1, 0.02, None)
    t = parse_tolerance("3/2(0.5) Ø 20 mm")
    assert t.test_diameter_mm == 20.0
    assert set(t.limits()) == {"power_fringes", "irregularity_fringes"}


def test_to_dict_carries_units():
    d = parse_tolerance("3/2(0.5); λ = 546.07").to_dict()
    assert d["unit"] == "fringes" and d["power_nm"] == pytest.approx(2 * 546.07 / 2)


@pytest.mark.parametrize(
    "text, where, words",
    [
        ("3/2(0.5", "character 8", "')' to close"),
        ("3/x(1)", "character 3", "power tolerance A"),
        ("2/2(0.5)", "character 1", "'3/'"),
        ("3/2(0.5) RMSq < 1", "character 13", "RMSt, RMSi or RMSa"),
        ("3/2(0.5) RMSi 0.1", "character 15", "'<'"),
        ("3/2(0.5); λ = 5", "wavelength 5 nm", "200-2000"),
        ("3/2(0.5) junk", "character 10", "unexpected text"),
        ("3/-(-)", "specifies nothing", "dash"),
        ("", "empty", "3/2(0.5)"),
    ],
)
def test_malformed_strings_point_at_the_bad_part(text, where, words):
    with pytest.raises(ToleranceSyntaxError) as exc:
        parse_tolerance(text)
    msg = str(exc.value)
    assert where in msg and words in msg
    assert "\n" not in msg


def test_one_fringe_is_half_a_wavelength():
    # one fringe = λ/2 of surface height (domain notes §3): 1 fringe at 632.8 nm = 316.4 nm = 1.1587 fringes at 546.07
    assert convert_fringes(1.0, 632.8, 546.07) == pytest.approx(632.8 / 546.07)
    assert convert_fringes(1.0, 632.8, 546.07) * 546.07 / 2 == pytest.approx(316.4)
