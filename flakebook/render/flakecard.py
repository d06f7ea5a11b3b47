"""A flake card: a crop of a micrograph with the flake's outline, terraces coloured by layer
number, the holes, a scale bar and a caption, drawn offscreen (PNG) for reports and the
catalogue.
"""

from __future__ import annotations

import math
from pathlib import Path

import cv2
import numpy as np
from PySide6.QtCore import QPointF, QRectF, Qt
from PySide6.QtGui import QBrush, QColor, QFont, QImage, QPainter, QPen, QPolygonF

from flakebook.errors import InputError
from flakebook.render.palette import HOLE_COLOUR, HOLE_HALO, HOLE_HALO_ALPHA, layer_hex
from flakebook.store import Appearance, Flake, Image, Project


def nice_length_um(target_um: float) -> float:
    """The largest round scale-bar length (1, 2 or 5 times a power of ten) not above
    ``target_um``; 1 for a value that is not a positive number."""
    if not target_um > 0 or not math.isfinite(target_um):
        return 1.0
    e = math.floor(math.log10(target_um))
    for m in (5.0, 2.0, 1.0):
        if m * 10**e <= target_um:
            return m * 10**e
    return 10**e


def _decode(data: bytes, name: str) -> np.ndarray:
    arr = cv2.imdecode(np.frombuffer(data, np.uint8), cv2.IMREAD_COLOR)
    if arr is None:
        raise InputError(f"{name}: the image cannot be decoded for a flake card")
    return np.ascontiguousarray(arr[:, :, ::-1])  # RGB


def _terrace_layers(project: Project, flake: Flake) -> dict[int, int | None]:
    """The layer number of each terrace: its latest assignment, else the most likely N of its
    evidence combined (flat prior)."""
    from flakebook.evidence import combine

    out: dict[int, int | None] = {}
    for a in project.assignments_of(flake):
        if a.terrace_id is not None:
            out[a.terrace_id] = a.layers
    by_terrace: dict[int, list] = {}
    for e in project.evidence_of(flake):
        if e.terrace_id is not None and e.likelihood is not None:
            by_terrace.setdefault(e.terrace_id, []).append(e.likelihood)
    for tid, lks in by_terrace.items():
        if tid not in out:
            out[tid] = int(combine(lks).layers)
    return out


