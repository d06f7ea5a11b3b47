"""The chip map drawn with QPainter: one drawing for the report, the window's view and exports.

:func:`paint_chip_map` draws a :class:`flakebook.report.chipmap.ChipMap` into any paint device
(a QImage, a QSvgGenerator, a widget) and returns the :class:`MapFrame` that maps chip um to the
device's pixels, so the window can find the flake under the mouse with the same numbers the
picture was drawn with. Drawn: the chip's outline (the project records no chip size, so it is
the placed images' extent plus a margin, and the picture says so), each placed image's frame
and name, every flake's outline filled with its layer number's colour (the shared Okabe-Ito
palette, :mod:`flakebook.render.palette`) and its label, the holes found in the images, axes
in um with the origin stated, a legend, and what could not be placed.

Coordinates are the images' stage coordinates: x to the right, y down (as on the camera's
picture), origin at the stage's zero. A Qt application must exist
(:func:`flakebook.render.export.ensure_app`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from PySide6.QtCore import QPointF, QRectF, QSize, Qt
from PySide6.QtGui import (
    QColor,
    QFont,
    QFontMetricsF,
    QImage,
    QPainter,
    QPainterPath,
    QPen,
    QPolygonF,
)

from flakebook.errors import InputError
from flakebook.render.palette import HOLE_COLOUR, layer_hex, legend_entries
from flakebook.render.plots import image_png, nice_ticks
from flakebook.report.chipmap import ChipMap, PlacedFlake, PlacedHole
from flakebook.wording import layers_text, number_text

#: The chip's outline: the placed images' extent widened by this share of its larger side.
MARGIN_SHARE = 0.04
#: What the axes are (said on the picture and in the report).
COORDINATES = (
    "chip coordinates in µm: the images' stage positions, origin at the stage's zero, "
    "x to the right, y downward (as in the micrographs)"
)
OUTLINE_NOTE = (
    "chip outline: the project records no chip size, so the outline drawn is the extent of "
    "the placed images plus a {margin} µm margin"
)

_INK = QColor("#222222")
_GREY = QColor("#6B6B6B")
_CHIP = QColor("#F3F1EC")
_FRAME = QColor("#8C8C8C")
_SELECT = QColor("#000000")


@dataclass(frozen=True)
class MapFrame:
    """Where the chip sits on the drawing: chip um (x0, y0) at pixel (left, top), ``scale``
    pixels per um, the same on both axes; ``plot`` is the drawn part in pixels, ``area`` the
    room the map was given (the plot fills it when zoomed in)."""

    x0_um: float
    y0_um: float
    left: float
    top: float
    scale: float
    plot: QRectF
    area: QRectF | None = None
    zoom: float = 1.0

    def to_px(self, x_um, y_um) -> tuple[float, float]:
        return self.left + (x_um - self.x0_um) * self.scale, self.top + (
            y_um - self.y0_um
        ) * self.scale

    def to_um(self, x_px: float, y_px: float) -> tuple[float, float]:
        return (
            self.x0_um + (x_px - self.left) / self.scale,
            self.y0_um + (y_px - self.top) / self.scale,
        )


def chip_rect(m: ChipMap) -> tuple[float, float, float, float] | None:
    """The outline drawn for the chip (x0, y0, x1, y1 in um): the map's extent plus a margin."""
    b = m.bounds_um()
    if b is None:
        return None
    x0, y0, x1, y1 = b
    margin = margin_um(m)
    return x0 - margin, y0 - margin, x1 + margin, y1 + margin


def margin_um(m: ChipMap) -> float:
    """The margin around the placed images (um), a round number near 4% of the larger side."""
    b = m.bounds_um()
    if b is None:
        return 0.0
    side = max(b[2] - b[0], b[3] - b[1], 1.0)
    raw = MARGIN_SHARE * side
    e = 10 ** math.floor(math.log10(raw))
    return float(next(k * e for k in (1, 2, 5, 10) if k * e >= raw))


