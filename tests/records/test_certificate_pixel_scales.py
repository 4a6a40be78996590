"""A bench calibrated along x and along y separately: the certificate prints both pixel scales and both of their
uncertainties (it used to print only the x uncertainty beside two scales)."""

from __future__ import annotations

import unicodedata

from pypdf import PdfReader

from ringgauge.certificates import issue_certificate
from ringgauge.records import RecordMeta, open_store
from records_sample import SHOP


def _nfkc(s: str) -> str:
    return unicodedata.normalize("NFKC", s)  # the micro sign reads back as the Greek mu


def _text(path) -> str:
    return " ".join(" ".join(unicodedata.normalize("NFKC", p.extract_text() or "").split())
                    for p in PdfReader(path).pages)


def test_unequal_pixel_scales_print_both_uncertainties(tmp_path, make_result, monkeypatch):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
    res = make_result("XY")
    res["setup"]["pixel_size_um"] = [8.0, 8.12]
    res["setup"]["pixel_size_u_um"] = [0.004, 0.0065]
    with open_store(tmp_path / "r.sqlite") as store:
        rec = store.add(RecordMeta(part="PCX-25-50", lot="L-0042", serial="0009"), res)
        _, path, _ = issue_certificate(store, rec.id, tmp_path / "c.pdf", SHOP)
    text = _text(path)
    assert _nfkc("x 8, y 8.12 µm/pixel") in text
    assert _nfkc("standard uncertainty x 0.004, y 0.0065 µm") in text


def test_equal_pixel_scales_print_one_uncertainty(tmp_path, make_result, monkeypatch):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
    with open_store(tmp_path / "r.sqlite") as store:
        rec = store.add(RecordMeta(part="PCX-25-50", lot="L-0042", serial="0010"), make_result("XX"))
        _, path, _ = issue_certificate(store, rec.id, tmp_path / "c.pdf", SHOP)
    text = _text(path)
    assert _nfkc("10 µm/pixel, standard uncertainty 0.02 µm") in text
