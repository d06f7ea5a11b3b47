"""Offscreen pictures for export: a widget or a view as PNG or SVG, a table as PNG or SVG.

Everything here draws with QPainter on a QImage or a QSvgGenerator, so it runs with
``QT_QPA_PLATFORM=offscreen`` and needs no display. A QApplication (or QGuiApplication) must
exist; :func:`ensure_app` makes one when called from a script.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from PySide6.QtCore import QRectF, QSize, Qt
from PySide6.QtGui import QColor, QFont, QFontMetrics, QGuiApplication, QImage, QPainter, QPen
from PySide6.QtSvg import QSvgGenerator

from flakebook.errors import InputError

IMAGE_SUFFIXES = (".png", ".svg")


def ensure_app():
    """The running Qt application, or a new offscreen-capable one."""
    app = QGuiApplication.instance()
    if app is None:
        import os

        os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
        from PySide6.QtWidgets import QApplication

        app = QApplication([])
    return app


def _check_target(path: str | Path) -> Path:
    path = Path(path)
    if path.suffix.lower() not in IMAGE_SUFFIXES:
        raise InputError(
            f"{path.name}: cannot export a picture with suffix {path.suffix or '(none)'!r}; "
            "accepted: .png or .svg"
        )
    if not path.parent.exists():
        raise InputError(f"{path}: the folder {path.parent} does not exist")
    return path


def widget_picture(widget, path: str | Path, *, scale: float = 1.0) -> Path:
    """Render ``widget`` (as it stands, children included) to a PNG or an SVG file."""
    path = _check_target(path)
    size = widget.size()
    if path.suffix.lower() == ".png":
        image = QImage(
            int(size.width() * scale), int(size.height() * scale), QImage.Format.Format_ARGB32
        )
        image.fill(QColor("white"))
        painter = QPainter(image)
        painter.setRenderHint(QPainter.RenderHint.Antialiasing)
        painter.scale(scale, scale)
        widget.render(painter)
        painter.end()
        if not image.save(str(path), "PNG"):
            raise InputError(f"{path}: could not write the PNG (is the folder writable?)")
    else:
        gen = QSvgGenerator()
        gen.setFileName(str(path))
        gen.setSize(size)
        gen.setViewBox(QRectF(0, 0, size.width(), size.height()))
        gen.setTitle("flakebook")
        painter = QPainter(gen)
        widget.render(painter)
        painter.end()
    return path


def table_picture(
    path: str | Path,
    header: Sequence[str],
    rows: Sequence[Sequence[object]],
    *,
    title: str = "",
    marks: Sequence[bool] | None = None,
) -> Path:
    """Draw a table (header, rows of cells) to a PNG or SVG; ``marks`` shade rows (stale)."""
    path = _check_target(path)
    font = QFont("sans-serif", 9)
    bold = QFont(font)
    bold.setBold(True)
    fm = QFontMetrics(font)
    cells = [["" if c is None else str(c) for c in r] for r in rows]
    widths = [
        max(
            [fm.horizontalAdvance(h) + 16]
            + [fm.horizontalAdvance(r[i]) + 12 for r in cells if i < len(r)]
        )
        for i, h in enumerate(header)
    ]
    row_h = fm.height() + 6
    top = row_h + 8 if title else 4
    width = sum(widths) + 8
    height = top + row_h * (len(cells) + 1) + 8

    def paint(p: QPainter) -> None:
        p.fillRect(QRectF(0, 0, width, height), QColor("white"))
        if title:
            p.setFont(bold)
            p.setPen(QColor("#111111"))
            p.drawText(
                QRectF(4, 2, width - 8, row_h),
                Qt.AlignmentFlag.AlignLeft | Qt.AlignmentFlag.AlignVCenter,
                title,
            )
        y = top
        p.fillRect(QRectF(4, y, width - 8, row_h), QColor("#E8E8E8"))
        p.setFont(bold)
        x = 4
        for h, w in zip(header, widths):
            p.drawText(QRectF(x + 4, y, w - 8, row_h), Qt.AlignmentFlag.AlignVCenter, h)
            x += w
        p.setFont(font)
        for i, r in enumerate(cells):
            y += row_h
            if marks is not None and i < len(marks) and marks[i]:
                p.fillRect(QRectF(4, y, width - 8, row_h), QColor("#FFF1CC"))
            elif i % 2:
                p.fillRect(QRectF(4, y, width - 8, row_h), QColor("#F6F6F6"))
            x = 4
            for c, w in zip(r, widths):
                p.drawText(QRectF(x + 4, y, w - 8, row_h), Qt.AlignmentFlag.AlignVCenter, c)
                x += w
        p.setPen(QPen(QColor("#BBBBBB")))
        p.drawRect(QRectF(4, top, width - 8, row_h * (len(cells) + 1)))

    if path.suffix.lower() == ".png":
        image = QImage(int(width), int(height), QImage.Format.Format_ARGB32)
        painter = QPainter(image)
        paint(painter)
        painter.end()
        if not image.save(str(path), "PNG"):
            raise InputError(f"{path}: could not write the PNG (is the folder writable?)")
    else:
        gen = QSvgGenerator()
        gen.setFileName(str(path))
        gen.setSize(QSize(int(width), int(height)))
        gen.setViewBox(QRectF(0, 0, width, height))
        gen.setTitle(title or "flakebook table")
        painter = QPainter(gen)
        paint(painter)
        painter.end()
    return path
