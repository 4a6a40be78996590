"""Small widgets shared by the window's pages."""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QLabel


class ElidedLabel(QLabel):
    """A name or path shortened in the middle with "…" when its space is narrow (the file's ending stays
    readable), the whole text as its tooltip; ``text()`` keeps the whole text."""

    def setText(self, text: str) -> None:  # noqa: N802
        super().setText(text)
        self.setToolTip(text)

    def paintEvent(self, _event):  # noqa: N802
        from PySide6.QtGui import QPainter

        p = QPainter(self)
        r = self.contentsRect()
        p.drawText(r, int(self.alignment()), self.fontMetrics().elidedText(self.text(), Qt.TextElideMode.ElideMiddle,
                                                                          r.width()))
        p.end()