def outline_note(m: ChipMap) -> str:
    return OUTLINE_NOTE.format(margin=number_text(margin_um(m), 3))


def flake_text(f: PlacedFlake, max_layers: int = 15) -> str:
    """A flake's label on the map: ``K7N-01 1L`` (or ``K7N-01 N?`` without an assignment)."""
    return f"{f.label} {layers_text(f.layers, max_layers) if f.layers is not None else 'N?'}"


def unplaced_text(m: ChipMap) -> str:
    """What is not on the map, in words."""
    if not m.unplaced_images and not m.unplaced_flakes:
        if not m.images:
            return "No image of this sample is in the project yet: there is nothing to place."
        return "Every image of this sample has a stage position: nothing is left off the map."
    parts = []
    if m.unplaced_images:
        parts.append(
            f"{len(m.unplaced_images)} image{'s' if len(m.unplaced_images) != 1 else ''} "
            f"without a stage position or pixel size ({', '.join(m.unplaced_images)})"
        )
    if m.unplaced_flakes:
        n = len(m.unplaced_flakes)
        parts.append(
            f"{n} flake{'s' if n != 1 else ''} seen only in such images "
            f"({', '.join(m.unplaced_flakes)})"
        )
    return "Not on the map: " + "; ".join(parts) + "."


def pattern_text(pattern) -> str:
    """The sample's hole pattern in words, or ''."""
    if pattern is None:
        return ""
    text = f"{number_text(pattern.diameter_um, 3)} µm holes"
    if pattern.pitch_um:
        text += f", {pattern.lattice} lattice of {number_text(pattern.pitch_um, 3)} µm pitch"
    return text + f", {pattern.bottom} bottom"


def distinct_holes(m: ChipMap) -> list[PlacedHole]:
    """The holes once each: a hole found in several overlapping images (an overview and a
    close-up) is drawn from the image with the finest frame, the others within half a radius
    of it left out."""
    width = {im.image_id: im.width_um for im in m.images}
    holes = sorted(m.holes, key=lambda h: (width.get(h.image_id, math.inf), h.hole_id))
    kept: list[PlacedHole] = []
    cells: dict[tuple[int, int], list[PlacedHole]] = {}
    size = max((h.radius_um for h in holes), default=1.0) or 1.0
    for h in holes:
        key = (int(math.floor(h.x_um / size)), int(math.floor(h.y_um / size)))
        near = (
            other
            for dx in (-1, 0, 1)
            for dy in (-1, 0, 1)
            for other in cells.get((key[0] + dx, key[1] + dy), ())
        )
        if any(
            math.hypot(o.x_um - h.x_um, o.y_um - h.y_um) < 0.5 * max(o.radius_um, h.radius_um)
            for o in near
        ):
            continue
        kept.append(h)
        cells.setdefault(key, []).append(h)
    return kept


def _font(px: float, bold: bool = False) -> QFont:
    f = QFont("sans-serif")
    f.setPixelSize(max(1, round(px)))
    f.setBold(bold)
    return f


def _wrap(text: str, fm: QFontMetricsF, width: float) -> list[str]:
    lines: list[str] = []
    for para in text.split("\n"):
        line = ""
        for word in para.split(" "):
            trial = f"{line} {word}".strip()
            if line and fm.horizontalAdvance(trial) > width:
                lines.append(line)
                line = word
            else:
                line = trial
        lines.append(line)
    return lines


@dataclass(frozen=True)
class _Layout:
    title_h: float
    left: float
    right: float
    bottom: float
    notes: list[str]


_LEGEND_W = 150.0
_AXIS_L = 58.0
_NOTE_PX = 11.0


