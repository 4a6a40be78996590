"""Certificates and lot reports: every field ISO/IEC 17025 §7.8 asks for is in the extracted text, the number
and "page x of y" are on every page, the content checksum verifies, a changed copy does not, a reprint is
identical, and A4 and Letter both lay out."""

from __future__ import annotations

import json
import unicodedata

import numpy as np
import pytest
from pypdf import PdfReader, PdfWriter

from ringgauge.errors import InputError
from ringgauge.imaging import save_png, sha256_file
from ringgauge.records import RecordMeta, open_store
from ringgauge.certificates import issue_certificate, issue_lot_report, power_limits_from_tolerance, reprint
from ringgauge.report.content import CONTENT_FILE
from ringgauge.report.verify import verify_pdf
from ringgauge.shop import load_shop, save_shop
from records_sample import SHOP



def unsigned_part(path) -> bytes:
    """The document as laid out, without the signature's incremental update (everything up to the first end)."""
    data = path.read_bytes()
    assert data.count(b"%%EOF") >= 2  # the layout, then the signature appended after it
    return data[: data.index(b"%%EOF")]


def text_of(path) -> list[str]:
    return [" ".join(unicodedata.normalize("NFKC", p.extract_text() or "").split()) for p in PdfReader(path).pages]


def test_certificate_carries_every_required_field(stocked, tmp_path):
    store, rec = stocked
    doc, path, again = issue_certificate(store, rec.id, tmp_path / "c.pdf", SHOP)
    assert not again and doc.number.startswith("FOW-C")
    pages = text_of(path)
    n = len(pages)
    for i, t in enumerate(pages, 1):  # unique identification and "page x of y" on every page
        assert f"No. {doc.number}" in t and f"Page {i} of {n}" in t
    assert f"End of certificate {doc.number}" in pages[-1]
    text = " ".join(pages)
    required = [
        "Certificate of Surface Inspection",                      # title
        "Fernhill Optical Workshop", "Unit 4, Quarry Lane",      # the shop
        "Harbour Optics Guild", "PO-5531",                        # customer and order
        "PCX-25-50", "D-1204 rev C", "S1", "0007", "L-0042",      # item
        "3/2(0.5)", "546.074 nm", "20 mm",                        # tolerance, λ, test diameter
        "Method", "ISO 10110-5", "GUM",                           # method
        "Measured (UTC)", rec.created_utc[:10], "Issued",         # dates
        "Radius of curvature R", "51.700 mm", "0.040 mm",         # result, unit, U (U to two digits)
        "coverage factor k = 2",
        "Power", "1.20 fringes", "0.10 fringes",
        "Uncertainty budget", "Sensitivity c_i", "pixel size", "Share",   # the budget table
        "Decision rule", "simple", "PASS",                        # decision rule and verdict
        "TP-0117", "TPC-88",                                      # traceability: test plate and its certificate
        "NIST ASD",                                               # wavelength source
        "bench 2, calibrated 2026-10-01",                         # pixel-scale calibration
        "20.4 °C",                                                # environment
        "A. Kestrel", "M. Oriel", "Approved by", "Signature",     # operator and approver sign-off
        rec.image_sha256,                                         # image checksum
        "Certificate content:",                                   # content checksum
        "Image with the fitted rings and centre", "Fit behind the result",
    ]
    missing = [s for s in required if s not in text]
    assert not missing
    reader = PdfReader(path)
    images = sum(len(p.images) for p in reader.pages)
    assert images >= 2  # the overlay and the fit plot are embedded as images
    v = verify_pdf(path, store)
    assert v.ok, v.checks


@pytest.mark.slow
def test_reprint_is_identical_and_new_issue_gets_a_new_number(stocked, tmp_path):
    store, rec = stocked
    d1, p1, _ = issue_certificate(store, rec.id, tmp_path / "a.pdf", SHOP)
    d2, p2, again = issue_certificate(store, rec.id, tmp_path / "b.pdf", SHOP)
    assert again and d2.number == d1.number
    # each copy is signed anew (the signing time differs); the laid-out document before the signature is the same
    assert unsigned_part(p1) == unsigned_part(p2)
    d3, p3 = reprint(store, d1.number, tmp_path / "c.pdf")
    assert unsigned_part(p3) == unsigned_part(p1)
    assert verify_pdf(p3, store).ok and verify_pdf(p1, store).ok  # every signed copy is kept as issued
    d4, _, again = issue_certificate(store, rec.id, tmp_path / "d.pdf", SHOP, new_issue=True)
    assert not again and d4.number != d1.number


