"""Printing from the window: a result as the window shows it (verdict, values with U and unit, the uncertainty
budget, warnings and the photograph with its overlay), and the text of an issued certificate.

Both go to a ``QPrinter`` — a real printer chosen in Qt's print dialog, or a PDF file. The signed certificate PDF
stays the authoritative document; its printout says so on every page.
"""

from __future__ import annotations

import datetime as _dt
import html
import unicodedata

from PySide6.QtCore import QMarginsF, QRectF, QUrl
from PySide6.QtGui import QFont, QFontMetricsF, QImage, QPageLayout, QPainter, QTextDocument

from ..errors import InputError
from ..result import AnalysisResult
from . import display


def _esc(x) -> str:
    return html.escape(str(x))


def result_html(result: AnalysisResult, *, title: str = "", stale: bool = False, with_picture: bool = False) -> str:
    """The printed page of a result, as HTML for ``QTextDocument`` (built from the window's own rows)."""
    v = display.verdict_view(result)
    rows = display.value_rows(result)
    budget = display.budget_rows(result)
    when = _dt.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z")
    parts = [
        "<html><body style='font-family: sans-serif; font-size: 9pt;'>",
        f"<h2>ringgauge — {_esc(title or result.image.path or 'result')}</h2>",
        f"<p>Printed {when}. Not a certificate: certificates are issued from the inspection records.</p>",
    ]
    if stale:
        parts.append("<p style='color:#7a0000'><b>OUT OF DATE:</b> the set-up was changed after this result was "
                     "made; it belongs to the set-up printed below.</p>")
    parts.append(f"<h3>{_esc(v.symbol)} {_esc(v.word)}</h3>")
    for line in (v.headline, v.explanation, *v.terms, v.decision_rule):
        if line:
            parts.append(f"<p>{_esc(line)}</p>")
    parts.append("<table border='1' cellspacing='0' cellpadding='3'><tr><th>Quantity</th><th>Value</th>"
                 "<th>U</th><th>Unit</th></tr>")
    group = None
    for r in rows:
        if r.group != group:  # the presentation's sections, as headings inside the table
            group = r.group
            parts.append(f"<tr><th colspan='4' align='left'>{_esc(group)}</th></tr>")
        parts.append(f"<tr><td>{_esc(r.label)}</td><td align='right'>{_esc(r.value)}</td>"
                     f"<td align='right'>{_esc(r.uncertainty)}</td><td>{_esc(r.unit)}</td></tr>")
    parts.append("</table>")
    k = result.k
    if k:
        parts.append(f"<p>U = k·u, expanded uncertainty with k = {float(k):g} (about 95 %); u is the standard "
                     "uncertainty (k = 1).</p>")
    if budget:
        parts.append("<h3>Uncertainty budget</h3><table border='1' cellspacing='0' cellpadding='2'><tr>"
                     + "".join(f"<th>{_esc(h)}</th>" for h in ("Input quantity", "Estimate", "u", "Distribution",
                                                                  "Sensitivity c", "Contribution", "Share"))
                     + "</tr>")
        for r in budget:
            parts.append("<tr>" + "".join(f"<td>{_esc(c)}</td>" for c in r) + "</tr>")
        parts.append("</table>")
    warns = list(result.warnings)
    if warns:
        parts.append("<h3>Warnings</h3><ul>" + "".join(f"<li>{_esc(w)}</li>" for w in warns) + "</ul>")
    if with_picture:
        parts.append("<h3>Image with the fitted overlay</h3><p><img src='ringgauge://picture' width='420'></p>")
    parts.append("</body></html>")
    return "".join(parts)


def print_result(result: AnalysisResult | None, printer, *, picture: QImage | None = None, title: str = "",
                 stale: bool = False) -> None:
    """Lay out the result on ``printer``'s pages (A4 or the printer's paper, 15 mm margins)."""
    if result is None:
        raise InputError("nothing to print: no result")
    doc = QTextDocument()
    has_pic = picture is not None and not picture.isNull()
    if has_pic:
        doc.addResource(QTextDocument.ResourceType.ImageResource, QUrl("ringgauge://picture"), picture)
    doc.setHtml(result_html(result, title=title, stale=stale, with_picture=has_pic))
    printer.setPageMargins(QMarginsF(15, 15, 15, 15), QPageLayout.Unit.Millimeter)
    doc.print_(printer)


def pdf_pages_text(path) -> list[str]:
    """The text of each page of a PDF (ligatures unfolded), for printing a certificate as issued."""
    try:
        from pypdf import PdfReader

        reader = PdfReader(str(path))
        return [unicodedata.normalize("NFKC", p.extract_text() or "").replace("\t", " ") for p in reader.pages]
    except FileNotFoundError:
        raise InputError(f"{path}: the certificate file is gone; issue it again") from None
    except Exception as exc:  # noqa: BLE001 - a damaged file is a message, not a crash
        raise InputError(f"{path}: cannot read the certificate ({type(exc).__name__})") from None


def print_pdf_text(path, printer) -> int:
    """Print the text of an issued certificate, page for page; returns the number of pages printed."""
    pages = pdf_pages_text(path)
    if not pages:
        raise InputError(f"{path}: the certificate has no pages")
    printer.setPageMargins(QMarginsF(15, 15, 15, 15), QPageLayout.Unit.Millimeter)
    painter = QPainter()
    if not painter.begin(printer):
        raise InputError("the printer cannot be opened (is it connected, or the PDF file writable?)")
    try:
        body = QFont("DejaVu Sans", 9)
        small = QFont("DejaVu Sans", 7)
        area = QRectF(painter.viewport())  # device pixels inside the margins
        name = str(path).replace("\\", "/").rsplit("/", 1)[-1]
        for i, text in enumerate(pages):
            if i:
                printer.newPage()
            painter.setFont(small)
            fm = QFontMetricsF(small, printer)
            note = (f"Printed copy of {name}, page {i + 1} of {len(pages)}. The signed PDF is the authoritative "
                    "certificate.")
            painter.drawText(QRectF(area.left(), area.top(), area.width(), fm.height() * 2), 0, note)
            y = area.top() + fm.height() * 2.5
            painter.setFont(body)
            fm = QFontMetricsF(body, printer)
            for line in text.splitlines():
                while True:
                    # wrap a long line at the last space that fits
                    cut = len(line)
                    while cut > 1 and fm.horizontalAdvance(line[:cut]) > area.width():
                        sp = line.rfind(" ", 0, cut - 1)
                        cut = sp if sp > 0 else cut - 1
                    if y + fm.height() > area.bottom():
                        break
                    painter.drawText(QRectF(area.left(), y, area.width(), fm.height()), 0, line[:cut])
                    y += fm.height() * 1.15
                    line = line[cut:].lstrip()
                    if not line:
                        break
    finally:
        painter.end()
    return len(pages)
