"""Certificates and lot reports laid out as PDF pages (reportlab): nothing here decides what is printed.

The content dict comes from :mod:`ringgauge.report.content` (and, for a reprint, from the records store as it
was issued); the tables are that module's builders, drawn as they are. Each PDF carries its content as an
embedded JSON file plus the checksum in the document information, and prints the checksum on the last page;
:mod:`ringgauge.report.verify` checks a copy against them.
"""

from __future__ import annotations

import io
import os
import tempfile
from pathlib import Path

from .. import __version__
from ..errors import InputError, RinggaugeError
from .content import (
    BUDGET_HEADER,
    CONTENT_FILE,
    _canonical,
    budget_tables,
    certificate_item_rows,
    content_checksum,
    lot_counts_rows,
    lot_parts_table,
    lot_spread_rows,
    results_table,
    specification_rows,
    traceability_rows,
    verdict_terms_table,
)


# ----------------------------------------------------------------------------------------------- layout

_FONTS: dict | None = None


def _fonts() -> dict:
    """Register DejaVu (for µ, λ, ², ±) from the system or from matplotlib's bundled copy."""
    global _FONTS
    if _FONTS is not None:
        return _FONTS
    from reportlab.pdfbase import pdfmetrics
    from reportlab.pdfbase.ttfonts import TTFont

    dirs = ["/usr/share/fonts/truetype/dejavu"]
    try:
        import matplotlib

        dirs.append(os.path.join(os.path.dirname(matplotlib.__file__), "mpl-data", "fonts", "ttf"))
    except ImportError:  # pragma: no cover - matplotlib is a dependency
        pass
    names = {"regular": "DejaVuSans.ttf", "bold": "DejaVuSans-Bold.ttf", "mono": "DejaVuSansMono.ttf"}
    found = {}
    for key, fname in names.items():
        for d in dirs:
            p = os.path.join(d, fname)
            if os.path.exists(p):
                face = "RG-" + fname[:-4]
                pdfmetrics.registerFont(TTFont(face, p))
                found[key] = face
                break
    if len(found) < 3:
        raise RinggaugeError("the DejaVu fonts are missing (install fonts-dejavu-core); cannot write the PDF")
    _FONTS = found
    return found


def _styles():
    from reportlab.lib import colors
    from reportlab.lib.styles import ParagraphStyle

    f = _fonts()
    base = ParagraphStyle("base", fontName=f["regular"], fontSize=8.6, leading=11.2)
    return {
        "base": base,
        "small": ParagraphStyle("small", parent=base, fontSize=7.4, leading=9.4),
        "mono": ParagraphStyle("mono", parent=base, fontName=f["mono"], fontSize=7.2, leading=9.2),
        "h1": ParagraphStyle("h1", parent=base, fontName=f["bold"], fontSize=15, leading=19, spaceAfter=2,
                             textColor=colors.HexColor("#1f3b57")),
        "h2": ParagraphStyle("h2", parent=base, fontName=f["bold"], fontSize=10, leading=13, spaceBefore=9,
                             spaceAfter=3, textColor=colors.HexColor("#1f3b57")),
        "cell": ParagraphStyle("cell", parent=base, fontSize=7.8, leading=9.6),
        "cellb": ParagraphStyle("cellb", parent=base, fontName=f["bold"], fontSize=7.8, leading=9.6),
        "verdict": ParagraphStyle("verdict", parent=base, fontName=f["bold"], fontSize=12, leading=15),
        "end": ParagraphStyle("end", parent=base, fontName=f["bold"], fontSize=9, alignment=1, spaceBefore=10),
    }


def _esc(s) -> str:
    from xml.sax.saxutils import escape

    return escape(str(s))


def _page_size(paper: str):
    from reportlab.lib.pagesizes import A4, LETTER

    p = (paper or "A4").strip().lower()
    if p == "a4":
        return A4
    if p == "letter":
        return LETTER
    raise InputError(f"paper size must be A4 or Letter, got {paper!r}")