def _layout(m: ChipMap, width: float, pattern) -> _Layout:
    fm = QFontMetricsF(_font(_NOTE_PX))
    notes = [COORDINATES + ".", outline_note(m) + ".", unplaced_text(m)]
    lines = [ln for n in notes for ln in _wrap(n, fm, width - 16)]
    return _Layout(
        title_h=30.0,
        left=_AXIS_L,
        right=_LEGEND_W + 14,
        bottom=40.0 + len(lines) * (fm.height() + 1) + 8,
        notes=lines,
    )


def figure_size(m: ChipMap, width_px: int = 900, pattern=None) -> QSize:
    """The size of the standalone figure ``width_px`` wide: the height follows the chip's
    shape (the same scale on both axes)."""
    lay = _layout(m, width_px, pattern)
    rect = chip_rect(m)
    pw = width_px - lay.left - lay.right
    if rect is None:
        ph = 200.0
    else:
        ph = pw * (rect[3] - rect[1]) / max(rect[2] - rect[0], 1e-9)
        ph = min(max(ph, 260.0), 1.4 * width_px)
    return QSize(int(width_px), int(math.ceil(lay.title_h + 8 + ph + lay.bottom)))


def paint_chip_map(
    p: QPainter,
    m: ChipMap,
    width: float,
    height: float,
    *,
    pattern=None,
    selected: int | None = None,
    max_layers: int = 15,
    title: str | None = None,
    zoom: float = 1.0,
    centre_um: tuple[float, float] | None = None,
) -> MapFrame | None:
    """Draw the map of ``m`` on ``p`` in a ``width`` x ``height`` pixel area; returns the frame
    (um to pixels) or None for a map with nothing placed. ``pattern`` is the sample's hole
    pattern (a HolePattern or None) for the legend, ``selected`` a flake id drawn marked.
    ``zoom`` above 1 magnifies the whole-chip view that many times about ``centre_um``
    (default: the chip's centre), the plot then filling the room it has."""
    p.save()
    try:
        return _paint(p, m, width, height, pattern, selected, max_layers, title, zoom,
                      centre_um)  # fmt: skip
    finally:
        p.restore()


