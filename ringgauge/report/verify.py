"""Verifying a certificate or lot report: its signature, its own consistency, its printed cells, the store.

Each check is one named line, so a user sees which one failed:

``signature``       the PDF carries the shop's PAdES signature and it is cryptographically valid;
``whole file``      the signature covers the whole file (nothing was appended or changed after signing);
``signer``          the signing certificate is the shop's own, chains to it, or is in the shop's trust list;
``content``         the embedded content matches the checksum in the document information and on the page;
``pages``           the number and "page x of y" on every page, and the end mark on the last;
``printed cells``   every table row of the content is printed as its own cells on one line, each cell's text
                    exactly the content's (text is read with its position, not searched for on the page);
``issued``          the store issued this number with this content, and this exact file (SHA-256);
``records chain``   the store's chain holds the document and its record unaltered;
``record``          the printed results are what the record holds;
``page text``       (unsigned copies, with the store) every line on the pages is one that laying out the stored
                    content again gives: edits in paragraphs and headings, or text drawn over a page, show up.

A PDF without a signature (made before signing existed) is checked by the other checks and marked
"unsigned"; it verifies only against a records store that issued it unsigned: without a signature anyone
could have made a consistent-looking copy.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import re
import unicodedata
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InputError, RinggaugeError
from .content import (
    CONTENT_FILE,
    _canonical_digest,
    _results_rows,
    budget_tables,
    certificate_item_rows,
    content_checksum,
    load_record_image,
    lot_counts_rows,
    lot_parts_table,
    lot_spread_rows,
    results_table,
    specification_rows,
    traceability_rows,
    verdict_terms_table,
)


@dataclass
class Verification:
    path: str
    number: str | None = None
    kind: str | None = None
    checksum: str | None = None
    pages: int = 0
    ok: bool = True
    signed: bool = False
    signer: str | None = None
    file_sha256: str | None = None
    #: (passed, "name: what was checked / what is wrong")
    checks: list[tuple[bool, str]] = field(default_factory=list)

    def check(self, ok: bool, what: str) -> bool:
        self.checks.append((bool(ok), what))
        self.ok = self.ok and bool(ok)
        return bool(ok)

    def failed(self) -> list[str]:
        return [w.split(":", 1)[0] for ok, w in self.checks if not ok]


def _norm(text: str) -> str:
    return re.sub(r"\s+", " ", unicodedata.normalize("NFKC", str(text))).strip()


def printed_values(content: dict) -> list[str]:
    """Strings the printed pages must show for the text to agree with the embedded content."""
    vals = [content["number"]]
    if content.get("kind") == "certificate":
        for r in content.get("results") or []:
            vals += [r["value"], r["U"]]
        vals.append(content["decision"]["verdict"].upper())
        vals.append(content["image"]["sha256"])
        vals += [content["item"]["serial"], content["item"]["part"]]
    else:
        vals += [content["lot"]] + [r["radius"] for r in content.get("rows") or []]
        vals += [c["Cpk"] for c in content.get("capability") or []]
    return [v for v in vals if v and v not in ("—",)]


# ------------------------------------------------------------------------------------------- table cells


#: check names of the certificate's first table where they differ from the printed label
_ITEM_CHECK_NAMES = {"Measured (UTC)": "measured date", "Inspection record": "record"}


def expected_rows(content: dict) -> list[tuple[str, list[str]]]:
    """The table rows the document prints, as (what, cells): every cell must be printed as a whole cell, and the
    cells of one row on one line. Only what the content says is checked (values, not headings), so a change of
    headings or column order in the layout does not break the check."""
    c = content
    rows: list[tuple[str, list[str]]] = []

    def one(name, value):
        if value not in (None, ""):
            rows.append((name, [str(value)]))

    def many(name, cells, ordered=True):
        cells = [str(x) for x in cells if x not in (None, "")]
        if cells:
            rows.append((name, cells if ordered else [UNORDERED, *cells]))

    if c.get("kind") == "certificate":
        # label and value on one line: a short value ("1", "2") also appears elsewhere on the page
        for label, v in certificate_item_rows(c):
            many(_ITEM_CHECK_NAMES.get(label, label.lower()), [label, v])
        for label, v in specification_rows(c):
            many(label.lower(), [label, v])
        for r in results_table(c)[1]:
            many(f"results row '{r[0]}'", r)
        for r in (verdict_terms_table(c) or {}).get("rows") or []:
            many(f"verdict terms row '{r[0]}'", r)
        for b, budget_rows in budget_tables(c):
            for r in budget_rows:
                many(f"budget {b.get('output', '')} row '{r[0]}'", r)
        for r in c.get("form_budget") or []:
            many(f"form contributions row '{r[0]}'", r)
        for label, v in traceability_rows(c):
            many(label.lower(), [label, v])
    else:
        for k in ("lot", "part", "customer", "tolerance", "period", "operators", "n_records"):
            one(k, c.get(k))
        for k, v in lot_counts_rows(c) if c.get("counts") else []:
            many(f"count of '{k}'", [k, v], ordered=False)
        for row in lot_spread_rows(c):
            many(f"{row[0].lower()} statistics", row[1:], ordered=False)
        for x in c.get("capability") or []:
            many(f"capability row '{x['quantity']}'", [x["limits"], x["mean"], x["s"], x["Cp"], x["Cpk"]],
                 ordered=False)
        for r, cells in zip(c.get("rows") or [], lot_parts_table(c)[1] if c.get("rows") else []):
            many(f"parts row for record {r['record']}", cells, ordered=False)
    return rows


def page_runs(reader) -> list[list[tuple[float, float, str]]]:
    """Each page's text as it is drawn: (x, y, text) per line of a paragraph, in page coordinates."""
    pages = []
    for page in reader.pages:
        runs: list[tuple[float, float, str]] = []

        def visit(text, cm, tm, font, size, runs=runs):
            t = _norm(text)
            if t:
                x = tm[4] * cm[0] + tm[5] * cm[2] + cm[4]
                y = tm[4] * cm[1] + tm[5] * cm[3] + cm[5]
                runs.append((x, y, t))

        page.extract_text(visitor_text=visit)
        pages.append(runs)
    return pages