def _kv_table(pairs, st, widths):
    from reportlab.lib import colors
    from reportlab.platypus import Paragraph, Table, TableStyle

    data = [[Paragraph(_esc(k), st["cellb"]), Paragraph(_esc(v), st["cell"])] for k, v in pairs]
    t = Table(data, colWidths=widths, hAlign="LEFT")
    t.setStyle(TableStyle([
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("LINEBELOW", (0, 0), (-1, -1), 0.25, colors.HexColor("#c8d0d8")),
        ("TOPPADDING", (0, 0), (-1, -1), 2), ("BOTTOMPADDING", (0, 0), (-1, -1), 2),
        ("LEFTPADDING", (0, 0), (-1, -1), 3),
    ]))
    return t


def _grid_table(header, rows, st, widths, *, repeat=True, zebra=True):
    from reportlab.lib import colors
    from reportlab.platypus import Paragraph, Table, TableStyle

    data = [[Paragraph(_esc(h), st["cellb"]) for h in header]]
    data += [[Paragraph(_esc(c), st["cell"]) for c in r] for r in rows]
    t = Table(data, colWidths=widths, repeatRows=1 if repeat else 0, hAlign="LEFT")
    style = [
        ("BACKGROUND", (0, 0), (-1, 0), colors.HexColor("#e4ebf2")),
        ("LINEBELOW", (0, 0), (-1, 0), 0.6, colors.HexColor("#1f3b57")),
        ("LINEBELOW", (0, 1), (-1, -1), 0.25, colors.HexColor("#c8d0d8")),
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("TOPPADDING", (0, 0), (-1, -1), 2), ("BOTTOMPADDING", (0, 0), (-1, -1), 2),
        ("LEFTPADDING", (0, 0), (-1, -1), 3), ("RIGHTPADDING", (0, 0), (-1, -1), 3),
    ]
    if zebra:
        for i in range(2, len(data), 2):
            style.append(("BACKGROUND", (0, i), (-1, i), colors.HexColor("#f5f7f9")))
    t.setStyle(TableStyle(style))
    return t


def _canvas_class(number: str, title: str, shop_name: str):
    """A canvas that knows the page count when it saves, so every page can say "page x of y"."""
    from reportlab.lib import colors
    from reportlab.pdfgen import canvas as rl_canvas

    f = _fonts()

    class NumberedCanvas(rl_canvas.Canvas):
        def __init__(self, *a, **kw):
            super().__init__(*a, **kw)
            self._pages = []

        def showPage(self):  # noqa: N802 - reportlab API
            self._pages.append(dict(self.__dict__))
            self._startPage()

        def save(self):
            n = len(self._pages)
            for i, state in enumerate(self._pages, 1):
                self.__dict__.update(state)
                self._marks(i, n)
                super().showPage()
            super().save()

        def _marks(self, i: int, n: int) -> None:
            w, h = self._pagesize
            m = 18 * 72 / 25.4
            self.saveState()
            self.setStrokeColor(colors.HexColor("#1f3b57"))
            self.setLineWidth(0.8)
            self.line(m, h - 14 * 72 / 25.4, w - m, h - 14 * 72 / 25.4)
            self.setFont(f["bold"], 8.5)
            self.setFillColor(colors.HexColor("#1f3b57"))
            self.drawString(m, h - 12 * 72 / 25.4, shop_name)
            self.setFont(f["regular"], 8.5)
            self.drawRightString(w - m, h - 12 * 72 / 25.4, f"{title}  No. {number}")
            self.setLineWidth(0.4)
            self.line(m, 14 * 72 / 25.4, w - m, 14 * 72 / 25.4)
            self.setFont(f["regular"], 7.5)
            self.setFillColor(colors.black)
            self.drawString(m, 10 * 72 / 25.4, f"No. {number}")
            self.drawCentredString(w / 2, 10 * 72 / 25.4, f"ringgauge {__version__}")
            self.drawRightString(w - m, 10 * 72 / 25.4, f"Page {i} of {n}")
            self.restoreState()

    return NumberedCanvas


def _doc(buf, paper: str, content: dict):
    from reportlab.lib.units import mm
    from reportlab.platypus import SimpleDocTemplate

    return SimpleDocTemplate(
        buf, pagesize=_page_size(paper), leftMargin=18 * mm, rightMargin=18 * mm, topMargin=20 * mm,
        bottomMargin=20 * mm, title=f"{content['title']} {content['number']}",
        author=(content.get("shop") or {}).get("name") or "", subject=content["number"],
        creator=content["software"], invariant=1,
    )


