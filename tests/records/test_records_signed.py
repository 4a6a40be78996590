"""Signed certificates and lot reports, and what 'certificate verify' says about altered copies.

Each tampered copy is made the way someone with the file (and another PDF program) would make it; each test
asserts WHICH named checks fail. The printed-cells check is also tested on unsigned documents, where it is
the only thing that reads the page.
"""

from __future__ import annotations

import hashlib
import json
import re
import sqlite3
import subprocess

import pytest
from pypdf import PdfReader, PdfWriter
from pypdf.generic import NameObject

from records_sample import SHOP

from ringgauge.cli import main
from ringgauge.records import RecordMeta, open_store
from ringgauge.certificates import issue_certificate, issue_lot_report
from ringgauge.report.content import load_record_image
from ringgauge.report.content import CONTENT_FILE, content_checksum
from ringgauge.report.layout import render_certificate
from ringgauge.report.verify import verify_pdf



@pytest.fixture
def issued(stocked, tmp_path):
    """A store with one record and its signed certificate: (store, record, document, path)."""
    store, rec = stocked
    doc, path, _ = issue_certificate(store, rec.id, tmp_path / "c.pdf", SHOP)
    return store, rec, doc, path


def failed(path, store=None) -> set[str]:
    return set(verify_pdf(path, store).failed())


def edit_incremental(src, out, old: bytes, new: bytes, *, pages=None) -> None:
    """Change page text the way an editor saving 'incrementally' does: an update appended after the signature."""
    w = PdfWriter(str(src), incremental=True)
    done = False
    for i, page in enumerate(w.pages):
        if pages is not None and i not in pages:
            continue
        cs = page.get_contents()
        data = cs.get_data()
        if old in data:
            cs.set_data(data.replace(old, new, 1))
            page.replace_contents(cs)
            done = True
    assert done, f"{old!r} is not on the page"
    with open(out, "wb") as fh:
        w.write(fh)


def edit_rewrite(src, out, old: bytes, new: bytes) -> None:
    """Change page text and save the whole file anew with another PDF library."""
    w = PdfWriter(clone_from=PdfReader(str(src)))
    done = False
    for page in w.pages:
        cs = page.get_contents()
        data = cs.get_data()
        if old in data:
            cs.set_data(data.replace(old, new, 1))
            page.replace_contents(cs)
            done = True
    assert done, f"{old!r} is not on the page"
    with open(out, "wb") as fh:
        w.write(fh)