_LINE_GAP = 11.5  # pt: lines of one cell are 9.6 pt apart; rows are at least 13 pt apart


def _cell_text(runs, x: float, y: float) -> str:
    """The whole text of the cell whose first line starts at (x, y): that line and the lines right below it."""
    col = sorted((r for r in runs if abs(r[0] - x) < 1.0 and r[1] <= y + 0.5), key=lambda r: -r[1])
    out, last = [], None
    for rx, ry, t in col:
        if last is not None and last - ry > _LINE_GAP:
            break
        out.append(t)
        last = ry
    return " ".join(out)


#: first cell of a row whose cells may come in any order (the lot report's columns are the layout's choice)
UNORDERED = "\0any order"


def find_row(pages_runs, cells: list[str]) -> bool:
    """True when some line of some page prints every one of ``cells`` as a whole cell of its own (each cell's
    text, wrapped lines included, exactly the expected text), all starting on that line, left to right in the
    given order (unless the row starts with :data:`UNORDERED`)."""
    ordered = not (cells and cells[0] == UNORDERED)
    want = [_norm(c) for c in (cells if ordered else cells[1:]) if _norm(c)]
    if not want:
        return True
    for runs in pages_runs:
        for x0, y0, t0 in runs:
            if not want[0].startswith(t0) or _cell_text(runs, x0, y0) != want[0]:
                continue
            line = [r for r in runs if abs(r[1] - y0) < 0.6]
            used = {(x0, y0)}
            ok = True
            last_x = x0
            for w in want[1:]:
                hit = next((r for r in sorted(line) if (r[0], r[1]) not in used and w.startswith(r[2])
                            and (not ordered or r[0] > last_x) and _cell_text(runs, r[0], r[1]) == w), None)
                if hit is None:
                    ok = False
                    break
                used.add((hit[0], hit[1]))
                last_x = hit[0]
            if ok:
                return True
    return False


def check_cells(pages_runs, content: dict) -> list[str]:
    """The table rows of ``content`` that are not printed cell by cell as they should be."""
    return [what for what, cells in expected_rows(content) if not find_row(pages_runs, cells)]


# ------------------------------------------------------------------------------------------- signature