def _shop_block(content, st):
    from reportlab.platypus import Paragraph

    shop = content.get("shop") or {}
    lines = [f"<b>{_esc(shop.get('name') or '')}</b>"] + [_esc(a) for a in shop.get("address") or []]
    if shop.get("contact"):
        lines.append(_esc(shop["contact"]))
    if shop.get("accreditation"):
        lines.append(_esc(shop["accreditation"]))
    return Paragraph("<br/>".join(lines), st["small"])


def _header_block(content, st, width):
    from reportlab.platypus import Paragraph, Table, TableStyle

    right = Paragraph(
        f"<b>No. {_esc(content['number'])}</b><br/>Issued {_esc(content['issued_utc'][:10])} (UTC)",
        st["base"])
    t = Table([[_shop_block(content, st), right]], colWidths=[width * 0.62, width * 0.38])
    t.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"), ("ALIGN", (1, 0), (1, 0), "RIGHT"),
                           ("LEFTPADDING", (0, 0), (-1, -1), 3)]))
    return [t, Paragraph(_esc(content["title"]), st["h1"])]


def _image_flowable(path, max_w, max_h):
    from reportlab.platypus import Image

    from PIL import Image as PILImage

    data = Path(path).read_bytes()
    with PILImage.open(io.BytesIO(data)) as im:
        w, h = im.size
    s = min(max_w / w, max_h / h)
    # from bytes, not the file name: the temporary folder's name must not leak into the PDF (reprints are
    # byte-identical)
    return Image(io.BytesIO(data), width=w * s, height=h * s)


def _signoff(content, st, width):
    from reportlab.platypus import Paragraph, Table, TableStyle

    line = "_" * 28
    cells = [
        Paragraph(f"<b>Measured by</b><br/>{_esc(content.get('operator') or content.get('operators') or '')}"
                  f"<br/><br/>Signature {line}<br/>Date {line}", st["cell"]),
        Paragraph(f"<b>Approved by</b><br/>{_esc(content.get('approver') or '')}<br/><br/>Signature {line}"
                  f"<br/>Date {line}", st["cell"]),
    ]
    t = Table([cells], colWidths=[width / 2, width / 2])
    t.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"), ("LEFTPADDING", (0, 0), (-1, -1), 3)]))
    return t