def _paint(p, m, width, height, pattern, selected, max_layers, title, zoom, centre_um):
    p.setRenderHint(QPainter.RenderHint.Antialiasing)
    p.setRenderHint(QPainter.RenderHint.TextAntialiasing)
    p.fillRect(QRectF(0, 0, width, height), QColor("white"))
    lay = _layout(m, width, pattern)
    p.setPen(_INK)
    p.setFont(_font(14, bold=True))
    p.drawText(
        QRectF(8, 4, width - 16, 24),
        Qt.AlignmentFlag.AlignLeft | Qt.AlignmentFlag.AlignVCenter,
        title if title is not None else f"Chip map of {m.sample}",
    )
    area = QRectF(
        lay.left,
        lay.title_h + 8,
        max(width - lay.left - lay.right, 10.0),
        max(height - lay.title_h - 8 - lay.bottom, 10.0),
    )
    _legend(p, QRectF(area.right() + 14, area.top(), _LEGEND_W, area.height()), m, pattern,
            selected is not None)  # fmt: skip
    rect = chip_rect(m)
    if rect is None:
        _notes(p, lay, area.bottom() - 30)
        p.setFont(_font(13))
        p.setPen(_INK)
        p.drawText(area, Qt.AlignmentFlag.AlignCenter, "Nothing of this sample can be placed.")
        return None
    x0, y0, x1, y1 = rect
    scale = min(area.width() / (x1 - x0), area.height() / (y1 - y0))
    zoom = max(float(zoom), 1.0)
    if zoom > 1.0:
        scale *= zoom
        cx, cy = centre_um if centre_um is not None else ((x0 + x1) / 2, (y0 + y1) / 2)
        vx0, vy0 = cx - area.width() / (2 * scale), cy - area.height() / (2 * scale)
        plot = QRectF(area)
        frame = MapFrame(vx0, vy0, area.left(), area.top(), scale, plot, area, zoom)
        shown = (vx0, vy0, vx0 + area.width() / scale, vy0 + area.height() / scale)
    else:
        left = area.left() + (area.width() - scale * (x1 - x0)) / 2
        top = area.top()
        plot = QRectF(left, top, scale * (x1 - x0), scale * (y1 - y0))
        frame = MapFrame(x0, y0, left, top, scale, plot, area, 1.0)
        shown = rect
    _axes(p, frame, shown)
    _notes(p, lay, plot.bottom() + 40)
    p.setClipRect(plot.adjusted(-1, -1, 1, 1))
    # the chip
    p.setPen(QPen(_INK, 1.4))
    p.setBrush(_CHIP)
    p.drawRect(QRectF(QPointF(*frame.to_px(x0, y0)), QPointF(*frame.to_px(x1, y1))))
    # origin of the coordinates, when on the chip
    ox, oy = frame.to_px(0.0, 0.0)
    if plot.contains(QPointF(ox, oy)):
        p.setPen(QPen(_GREY, 1.0))
        p.drawLine(QPointF(ox - 7, oy), QPointF(ox + 7, oy))
        p.drawLine(QPointF(ox, oy - 7), QPointF(ox, oy + 7))
        p.setFont(_font(10))
        p.drawText(QPointF(ox + 4, oy + 14), "0, 0")
    # image frames, largest first (an overview under its close-ups), names inside the corner
    p.setFont(_font(10))
    names: list[QRectF] = []
    for im in sorted(m.images, key=lambda im: -im.width_um):
        fx0, fy0 = frame.to_px(im.x0_um, im.y0_um)
        fx1, fy1 = frame.to_px(im.x1_um, im.y1_um)
        r = QRectF(QPointF(fx0, fy0), QPointF(fx1, fy1))
        p.setPen(QPen(_FRAME, 1.0, Qt.PenStyle.DashLine))
        p.setBrush(Qt.BrushStyle.NoBrush)
        p.drawRect(r)
        p.setPen(_GREY)
        name = im.name.rsplit(".", 1)[0]
        if r.width() > 40:
            nfm = QFontMetricsF(p.font())
            text = nfm.elidedText(name, Qt.TextElideMode.ElideRight, r.width() - 6)
            p.drawText(
                r.adjusted(3, 2, -3, -2),
                Qt.AlignmentFlag.AlignLeft | Qt.AlignmentFlag.AlignTop,
                text,
            )
            if im.width_um < max(i.width_um for i in m.images):  # the overview's is aside
                names.append(QRectF(r.left() + 3, r.top() + 2, nfm.horizontalAdvance(text),
                                    nfm.height()))  # fmt: skip
    # flakes, filled by layer number; their holes drawn over them so covered holes show
    for f in m.flakes:
        poly = _poly(frame, f.outline_um)
        fill = QColor(layer_hex(f.layers))
        fill.setAlpha(225)
        p.setBrush(fill)
        p.setPen(QPen(_INK, 1.0))
        p.drawPolygon(poly)
    p.setBrush(Qt.BrushStyle.NoBrush)
    hole_pen = QPen(QColor(HOLE_COLOUR), 0.9)
    p.setPen(hole_pen)
    for h in distinct_holes(m):
        hx, hy = frame.to_px(h.x_um, h.y_um)
        r = max(h.radius_um * scale, 1.2)
        p.drawEllipse(QPointF(hx, hy), r, r)
    # the selected flake: a heavy outline with a white edge, so it reads on any fill
    for f in m.flakes:
        if f.flake_id == selected:
            poly = _poly(frame, f.outline_um)
            p.setPen(QPen(QColor("white"), 6.0))
            p.drawPolygon(poly)
            p.setPen(QPen(_SELECT, 3.0))
            p.drawPolygon(poly)
    _labels(p, frame, m, selected, max_layers, names)
    p.setClipping(False)
    return frame


