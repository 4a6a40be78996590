"""Issuing certificates and lot reports: number them in the store, keep their content, write the PDF.

This module sits above both :mod:`ringgauge.records` (the store that numbers and keeps documents) and
:mod:`ringgauge.report` (what a document says, its layout, its signature, its verification): records never
imports report, report reads the store only through a store object it is given, and the command line and the
window issue documents through here.

A certificate is issued once per record; asking again reprints the issued content (same number, same
content checksum) unless a new issue is asked for. A lot report is issued anew each time (the lot may have
grown), and any issued document can be reprinted by its number.

Every PDF written here is signed with the shop's key (:mod:`ringgauge.report.signing`; a key is made on the
first issue when the shop has none, with a message), and the SHA-256 of the signed file is kept in the
store, chained, so ``ringgauge certificate verify`` can tell the file is the one that was issued.
"""

from __future__ import annotations

from pathlib import Path

from . import physics
from .errors import InputError
from .records.lot import summarise_lot
from .records.store import IssuedDocument, RecordFilter, Store
from .report.content import load_record_image


def power_limits_from_tolerance(tolerance: str | None, wavelength_nm: float | None = None
                                ) -> tuple[float, float] | None:
    """Power limits −A..+A from an ISO 10110-5 form tolerance, in fringes of ``wavelength_nm`` (the lot's
    measuring wavelength; the tolerance's own λ when None). None when no tolerance or A is given as '-'.

    A tolerance in fringes of λ_t converts to fringes of the measuring λ as A·λ_t/λ (one fringe = λ/2 of
    height)."""
    if not tolerance:
        return None
    from .form.tolerance import parse_tolerance

    tol = parse_tolerance(tolerance)
    if tol.power is None:
        return None
    a = physics.fringes_at(tol.power, tol.wavelength_nm, wavelength_nm) if wavelength_nm else tol.power
    return (-a, a)


def issue_certificate(store: Store, record_id: int, out: str | Path, shop: dict, *, paper: str | None = None,
                      approver: str | None = None, new_issue: bool = False) -> tuple[IssuedDocument, Path, bool]:
    """Issue (or reprint) the certificate of a record; returns (document, path, reprinted)."""
    from .report.content import certificate_content
    from .report.layout import render_certificate

    signer = prepare_signer(shop)
    rec = store.get(record_id)
    if not rec.intact():
        raise InputError(f"record {rec.id} fails its integrity check (its stored content was altered); "
                         "no certificate can be issued")
    _refuse_broken_record(store, rec.id)
    earlier = store.documents(record_id=rec.id)
    if earlier and not new_issue:
        doc, reprint = earlier[-1], True
    else:
        content = certificate_content(rec, shop, approver=approver)
        if rec.manual:  # said right under the results table and again in the notes
            content["origin"] = "manual"
            content["warnings"] = [MANUAL_NOTE] + list(content.get("warnings") or [])
            content["coverage"] = MANUAL_NOTE + " " + str(content.get("coverage") or "")
        doc, reprint = store.issue("certificate", content, record_id=rec.id, lot=rec.meta.lot,
                                   prefix=shop.get("certificate_prefix") or "RG"), False
    image01, note = load_record_image(rec)
    path = render_certificate(doc.content, out, paper=paper or shop.get("paper") or "A4", result=rec.result,
                              image01=image01, image_note=note)
    sign_and_keep(store, doc, path, shop, signer)
    return doc, path, reprint