def render_certificate(content: dict, out: str | os.PathLike, *, paper: str = "A4", result: dict | None = None,
                       image01=None, image_note: str | None = None) -> Path:
    """Lay out a certificate from its issued ``content``; ``result`` and ``image01`` give the figures."""
    from reportlab.lib.units import mm
    from reportlab.platypus import CondPageBreak, KeepTogether, Paragraph, Spacer, Table, TableStyle

    from .overlay import fit_plot_png, height_map_png, overlay_png

    st = _styles()
    buf = io.BytesIO()
    doc = _doc(buf, paper, content)
    W = doc.width
    story = _header_block(content, st, W)
    c = content
    story.append(_kv_table(certificate_item_rows(c), st, [34 * mm, W - 34 * mm]))
    story.append(Paragraph("Specification and method", st["h2"]))
    story.append(_kv_table(specification_rows(c) + [("Method", c["method"])], st, [34 * mm, W - 34 * mm]))
    story.append(Paragraph("Results", st["h2"]))
    header, rows = results_table(c)
    story.append(_grid_table(header, rows, st, [W * 0.38, W * 0.26, W * 0.26, W * 0.10]))
    story.append(Paragraph(_esc(c["coverage"]), st["small"]))
    d = c["decision"]
    verdict_colour = {"pass": "#1e7b34", "fail": "#b00020"}.get(d["verdict"], "#7a5b00")  # conditional: amber
    story.append(Paragraph("Conformity statement", st["h2"]))
    story.append(Paragraph(f"Verdict: <font color='{verdict_colour}'>{_esc(d['verdict'].upper())}</font>",
                           st["verdict"]))
    if d["verdict"] == "not evaluated":
        story.append(Paragraph("No tolerance was given for this inspection, so no statement of conformity is "
                               "made.", st["base"]))
    else:
        story.append(Paragraph(f"Decision rule: {_esc(d['rule'])}. {_esc(d['rule_note'])}", st["base"]))
        if d.get("meaning"):
            story.append(Paragraph(_esc(d["meaning"]), st["base"]))
    terms = verdict_terms_table(c)
    if terms and terms.get("rows"):
        story.append(Spacer(1, 3))
        widths = [0.24, 0.2, 0.12, 0.14, 0.14, 0.16] if len(terms["header"]) == 6 else \
            [1 / len(terms["header"])] * len(terms["header"])
        story.append(_grid_table(terms["header"], terms["rows"], st, [W * x for x in widths]))
    # older issued content kept one "budget"; a reprint lays it out as it was
    for b, rows in budget_tables(c):
        story.append(CondPageBreak(50 * mm))
        story.append(Paragraph(f"Uncertainty budget — {_esc(b['output'])} / {_esc(b['unit'])}", st["h2"]))
        story.append(_grid_table(BUDGET_HEADER, rows, st,
                                 [W * x for x in (0.18, 0.12, 0.11, 0.13, 0.09, 0.15, 0.13, 0.09)]))
        story.append(Paragraph(
            f"Combined standard uncertainty u_c = {_esc(b['u_c'])}; effective degrees of freedom "
            f"{_esc(b['dof_eff'])}; coverage factor k = {_esc(b['k'])}; expanded uncertainty U = {_esc(b['U'])} "
            f"({_esc(b['coverage'])}).", st["small"]))
    if c.get("form_budget"):
        story.append(CondPageBreak(50 * mm))
        story.append(Paragraph("Uncertainty contributions to the form terms (standard uncertainties, k = 1)",
                               st["h2"]))
        story.append(_grid_table(["Term", "Source", "u / fringes", "u / nm"], c["form_budget"], st,
                                 [W * 0.34, W * 0.34, W * 0.16, W * 0.16]))
        story.append(Paragraph("Contributions are combined in quadrature for each term (GUM, uncorrelated "
                               "inputs); U = k·u_c appears in the results table.", st["small"]))
    # figures
    with tempfile.TemporaryDirectory(prefix="rg-cert-") as tmp:
        figs = []
        if image01 is not None and result is not None:
            p = Path(tmp) / "overlay.jpg"
            overlay_png(image01, result, p, fmt="jpeg")
            figs.append((_image_flowable(p, W * 0.49, 75 * mm),
                         "Image with the clear aperture (dashed) and the test diameter (dotted)"
                         if c.get("mode") == "form" else "Image with the fitted rings and centre"))
        if result is not None:
            p = Path(tmp) / "fit.png"
            if fit_plot_png(result, p):
                figs.append((_image_flowable(p, W * 0.49, 75 * mm),
                             "Form terms with their expanded uncertainty" if c.get("mode") == "form"
                             else "Fit behind the result: r² against fringe order, and residuals"))
        story.append(CondPageBreak(85 * mm))
        story.append(Paragraph("Image and fit", st["h2"]))
        if figs:
            cells = [[f for f, _ in figs], [Paragraph(_esc(t), st["small"]) for _, t in figs]]
            t = Table(cells, colWidths=[W / 2] * len(figs), hAlign="LEFT")
            t.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"), ("ALIGN", (0, 0), (-1, -1), "CENTER")]))
            story.append(t)
        if result is not None and c.get("mode") == "form":
            p = Path(tmp) / "height.png"
            if height_map_png(result, p):
                story.append(_image_flowable(p, W * 0.62, 80 * mm))
                story.append(Paragraph("Surface height map (nm of surface height, less piston and tilt) over the "
                                       "part, from the analysis's height map", st["small"]))
        if image_note:
            story.append(Paragraph(_esc(image_note), st["small"]))
        story.append(Paragraph("Traceability and conditions", st["h2"]))
        story.append(_kv_table(traceability_rows(c), st, [34 * mm, W - 34 * mm]))
        notes = []
        if c.get("correction"):
            notes.append(c["correction"])
        notes += c.get("warnings") or []
        if c.get("notes"):
            notes.append(c["notes"])
        if notes:
            story.append(Paragraph("Notes", st["h2"]))
            for n in notes:
                story.append(Paragraph("• " + _esc(n), st["base"]))
        closing = [
            Paragraph("Authorisation", st["h2"]),
            _signoff(c, st, W),
            Spacer(1, 6),
            Paragraph("Checksums (SHA-256)", st["h2"]),
            Paragraph(f"Image: {_esc(c['image']['sha256'])}", st["mono"]),
            Paragraph(f"Inspection record: {_esc(c['record_checksum'])}", st["mono"]),
            Paragraph(f"Certificate content: {content_checksum(content)}", st["mono"]),
            Paragraph("Check a copy with: ringgauge certificate verify FILE.pdf", st["small"]),
            Spacer(1, 4),
            Paragraph("The results relate only to the item inspected. This certificate shall not be reproduced "
                      "except in full without the written approval of the issuing shop.", st["small"]),
            Paragraph(f"— End of certificate {_esc(c['number'])} —", st["end"]),
        ]
        story.append(KeepTogether(closing))
        doc.build(story, canvasmaker=_canvas_class(c["number"], "Certificate", c["shop"].get("name") or ""))
    return _finish(buf, content, out)