def _poly(frame: MapFrame, outline_um: np.ndarray) -> QPolygonF:
    return QPolygonF([QPointF(*frame.to_px(x, y)) for x, y in outline_um])


def _axes(p: QPainter, frame: MapFrame, rect) -> None:
    x0, y0, x1, y1 = rect
    plot = frame.plot
    p.setFont(_font(11))
    fm = QFontMetricsF(p.font())
    ink = QPen(_INK, 1.0)
    target_x = max(2, int(plot.width() / 90))
    target_y = max(2, int(plot.height() / 60))
    for v in nice_ticks(x0, x1, target_x):
        xx, _ = frame.to_px(v, y0)
        p.setPen(ink)
        p.drawLine(QPointF(xx, plot.bottom()), QPointF(xx, plot.bottom() + 4))
        text = f"{v:g}"
        p.drawText(QPointF(xx - fm.horizontalAdvance(text) / 2, plot.bottom() + 5 + fm.ascent()),
                   text)  # fmt: skip
    for v in nice_ticks(y0, y1, target_y):
        _, yy = frame.to_px(x0, v)
        p.setPen(ink)
        p.drawLine(QPointF(plot.left() - 4, yy), QPointF(plot.left(), yy))
        text = f"{v:g}"
        p.drawText(QPointF(plot.left() - 6 - fm.horizontalAdvance(text), yy + fm.ascent() / 2.5),
                   text)  # fmt: skip
    p.setPen(ink)
    p.drawText(
        QRectF(plot.left(), plot.bottom() + 6 + fm.height(), plot.width(), fm.height() + 2),
        Qt.AlignmentFlag.AlignHCenter,
        "x (µm) →",
    )
    p.save()
    p.translate(12, plot.top() + plot.height() / 2)
    p.rotate(-90)
    p.drawText(QRectF(-plot.height() / 2, -8, plot.height(), 18), Qt.AlignmentFlag.AlignHCenter,
               "← y (µm), increasing downward")  # fmt: skip
    p.restore()


def _notes(p: QPainter, lay: _Layout, top: float) -> None:
    """The notes under the map: what the axes are, where the outline comes from, what is
    unplaced."""
    note_font = _font(_NOTE_PX)
    fm = QFontMetricsF(note_font)
    p.setFont(note_font)
    p.setPen(_GREY)
    y = top
    for line in lay.notes:
        p.drawText(QPointF(8, y + fm.ascent()), line)
        y += fm.height() + 1


def _labels(p: QPainter, frame: MapFrame, m: ChipMap, selected, max_layers,
            avoid: Sequence[QRectF] = ()) -> None:  # fmt: skip
    """Each flake's label beside its outline, on a white ground, where it overlaps no other
    label, flake or image name (right, left, below, above, in that order of trial)."""
    font = _font(12, bold=True)
    p.setFont(font)
    fm = QFontMetricsF(font)
    boxes = []
    for f in m.flakes:
        pts = np.array([frame.to_px(x, y) for x, y in f.outline_um])
        boxes.append(QRectF(QPointF(*pts.min(axis=0)), QPointF(*pts.max(axis=0))))
    placed: list[QRectF] = []
    for f, box in zip(m.flakes, boxes):
        text = flake_text(f, max_layers)
        w, h = fm.horizontalAdvance(text) + 6, fm.height() + 2
        cx, cy = box.center().x(), box.center().y()
        trials = [
            QRectF(box.right() + 4, cy - h / 2, w, h),
            QRectF(box.left() - 4 - w, cy - h / 2, w, h),
            QRectF(cx - w / 2, box.bottom() + 3, w, h),
            QRectF(cx - w / 2, box.top() - 3 - h, w, h),
        ]
        others = [b for b, g in zip(boxes, m.flakes) if g is not f] + placed + list(avoid)

        def cost(r: QRectF, others=others) -> float:
            inside = 0.0 if frame.plot.contains(r) else 1000.0
            return inside + sum(_overlap(r, o) for o in others)

        r = min(trials, key=cost)
        placed.append(r)
        ground = QColor("white")
        ground.setAlpha(240)
        p.setPen(QPen(QColor("#BDBDBD"), 0.8))  # a tag's edge: a hole ring it covers is cut
        p.setBrush(ground)
        p.drawRoundedRect(r, 3, 3)
        p.setPen(QPen(_INK, 1.0) if f.flake_id != selected else QPen(_SELECT, 1.0))
        if f.flake_id == selected:
            p.setBrush(Qt.BrushStyle.NoBrush)
            p.drawRoundedRect(r, 3, 3)
        p.drawText(r, Qt.AlignmentFlag.AlignCenter, text)
    p.setBrush(Qt.BrushStyle.NoBrush)