def test_issued_certificate_is_signed_and_verifies(issued, capsys, tmp_path):
    store, rec, doc, path = issued
    v = verify_pdf(path, store)
    assert v.ok and v.signed and "Fernhill Optical Workshop" in v.signer, v.checks
    assert [w.split(":")[0] for _, w in v.checks] == ["signature", "whole file", "signer", "content", "pages",
                                                      "printed cells", "issued", "records chain", "record"]
    assert store.issued_files(doc.number)[0]["file_sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    # a customer without the store: the signature, the signer and the document's own checks
    assert verify_pdf(path).ok
    code = main(["certificate", "verify", str(path), "--db", str(tmp_path / "r.sqlite")])
    out = capsys.readouterr().out
    assert code == 0 and "verified: signature valid and trusted" in out and out.count("FAIL") == 0


def test_signed_lot_report_verifies(issued, tmp_path):
    store, rec, doc, path = issued
    ldoc, lpath = issue_lot_report(store, "L-0042", tmp_path / "lot.pdf", SHOP)
    v = verify_pdf(lpath, store)
    assert v.ok and v.signed and v.kind == "lot report", v.checks
    edit_incremental(lpath, tmp_path / "lot-bad.pdf", b"(51.700 \\261 0.040)", b"(51.900 \\261 0.040)") \
        if b"51.700 \\261" in PdfReader(str(lpath)).pages[-1].get_contents().get_data() else \
        edit_incremental(lpath, tmp_path / "lot-bad.pdf", b"51.7", b"51.9")
    assert {"whole file", "printed cells"} <= failed(tmp_path / "lot-bad.pdf", store)


# --------------------------------------------------------------------------------- printed-text tampering

def _measured_bytes(doc) -> bytes:
    return doc.content["dates"]["measured (UTC)"].encode()


def _share_bytes(doc) -> bytes:
    return doc.content["budgets"][0]["rows"][0]["share"].encode()


EDITS = {
    "visible digit": lambda doc: (b"(51.700 mm)", b"(51.900 mm)"),
    "value (U)": lambda doc: (b"(0.040 mm)", b"(0.004 mm)"),
    "verdict": lambda doc: (b"(PASS)", b"(FAIL)"),
    "customer name": lambda doc: (b"(Harbour Optics Guild)", b"(Harbour Optics Gu1ld)"),
    "operator name": lambda doc: (b"(A. Kestrel)", b"(A. Kistrel)"),
    "date": lambda doc: (_measured_bytes(doc), _measured_bytes(doc)[:-1]
                         + (b"1" if _measured_bytes(doc)[-1:] != b"1" else b"2")),
    "share": lambda doc: (b"(" + _share_bytes(doc) + b")", b"(" + _share_bytes(doc).replace(b"9", b"1", 1) + b")"),
}


@pytest.mark.parametrize("what", list(EDITS))
def test_changed_print_saved_incrementally(issued, tmp_path, what):
    store, rec, doc, path = issued
    old, new = EDITS[what](doc)
    assert old != new
    bad = tmp_path / "bad.pdf"
    edit_incremental(path, bad, old, new)
    assert failed(bad, store) == {"whole file", "printed cells", "issued"}
    assert failed(bad) == {"whole file", "printed cells"}  # a customer without the store sees the same


@pytest.mark.parametrize("what", ["visible digit", "verdict", "customer name"])
def test_changed_print_resaved_by_another_library(issued, tmp_path, what):
    store, rec, doc, path = issued
    old, new = EDITS[what](doc)
    bad = tmp_path / "bad.pdf"
    edit_rewrite(path, bad, old, new)
    assert failed(bad, store) == {"signature", "whole file", "printed cells", "issued"}


def test_resaved_unchanged_by_another_library(issued, tmp_path):
    store, rec, doc, path = issued
    bad = tmp_path / "resaved.pdf"
    PdfWriter(clone_from=PdfReader(str(path))).write(str(bad))
    assert failed(bad, store) == {"signature", "whole file", "issued"}


def test_page_painted_over(issued, tmp_path):
    """A white box over the page and 'Verdict: FAIL' drawn on it (the text underneath is still in the file)."""
    store, rec, doc, path = issued
    w = PdfWriter(str(path), incremental=True)
    page = w.pages[0]
    font = next(k for k in page["/Resources"]["/Font"] if "F2" in k)
    cs = page.get_contents()
    cs.set_data(cs.get_data() + f"\nq 1 1 1 rg 0 0 595 842 re f Q BT {font} 12 Tf 57 354 Td (Verdict: FAIL) Tj ET\n"
                .encode())
    page.replace_contents(cs)
    bad = tmp_path / "painted.pdf"
    w.write(str(bad))
    assert failed(bad, store) == {"whole file", "printed cells", "issued"}


def test_flipped_image_byte(issued, tmp_path):
    store, rec, doc, path = issued
    data = bytearray(path.read_bytes())
    m = re.search(rb"/Subtype /Image.*?stream\r?\n", data, re.S)
    assert m, "the certificate embeds its image"
    data[m.end() + 200] ^= 0x01
    bad = tmp_path / "flipped.pdf"
    bad.write_bytes(bytes(data))
    assert failed(bad, store) == {"signature", "issued"}
    assert failed(bad) == {"signature"}


def test_changed_metadata(issued, tmp_path):
    store, rec, doc, path = issued
    w = PdfWriter(str(path), incremental=True)
    w.add_metadata({"/RinggaugeNumber": "FOW-C2026-999999"})
    bad = tmp_path / "meta.pdf"
    w.write(str(bad))
    assert failed(bad, store) == {"whole file", "content", "issued"}


def test_attachment_removed(issued, tmp_path):
    store, rec, doc, path = issued
    w = PdfWriter(str(path), incremental=True)
    names = w._root_object["/Names"]
    del names[NameObject("/EmbeddedFiles")]
    w._root_object[NameObject("/Names")] = names
    bad = tmp_path / "noattach.pdf"
    w.write(str(bad))
    assert failed(bad, store) == {"whole file", "content"}


def test_incremental_update_appended(issued, tmp_path):
    store, rec, doc, path = issued
    w = PdfWriter(str(path), incremental=True)
    w.add_metadata({"/Keywords": "approved"})  # harmless-looking, but added after signing
    bad = tmp_path / "appended.pdf"
    w.write(str(bad))
    assert failed(bad, store) == {"whole file", "issued"}
    # junk bytes after the end are an addition too
    junk = tmp_path / "junk.pdf"
    junk.write_bytes(path.read_bytes() + b"\n% appended\n")
    assert "whole file" in failed(junk, store) and "issued" in failed(junk, store)


# ------------------------------------------------------------------------------------- re-rendered copies


def _rerender(store, rec, doc, out, **changes):
    content = json.loads(json.dumps(doc.content))
    content["results"][0]["value"] = changes.get("value", "52.100 mm")
    image01, note = load_record_image(rec)
    render_certificate(content, out, result=rec.result, image01=image01, image_note=note)
    return content


def test_rerendered_with_other_values_unsigned(issued, tmp_path):
    store, rec, doc, path = issued
    bad = tmp_path / "rerender.pdf"
    _rerender(store, rec, doc, bad)
    v = verify_pdf(bad, store)
    assert not v.signed and set(v.failed()) == {"issued", "record"}
    assert "content differs" in dict((w.split(":")[0], w) for _, w in v.checks)["issued"]
    assert "results differ" in dict((w.split(":")[0], w) for _, w in v.checks)["record"]
    assert failed(bad) == {"issued"}  # unsigned and no store: cannot be verified on its own


def test_rerendered_and_signed_with_another_key(issued, tmp_path, monkeypatch):
    store, rec, doc, path = issued
    bad = tmp_path / "rerender-signed.pdf"
    _rerender(store, rec, doc, bad)
    from ringgauge.report import signing

    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "forger"))
    signing.keygen("Fernhill Optical Workshop")  # same name, another key
    signing.sign_pdf_file(bad, reason="forged")
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
    assert failed(bad, store) == {"signer", "issued", "record"}
    assert failed(bad) == {"signer"}


