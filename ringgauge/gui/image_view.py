"""The photograph with the fitted overlay: zoom, pan, switchable layers, and picking a centre or an aperture
by hand."""

from __future__ import annotations

import math

import numpy as np
from PySide6.QtCore import QPointF, QRectF, Qt, Signal
from PySide6.QtGui import QBrush, QColor, QImage, QPainter, QPen, QPixmap
from PySide6.QtWidgets import (
    QGraphicsEllipseItem,
    QGraphicsItemGroup,
    QGraphicsLineItem,
    QGraphicsPixmapItem,
    QGraphicsRectItem,
    QGraphicsScene,
    QGraphicsSimpleTextItem,
    QGraphicsTextItem,
    QGraphicsView,
)

from .display import Overlay

# Okabe & Ito (2008) colour-blind-safe palette
ORANGE = QColor(230, 159, 0)
SKY = QColor(86, 180, 233)
GREEN = QColor(0, 158, 115)
YELLOW = QColor(240, 228, 66)
BLUE = QColor(0, 114, 178)
VERMILION = QColor(213, 94, 0)
PURPLE = QColor(204, 121, 167)

#: overlay layers, in drawing order: key -> label shown in the layer menu
LAYERS = {
    "rings": "Fitted rings",
    "aperture": "Evaluated aperture",
    "masks": "Masked regions",
    "meridians": "Principal meridians",
    "centre": "Centre",
}


#: most fitted rings drawn over the photograph
MAX_RINGS = 16


def array_to_qimage(a: np.ndarray) -> QImage:
    """uint8 (H, W) grey or (H, W, 3) RGB to a QImage that owns its bytes."""
    a = np.ascontiguousarray(a)
    h, w = a.shape[:2]
    if a.ndim == 2:
        img = QImage(a.data, w, h, a.strides[0], QImage.Format.Format_Grayscale8)
    else:
        img = QImage(a.data, w, h, a.strides[0], QImage.Format.Format_RGB888)
    return img.copy()


def _pen(colour: QColor, width: float = 2.0, style=Qt.PenStyle.SolidLine) -> QPen:
    p = QPen(colour, width, style)
    p.setCosmetic(True)  # width in screen pixels at any zoom
    return p


