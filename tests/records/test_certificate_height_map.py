"""A certificate of a surface-form measurement shows the surface height map (nm) as a figure, drawn from the
record's stored result; a radius certificate has no such figure."""

from __future__ import annotations

from pathlib import Path

from pypdf import PdfReader

from ringgauge.bench_setup import BenchSetup
from ringgauge.certificates import issue_certificate
from ringgauge.imaging import load_frame
from ringgauge.pipeline import analyse
from ringgauge.records import RecordMeta, open_store
from ringgauge.report.overlay import height_map_png
from ringgauge.sources import get_source
from records_sample import SHOP

PLATE = sorted((Path(__file__).resolve().parents[2] / "sample_images" / "testplate").glob("*.png"))
CAPTION = "Surface height map"


def _form_result():
    plate = {"id": "TP-demo", "radius_mm": 51.68, "radius_u_mm": 0.002, "kind": "convex", "calibrated": None,
             "due": None}
    setup = BenchSetup(source=get_source("mercury-e"), pixel_size_um=25.0, pixel_size_u_um=0.02,
                       test_diameter_mm=18.0, tolerance="3/2(0.5)", test_plate=plate)
    return analyse([load_frame(p) for p in PLATE], setup)


def _images(path) -> int:
    return sum(len(page.images) for page in PdfReader(path).pages)


def test_form_certificate_carries_the_height_map(tmp_path, monkeypatch, make_result):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
    res = _form_result()
    assert height_map_png(res, tmp_path / "map.png") and (tmp_path / "map.png").stat().st_size > 5000
    with open_store(tmp_path / "r.sqlite") as store:
        rec = store.add(RecordMeta(part="PCC-51", serial="A-0093"), res.to_dict(),
                        image_path=str(PLATE[0]))
        _, form_pdf, _ = issue_certificate(store, rec.id, tmp_path / "form.pdf", SHOP)
        lens = store.add(RecordMeta(part="PCX-25-50", serial="0007"), make_result("L"))
        _, lens_pdf, _ = issue_certificate(store, lens.id, tmp_path / "lens.pdf", SHOP)
    form_text = " ".join(p.extract_text() for p in PdfReader(form_pdf).pages)
    lens_text = " ".join(p.extract_text() for p in PdfReader(lens_pdf).pages)
    assert CAPTION in form_text and CAPTION not in lens_text
    # the image with the aperture, the form-term chart and the height map
    assert _images(form_pdf) >= 3


def test_no_map_no_figure(tmp_path, make_result):
    # a result without a height map (the records sample keeps none): nothing is drawn
    assert not height_map_png(make_result("R"), tmp_path / "none.png")
    assert not (tmp_path / "none.png").exists()