def _signature_checks(v: Verification, path: Path) -> None:
    from cryptography.hazmat.primitives.serialization import Encoding
    from pyhanko.pdf_utils.reader import PdfFileReader
    from pyhanko.sign.validation import validate_pdf_signature
    from pyhanko_certvalidator import ValidationContext
    from asn1crypto import x509 as asn1_x509

    from .signing import fingerprint, trusted_certificates

    with open(path, "rb") as fh:
        try:
            r = PdfFileReader(fh, strict=False)
            sigs = list(r.embedded_signatures)
        except Exception as exc:  # noqa: BLE001 - a damaged file is a failed check, not a crash
            v.check(False, f"signature: the signature cannot be read ({type(exc).__name__})")
            return
        if not sigs:
            return
        v.signed = True
        if len(sigs) > 1:
            v.check(False, f"signature: the file carries {len(sigs)} signatures; a ringgauge document carries one")
        sig = sigs[-1]
        trusted = trusted_certificates()
        roots = [asn1_x509.Certificate.load(c.public_bytes(Encoding.DER)) for c in trusted]
        fps = {fingerprint(c.public_bytes(Encoding.DER)) for c in trusted}
        import logging

        quiet = logging.getLogger("pyhanko")
        level = quiet.level
        quiet.setLevel(logging.CRITICAL)  # its own log of a tampered file's details would flood the terminal
        try:
            vc = ValidationContext(trust_roots=roots, allow_fetching=False)
            # no diff analysis: a ringgauge document must be covered whole, so any later revision already fails
            st = validate_pdf_signature(sig, vc, skip_diff=True)
        except Exception as exc:  # noqa: BLE001
            v.check(False, f"signature: cannot be validated ({type(exc).__name__}: {str(exc)[:120]})")
            return
        finally:
            quiet.setLevel(level)
        cert = sig.signer_cert
        signer_fp = fingerprint(cert.dump())
        v.signer = f"{cert.subject.human_friendly} (SHA-256 {signer_fp})"
        v.check(st.intact and st.valid, "signature: valid, the signed bytes are unchanged" if st.intact and st.valid
                else "signature: INVALID — the signed bytes were changed or the signature is damaged")
        cov = getattr(st.coverage, "name", str(st.coverage))
        whole = cov == "ENTIRE_FILE"
        v.check(whole, "whole file: the signature covers the whole file" if whole else
                f"whole file: NOT covered — something was added after signing (coverage {cov.lower()})")
        ok_signer = signer_fp in fps or bool(st.trusted)
        v.check(ok_signer, f"signer: {v.signer} is the shop's key or in its trust list" if ok_signer else
                f"signer: {v.signer} is NOT the shop's key nor in its trust list (ringgauge shop trust list)")


# ------------------------------------------------------------------------------------------- the store


def _store_checks(v: Verification, content: dict, digest: str, store) -> None:
    try:
        doc = store.document(str(v.number))
    except RinggaugeError as exc:
        v.check(False, f"issued: document {v.number} is not in the records store {store.where}"
                if "no certificate or lot report numbered" in str(exc) else f"issued: {exc}")
        return
    files = store.issued_files(v.number)
    chain_kinds = {"MISSING", "BROKEN LINK", "END REMOVED", "REWRITTEN", "UNVERIFIABLE"}
    rid = doc.record_id
    rec_ids = {rid} if rid is not None else {int(r["record"]) for r in content.get("rows") or []
                                              if str(r.get("record", "")).isdigit()}
    file_ids = {f["id"] for f in files if f.get("id") is not None}
    try:
        rep = store.check(only={"inspection": rec_ids, "issued_document": {doc.id}, "issued_file": file_ids})
    except RinggaugeError as exc:
        rep = None
        chain_problem = f"cannot be checked ({exc})"
    bad = [] if rep is None else [
        f for f in rep.findings if f.kind in chain_kinds
        or (f.table == "issued_document" and f.row_id == doc.id)
        or (f.table == "inspection" and f.row_id in rec_ids)
        or (f.table == "issued_file" and f.row_id in file_ids)]
    # a file entry that is not sealed in the chain (added by hand) proves nothing
    bad_files = {f.row_id for f in bad if f.table == "issued_file"}
    files = [f for f in files if f.get("id") not in bad_files]
    same_content = doc.content_sha256 == digest
    if not same_content:
        v.check(False, f"issued: the content differs from {doc.kind} {doc.number} as issued on "
                       f"{doc.issued_utc[:10]} ({store.where})")
    elif v.signed:
        match = any(f["file_sha256"] == v.file_sha256 for f in files)
        v.check(match, f"issued: identical to {doc.kind} {doc.number} as issued on {doc.issued_utc[:10]} "
                       f"({store.where}), same file SHA-256" if match else
                f"issued: this file's SHA-256 {v.file_sha256[:16]}… is not one the store kept for {doc.number}")
    else:
        signed_before = [f for f in files if f["signed"]]
        v.check(not signed_before,
                f"issued: identical to {doc.kind} {doc.number} as issued on {doc.issued_utc[:10]} ({store.where})"
                if not signed_before else
                f"issued: {doc.number} was issued signed, but this copy carries no signature (it was removed)")
    if rep is None:
        v.check(False, f"records chain: {chain_problem}")
        return
    v.check(not bad, "records chain: intact for this document and its record(s)" if not bad else
            f"records chain: BROKEN — {bad[0].message}")
    _record_checks(v, content, store, doc)
    if not v.signed:
        _page_text_check(v, content, store, doc)