def _overlap(a: QRectF, b: QRectF) -> float:
    i = a.intersected(b)
    return 0.0 if i.isEmpty() else i.width() * i.height()


def _legend(p: QPainter, r: QRectF, m: ChipMap, pattern, marked: bool = False) -> None:
    p.setFont(_font(12, bold=True))
    p.setPen(_INK)
    y = r.top() + 2
    p.drawText(QPointF(r.left(), y + 12), "Layer number N")
    y += 22
    p.setFont(_font(11))
    used = {f.layers for f in m.flakes}
    for label, colour in legend_entries():
        p.setPen(QPen(_INK, 1.0))
        p.setBrush(QColor(colour))
        p.drawRect(QRectF(r.left(), y, 16, 12))
        p.setPen(_INK if _used(label, used) else _GREY)
        p.drawText(QPointF(r.left() + 24, y + 11), label)
        y += 18
    y += 8
    p.setBrush(Qt.BrushStyle.NoBrush)
    p.setPen(QPen(QColor(HOLE_COLOUR), 1.0))
    p.drawEllipse(QPointF(r.left() + 8, y + 6), 5, 5)
    p.setPen(_INK)
    holes = len(distinct_holes(m))
    p.drawText(QPointF(r.left() + 24, y + 10), f"hole ({holes or 'none'} found)")
    y += 18
    text = pattern_text(pattern)
    if text:
        fm = QFontMetricsF(p.font())
        p.setPen(_GREY)
        for line in _wrap("pattern: " + text, fm, r.width() - 4):
            p.drawText(QPointF(r.left(), y + 10), line)
            y += fm.height()
        y += 4
    p.setPen(QPen(_FRAME, 1.0, Qt.PenStyle.DashLine))
    p.drawRect(QRectF(r.left(), y, 16, 12))
    p.setPen(_INK)
    p.drawText(QPointF(r.left() + 24, y + 11), "image frame")
    y += 18
    if not marked:
        return
    p.setPen(QPen(_SELECT, 3.0))
    p.drawLine(QPointF(r.left(), y + 6), QPointF(r.left() + 16, y + 6))
    p.setPen(_INK)
    p.drawText(QPointF(r.left() + 24, y + 11), "selected flake")


def _used(label: str, used: set) -> bool:
    if label == "not assigned":
        return None in used
    n = int(label.rstrip("L+"))
    if label.endswith("+"):
        return any(u is not None and u >= n for u in used)
    return n in used


# ---- the standalone figure ----------------------------------------------------------------


def chip_map_image(m: ChipMap, *, width_px: int = 900, pattern=None, selected=None,
                   max_layers: int = 15) -> QImage:  # fmt: skip
    """The map as a QImage ``width_px`` wide (white ground)."""
    size = figure_size(m, width_px, pattern)
    img = QImage(size, QImage.Format.Format_RGB32)
    img.fill(QColor("white"))
    p = QPainter(img)
    try:
        paint_chip_map(p, m, size.width(), size.height(), pattern=pattern, selected=selected,
                       max_layers=max_layers)  # fmt: skip
    finally:
        p.end()
    return img