class ImageView(QGraphicsView):
    """Shows one image; ``mode`` is ``"look"`` (drag pans), ``"centre"`` (click sets the centre) or
    ``"aperture"`` (press at the centre, drag to the edge)."""

    centrePicked = Signal(float, float)
    aperturePicked = Signal(float, float, float)
    zoomChanged = Signal(float)

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setScene(QGraphicsScene(self))
        self.setRenderHints(QPainter.RenderHint.Antialiasing | QPainter.RenderHint.SmoothPixmapTransform)
        self.setBackgroundBrush(QBrush(QColor(40, 42, 46)))
        self.setTransformationAnchor(QGraphicsView.ViewportAnchor.AnchorUnderMouse)
        self.setResizeAnchor(QGraphicsView.ViewportAnchor.AnchorViewCenter)
        self.setDragMode(QGraphicsView.DragMode.ScrollHandDrag)
        self.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.setVerticalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.setAccessibleName("Interferogram view")
        self._pixmap = QGraphicsPixmapItem()
        self._pixmap.setTransformationMode(Qt.TransformationMode.SmoothTransformation)
        self.scene().addItem(self._pixmap)
        # overlay layers live inside a clip box the size of the image, so rings cut by the frame stay in it
        self._clip = QGraphicsRectItem()
        self._clip.setPen(QPen(Qt.PenStyle.NoPen))
        self._clip.setFlag(QGraphicsRectItem.GraphicsItemFlag.ItemClipsChildrenToShape)
        self._clip.setZValue(10)
        self.scene().addItem(self._clip)
        self._groups: dict[str, QGraphicsItemGroup] = {}
        self.visible = {k: True for k in LAYERS}
        self.overlay = Overlay()
        self.mode = "look"
        self._press: QPointF | None = None
        self._rubber: QGraphicsEllipseItem | None = None
        self._fit_pending = True
        self.ring_step = 1
        # three short lines, so the hint stays whole even in a narrow view (it is scaled down to fit when needed)
        self._placeholder = QGraphicsSimpleTextItem("Open an interferogram:\nFile > Open (Ctrl+O),\nor drop a file here")
        self._placeholder.setBrush(QBrush(QColor(230, 230, 230)))
        f = self._placeholder.font()
        f.setPointSizeF(f.pointSizeF() * 1.3)
        self._placeholder.setFont(f)
        self.scene().addItem(self._placeholder)
        self._show_placeholder()

    # image ----------------------------------------------------------------------------------------------
    def set_image(self, a: np.ndarray | None, *, refit: bool = False) -> None:
        if a is None:
            self._pixmap.setPixmap(QPixmap())
            self._show_placeholder()
            return
        self._placeholder.setVisible(False)
        new_size = (a.shape[1], a.shape[0])
        old = self._pixmap.pixmap()
        if refit or old.isNull() or (old.width(), old.height()) != new_size:
            self._fit_pending = True
        self._pixmap.setPixmap(QPixmap.fromImage(array_to_qimage(a)))
        self.scene().setSceneRect(QRectF(0, 0, new_size[0], new_size[1]).adjusted(-40, -40, 40, 40))
        self._clip.setRect(QRectF(-0.5, -0.5, new_size[0], new_size[1]))
        if self._fit_pending and self.isVisible():
            self.fit()

    def _show_placeholder(self) -> None:
        """The empty view's hint, centred and whole: shrunk to the view when the view is narrower than it."""
        self._placeholder.setVisible(True)
        self._clip.setRect(QRectF())
        rect = self._placeholder.sceneBoundingRect().adjusted(-12, -12, 12, 12)
        self.scene().setSceneRect(rect)
        self.resetTransform()
        vp = self.viewport().rect()
        if rect.width() > vp.width() or rect.height() > vp.height():
            self.fitInView(rect, Qt.AspectRatioMode.KeepAspectRatio)
        self.centerOn(rect.center())
        self._fit_pending = True

    def image_size(self) -> tuple[int, int]:
        pm = self._pixmap.pixmap()
        return (pm.width(), pm.height())

    def fit(self) -> None:
        pm = self._pixmap.pixmap()
        if pm.isNull():
            return
        # pixel centres are at integers: the pixmap's top-left corner sits at (-0.5, -0.5)
        self.fitInView(QRectF(-0.5, -0.5, pm.width(), pm.height()), Qt.AspectRatioMode.KeepAspectRatio)
        self._fit_pending = False
        self.zoomChanged.emit(self.zoom())

    def zoom(self) -> float:
        return float(self.transform().m11())

    def view_centre(self) -> QPointF:
        """The image point (x = column, y = row) at the middle of the view."""
        return self.mapToScene(self.viewport().rect().center())

    def set_zoom(self, factor: float, *, anchor: QPointF | None = None) -> None:
        """Zoom to ``factor`` screen pixels per image pixel. The image point under ``anchor`` (a position in the
        viewport, e.g. the mouse) stays where it is; without one, the point in the middle of the view does."""
        factor = float(min(max(factor, 0.02), 64.0))
        vp = QPointF(self.viewport().rect().center()) if anchor is None else QPointF(anchor)
        keep = self.mapToScene(vp.toPoint())
        old_anchor = self.transformationAnchor()
        self.setTransformationAnchor(QGraphicsView.ViewportAnchor.NoAnchor)
        self.resetTransform()
        self.scale(factor, factor)
        # move the view so that ``keep`` is back under ``vp``
        self.centerOn(keep)
        if anchor is not None:
            # keep is in the middle now; move by what lies between the anchor and the middle
            self.centerOn(keep * 2 - QPointF(self.mapToScene(vp.toPoint())))
        self.setTransformationAnchor(old_anchor)
        self.zoomChanged.emit(factor)

    def zoom_by(self, step: float, *, anchor: QPointF | None = None) -> None:
        self.set_zoom(self.zoom() * step, anchor=anchor)

    def showEvent(self, event):  # noqa: N802
        super().showEvent(event)
        if self._pixmap.pixmap().isNull():
            self._show_placeholder()
        elif self._fit_pending:
            self.fit()

    def resizeEvent(self, event):  # noqa: N802
        super().resizeEvent(event)
        if self._pixmap.pixmap().isNull():
            self._show_placeholder()
        elif self._fit_pending:
            self.fit()

    def wheelEvent(self, event):  # noqa: N802
        steps = event.angleDelta().y() / 120.0
        if steps:
            self.zoom_by(1.25**steps, anchor=event.position())  # the point under the mouse stays put
            event.accept()

    # overlay ----------------------------------------------------------------------------------------------
    def set_layer_visible(self, key: str, on: bool) -> None:
        self.visible[key] = bool(on)
        if key in self._groups:
            self._groups[key].setVisible(bool(on))

    def set_overlay(self, ov: Overlay) -> None:
        self.overlay = ov
        for g in self._groups.values():
            self.scene().removeItem(g)  # takes its children along
        self._groups = {}
        for key in LAYERS:
            g = QGraphicsItemGroup(self._clip)
            g.setZValue(list(LAYERS).index(key))
            self._groups[key] = g
            getattr(self, f"_draw_{key}")(g, ov)
            g.setVisible(self.visible.get(key, True))

    def layer_item_count(self, key: str) -> int:
        g = self._groups.get(key)
        return 0 if g is None else len(g.childItems())

    def _ellipse(self, g, cx, cy, rx, ry, pen, brush=None):
        it = QGraphicsEllipseItem(cx - rx, cy - ry, 2 * rx, 2 * ry)
        it.setPen(pen)
        if brush is not None:
            it.setBrush(brush)
        g.addToGroup(it)
        return it

    def _draw_rings(self, g, ov: Overlay) -> None:
        if ov.centre is None:
            return
        cx, cy = ov.centre
        # dozens of rings would hide the photograph: draw at most MAX_RINGS of them, evenly spread in order
        step = max(1, -(-len(ov.rings) // MAX_RINGS))
        self.ring_step = step
        for r in ov.rings[::step]:
            colour = QColor(ORANGE if r.kind == "dark" else SKY)
            colour.setAlpha(220)
            style = Qt.PenStyle.SolidLine if r.used else Qt.PenStyle.DotLine
            self._ellipse(g, cx, cy, r.rx, r.ry, _pen(colour, 1.2 if r.used else 1.0, style))

    def _draw_aperture(self, g, ov: Overlay) -> None:
        if ov.aperture is None:
            return
        cx, cy, rx, ry = ov.aperture
        style = Qt.PenStyle.DashLine if ov.aperture_by_hand else Qt.PenStyle.SolidLine
        self._ellipse(g, cx, cy, rx, ry, _pen(GREEN, 2.5, style))
        if ov.test_circle is not None:
            # the test diameter the form was evaluated over (dash-dot, so it stays distinct where it meets the rim)
            tx, ty, trx, try_ = ov.test_circle
            self._ellipse(g, tx, ty, trx, try_, _pen(SKY, 2.0, Qt.PenStyle.DashDotLine))
            txt = QGraphicsTextItem()
            txt.setHtml(f"<span style='background-color: rgba(0, 0, 0, 170); color: {QColor(SKY).name()};'>"
                        f"&nbsp;test Ø {ov.test_diameter_mm:g} mm&nbsp;</span>")
            txt.setFlag(QGraphicsTextItem.GraphicsItemFlag.ItemIgnoresTransformations)
            txt.setPos(tx + 0.72 * trx, ty - 0.72 * try_)
            g.addToGroup(txt)

    def _draw_masks(self, g, ov: Overlay) -> None:
        brush = QBrush(QColor(213, 94, 0, 90), Qt.BrushStyle.BDiagPattern)
        for x, y, r in ov.masks:
            self._ellipse(g, x, y, r, r, _pen(VERMILION, 1.5), brush)

    def _draw_meridians(self, g, ov: Overlay) -> None:
        if not ov.meridians:
            return
        if ov.aperture is not None:
            cx, cy, rx, ry = ov.aperture
            length = max(rx, ry)
        elif ov.centre is not None:
            cx, cy = ov.centre
            w, h = self.image_size()
            length = 0.45 * min(w, h)
        else:
            return
        for i, (ang, label) in enumerate(ov.meridians):
            t = math.radians(ang)
            # angles count from +x toward +y (image rows run down), as the form evaluation states them
            dx, dy = math.cos(t) * length, math.sin(t) * length
            pen = _pen(PURPLE if i == 0 else YELLOW, 2.0, Qt.PenStyle.DashDotLine)
            line = QGraphicsLineItem(cx - dx, cy - dy, cx + dx, cy + dy)
            line.setPen(pen)
            g.addToGroup(line)
            txt = QGraphicsTextItem()
            txt.setHtml(f"<span style='background-color: rgba(0, 0, 0, 170); color: {pen.color().name()};'>"
                        f"&nbsp;{label}&nbsp;</span>")
            txt.setFlag(QGraphicsTextItem.GraphicsItemFlag.ItemIgnoresTransformations)
            txt.setPos(cx + 0.4 * dx, cy + 0.4 * dy)
            g.addToGroup(txt)

    def _draw_centre(self, g, ov: Overlay) -> None:
        if ov.centre is None:
            return
        cx, cy = ov.centre
        colour = YELLOW if ov.centre_by_hand else BLUE
        w, h = self.image_size()
        arm = max(6.0, 0.03 * max(w, h, 1))
        for x0, y0, x1, y1 in ((cx - arm, cy, cx + arm, cy), (cx, cy - arm, cx, cy + arm)):
            halo = QGraphicsLineItem(x0, y0, x1, y1)
            halo.setPen(_pen(QColor(0, 0, 0), 5.0))
            g.addToGroup(halo)
            line = QGraphicsLineItem(x0, y0, x1, y1)
            line.setPen(_pen(colour, 2.5))
            g.addToGroup(line)

    # picking ----------------------------------------------------------------------------------------------
    def set_mode(self, mode: str) -> None:
        if mode not in ("look", "centre", "aperture"):
            raise ValueError(mode)
        self.mode = mode
        self.setDragMode(QGraphicsView.DragMode.ScrollHandDrag if mode == "look" else QGraphicsView.DragMode.NoDrag)
        self.viewport().setCursor(Qt.CursorShape.OpenHandCursor if mode == "look" else Qt.CursorShape.CrossCursor)

    def mousePressEvent(self, event):  # noqa: N802
        if self.mode != "look" and event.button() == Qt.MouseButton.LeftButton:
            p = self.mapToScene(event.position().toPoint())
            if self.mode == "centre":
                self.centrePicked.emit(p.x(), p.y())
                event.accept()
                return
            self._press = p
            self._rubber = QGraphicsEllipseItem(p.x(), p.y(), 0, 0)
            self._rubber.setPen(_pen(GREEN, 2.0, Qt.PenStyle.DashLine))
            self._rubber.setZValue(50)
            self.scene().addItem(self._rubber)
            event.accept()
            return
        super().mousePressEvent(event)

    def mouseMoveEvent(self, event):  # noqa: N802
        if self._press is not None and self._rubber is not None:
            p = self.mapToScene(event.position().toPoint())
            r = math.hypot(p.x() - self._press.x(), p.y() - self._press.y())
            self._rubber.setRect(self._press.x() - r, self._press.y() - r, 2 * r, 2 * r)
            event.accept()
            return
        super().mouseMoveEvent(event)

    def mouseReleaseEvent(self, event):  # noqa: N802
        if self._press is not None:
            p = self.mapToScene(event.position().toPoint())
            r = math.hypot(p.x() - self._press.x(), p.y() - self._press.y())
            c = self._press
            self._press = None
            if self._rubber is not None:
                self.scene().removeItem(self._rubber)
                self._rubber = None
            self.aperturePicked.emit(c.x(), c.y(), r)
            event.accept()
            return
        super().mouseReleaseEvent(event)