def render_lot_report(content: dict, out: str | os.PathLike, *, paper: str = "A4") -> Path:
    """Lay out a lot report from its issued ``content`` (the control chart is drawn from the content)."""
    from reportlab.lib.units import mm
    from reportlab.platypus import CondPageBreak, KeepTogether, Paragraph, Spacer

    from ..records.lot import IndividualsChart, chart_png  # the lot statistics' own chart

    st = _styles()
    buf = io.BytesIO()
    doc = _doc(buf, paper, content)
    W = doc.width
    c = content
    story = _header_block(c, st, W)
    story.append(_kv_table(
        [("Lot", c["lot"]), ("Part", c["part"]), ("Drawing", c.get("drawing", "—")), ("Customer", c["customer"]),
         ("Order", c.get("order", "—")), ("Radius tolerance", c.get("radius_tolerance", "not specified")),
         ("Form tolerance", c["tolerance"]), ("Decision rule", c.get("decision_rule", "—")),
         ("Inspected", c["period"]), ("Operators", c["operators"]), ("Records", c["n_records"])],
        st, [34 * mm, W - 34 * mm]))
    if c.get("rule_note"):
        story.append(Paragraph(_esc(c["rule_note"]), st["small"]))
    story.append(Paragraph("Summary", st["h2"]))
    story.append(_grid_table(["Verdict (all specified characteristics)", "Parts"], lot_counts_rows(c), st,
                             [W * 0.45, W * 0.15], zebra=False))
    if c.get("radius_counts"):
        story.append(Spacer(1, 4))
        story.append(_grid_table(["Radius verdict", "Parts"], [[k, v] for k, v in c["radius_counts"]], st,
                                 [W * 0.45, W * 0.15], zebra=False))
        if c.get("accepted"):
            story.append(Paragraph(_esc(f"Accepted on radius under {c.get('decision_rule')}: {c['accepted']} "
                                        "parts."), st["small"]))
    story.append(Spacer(1, 4))
    spreads = lot_spread_rows(c)
    story.append(_grid_table(["Quantity", "n", "Mean", "Standard deviation s", "Range"],
                             spreads or [["—", "0", "—", "—", "—"]],
                             st, [W * 0.22, W * 0.08, W * 0.22, W * 0.2, W * 0.28]))
    if c["capability"]:
        story.append(Paragraph("Process capability", st["h2"]))
        story.append(_grid_table(["Quantity", "Specification", "n", "Mean", "s", "Cp", "Cpk"],
                                 [[x["quantity"], x["limits"], x["n"], x["mean"], x["s"], x["Cp"], x["Cpk"]]
                                  for x in c["capability"]], st,
                                 [W * x for x in (0.14, 0.24, 0.07, 0.17, 0.16, 0.11, 0.11)]))
        story.append(Paragraph(_esc(c["capability_note"]), st["small"]))
    for n in c.get("notes") or []:
        story.append(Paragraph("• " + _esc(n), st["small"]))
    with tempfile.TemporaryDirectory(prefix="rg-lot-") as tmp:
        if c["charts"]:
            charts = [IndividualsChart(ch["quantity"], ch["unit"], tuple(ch["labels"]), tuple(ch["values"]),
                                       ch["centre"], ch["mr_bar"], ch["ucl"], ch["lcl"], 3.267 * ch["mr_bar"],
                                       tuple(ch["out_of_limits"]), ch.get("lsl"), ch.get("usl"),
                                       ch.get("decimals")) for ch in c["charts"]]
            p = Path(tmp) / "chart.png"
            chart_png(charts, p)
            story.append(CondPageBreak(95 * mm))
            story.append(Paragraph("Control chart (individuals)", st["h2"]))
            story.append(_image_flowable(p, W, 110 * mm))
            story.append(Paragraph(_esc(c["chart_note"]), st["small"]))
        story.append(Paragraph("Parts (by serial)", st["h2"]))
        story.append(Paragraph(f"R: radius of curvature; U: expanded uncertainty ({_esc(c['k'])}, about 95 %).",
                               st["small"]))
        story.append(Spacer(1, 3))
        header, rows, widths = lot_parts_table(c)
        story.append(_grid_table(header, rows, st, [W * x for x in widths]))
        story.append(KeepTogether([
            Paragraph("Lot sign-off", st["h2"]),
            _lot_approval(c, st, W),
            Paragraph("Checksums (SHA-256)", st["h2"]),
            Paragraph(f"Records listed: {_esc(c['record_checksums'])}", st["mono"]),
            Paragraph(f"Report content: {content_checksum(content)}", st["mono"]),
            Paragraph("Check a copy with: ringgauge certificate verify FILE.pdf", st["small"]),
            Paragraph(f"— End of lot report {_esc(c['number'])} —", st["end"]),
        ]))
        doc.build(story, canvasmaker=_canvas_class(c["number"], "Lot report", c["shop"].get("name") or ""))
    return _finish(buf, content, out)