def chip_map_png(m: ChipMap, **kw) -> bytes:
    """The map as PNG bytes (see :func:`chip_map_image`)."""
    return image_png(chip_map_image(m, **kw))


def write_chip_map(
    m: ChipMap,
    path: str | Path,
    *,
    width_px: int = 900,
    pattern=None,
    selected=None,
    max_layers: int = 15,
) -> Path:
    """Write the map to ``path``: PNG or SVG (Qt's QSvgGenerator, labels kept as text)."""
    from flakebook.render.export import _check_target

    path = _check_target(path)
    if path.suffix.lower() == ".png":
        img = chip_map_image(m, width_px=width_px, pattern=pattern, selected=selected,
                             max_layers=max_layers)  # fmt: skip
        if not img.save(str(path), "PNG"):
            raise InputError(f"{path}: could not write the PNG (is the folder writable?)")
        return path
    from PySide6.QtSvg import QSvgGenerator

    size = figure_size(m, width_px, pattern)
    gen = QSvgGenerator()
    gen.setFileName(str(path))
    gen.setSize(size)
    gen.setViewBox(QRectF(0, 0, size.width(), size.height()))
    gen.setTitle(f"Chip map of {m.sample}")
    gen.setDescription(COORDINATES)
    p = QPainter(gen)
    if not p.isActive():
        raise InputError(f"{path}: could not write the SVG (is the folder writable?)")
    try:
        paint_chip_map(p, m, size.width(), size.height(), pattern=pattern, selected=selected,
                       max_layers=max_layers)  # fmt: skip
    finally:
        p.end()
    return path


def flake_at(frame: MapFrame, m: ChipMap, x_px: float, y_px: float, tolerance_px: float = 5.0):
    """The flake drawn under pixel (x, y): inside its outline, or within ``tolerance_px`` of
    it (the smallest such flake first, so one lying on a larger one can be picked)."""
    pt = QPointF(x_px, y_px)
    hits = []
    for f in m.flakes:
        poly = _poly(frame, f.outline_um)
        path = QPainterPath()
        path.addPolygon(poly)
        path.closeSubpath()
        if path.contains(pt):
            hits.append((0.0, _area(f.outline_um), f))
            continue
        d = _distance_to_outline(np.array([[q.x(), q.y()] for q in poly]), x_px, y_px)
        if d <= tolerance_px:
            hits.append((d, _area(f.outline_um), f))
    if not hits:
        return None
    return min(hits, key=lambda t: (t[0], t[1]))[2]


def _area(poly: np.ndarray) -> float:
    x, y = poly[:, 0], poly[:, 1]
    return 0.5 * abs(float(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1))))


def _distance_to_outline(pts: np.ndarray, x: float, y: float) -> float:
    a, b = pts, np.roll(pts, -1, axis=0)
    ab = b - a
    t = np.clip(((x - a[:, 0]) * ab[:, 0] + (y - a[:, 1]) * ab[:, 1])
                / np.maximum((ab**2).sum(axis=1), 1e-12), 0, 1)  # fmt: skip
    q = a + ab * t[:, None]
    return float(np.min(np.hypot(q[:, 0] - x, q[:, 1] - y)))


def position_rows(m: ChipMap, max_layers: int = 15) -> list[list[str]]:
    """One row per placed flake: label, N, centre x and y (um, 1 decimal), the image it is
    drawn from (to drive the stage to, or look up)."""
    names = {im.image_id: im.name for im in m.images}
    return [
        [f.label, layers_text(f.layers, max_layers) if f.layers is not None else "-",
         f"{f.centroid_um[0]:.1f}", f"{f.centroid_um[1]:.1f}", names.get(f.image_id, "")]
        for f in sorted(m.flakes, key=lambda f: f.label)
    ]  # fmt: skip


POSITION_HEADER: Sequence[str] = ("Flake", "N", "centre x (µm)", "centre y (µm)", "drawn from")