_PAGE_MARK = re.compile(r"^(Page \d+ of \d+|Image not shown: .*)$")


def _page_text_check(v: Verification, content: dict, store, doc) -> None:
    """Unsigned copies only (a signature already covers every byte): every line of text on the pages must be
    one that laying out the stored content again gives — a changed word in a paragraph, a line drawn over the
    page or a value outside the tables shows up as a line the content does not make."""
    import tempfile

    from pypdf import PdfReader

    from .layout import render_certificate, render_lot_report

    def texts(path) -> set[str]:
        return {t for rs in page_runs(PdfReader(str(path))) for _, _, t in rs}

    try:
        box = PdfReader(v.path).pages[0].mediabox
        paper = "Letter" if abs(float(box.width) - 612.0) < 2 else "A4"
        allowed: set[str] = set()
        with tempfile.TemporaryDirectory(prefix="rg-verify-") as tmp:
            if doc.kind == "certificate":
                rec = store.get(doc.record_id)
                image01, note = load_record_image(rec)
                # with and without the figures: the image may have moved since the document was laid out
                for i, (res, img, nt) in enumerate(((rec.result, image01, note), (rec.result, None, None),
                                                    (None, None, None))):
                    p = render_certificate(content, Path(tmp) / f"{i}.pdf", paper=paper, result=res, image01=img,
                                           image_note=nt)
                    allowed |= texts(p)
            else:
                allowed |= texts(render_lot_report(content, Path(tmp) / "lot.pdf", paper=paper))
    except (RinggaugeError, KeyError, TypeError, ValueError, AttributeError, IndexError, OSError) as exc:
        v.check(True, f"page text: not compared (the content cannot be laid out again by this version: "
                      f"{type(exc).__name__})")
        return
    reader = PdfReader(v.path)
    extra = sorted({t for rs in page_runs(reader) for _, _, t in rs} - allowed)
    extra = [t for t in extra if not _PAGE_MARK.match(t)]
    v.check(not extra, "page text: every line on the pages is one the stored content lays out" if not extra else
            f"page text: {len(extra)} line(s) the content does not make: " + "; ".join(e[:60] for e in extra[:3]))


def _record_checks(v: Verification, content: dict, store, doc) -> None:
    if doc.kind == "certificate":
        try:
            rec = store.get(doc.record_id)
        except RinggaugeError as exc:
            v.check(False, f"record: {exc}")
            return
        problems = []
        if rec.content_sha256 != content.get("record_checksum"):
            problems.append("its checksum differs from the one printed")
        if not rec.intact():
            problems.append("it fails its own checksum")
        try:
            if rec.result and _results_rows(rec.result) != content.get("results"):
                problems.append("its results differ from the printed ones")
        except Exception:  # noqa: BLE001 - a result laid out by an older version
            pass
        verdict = (rec.result or {}).get("verdict")
        overall = verdict.get("overall") if isinstance(verdict, dict) else verdict
        if (overall or "not evaluated") != content["decision"]["verdict"]:
            problems.append("its verdict differs from the printed one")
        if rec.manual and content.get("origin") != "manual":
            problems.append("it is a manual entry but the document does not say so")
        v.check(not problems, f"record: the printed results are record {rec.id}'s" if not problems else
                f"record: record {rec.id} does not match — {'; '.join(problems)}")
    else:
        try:
            ids = [int(r["record"]) for r in content.get("rows") or []]
            recs = [store.get(i) for i in ids]
        except (RinggaugeError, ValueError, KeyError) as exc:
            v.check(False, f"record: the listed records cannot be read ({exc})")
            return
        digest = _canonical_digest([r.content_sha256 for r in sorted(recs, key=lambda r: r.id)])
        ok = digest == content.get("record_checksums") and all(r.intact() for r in recs)
        v.check(ok, f"record: the {len(recs)} listed records are the ones the report was made from" if ok else
                "record: the listed records differ from the ones the report was made from")


# ---------------------------------------------------------------------------------------------- verify


