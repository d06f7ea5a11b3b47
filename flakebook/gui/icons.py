"""The toolbar's icons, drawn with QPainter (our own simple glyphs, no image files): one per
action name, all the same size, so that toolbar buttons never change width.
"""

from __future__ import annotations

from PySide6.QtCore import QPointF, QRectF, Qt
from PySide6.QtGui import QColor, QFont, QIcon, QPainter, QPainterPath, QPen, QPixmap, QPolygonF

SIZE = 32
INK = QColor("#2B2B2B")
ACCENT = QColor("#0072B2")  # Okabe-Ito blue


def _pen(colour: QColor = INK, width: float = 2.2) -> QPen:
    pen = QPen(colour, width)
    pen.setCapStyle(Qt.PenCapStyle.RoundCap)
    pen.setJoinStyle(Qt.PenJoinStyle.RoundJoin)
    return pen


def _arrow(p: QPainter, mirror: bool) -> None:
    """A curved arrow: undo (pointing left) or redo (mirrored)."""
    if mirror:
        p.translate(SIZE, 0)
        p.scale(-1, 1)
    path = QPainterPath(QPointF(9, 13))
    path.cubicTo(QPointF(15, 6), QPointF(27, 8), QPointF(26, 18))
    path.cubicTo(QPointF(25, 25), QPointF(17, 27), QPointF(12, 25))
    p.setPen(_pen())
    p.drawPath(path)
    p.setBrush(INK)
    p.drawPolygon(QPolygonF([QPointF(4, 12), QPointF(12, 7), QPointF(12, 18)]))


def _draw(name: str, p: QPainter) -> None:
    p.setPen(_pen())
    p.setBrush(Qt.BrushStyle.NoBrush)
    if name == "openProject":
        p.drawPolygon(
            QPolygonF(
                [
                    QPointF(4, 9),
                    QPointF(12, 9),
                    QPointF(15, 12),
                    QPointF(28, 12),
                    QPointF(28, 26),
                    QPointF(4, 26),
                ]
            )
        )
    elif name == "addImages":
        p.drawRect(QRectF(4, 7, 20, 16))
        p.drawPolyline(QPolygonF([QPointF(6, 21), QPointF(12, 14), QPointF(17, 19)]))
        p.setPen(_pen(ACCENT, 2.6))
        p.drawLine(QPointF(25, 19), QPointF(25, 29))
        p.drawLine(QPointF(20, 24), QPointF(30, 24))
    elif name == "undo":
        _arrow(p, False)
    elif name == "redo":
        _arrow(p, True)
    elif name == "tool_select":
        p.setBrush(INK)
        p.drawPolygon(
            QPolygonF(
                [
                    QPointF(9, 4),
                    QPointF(9, 25),
                    QPointF(14, 20),
                    QPointF(18, 28),
                    QPointF(21, 27),
                    QPointF(17, 19),
                    QPointF(24, 19),
                ]
            )
        )
    elif name == "tool_outline":
        pts = [QPointF(6, 10), QPointF(20, 5), QPointF(27, 18), QPointF(14, 27)]
        p.drawPolygon(QPolygonF(pts))
        p.setBrush(ACCENT)
        p.setPen(Qt.PenStyle.NoPen)
        for q in pts:
            p.drawEllipse(q, 3, 3)
    elif name == "tool_segment":
        p.setPen(_pen(INK, 1.6))
        p.setPen(QPen(INK, 1.6, Qt.PenStyle.DashLine))
        p.drawEllipse(QRectF(5, 6, 22, 19))
        p.setPen(_pen(ACCENT, 2.4))
        p.drawLine(QPointF(16, 11), QPointF(16, 21))
        p.drawLine(QPointF(11, 16), QPointF(21, 16))
    elif name == "tool_hole":
        p.drawEllipse(QRectF(6, 6, 20, 20))
        p.setBrush(INK)
        p.drawEllipse(QPointF(16, 16), 2, 2)
    elif name == "tool_scale":
        p.drawRect(QRectF(3, 12, 26, 9))
        for i, x in enumerate(range(7, 29, 4)):
            p.drawLine(QPointF(x, 12), QPointF(x, 15 if i % 2 else 17))
    elif name == "tool_measure":
        p.drawLine(QPointF(6, 26), QPointF(26, 6))
        p.setBrush(INK)
        p.drawPolygon(QPolygonF([QPointF(4, 28), QPointF(6, 20), QPointF(12, 26)]))
        p.drawPolygon(QPolygonF([QPointF(28, 4), QPointF(26, 12), QPointF(20, 6)]))
    elif name == "tool_split":
        p.drawPolygon(QPolygonF([QPointF(5, 9), QPointF(24, 5), QPointF(27, 24), QPointF(8, 27)]))
        p.setPen(QPen(ACCENT, 2.4, Qt.PenStyle.DashLine))
        p.drawLine(QPointF(3, 29), QPointF(29, 3))
    elif name == "findFlakes":
        p.drawEllipse(QRectF(5, 5, 15, 15))
        p.setPen(_pen(INK, 3.2))
        p.drawLine(QPointF(18, 18), QPointF(27, 27))
        p.setPen(_pen(ACCENT, 1.8))
        p.drawPolygon(QPolygonF([QPointF(9, 11), QPointF(13, 8), QPointF(16, 13), QPointF(11, 16)]))
    elif name == "detectHoles":
        for x in (9, 23):
            for y in (9, 23):
                p.drawEllipse(QPointF(x, y), 4.5, 4.5)
    elif name == "fitImage":
        for sx, sy in ((1, 1), (-1, 1), (1, -1), (-1, -1)):
            cx, cy = 16 - sx * 11, 16 - sy * 11
            p.drawLine(QPointF(cx, cy), QPointF(cx + sx * 7, cy))
            p.drawLine(QPointF(cx, cy), QPointF(cx, cy + sy * 7))
    else:  # any other action: its first letter in a box, still one size
        p.drawRoundedRect(QRectF(4, 4, 24, 24), 4, 4)
        f = QFont()
        f.setPixelSize(16)
        f.setBold(True)
        p.setFont(f)
        p.drawText(QRectF(4, 4, 24, 24), Qt.AlignmentFlag.AlignCenter, (name[:1] or "?").upper())


def icon(name: str) -> QIcon:
    """The icon of the action called ``name`` (its object name, e.g. ``"tool_hole"``)."""
    out = QIcon()
    for scale in (1, 2):
        pm = QPixmap(SIZE * scale, SIZE * scale)
        pm.setDevicePixelRatio(scale)
        pm.fill(Qt.GlobalColor.transparent)
        p = QPainter(pm)
        p.setRenderHint(QPainter.RenderHint.Antialiasing)
        _draw(name, p)
        p.end()
        out.addPixmap(pm)
    return out