def _lot_approval(content, st, width):
    """The QA sign-off block: disposition boxes, prepared by / approved by with name, date and signature lines."""
    from reportlab.platypus import Paragraph, Table, TableStyle

    line = "_" * 26
    box = "☐"
    disp = Paragraph(f"<b>Lot disposition</b>&nbsp;&nbsp; {box} accepted &nbsp;&nbsp; {box} rejected &nbsp;&nbsp; "
                     f"{box} accepted with concession &nbsp;&nbsp; {box} sorted / rework", st["cell"])
    cells = [
        Paragraph(f"<b>Prepared by</b><br/>{_esc(content.get('operators') or '')}<br/><br/>Name {line}"
                  f"<br/><br/>Date {line}<br/><br/>Signature {line}", st["cell"]),
        Paragraph(f"<b>Approved by (QA)</b><br/>{_esc(content.get('approver') or '')}<br/><br/>Name {line}"
                  f"<br/><br/>Date {line}<br/><br/>Signature {line}", st["cell"]),
    ]
    t = Table([[disp, ""], cells], colWidths=[width / 2, width / 2])
    t.setStyle(TableStyle([("SPAN", (0, 0), (1, 0)), ("VALIGN", (0, 0), (-1, -1), "TOP"),
                           ("LEFTPADDING", (0, 0), (-1, -1), 3), ("BOTTOMPADDING", (0, 0), (-1, 0), 8)]))
    return t


def _finish(buf: io.BytesIO, content: dict, out) -> Path:
    """Embed the content and its checksum, then write the file atomically."""
    from pypdf import PdfReader, PdfWriter

    buf.seek(0)
    writer = PdfWriter(clone_from=PdfReader(buf))
    text = _canonical(content)
    writer.add_attachment(CONTENT_FILE, text.encode("utf-8"))
    writer.add_metadata({"/RinggaugeNumber": content["number"], "/RinggaugeContentSHA256": content_checksum(content)})
    out = Path(out)
    if out.parent and not out.parent.exists():
        raise InputError(f"cannot write {out}: folder {out.parent} does not exist")
    tmp = out.with_name(out.name + ".part")
    try:
        with open(tmp, "wb") as fh:
            writer.write(fh)
        os.replace(tmp, out)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise InputError(f"cannot write {out} ({exc.strerror or exc})") from None
    return out
