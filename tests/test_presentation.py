"""The one presentation of a result (ringgauge.presentation): labelled rows with value, U and unit, in sections,
that the window's table, the text report and the certificate render.

Results: a lens on an optical flat (radius), the sample test-plate pair and one frame of it alone (sign of power
unknown), analysed with the options of the golden copies."""

from __future__ import annotations

import contextlib
import io
import json
import math
import sys
from pathlib import Path

import pytest

from ringgauge import presentation as pr
from ringgauge.form.result import FORM_TERMS
from ringgauge.result import AnalysisResult

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests" / "golden"))
import capture  # noqa: E402

PLATE_FRAMES = sorted((ROOT / "sample_images" / "testplate").glob("*.png"))


def _analyse(args: list[str]) -> AnalysisResult:
    from ringgauge.cli import main

    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        assert main(["analyze", *args, "--json", "--quiet"]) == 0
    return AnalysisResult.from_dict(json.loads(out.getvalue()))


@pytest.fixture(scope="module")
def radius_result():
    img = ROOT / "sample_images" / "lot-FH2604" / "FH2604-01.png"
    return _analyse([str(img), *capture.LOT_OPTIONS, "--radius-tolerance", "1000 ± 5"])


@pytest.fixture(scope="module")
def pair_result():
    return _analyse([*map(str, PLATE_FRAMES), *capture.PLATE_OPTIONS])


@pytest.fixture(scope="module")
def single_result():
    return _analyse([str(PLATE_FRAMES[0]), *capture.PLATE_OPTIONS])


def _same(printed: str, value: float) -> bool:
    """The printed number is the value to the digits printed (half a unit in the last digit)."""
    dec = len(printed.split(".")[1]) if "." in printed else 0
    return abs(float(printed) - value) <= 0.5 * 10.0**-dec + 1e-12


def _check_units_and_U(result: AnalysisResult) -> list[pr.Row]:
    rows = pr.rows(result)
    assert rows and len({r.key for r in rows}) == len(rows)  # one row per quantity
    for r in rows:
        if r.value is not None:
            # every number carries its unit; pure numbers are named as such
            assert r.shown_unit or r.key in pr.DIMENSIONLESS, r
        if r.kind == pr.MEASURED:
            # a measurement carries its uncertainty (U = k·u), with k as the result states it
            assert r.value is not None and r.value.u is not None and r.value.U > 0, r
            assert r.value.k == pytest.approx(result.k if result.form is None else result.form.k), r
        if r.alt is not None:
            assert r.alt.unit == "nm" and r.alt.U is not None and r.alt.U > 0, r
        if r.kind == pr.TEXT:
            assert r.value is None and not r.unit, r  # words, not a number without its unit
        if r.choices:
            assert r.unit == "mm" and r.value is None
    return rows


def test_value_and_U_round_together():
    # U to two significant digits, rounded, and the value to the same decimal place (GUM 7.2.6 — from memory)
    assert pr.value_and_U(826.2632, 3.3776) == ("826.3", "3.4")
    assert pr.value_and_U(1.22116, 0.00279) == ("1.2212", "0.0028")
    assert pr.value_and_U(1000.8123, 19.6) == ("1001", "20")
    assert pr.value_and_U(42.04, 2.96, decimals=1) == ("42.0", "3.0")
    assert pr.value_and_U(5.0, None) == ("5", None)
    assert pr.value_and_U(None, 1.0) == ("—", None)
    assert pr.quantity_text(None) == "n/a"


def test_term_labels_come_from_the_one_list():
    assert [pr.term_label(t.name) for t in FORM_TERMS] == [t.label for t in FORM_TERMS]
    assert pr.term_label("rms_total_fringes") == "RMSt (total RMS after tilt)"
    assert pr.term_label("some_new_term") == "some new term"  # never the internal key
    # certificates keep their wording; every term has one, and none is an internal key
    labels = [pr.document_label(t) for t in FORM_TERMS]
    assert len(set(labels)) == len(FORM_TERMS) and not any("_" in x for x in labels)
    assert labels[0] == "Power (sagitta deviation, A)" and labels[2] == "Irregularity (B)"