def verify_pdf(path: str | os.PathLike, store=None) -> Verification:
    """Check a certificate or lot report (see the module's docstring for each check)."""
    from pypdf import PdfReader
    from pypdf.errors import PdfReadError

    from ..settings import read_regular_bytes

    p = Path(path)
    v = Verification(str(p))
    # a named pipe or device given as the document would block a plain read: refused without opening it for good
    data = read_regular_bytes(p, what="document")
    v.file_sha256 = hashlib.sha256(data).hexdigest()
    try:
        reader = PdfReader(io.BytesIO(data))
        runs = page_runs(reader)
        pages = [_norm(" ".join(t for _, _, t in sorted(rs, key=lambda r: (-r[1], r[0])))) for rs in runs]
        meta = reader.metadata or {}
        att = reader.attachments
    except (PdfReadError, OSError, ValueError, KeyError, TypeError, AttributeError, IndexError, RecursionError,
            AssertionError, NotImplementedError, LookupError, ArithmeticError) as exc:
        raise InputError(f"{p}: not a readable PDF ({type(exc).__name__})") from None
    v.pages = len(pages)
    _signature_checks(v, p)
    if not v.signed:
        v.checks.insert(0, (True, "signature: none — UNSIGNED document (made before signing, or its signature "
                                  "was removed); only the checks below speak for it"))
    if CONTENT_FILE not in att:
        v.check(False, "content: the PDF carries no ringgauge content (not a ringgauge document, or it was "
                       "rewritten without it)")
        return v
    try:
        content = json.loads(att[CONTENT_FILE][0].decode("utf-8"))
        if not isinstance(content, dict):
            raise ValueError
    except (ValueError, UnicodeDecodeError):
        v.check(False, "content: the embedded content is damaged")
        return v
    digest = content_checksum(content)
    v.number, v.kind, v.checksum = content.get("number"), content.get("kind"), digest
    in_info = meta.get("/RinggaugeContentSHA256") == digest
    on_page = any(f"content: {digest}" in t for t in pages)
    in_info_number = meta.get("/RinggaugeNumber") in (None, v.number)
    v.check(in_info and on_page and in_info_number,
            "content: the embedded content matches the checksum in the document information and on the page"
            if in_info and on_page and in_info_number else
            "content: the embedded content does NOT match " + " and ".join(
                w for w, ok in (("the document information", in_info and in_info_number),
                                ("the printed checksum", on_page)) if not ok))
    n = len(pages)
    marks = all(f"No. {v.number}" in t and f"Page {i} of {n}" in t for i, t in enumerate(pages, 1))
    end = bool(pages) and f"End of {v.kind} {v.number}" in pages[-1]
    v.check(marks and end, f"pages: number {v.number} and 'Page x of {n}' on every page, end mark on the last"
            if marks and end else f"pages: number, page marks or end mark missing or changed")
    try:
        missing = check_cells(runs, content)
        if content.get("kind") == "certificate":
            verdict_lines = [t for rs in runs for _, _, t in rs if t.startswith("Verdict:")]
            want = f"Verdict: {content['decision']['verdict'].upper()}"
            if verdict_lines != [want]:
                missing.append(f"verdict line (printed {len(verdict_lines)} time(s): {', '.join(verdict_lines[:3])})")
        for who in ("operator", "approver") if content.get("kind") == "certificate" else ("approver",):
            name = _norm(content.get(who) or "")
            # the sign-off names are lines of their own, under "Measured by" / "Approved by"
            if name and not any(name.startswith(t) and _cell_text(rs, x, y) == name
                                for rs in runs for x, y, t in rs):
                missing.append(f"{who} name {name}")
        lost = [s for s in printed_values(content) if _norm(s) not in " ".join(pages)]
        missing += [f"value {s}" for s in lost]
    except (KeyError, TypeError, AttributeError, IndexError) as exc:
        missing = [f"the content lacks {exc}"]
    v.check(not missing, "printed cells: every value sits in its own table cell and equals the content"
            if not missing else f"printed cells: {len(missing)} row(s) not printed as the content says: "
            + "; ".join(missing[:4]))
    if store is not None and v.number:
        try:
            _store_checks(v, content, digest, store)
        except (KeyError, TypeError, AttributeError, ValueError, IndexError) as exc:
            v.check(False, f"record: the embedded content lacks what the store check needs ({type(exc).__name__}: "
                           f"{str(exc)[:80]})")
    elif not v.signed:
        v.check(False, "issued: unsigned, and no records store to compare with — an unsigned copy cannot be "
                       "verified on its own (give --db)")
    return v
