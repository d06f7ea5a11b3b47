"""Small offscreen plots drawn with QPainter: axes with round ticks, lines, points with error
bars, and a legend; PNG bytes out. The report's figures (contrast versus N, spectra with their
fits, omega(T) and omega(P), kappa versus N) all go through :class:`Plot`, so the window's
exports can use the same path.

A Qt application must exist (:func:`flakebook.render.export.ensure_app`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from PySide6.QtCore import QBuffer, QByteArray, QIODevice, QPointF, QRectF, Qt
from PySide6.QtGui import QColor, QFont, QFontMetrics, QImage, QPainter, QPainterPath, QPen

#: Line colours for curves that are not layer numbers (Okabe-Ito order, see render/palette.py).
SERIES_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000")


def nice_ticks(lo: float, hi: float, target: int = 5) -> list[float]:
    """Round tick values (1, 2 or 5 times a power of ten apart) covering ``lo``..``hi``."""
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return [lo] if math.isfinite(lo) else []
    raw = (hi - lo) / max(target, 1)
    e = math.floor(math.log10(raw))
    step = next(m * 10**e for m in (1, 2, 5, 10) if m * 10**e >= raw)
    start = math.ceil(lo / step - 1e-9) * step
    out = []
    v = start
    while v <= hi + 1e-9 * step:
        out.append(round(v, 12))
        v += step
    return out


def _tick_text(v: float) -> str:
    return f"{v:g}"


@dataclass
class _Series:
    x: np.ndarray
    y: np.ndarray
    colour: str
    label: str
    style: str  # "line", "points", "dash"
    yerr: np.ndarray | None = None
    ylo: np.ndarray | None = None
    yhi: np.ndarray | None = None
    width: float = 1.6


@dataclass
class Plot:
    """A plot in the making: add lines and points, then :meth:`png` (or :meth:`image`)."""

    title: str = ""
    xlabel: str = ""
    ylabel: str = ""
    width_px: int = 640
    height_px: int = 400
    log_x: bool = False
    x_ticks: Sequence[float] | None = None
    x_tick_labels: Sequence[str] | None = None
    note: str = ""
    series: list[_Series] = field(default_factory=list)

    def line(self, x, y, colour: str | None = None, label: str = "", *, dash=False, width=1.6):
        """A curve through (x, y)."""
        self.series.append(
            _Series(
                _arr(x),
                _arr(y),
                colour or self._next(),
                label,
                "dash" if dash else "line",
                width=width,
            )  # fmt: skip
        )

    def points(self, x, y, colour: str | None = None, label: str = "", *, yerr=None,
               ylo=None, yhi=None) -> None:  # fmt: skip
        """Markers at (x, y) with symmetric ``yerr`` or an interval ``ylo``..``yhi``."""
        self.series.append(
            _Series(
                _arr(x),
                _arr(y),
                colour or self._next(),
                label,
                "points",
                yerr=None if yerr is None else _arr(yerr),
                ylo=None if ylo is None else _arr(ylo),
                yhi=None if yhi is None else _arr(yhi),
            )  # fmt: skip
        )

    def _next(self) -> str:
        return SERIES_COLOURS[len(self.series) % len(SERIES_COLOURS)]

    # ---- drawing ------------------------------------------------------------------------------

    def _ranges(self) -> tuple[float, float, float, float]:
        xs, ys = [], []
        for s in self.series:
            ok = np.isfinite(s.x) & np.isfinite(s.y)
            if self.log_x:
                ok &= s.x > 0
            xs.append(s.x[ok])
            ys.append(s.y[ok])
            for lo, hi in ((s.ylo, s.yhi), (None, None)):
                if lo is not None and hi is not None:
                    ys.append(lo[ok & np.isfinite(lo)])
                    ys.append(hi[ok & np.isfinite(hi)])
            if s.yerr is not None:
                e = np.where(np.isfinite(s.yerr), s.yerr, 0)
                ys.append((s.y + e)[ok])
                ys.append((s.y - e)[ok])
        x = np.concatenate(xs) if xs else np.array([])
        y = np.concatenate(ys) if ys else np.array([])
        if x.size == 0 or y.size == 0:
            return 0.0, 1.0, 0.0, 1.0
        x0, x1 = float(x.min()), float(x.max())
        y0, y1 = float(y.min()), float(y.max())
        if self.log_x:
            x0, x1 = math.log10(x0), math.log10(x1)
        if x1 <= x0:
            x0, x1 = x0 - 0.5, x1 + 0.5
        if y1 <= y0:
            pad = abs(y0) * 0.1 or 1.0
            y0, y1 = y0 - pad, y1 + pad
        px, py = 0.04 * (x1 - x0), 0.08 * (y1 - y0)
        return x0 - px, x1 + px, y0 - py, y1 + py

    def image(self) -> QImage:
        """The plot as a QImage (white background)."""
        w, h = self.width_px, self.height_px
        img = QImage(w, h, QImage.Format.Format_RGB32)
        img.fill(QColor("white"))
        p = QPainter(img)
        try:
            self._paint(p, w, h)
        finally:
            p.end()
        return img

    def png(self) -> bytes:
        """The plot as PNG bytes."""
        return image_png(self.image())

    def _paint(self, p: QPainter, w: int, h: int) -> None:
        p.setRenderHint(QPainter.RenderHint.Antialiasing)
        font = QFont("sans-serif")
        font.setPixelSize(12)
        bold = QFont(font)
        bold.setBold(True)
        bold.setPixelSize(13)
        fm = QFontMetrics(font)
        left, right = 70, 16
        top = 30 if self.title else 12
        bottom = 48 + (16 if self.note else 0)
        pw, ph = w - left - right, h - top - bottom
        x0, x1, y0, y1 = self._ranges()

        def X(v):  # noqa: N802 - a coordinate map
            v = np.asarray(v, float)
            if self.log_x:
                v = np.log10(np.where(v > 0, v, np.nan))
            return left + (v - x0) / (x1 - x0) * pw

        def Y(v):  # noqa: N802
            return top + ph - (np.asarray(v, float) - y0) / (y1 - y0) * ph

        if self.title:
            p.setFont(bold)
            p.setPen(QColor("#111111"))
            p.drawText(QRectF(left, 4, pw, 22), Qt.AlignmentFlag.AlignLeft, self.title)
        p.setFont(font)
        p.setPen(QPen(QColor("#222222"), 1))
        p.drawRect(QRectF(left, top, pw, ph))
        # ticks
        if self.x_ticks is not None:
            xt = [float(v) for v in self.x_ticks]
            labels = list(self.x_tick_labels or [_tick_text(v) for v in xt])
        elif self.log_x:
            xt = [10**e * m for e in range(math.floor(x0), math.ceil(x1) + 1) for m in (1, 2, 5)]
            xt = [v for v in xt if x0 <= math.log10(v) <= x1]
            labels = [_tick_text(v) for v in xt]
        else:
            xt = nice_ticks(x0, x1)
            labels = [_tick_text(v) for v in xt]
        for v, text in zip(xt, labels):
            xx = float(X(v))
            if not (left - 0.5 <= xx <= left + pw + 0.5):
                continue
            p.setPen(QPen(QColor("#E4E4E4"), 1))
            p.drawLine(QPointF(xx, top), QPointF(xx, top + ph))
            p.setPen(QPen(QColor("#222222"), 1))
            p.drawLine(QPointF(xx, top + ph), QPointF(xx, top + ph + 4))
            p.drawText(QRectF(xx - 40, top + ph + 5, 80, 16), Qt.AlignmentFlag.AlignHCenter, text)
        for v in nice_ticks(y0, y1):
            yy = float(Y(v))
            p.setPen(QPen(QColor("#E4E4E4"), 1))
            p.drawLine(QPointF(left, yy), QPointF(left + pw, yy))
            p.setPen(QPen(QColor("#222222"), 1))
            p.drawLine(QPointF(left - 4, yy), QPointF(left, yy))
            p.drawText(QRectF(0, yy - 8, left - 7, 16), Qt.AlignmentFlag.AlignRight, _tick_text(v))
        p.drawText(QRectF(left, top + ph + 22, pw, 18), Qt.AlignmentFlag.AlignHCenter, self.xlabel)
        if self.note:
            small = QFont(font)
            small.setPixelSize(10)
            p.setFont(small)
            p.setPen(QColor("#555555"))
            p.drawText(QRectF(4, h - 16, w - 8, 14), Qt.AlignmentFlag.AlignLeft, self.note)
            p.setFont(font)
            p.setPen(QColor("#222222"))
        p.save()
        p.translate(14, top + ph / 2)
        p.rotate(-90)
        p.drawText(QRectF(-ph / 2, -8, ph, 18), Qt.AlignmentFlag.AlignHCenter, self.ylabel)
        p.restore()
        # data
        p.setClipRect(QRectF(left, top, pw, ph))
        for s in self.series:
            xs, ys = X(s.x), Y(s.y)
            colour = QColor(s.colour)
            if s.style in ("line", "dash"):
                pen = QPen(colour, s.width)
                if s.style == "dash":
                    pen.setStyle(Qt.PenStyle.DashLine)
                p.setPen(pen)
                path = QPainterPath()
                started = False
                for xx, yy in zip(xs, ys):
                    if not (math.isfinite(xx) and math.isfinite(yy)):
                        started = False
                        continue
                    if started:
                        path.lineTo(xx, yy)
                    else:
                        path.moveTo(xx, yy)
                        started = True
                p.drawPath(path)
                continue
            p.setPen(QPen(colour, 1.3))
            for i, (xx, yy) in enumerate(zip(xs, ys)):
                if not (math.isfinite(xx) and math.isfinite(yy)):
                    continue
                lo = hi = None
                if s.yerr is not None and math.isfinite(s.yerr[i]):
                    lo, hi = s.y[i] - s.yerr[i], s.y[i] + s.yerr[i]
                elif s.ylo is not None and s.yhi is not None:
                    lo, hi = s.ylo[i], s.yhi[i]
                if lo is not None and math.isfinite(lo) and math.isfinite(hi):
                    p.drawLine(QPointF(xx, float(Y(lo))), QPointF(xx, float(Y(hi))))
                    p.drawLine(QPointF(xx - 3, float(Y(lo))), QPointF(xx + 3, float(Y(lo))))
                    p.drawLine(QPointF(xx - 3, float(Y(hi))), QPointF(xx + 3, float(Y(hi))))
                p.setBrush(colour)
                p.drawEllipse(QPointF(xx, yy), 3.5, 3.5)
                p.setBrush(Qt.BrushStyle.NoBrush)
        p.setClipping(False)
        # legend
        named = [s for s in self.series if s.label]
        if named:
            lw = max(fm.horizontalAdvance(s.label) for s in named) + 34
            lx, ly = left + pw - lw - 6, top + 6
            p.fillRect(QRectF(lx, ly, lw, 16 * len(named) + 6), QColor(255, 255, 255, 220))
            for i, s in enumerate(named):
                yy = ly + 11 + 16 * i
                p.setPen(QPen(QColor(s.colour), 2))
                if s.style == "points":
                    p.setBrush(QColor(s.colour))
                    p.drawEllipse(QPointF(lx + 13, yy), 3.5, 3.5)
                    p.setBrush(Qt.BrushStyle.NoBrush)
                else:
                    p.drawLine(QPointF(lx + 4, yy), QPointF(lx + 22, yy))
                p.setPen(QColor("#222222"))
                p.drawText(QRectF(lx + 28, yy - 8, lw - 28, 16), Qt.AlignmentFlag.AlignLeft,
                           s.label)  # fmt: skip


def _arr(v) -> np.ndarray:
    return np.asarray(v, dtype=float).ravel()


def image_png(image: QImage) -> bytes:
    """A QImage as PNG bytes."""
    data = QByteArray()
    buf = QBuffer(data)
    buf.open(QIODevice.OpenModeFlag.WriteOnly)
    image.save(buf, "PNG")
    buf.close()
    return bytes(data.data())