def test_radius_rows(radius_result):
    r = radius_result
    rows = _check_units_and_U(r)
    by = {x.key: x for x in rows}
    R = by["radius"]
    assert R.value == r.radius and R.value.unit == "mm" and R.label == "Radius of curvature R"
    a, b = pr.value_and_U(R.value.value, R.value.U)
    assert _same(a, r.radius.value) and _same(b, r.radius.U)
    assert [s.title for s in pr.sections(r)] == ["Radius", "Rings", "Set-up", "Run"]
    assert by["rings.used"].text == str(len(r.fit.rings_used))
    assert by["setup.wavelength"].value.value == r.setup.wavelength_nm
    # the certificate's rows: the radius, the rings used and the contact offset, in that order
    cert = pr.certificate_rows(r)
    assert [x.document_label for x in cert] == ["Radius of curvature R", "Rings used in the fit", "Contact offset"]
    assert pr.headline(r) == f"R = {a} ± {b} mm  (k = {r.k:g})"


def test_form_pair_rows(pair_result):
    r = pair_result
    form = r.form
    assert form is not None and r.radius is None
    rows = _check_units_and_U(r)
    terms = [x for x in rows if x.key.startswith("form.") and x.alt is not None]
    # every measured term once, in the one list's order, labelled from it
    assert [x.key for x in terms] == [f"form.{t.name}" for t in FORM_TERMS if t.name in
                                      {q.name for q in form.quantities}]
    assert len(terms) == len(FORM_TERMS)
    for x, spec in zip(terms, FORM_TERMS):
        assert x.label.lower() == spec.label.lower() and x.certificate_label == pr.document_label(spec)
        assert x.value == form.term(spec.name).fringes and x.alt == form.term(spec.name).nm
        assert x.value.unit == "fringes" and x.on_certificate
    by = {x.key: x for x in rows}
    assert by["plate.delta_r"].value == form.radius.delta_r and by["plate.delta_r"].value.unit == "mm"
    assert by["form.aperture"].value.unit == "mm" and by["form.astigmatism_axis"].value.unit == "°"
    assert [s.title for s in pr.sections(r)] == ["Surface form", "Against the test plate", "Set-up", "Run"]


def test_sign_unknown_single_frame(single_result):
    r = single_result
    form = r.form
    assert form.sign.sign == 0  # one frame cannot tell the sign of power
    rows = _check_units_and_U(r)
    by = {x.key: x for x in rows}
    assert by["form.sign"].text == "unknown" and by["form.sign"].note == form.sign.label
    sr = by["plate.surface_radius"]
    # two candidates, no single surface radius claimed
    assert sr.value is None and len(sr.choices) == 2 and sr.unit == "mm"
    assert sr.choices == pytest.approx(form.radius.surface_radius_candidates_mm)
    assert pr.figure_text(sr) == " or ".join(f"{c:.4f}" for c in sr.choices)


def test_the_window_table_renders_the_same_rows(pair_result, radius_result, single_result):
    from ringgauge.gui import display

    for r in (radius_result, pair_result, single_result):
        rows = pr.rows(r)
        table = display.value_rows(r)
        shown = {t.label: t for t in table}
        for x in rows:
            t = shown[x.label]
            assert t.unit == x.shown_unit and t.group == x.section
            if x.value is not None and x.value.U is not None:
                a, b = pr.value_and_U(x.value.value, x.value.U, decimals=x.decimals)
                assert (t.value, t.uncertainty) == (a, "± " + b)
                assert _same(t.value, x.value.value)
            elif x.kind == pr.MEASURED:
                assert t.uncertainty == "not available"
        # the nm rows the window adds are the same terms' alt values, nothing else
        extra = [t for t in table if t.label not in {x.label for x in rows}]
        assert all(t.label.endswith(" in nm") and t.unit == "nm" for t in extra)
        assert len(extra) == (2 if r.form is not None else 0)


def test_the_certificate_renders_the_same_rows(pair_result, single_result, radius_result):
    from ringgauge.report import content

    for r in (radius_result, pair_result, single_result):
        cert = pr.certificate_rows(r)
        printed = content._results_rows(r.to_dict())
        assert [p["quantity"] for p in printed] == [x.document_label for x in cert]
        for p, x in zip(printed, cert):
            if x.value is not None and x.value.U is not None and x.decimals is None:
                a, b = pr.value_and_U(x.value.value, x.value.U)
                assert p["value"].startswith(f"{a} {x.value.unit}") and p["U"].startswith(f"{b} {x.value.unit}")
                assert math.isclose(float(p["k"]), x.value.k)


def test_a_stored_result_that_cannot_be_read_back_is_one_line(pair_result):
    from ringgauge.errors import InputError

    d = pair_result.to_dict()
    assert pr.typed_result(d) == pair_result  # read back as it was
    del d["form"]["wavelength_u_nm"]  # a form result stored by hand without its wavelength's uncertainty
    with pytest.raises(InputError) as exc:
        pr.typed_result(d)
    assert "\n" not in str(exc.value) and "cannot be read back" in str(exc.value)