def flake_card(
    project: Project,
    flake: Flake | str,
    *,
    appearance: Appearance | None = None,
    size_px: int = 360,
    margin: float = 0.35,
) -> QImage:
    """The flake card of ``flake`` (a record or its label) as a QImage of about ``size_px``.

    ``appearance``: which image of the flake (default: the one at the finest pixel size).
    A Qt application must exist (``flakebook.render.export.ensure_app``).
    """
    if isinstance(flake, str):
        flake = project.find_flake(flake)
    apps = project.appearances_of(flake)
    if not apps:
        raise InputError(f"flake {flake.label} has no outline in any image; nothing to draw")
    if appearance is None:
        images = {a.id: project.get(Image, a.image_id) for a in apps}
        appearance = min(apps, key=lambda a: images[a.id].pixel_size_um or math.inf)
    image = project.get(Image, appearance.image_id)
    rgb = _decode(project.image_bytes(image), image.path)
    outline = np.asarray(appearance.outline_px, float)
    x0, y0 = outline.min(axis=0)
    x1, y1 = outline.max(axis=0)
    side = max(x1 - x0, y1 - y0) * (1 + 2 * margin) + 8
    cx, cy = (x0 + x1) / 2, (y0 + y1) / 2
    h, w = rgb.shape[:2]
    left = int(max(0, math.floor(cx - side / 2)))
    top = int(max(0, math.floor(cy - side / 2)))
    right = int(min(w, math.ceil(cx + side / 2)))
    bottom = int(min(h, math.ceil(cy + side / 2)))
    crop = np.ascontiguousarray(rgb[top:bottom, left:right])
    scale = size_px / max(crop.shape[0], crop.shape[1])
    cw, ch = max(1, round(crop.shape[1] * scale)), max(1, round(crop.shape[0] * scale))
    caption_h = 40
    card = QImage(cw, ch + caption_h, QImage.Format.Format_RGB888)
    card.fill(QColor("#202024"))
    qcrop = QImage(crop.data, crop.shape[1], crop.shape[0], 3 * crop.shape[1],
                   QImage.Format.Format_RGB888)  # fmt: skip
    painter = QPainter(card)
    try:
        painter.setRenderHint(QPainter.RenderHint.Antialiasing)
        painter.setRenderHint(QPainter.RenderHint.SmoothPixmapTransform)
        painter.drawImage(QRectF(0, 0, cw, ch), qcrop)

        def to_card(pts: np.ndarray) -> QPolygonF:
            # pixel centres: x_card = (x - left + 0.5) * scale
            return QPolygonF([QPointF((x - left + 0.5) * scale, (y - top + 0.5) * scale)
                              for x, y in pts])  # fmt: skip

        painter.setBrush(Qt.BrushStyle.NoBrush)
        painter.setPen(QPen(QColor("white"), 1.0, Qt.PenStyle.DashLine))
        painter.drawPolygon(to_card(outline))
        layers = _terrace_layers(project, flake)
        shown: list[int] = []
        for terrace in project.terraces_of(flake):
            if terrace.appearance_id != appearance.id or terrace.outline_px is None:
                continue
            n = layers.get(terrace.id)
            if n is not None and n not in shown:
                shown.append(n)
            colour = QColor(layer_hex(n))
            fill = QColor(colour)
            fill.setAlpha(80)
            painter.setPen(QPen(colour, 2.5))
            painter.setBrush(QBrush(fill))
            painter.drawPolygon(to_card(np.asarray(terrace.outline_px, float)))

        # Holes on top, in the hole colour (used for nothing else) on a translucent halo.
        halo = QColor(HOLE_HALO)
        halo.setAlpha(HOLE_HALO_ALPHA)
        painter.setBrush(Qt.BrushStyle.NoBrush)
        for _link, hole in project.holes_covered_by(flake):
            if hole.image_id != image.id:
                continue
            r = hole.radius_px * scale
            c = QPointF(
                (hole.center_x_px - left + 0.5) * scale, (hole.center_y_px - top + 0.5) * scale
            )
            painter.setPen(QPen(halo, 4.0))
            painter.drawEllipse(c, r, r)
            painter.setPen(QPen(QColor(HOLE_COLOUR), 2.0))
            painter.drawEllipse(c, r, r)

        # Scale bar: about a quarter of the crop's width, bottom right.
        if image.pixel_size_um:
            width_um = crop.shape[1] * image.pixel_size_um
            bar_um = nice_length_um(width_um / 4)
            bar_px = bar_um / image.pixel_size_um * scale
            y = ch - 12
            x_end = cw - 12
            painter.setPen(QPen(QColor("white"), 4, Qt.PenStyle.SolidLine, Qt.PenCapStyle.FlatCap))
            painter.drawLine(QPointF(x_end - bar_px, y), QPointF(x_end, y))
            font = QFont()
            font.setPixelSize(13)
            painter.setFont(font)
            label = f"{bar_um:g} µm"
            painter.drawText(QRectF(x_end - bar_px - 40, y - 22, bar_px + 40, 18),
                             Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignBottom, label)  # fmt: skip

        latest = project.latest_assignment(flake)
        if latest is None:
            what = "layer number not assigned"
        elif latest.manual:
            what = f"{latest.layers}L (set by hand)"
        else:
            what = f"{latest.layers}L, P = {latest.probability:.2f}"
        if len(shown) > 1:
            what += "   terraces " + ", ".join(f"{n}L" for n in sorted(shown))
        font = QFont()
        font.setPixelSize(13)
        font.setBold(True)
        painter.setFont(font)
        painter.setPen(QColor("white"))
        painter.drawText(QRectF(8, ch + 2, cw - 16, caption_h - 4),
                         Qt.AlignmentFlag.AlignVCenter | Qt.AlignmentFlag.AlignLeft,
                         f"{flake.label}   {what}")  # fmt: skip
    finally:
        painter.end()
    return card


def save_flake_card(project: Project, flake: Flake | str, path: str | Path, **kw) -> Path:
    """Write a flake card as PNG; returns the path."""
    from flakebook.render.export import ensure_app

    ensure_app()
    path = Path(path)
    if path.suffix.lower() != ".png":
        raise InputError(f"{path.name}: a flake card is a PNG; accepted: a name ending in .png")
    img = flake_card(project, flake, **kw)
    if not img.save(str(path), "PNG"):
        raise InputError(f"{path}: could not write the flake card")
    return path