def test_rerendered_with_the_store_replaced_too(issued, tmp_path, monkeypatch):
    """A forged copy plus a REPLACE of the issued document in the store (triggers dropped first)."""
    store, rec, doc, path = issued
    bad = tmp_path / "rerender.pdf"
    content = _rerender(store, rec, doc, bad)
    text = json.dumps(content, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    con = sqlite3.connect(store.where)
    for t in ("no_update", "no_delete", "no_replace"):
        con.execute(f"DROP TRIGGER issued_document_{t}")
    con.execute("REPLACE INTO issued_document (id, number, kind, record_id, lot, issued_utc, content_json, "
                "content_sha256) SELECT id, number, kind, record_id, lot, issued_utc, ?, ? FROM issued_document "
                "WHERE number = ?", (text, content_checksum(content), doc.number))
    con.commit()
    con.close()
    assert content_checksum(content) == hashlib.sha256(text.encode()).hexdigest()
    with open_store(store.where) as s:
        v = verify_pdf(bad, s)
    assert set(v.failed()) == {"issued", "records chain", "record"}
    assert "issued document 1: ALTERED" in dict((w.split(":")[0], w) for _, w in v.checks)["records chain"]


# ---------------------------------------------------------------------------------------- unsigned copies


def test_signature_stripped(issued, tmp_path):
    """The file as it was before signing (cut at its first end): consistent, but the store knows it was signed."""
    store, rec, doc, path = issued
    data = path.read_bytes()
    bad = tmp_path / "stripped.pdf"
    bad.write_bytes(data[: data.index(b"%%EOF") + 6])
    v = verify_pdf(bad, store)
    assert not v.signed and set(v.failed()) == {"issued"}
    assert "was issued signed" in dict((w.split(":")[0], w) for _, w in v.checks)["issued"]


@pytest.fixture
def legacy(tmp_path, make_result, monkeypatch):
    """A certificate issued before signing existed: rendered and numbered, no signature, no file kept."""
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
    from ringgauge.report.content import certificate_content

    store = open_store(tmp_path / "r.sqlite")
    rec = store.add(RecordMeta(part="PCX-25-50", serial="0007", operator="A. Kestrel",
                               customer="Harbour Optics Guild"), make_result("S1"))
    doc = store.issue("certificate", certificate_content(rec, SHOP), record_id=rec.id, prefix="FOW")
    path = render_certificate(doc.content, tmp_path / "old.pdf", result=rec.result)
    yield store, rec, doc, path
    store.close()


def test_unsigned_legacy_certificate_verifies_marked_unsigned(legacy, capsys):
    store, rec, doc, path = legacy
    v = verify_pdf(path, store)
    assert v.ok and not v.signed and "UNSIGNED" in v.checks[0][1], v.checks
    assert failed(path) == {"issued"}  # without the store nothing speaks for an unsigned copy
    code = main(["certificate", "verify", str(path), "--db", store.where])
    assert code == 0 and "verified (unsigned document" in capsys.readouterr().out


@pytest.mark.parametrize("what", ["visible digit", "value (U)", "verdict", "customer name", "operator name", "date",
                                  "share"])
def test_printed_cells_catch_edits_on_unsigned_copies(legacy, tmp_path, what):
    """Without a signature, the cell check is what reads the page: each edit is named there."""
    store, rec, doc, path = legacy
    old, new = EDITS[what](doc)
    bad = tmp_path / "bad.pdf"
    edit_rewrite(path, bad, old, new)
    assert failed(bad, store) == {"printed cells", "page text"}


def test_value_moved_to_another_cell_is_caught(legacy, tmp_path):
    """The old check found each value anywhere on the page; swapping value and U kept both on it."""
    store, rec, doc, path = legacy
    bad = tmp_path / "swapped.pdf"
    edit_rewrite(path, bad, b"(51.700 mm)", b"(0.04X mm)")
    edit_rewrite(bad, tmp_path / "swapped2.pdf", b"(0.040 mm)", b"(51.700 mm)")
    edit_rewrite(tmp_path / "swapped2.pdf", tmp_path / "swapped3.pdf", b"(0.04X mm)", b"(0.040 mm)")
    v = verify_pdf(tmp_path / "swapped3.pdf", store)
    assert set(v.failed()) == {"printed cells"}
    assert "results row 'Radius of curvature R'" in dict((w.split(":")[0], w) for _, w in v.checks)["printed cells"]


def test_pdftoppm_renders_the_signed_certificate(issued, tmp_path):
    """The signed file still renders (pdftoppm from poppler); the PNG is looked at by hand."""
    store, rec, doc, path = issued
    out = subprocess.run(["pdftoppm", "-png", "-r", "40", str(path), str(tmp_path / "page")], capture_output=True,
                         timeout=60)
    if out.returncode == 127:
        pytest.skip("pdftoppm not installed")
    assert out.returncode == 0 and (tmp_path / "page-1.png").exists()


def test_hostile_files_give_one_line(issued, tmp_path, capsys):
    store, rec, doc, path = issued
    data = path.read_bytes()
    cases = {"garbage.pdf": b"%PDF-1.4\n" + bytes(range(256)) * 40, "half.pdf": data[: len(data) // 2],
             "empty.pdf": b""}
    for name, blob in cases.items():
        (tmp_path / name).write_bytes(blob)
        code = main(["certificate", "verify", str(tmp_path / name), "--db", store.where])
        out, err = capsys.readouterr()
        assert code in (1, 2) and "Traceback" not in out + err, (name, out, err)
        assert err.count("\n") == 1 and err.startswith("ringgauge: "), (name, err)
    # embedded content that is JSON but not a document's: named failures, no crash
    w = PdfWriter(str(path), incremental=True)
    w.add_attachment("ringgauge-content.json", json.dumps({"number": doc.number, "kind": "certificate"}).encode())
    w.write(str(tmp_path / "odd.pdf"))
    v = verify_pdf(tmp_path / "odd.pdf", store)
    assert not v.ok and "whole file" in v.failed()


def test_passphrase_key_and_key_replacement(tmp_path, make_result, monkeypatch, capsys):
    """A key with a passphrase signs only with it (nothing numbered or left behind without it); a replaced key
    keeps older documents verifying (its certificate moves to the trust list)."""
    from ringgauge.report import signing

    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
    monkeypatch.setenv("RINGGAUGE_KEY_PASSPHRASE", "long enough phrase")
    signing.keygen("Fernhill Optical Workshop", passphrase=b"long enough phrase")
    assert signing.key_info().encrypted and b"ENCRYPTED" in signing.key_path().read_bytes()
    assert signing.key_path().stat().st_mode & 0o777 == 0o600
    with open_store(tmp_path / "r.sqlite") as s:
        rec = s.add(RecordMeta(serial="1"), make_result("1"))
        monkeypatch.setenv("RINGGAUGE_KEY_PASSPHRASE", "wrong phrase!")
        with pytest.raises(signing.SigningError, match="wrong or missing passphrase"):
            issue_certificate(s, rec.id, tmp_path / "c.pdf", SHOP)
        assert not (tmp_path / "c.pdf").exists() and s.documents(record_id=rec.id) == []
        monkeypatch.setenv("RINGGAUGE_KEY_PASSPHRASE", "long enough phrase")
        _, old, _ = issue_certificate(s, rec.id, tmp_path / "c.pdf", SHOP)
        monkeypatch.delenv("RINGGAUGE_KEY_PASSPHRASE")
        signing.keygen("Fernhill Optical Workshop", replace=True)
        _, new, _ = issue_certificate(s, rec.id, tmp_path / "c2.pdf", SHOP, new_issue=True)
        v_old, v_new = verify_pdf(old, s), verify_pdf(new, s)
        assert v_old.ok and v_new.ok and v_old.signer != v_new.signer
    assert main(["shop", "trust", "list"]) == 0
    assert capsys.readouterr().out.count("extra") == 1


@pytest.mark.parametrize("old,new", [
    (b"(Expanded uncertainty U = k", b"(Expanded uncertainty U = 2"),     # a paragraph, not a table cell
    (b"(Conformity statement)", b"(Conformity statemant)"),                # a heading
])
def test_page_text_of_unsigned_copies_is_compared_with_a_new_layout(legacy, tmp_path, old, new):
    store, rec, doc, path = legacy
    assert failed(path, store) == set()
    bad = tmp_path / "bad.pdf"
    edit_rewrite(path, bad, old, new)
    assert failed(bad, store) == {"page text"}


def test_page_painted_over_on_an_unsigned_copy(legacy, tmp_path):
    store, rec, doc, path = legacy
    w = PdfWriter(clone_from=PdfReader(str(path)))
    page = w.pages[-1]
    font = next(k for k in page["/Resources"]["/Font"] if "F2" in k)
    cs = page.get_contents()
    cs.set_data(cs.get_data() + f"\nq 1 1 1 rg 0 0 595 842 re f Q BT {font} 12 Tf 57 400 Td (Released with "
                                 f"concession) Tj ET\n".encode())
    page.replace_contents(cs)
    w.write(str(tmp_path / "painted.pdf"))
    assert failed(tmp_path / "painted.pdf", store) == {"page text"}


def test_file_checksum_added_to_the_store_by_hand_is_not_trusted(issued, tmp_path):
    """A forged copy's SHA-256 slipped into the store's list of issued files (outside ringgauge)."""
    store, rec, doc, path = issued
    bad = tmp_path / "bad.pdf"
    edit_incremental(path, bad, b"(51.700 mm)", b"(51.900 mm)")
    con = sqlite3.connect(store.where)
    con.execute("INSERT INTO issued_file (number, file_sha256, signed, signer, written_utc) VALUES (?, ?, 1, 'x', "
                "'2026-01-01')", (doc.number, hashlib.sha256(bad.read_bytes()).hexdigest()))
    con.commit()
    con.close()
    with open_store(store.where) as s:
        v = verify_pdf(bad, s)
    assert set(v.failed()) == {"whole file", "printed cells", "issued", "records chain"}
    assert "issued file entry 2" in dict((w.split(":")[0], w) for _, w in v.checks)["records chain"]


def test_short_value_changed_to_one_printed_elsewhere(legacy, tmp_path):
    """Gap medium index 1 made 2 (a '2' is printed elsewhere, in the k column): label and value are read as a pair."""
    store, rec, doc, path = legacy
    w = PdfWriter(clone_from=PdfReader(str(path)))
    page = w.pages[0]
    cs = page.get_contents()
    data = cs.get_data()
    strings = re.findall(rb"\(((?:[^()\\]|\\.)*)\) Tj", data)
    two = strings[strings.index(b"Radius of curvature R") + 3]  # the k cell of the radius row: "2"
    at = data.index(b"(Gap medium index) Tj")
    m = re.compile(rb"\(((?:[^()\\]|\\.)*)\) Tj").search(data, at + 10)
    assert m.group(1) != two
    cs.set_data(data[: m.start(1)] + two + data[m.end(1):])
    page.replace_contents(cs)
    w.write(str(tmp_path / "bad.pdf"))
    v = verify_pdf(tmp_path / "bad.pdf", store)
    assert set(v.failed()) == {"printed cells"}
    assert "gap medium index" in dict((x.split(":")[0], x) for _, x in v.checks)["printed cells"]