def test_altered_copies_do_not_verify(stocked, tmp_path):
    store, rec = stocked
    doc, path, _ = issue_certificate(store, rec.id, tmp_path / "c.pdf", SHOP)
    # 1) the embedded content changed (a value edited)
    w = PdfWriter(clone_from=PdfReader(path))
    content = json.loads(PdfReader(path).attachments[CONTENT_FILE][0])
    content["results"][0]["value"] = "51.90 mm"
    w2 = PdfWriter()
    for page in w.pages:
        w2.add_page(page)
    w2.add_metadata(dict(PdfReader(path).metadata))
    w2.add_attachment(CONTENT_FILE, json.dumps(content).encode())
    bad1 = tmp_path / "bad1.pdf"
    with open(bad1, "wb") as fh:
        w2.write(fh)
    v = verify_pdf(bad1, store)
    assert not v.ok and {"content", "issued"} <= set(v.failed())
    # 2) the printed text changed (the radius on the page), embedded content untouched
    w = PdfWriter(clone_from=PdfReader(path))
    changed = False
    for page in w.pages:
        data = page.get_contents().get_data()
        if b"51.700" in data:
            cs = page.get_contents()
            cs.set_data(data.replace(b"51.700", b"51.900"))
            page.replace_contents(cs)
            changed = True
    assert changed
    bad2 = tmp_path / "bad2.pdf"
    with open(bad2, "wb") as fh:
        w.write(fh)
    v = verify_pdf(bad2, store)
    assert not v.ok and {"signature", "printed cells"} <= set(v.failed())
    # 3) a genuine-looking certificate the store never issued
    other = open_store(tmp_path / "other.sqlite")
    v = verify_pdf(path, other)
    assert not v.ok and v.failed() == ["issued"] and "not in the records store" in v.checks[-1][1]
    other.close()


@pytest.mark.slow
@pytest.mark.parametrize("paper,size_pt", [("A4", (595.3, 841.9)), ("Letter", (612.0, 792.0))])
def test_paper_sizes(stocked, tmp_path, paper, size_pt):
    store, rec = stocked
    _, path, _ = issue_certificate(store, rec.id, tmp_path / "c.pdf", SHOP, paper=paper)
    box = PdfReader(path).pages[0].mediabox
    # ISO 216 A4 = 210 x 297 mm; ANSI Letter = 8.5 x 11 in (1 pt = 1/72 in)
    assert (float(box.width), float(box.height)) == pytest.approx(size_pt, abs=0.5)
    assert verify_pdf(path, store).ok


def test_failed_and_superseded_records_get_no_certificate(stocked, tmp_path):
    store, rec = stocked
    bad = store.add(RecordMeta(lot="L-0042"), None, image_path="/x/b.png", image_sha256="ef" * 32,
                    failure="no ring system found")
    with pytest.raises(InputError, match="failed analysis"):
        issue_certificate(store, bad.id, tmp_path / "x.pdf", SHOP)
    new = store.supersede(rec.id, "serial misread", meta_changes={"serial": "0070"})
    with pytest.raises(InputError, match=f"certify record {new.id}"):
        issue_certificate(store, rec.id, tmp_path / "x.pdf", SHOP)
    doc, path, _ = issue_certificate(store, new.id, tmp_path / "n.pdf", SHOP)
    text = " ".join(text_of(path))
    assert f"corrects record {rec.id}: serial misread" in text and "0070" in text


def test_missing_image_is_said_not_hidden(stocked, tmp_path):
    store, rec = stocked
    (tmp_path / "S0007.png").unlink()
    _, path, _ = issue_certificate(store, rec.id, tmp_path / "c.pdf", SHOP)
    assert "Image not shown" in " ".join(text_of(path))