def issue_lot_report(store: Store, lot: str, out: str | Path, shop: dict, *, paper: str | None = None,
                     tolerance: str | None = None, radius_limits=None, approver: str | None = None,
                     chart_out: str | Path | None = None) -> tuple[IssuedDocument, Path]:
    """Issue a lot report from the lot's current records."""
    from .records.lot import chart_png
    from .report.content import lot_report_content
    from .report.layout import render_lot_report

    signer = prepare_signer(shop)
    records = store.find(RecordFilter(lot=lot))
    if not records:
        raise InputError(f"lot {lot!r} has no records in {store.where}; run 'ringgauge batch' first")
    tol = tolerance or next(((r.setup or {}).get("tolerance") for r in records
                             if (r.setup or {}).get("tolerance")), None)
    summary = summarise_lot(records, lot, power_limits=power_limits_from_tolerance(tol, _lot_wavelength(records)),
                            radius_limits=radius_limits)
    content = lot_report_content(records, summary, shop, tolerance=tol, approver=approver)
    doc = store.issue("lot report", content, lot=lot, prefix=shop.get("certificate_prefix") or "RG")
    path = render_lot_report(doc.content, out, paper=paper or shop.get("paper") or "A4")
    sign_and_keep(store, doc, path, shop, signer)
    if chart_out is not None and summary.charts:
        chart_png(summary.charts, chart_out, title=f"Lot {lot}")
    return doc, path


def _lot_wavelength(records) -> float | None:
    """The measuring wavelength shared by a lot's records (None when they differ or none is stored)."""
    lams = {round(float((r.setup or {}).get("wavelength_nm")), 4) for r in records
            if (r.setup or {}).get("wavelength_nm")}
    if len(lams) > 1:
        raise InputError(f"the lot's records were measured at different wavelengths ({', '.join(map(str, sorted(lams)))} "
                         "nm); their power in fringes cannot be pooled")
    return lams.pop() if lams else None


def reprint(store: Store, number: str, out: str | Path, *, paper: str = "A4") -> tuple[IssuedDocument, Path]:
    """Lay out an issued document again from its stored content."""
    from .report.layout import render_certificate, render_lot_report

    doc = store.document(number)
    signer = prepare_signer({})
    if doc.kind == "lot report":
        path = render_lot_report(doc.content, out, paper=paper)
    else:
        rec = store.get(doc.record_id)
        image01, note = load_record_image(rec)
        path = render_certificate(doc.content, out, paper=paper, result=rec.result, image01=image01,
                                  image_note=note)
    sign_and_keep(store, doc, path, {}, signer)
    return doc, path


MANUAL_NOTE = ("MANUAL ENTRY: the results of this record were typed in by hand, not measured by ringgauge from "
               "the image.")


def _refuse_broken_record(store: Store, record_id: int) -> None:
    """No document for a record the chain check finds altered, forged or out of place."""
    rep = store.check(only={"inspection": {record_id}})
    bad = [f for f in rep.findings if f.table == "inspection" and f.row_id == record_id]
    if bad:
        raise InputError(f"record {record_id} fails the records check ({bad[0].kind.lower()}: {bad[0].message}); "
                         "no document can be issued for it")


def prepare_signer(shop: dict):
    """The shop's signer, ready before anything is numbered or written (a key is made if there is none; a
    passphrase is asked for now), so a key that cannot be used stops the issue before it starts."""
    from .report.signing import ensure_key, load_signer

    ensure_key(shop)
    return load_signer()


def sign_and_keep(store: Store, doc: IssuedDocument, path: Path, shop: dict, signer=None) -> str:
    """Sign the written PDF with the shop's key and keep its SHA-256 in the store; returns the fingerprint.

    If signing or keeping fails, the unsigned file is removed: no unsigned copy is left looking issued."""
    import hashlib

    from .report.signing import sign_pdf_file, signature_box

    try:
        if signer is None:
            signer = prepare_signer(shop)
        fp = sign_pdf_file(path, reason=f"{doc.kind.capitalize()} {doc.number} issued",
                           location=", ".join((shop.get("address") or [])[-1:]) or None, box=signature_box(path),
                           signer=signer)
        store.record_file(doc.number, hashlib.sha256(Path(path).read_bytes()).hexdigest(), signed=True, signer=fp)
    except BaseException:
        Path(path).unlink(missing_ok=True)
        raise
    return fp