@pytest.mark.slow
def test_lot_report(tmp_path, make_result):
    store = open_store(tmp_path / "r.sqlite")
    rng = np.random.default_rng(11)
    for i in range(30):
        p = float(rng.normal(1.0, 0.3))
        store.add(RecordMeta(lot="L9", part="PCX", serial=f"{i:04d}", operator="J. Finch"),
                  make_result(str(i), power=p, radius_mm=float(rng.normal(51.7, 0.01)),
                              verdict="pass" if abs(p) <= 2 else "fail"))
    store.add(RecordMeta(lot="L9", serial="0099"), None, image_path="/x/b.png", image_sha256="ab" * 32,
              failure="no ring system found")
    chart = tmp_path / "chart.png"
    doc, path = issue_lot_report(store, "L9", tmp_path / "lot.pdf", SHOP, chart_out=chart)
    pages = text_of(path)
    for i, t in enumerate(pages, 1):
        assert f"No. {doc.number}" in t and f"Page {i} of {len(pages)}" in t
    text = " ".join(pages)
    for s in ("Lot Inspection Report", "L9", "3/2(0.5)", "Process capability", "Cp", "Cpk",
              "Control chart (individuals)", "analysis failed", "no ring system found", "0029",
              f"End of lot report {doc.number}"):
        assert s in text, s
    cap = doc.content["capability"][0]
    # the limits carry the lot's one number of digits for power (U = 0.10 fringes: two decimals)
    assert cap["quantity"] == "power" and cap["limits"] == "-2.00 to 2.00 fringes"
    assert chart.read_bytes()[:4] == b"\x89PNG"
    assert verify_pdf(path, store).ok
    with pytest.raises(InputError, match="has no records"):
        issue_lot_report(store, "nope", tmp_path / "x.pdf", SHOP)
    store.close()


@pytest.mark.parametrize("tol,limits", [("3/2(0.5)", (-2.0, 2.0)), ("3/0.5(0.2)", (-0.5, 0.5)),
                                        ("3/-(1)", None), (None, None)])
def test_power_limits_from_tolerance(tol, limits):
    # ISO 10110-5: in 3/A(B/C) the A is the sagitta (power) deviation in fringes, a dash means not specified
    assert power_limits_from_tolerance(tol) == limits


def test_power_limits_convert_to_the_measuring_wavelength():
    # one fringe = λ/2 of height: 2 fringes of 632.8 nm = 632.8 nm of height = 2 * 632.8 / 546.074 fringes at
    # the mercury e-line [derived]
    lo, hi = power_limits_from_tolerance("3/2(0.5); λ = 632.8", 546.074)
    assert hi == pytest.approx(2 * 632.8 / 546.074) and lo == -hi


def test_power_limits_bad_tolerance():
    with pytest.raises(InputError, match="ISO 10110-5"):
        power_limits_from_tolerance("power 2")


def test_shop_settings(tmp_path, monkeypatch):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path))
    assert load_shop()["certificate_prefix"] == "RG"
    save_shop(SHOP)
    assert load_shop()["name"] == "Fernhill Optical Workshop"
    (tmp_path / "shop.json").write_text('{"name": "x",\n "colour": "red"}')
    with pytest.raises(InputError, match="unknown key"):
        load_shop()
    (tmp_path / "shop.json").write_text('{"name": "x",')
    with pytest.raises(InputError, match="not valid JSON"):
        load_shop()
    (tmp_path / "shop.json").write_text('{"paper": "A3"}')
    with pytest.raises(InputError, match="A4"):
        load_shop()


def form_result(make_result) -> dict:
    """A test-plate result of the shape the form evaluation gives (key names as in ``FormResult.to_dict``;
    invented values, not check values)."""
    res = make_result("tp")
    res.update(radius_mm=None, radius_u_mm=None, radius_U_mm=None, budget=None, fringes=None, centre_px=None)
    fr = 273.037
    # the whole shape from the sample result (a stored form result reads back typed), the values set here
    form = {**res["form"], "method": "full-aperture gap-model fit", "wavelength_nm": 546.074, "fringe_nm": fr,
            "k": 2.0}
    for t, v, u in (("power", 1.25, 0.05), ("astigmatism", 0.3, 0.02), ("irregularity", 0.21, 0.01),
                    ("rot_sym_irregularity", 0.08, 0.01), ("rms_total", 0.3, 0.01), ("rms_irregularity", 0.04,
                    0.002), ("rms_asymmetric", 0.03, 0.002), ("pv_total", 1.4, 0.06)):
        form.update({f"{t}_fringes": v, f"{t}_u_fringes": u, f"{t}_nm": v * fr, f"{t}_u_nm": u * fr})
    form.update(power_sign="+", sign={**form["sign"], "sign": "+", "meaning": "centre contact"},
                astigmatism_axis_deg=42.0, astigmatism_axis_u_deg=1.5, test_diameter_mm=18.0,
                test_diameter_source="tolerance",
                aperture={**form["aperture"], "centre_px": [160.0, 120.0], "diameter_px": 200.0},
                uncertainty_budget={"power_fringes": [{"source": "fit (pixel noise)", "u_fringes": 0.01,
                                                       "u_nm": 2.7}]},
                radius={**form["radius"], "delta_r_mm": -0.0105, "delta_r_u_mm": 0.0014, "delta_r_U_mm": 0.0028,
                        "surface_radius_mm": 49.9895, "surface_radius_u_mm": 0.00245, "surface_radius_U_mm": 0.0049,
                        "k": 2.0},
                tolerance={"text": "3/2(0.5)", "wavelength_nm": 546.07, "wavelength_stated": False})
    res["form"] = form
    res["verdict"] = {"overall": "conditional pass", "rule": "simple", "decision_rule": "simple acceptance",
                      "meaning": "the result lies within U of a limit",
                      "terms": [{"term": "power", "value": 1.25, "U": 0.1, "limit": 2.0, "unit": "fringes",
                                 "value_fringes": 1.25, "U_fringes": 0.1, "limit_fringes": 2.0, "value_nm": 1.25 * fr,
                                 "wavelength_nm": 546.07, "wavelength_stated": False, "verdict": "pass", "note": ""},
                                {"term": "irregularity", "value": 0.48, "U": 0.04, "limit": 0.5, "unit": "fringes",
                                 "value_fringes": 0.48, "U_fringes": 0.04, "limit_fringes": 0.5,
                                 "value_nm": 0.48 * fr, "wavelength_nm": 546.07, "wavelength_stated": False,
                                 "verdict": "conditional pass", "note": ""}]}
    res["setup"]["test_plate"] = {"id": "TP-0117", "radius_mm": 50.0, "radius_u_mm": 0.002, "kind": "concave",
                                  "calibrated": "2026-03-14", "due": "2027-03-14", "overdue": False}
    return res


def test_form_certificate(tmp_path, make_result):
    img = tmp_path / "tp.png"
    yy, xx = np.mgrid[0:240, 0:320]
    save_png(img, 0.5 + 0.4 * np.cos(((xx - 160.0) ** 2 + (yy - 120.0) ** 2) / 3000.0))
    res = form_result(make_result)
    res["image"].update(path=str(img), sha256=sha256_file(img), width=320, height=240)
    store = open_store(tmp_path / "r.sqlite")
    rec = store.add(RecordMeta(part="PCC-20-50", lot="L-0051", serial="0012", operator="A. Kestrel"), res)
    doc, path, _ = issue_certificate(store, rec.id, tmp_path / "f.pdf", SHOP)
    text = " ".join(text_of(path))
    for s in ("Power (sagitta deviation, A)", "1.25 fringes = 341 nm", "0.10 fringes = 27 nm",
              "Irregularity (B)", "Rotationally symmetric irregularity (C)", "RMSi", "PV of the form deviation",
              "Sign of power", "centre contact", "Astigmatism axis", "42.0°", "3.0°",
              "Radius difference to the test plate ΔR", "-0.0105 mm", "Surface radius", "49.9895 mm",
              "3/2(0.5) (fringes of λ = 546.07 nm", "18.00 mm (tolerance)", "CONDITIONAL PASS", "within U of a limit",
              "Limit", "0.5 fringes", "0.480 ± 0.040 fringes", "Uncertainty contributions to the form terms",
              "fit (pixel noise)", "TP-0117, certified radius 50 mm, standard uncertainty 0.002 mm, concave",
              "due 2027-03-14", "Image with the clear aperture", "Form terms with their expanded uncertainty"):
        assert s in text, s
    assert "Fringes counted" not in text and "Radius of curvature R" not in text
    assert verify_pdf(path, store).ok
    store.close()
