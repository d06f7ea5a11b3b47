"""The image canvas: a micrograph on a pyqtgraph view box with its overlays and tools.

Coordinates are image pixels as INTERFACE.md gives them: the origin at the centre of the top-left
pixel, x to the right, y down. The image item is placed so that pixel (col, row) is centred on
(x, y) = (col, row). Overlays are small GraphicsItems on the same view box: flake outlines and
terraces coloured by layer number (Okabe-Ito, see :mod:`flakebook.gui.palette`), holes (movable,
resizable circles), a scale bar, the selection, and the rubber band of the active tool.

The canvas holds no data of the project: it shows what it is given and reports what the user did
through signals; the main window turns those into undoable commands. What a click, a cursor move
or Enter does depends on the active tool, a :class:`~flakebook.gui.tools.base.CanvasTool` of
:mod:`flakebook.gui.tools` (one module per tool, its command beside it).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import cv2
import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QEvent, QPointF, QRectF, Qt, Signal
from PySide6.QtGui import QBrush, QColor, QPainterPath, QPen, QPolygonF
from PySide6.QtWidgets import QGraphicsEllipseItem, QGraphicsPathItem, QLabel

from flakebook.gui import palette
from flakebook.gui.tools import CANVAS_TOOLS
from flakebook.render.flakecard import nice_length_um

pg.setConfigOptions(imageAxisOrder="row-major", antialias=False)

#: The canvas's tools by name, in toolbar order (their behaviour: flakebook.gui.tools).
TOOLS = tuple(CANVAS_TOOLS)
TOOL_HINTS = {name: tool.hint for name, tool in CANVAS_TOOLS.items()}


@dataclass(frozen=True)
class OutlineShape:
    """What the canvas draws for one appearance of a flake in this image."""

    appearance_id: int
    flake_id: int
    label: str
    outline_px: np.ndarray  # (n, 2) x, y
    layers: int | None = None
    terraces: tuple[tuple[np.ndarray, int | None], ...] = field(default_factory=tuple)


@dataclass(frozen=True)
class HoleShape:
    """A hole on the image: centre and radius in pixels."""

    hole_id: int
    x_px: float
    y_px: float
    radius_px: float
    detected: bool = False


def _polygon(points: np.ndarray) -> QPolygonF:
    return QPolygonF([QPointF(float(x), float(y)) for x, y in np.asarray(points, float)])


def _path(points: np.ndarray) -> QPainterPath:
    path = QPainterPath()
    path.addPolygon(_polygon(points))
    path.closeSubpath()
    return path


class OutlineItem(QGraphicsPathItem):
    """A flake's outline (and its terraces as translucent fills)."""

    def __init__(self, shape: OutlineShape) -> None:
        super().__init__(_path(shape.outline_px))
        self.shape_data = shape
        self.polygon = _polygon(shape.outline_px)
        self.terrace_items: list[QGraphicsPathItem] = []
        for poly, layers in shape.terraces:
            item = QGraphicsPathItem(_path(poly), self)
            colour = palette.layer_colour(layers)
            colour.setAlpha(150)  # strong enough that the legend's colour shows
            item.setBrush(QBrush(colour))
            pen = QPen(palette.layer_colour(layers), 1.0)
            pen.setCosmetic(True)
            pen.setStyle(Qt.PenStyle.DotLine)
            item.setPen(pen)
            self.terrace_items.append(item)
        self.set_selected(False)
        self.setZValue(10)

    def set_selected(self, selected: bool) -> None:
        colour = palette.layer_colour(self.shape_data.layers)
        pen = QPen(colour, 3.5 if selected else 1.8)
        pen.setCosmetic(True)
        if self.shape_data.layers is None:
            pen.setStyle(Qt.PenStyle.DashLine)
        self.setPen(pen)
        fill = QColor(colour)
        fill.setAlpha(0)
        self.setBrush(QBrush(fill) if selected else QBrush(Qt.BrushStyle.NoBrush))
        self.setZValue(12 if selected else 10)

    def contains_image_point(self, x: float, y: float) -> bool:
        return self.polygon.containsPoint(QPointF(x, y), Qt.FillRule.OddEvenFill)

    def area_px(self) -> float:
        pts = np.asarray(self.shape_data.outline_px, float)
        x, y = pts[:, 0], pts[:, 1]
        return 0.5 * abs(float(np.dot(x, np.roll(y, 1)) - np.dot(y, np.roll(x, 1))))


class HoleItem(QGraphicsEllipseItem):
    """A hole as drawn: a ring in the hole colour (used for nothing else) on a translucent
    light halo, readable on bare substrate, on a flake and on a dark or bright hole alike;
    dashed when found by detection or the lattice."""

    def __init__(self, shape: HoleShape) -> None:
        r = float(shape.radius_px)
        super().__init__(shape.x_px - r, shape.y_px - r, 2 * r, 2 * r)
        halo_colour = QColor(palette.HOLE_HALO)
        halo_colour.setAlpha(palette.HOLE_HALO_ALPHA)
        halo = QPen(halo_colour, 4.0)
        halo.setCosmetic(True)
        self.setPen(halo)
        self.inner = QGraphicsEllipseItem(shape.x_px - r, shape.y_px - r, 2 * r, 2 * r, self)
        pen = QPen(QColor(palette.HOLE_COLOUR), 2.0)
        pen.setCosmetic(True)
        if shape.detected:
            pen.setStyle(Qt.PenStyle.DashLine)
        self.inner.setPen(pen)
        self.hole_id = shape.hole_id
        self.shape_data = shape
        self.setZValue(20)

    def centre_radius(self) -> tuple[float, float, float]:
        s = self.shape_data
        return float(s.x_px), float(s.y_px), float(s.radius_px)


class HoleHandle(pg.CircleROI):
    """The hole picked with the select tool: drag to move, the handle to resize, right-click
    or Delete to remove."""

    def __init__(self, hole: HoleItem) -> None:
        x, y, r = hole.centre_radius()
        super().__init__(
            (x - r, y - r),
            (2 * r, 2 * r),
            pen=pg.mkPen("#FFFFFF", width=2),
            hoverPen=pg.mkPen(palette.HOLE_COLOUR, width=2),
            handlePen=pg.mkPen("#FFFFFF"),
            removable=True,
            movable=True,
        )
        self.hole_id = hole.hole_id
        self.setZValue(25)

    def centre_radius(self) -> tuple[float, float, float]:
        pos = self.pos()
        size = self.size()
        r = 0.25 * (abs(size[0]) + abs(size[1]))
        return float(pos[0] + r), float(pos[1] + r), float(r)


class ScaleBarItem(pg.ScaleBar):
    """A scale bar in micrometres that picks a round length for the current zoom."""

    def __init__(self) -> None:
        super().__init__(
            size=100, width=6, brush="#FFFFFF", pen=pg.mkPen("#000000"), offset=(-24, -24)
        )
        self.um_per_px: float | None = None
        self.text.setColor("#FFFFFF")

    def set_scale(self, um_per_px: float | None) -> None:
        self.um_per_px = um_per_px
        self.setVisible(bool(um_per_px))
        self.updateBar()

    def updateBar(self) -> None:  # noqa: N802 - pyqtgraph API
        view = self.parentItem()
        if view is None or not self.um_per_px:
            return
        (x0, x1), _ = view.viewRange()
        width_um = abs(x1 - x0) * self.um_per_px
        self.size = nice_length_um(width_um / 5.0) / self.um_per_px
        length_um = self.size * self.um_per_px
        self.text.setText(format_um(length_um))
        super().updateBar()


def format_um(length_um: float) -> str:
    """A length for a label: um below 1 mm, mm above."""
    if length_um >= 1000:
        return f"{length_um / 1000:g} mm"
    if length_um >= 1:
        return f"{length_um:g} \u00b5m"
    return f"{length_um * 1000:g} nm"


class ImageCanvas(pg.GraphicsView):
    """The micrograph with overlays and the interactive tools.

    Signals (all coordinates in image pixels):
      cursorMoved(x, y), left(): the cursor over the image / off it;
      flakeClicked(flake_id) (-1 for empty substrate);
      holePlaced(x, y, r), holeChanged(hole_id, x, y, r), holeRemoveRequested(hole_id);
      scaleLineDrawn(x0, y0, x1, y1), distanceMeasured(x0, y0, x1, y1);
      outlineDrawn(points), outlineEdited(appearance_id, points) (points: (n, 2) arrays);
      segmentRequested(x, y); toolChanged(name).
    """

    cursorMoved = Signal(float, float)
    cursorLeft = Signal()
    flakeClicked = Signal(int)
    holePlaced = Signal(float, float, float)
    holeChanged = Signal(int, float, float, float)
    holeRemoveRequested = Signal(int)
    scaleLineDrawn = Signal(float, float, float, float)
    distanceMeasured = Signal(float, float, float, float)
    splitLineDrawn = Signal(float, float, float, float)
    outlineDrawn = Signal(object)
    outlineEdited = Signal(int, object)
    segmentRequested = Signal(float, float)
    toolChanged = Signal(str)
    editEnded = Signal()  # an outline being edited was kept or dropped

    def __init__(self, parent=None) -> None:
        super().__init__(parent, background="#202124")
        self.setObjectName("imageCanvas")
        self.view = pg.ViewBox(lockAspect=True, invertY=True, enableMenu=False)
        self.view.setDefaultPadding(0.01)
        self.setCentralItem(self.view)
        self.image_item = pg.ImageItem(autoDownsample=False)
        self.image_item.setZValue(0)
        self.view.addItem(self.image_item)
        self.pyramid: ImagePyramid | None = None
        self._tile: tuple[int, int, int, int, int] | None = None  # level, c0, r0, c1, r1
        self.view.sigRangeChanged.connect(lambda *a: self._update_tile())
        self.view.sigResized.connect(lambda *a: self._update_tile())
        self.scale_bar = ScaleBarItem()
        self.scale_bar.setParentItem(self.view)
        self.scale_bar.setVisible(False)
        self.view.sigRangeChanged.connect(lambda *a: self.scale_bar.updateBar())

        self.outlines: dict[int, OutlineItem] = {}  # by appearance id
        self.holes: dict[int, HoleItem] = {}
        self.selected_flake: int | None = None
        self.image_shape: tuple[int, int] | None = None
        self.default_hole_radius_px = 20.0
        self.tool = "select"
        self._points: list[tuple[float, float]] = []
        self._rubber = pg.PlotCurveItem(
            pen=pg.mkPen("#FFFFFF", width=1.5, style=Qt.PenStyle.DashLine)
        )
        self._rubber.setZValue(30)
        self.view.addItem(self._rubber)
        self._measure_text = pg.TextItem(
            color="#FFFFFF", anchor=(0, 1), fill=pg.mkBrush(0, 0, 0, 160)
        )
        self._measure_text.setZValue(31)
        self._measure_text.setVisible(False)
        self.view.addItem(self._measure_text)
        self._edit_roi: pg.PolyLineROI | None = None
        self._hole_roi: HoleHandle | None = None
        self._edit_appearance: int | None = None
        self.um_per_px: float | None = None

        self.legend = QLabel(self)
        self.legend.setObjectName("layerLegend")
        self.legend.setStyleSheet(
            "QLabel { background: rgba(20,20,20,190); color: #EEE; padding: 4px 6px;"
            " border-radius: 3px; font-size: 11px; }"
        )
        self.legend.move(8, 8)
        self.set_legend([])
        self.empty_label = QLabel(self)
        self.empty_label.setObjectName("canvasEmpty")
        self.empty_label.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self.empty_label.setWordWrap(True)
        self.empty_label.setStyleSheet("QLabel { color: #BBBBBB; font-size: 14px; }")
        self.set_empty_text(
            "No image shown.\n\nOpen a project (Ctrl+O) or create one (Ctrl+N), or drop a "
            ".flakebook file here. Then add micrographs (Ctrl+I) or drop them here."
        )

        scene = self.scene()
        scene.sigMouseMoved.connect(self._on_mouse_moved)
        scene.sigMouseClicked.connect(self._on_mouse_clicked)
        self.viewport().installEventFilter(self)
        self.setAcceptDrops(False)  # the window takes drops

    def set_empty_text(self, text: str) -> None:
        """What the canvas says while no image is shown."""
        self.empty_label.setText(text)
        self._place_empty()

    def _place_empty(self) -> None:
        if getattr(self, "empty_label", None) is None:  # resized while being built
            return
        w, h = self.width(), self.height()
        self.empty_label.setGeometry(int(w * 0.15), int(h * 0.3), int(w * 0.7), int(h * 0.4))
        self.empty_label.setVisible(self.image_shape is None)

    def resizeEvent(self, ev) -> None:  # noqa: N802 - Qt API
        super().resizeEvent(ev)
        self._place_empty()

    # ---- content -------------------------------------------------------------------------
    def set_image(self, display: np.ndarray | None, um_per_px: float | None = None) -> None:
        """Show ``display`` (uint8 (h, w) or (h, w, 3)); None clears the canvas."""
        self.cancel_tool()
        self.clear_overlays()
        if display is None:
            self.image_item.clear()
            self.image_shape = None
            self.set_scale(None)
            self._place_empty()
            return
        h, w = display.shape[:2]
        self.pyramid = ImagePyramid(display)
        self._tile = None
        self.image_shape = (h, w)
        self._place_empty()
        self.view.setLimits(xMin=-0.5 - w, xMax=w * 2, yMin=-0.5 - h, yMax=h * 2)
        self.view.setRange(QRectF(-0.5, -0.5, w, h), padding=0.01)
        self.set_scale(um_per_px)
        self._update_tile()

    def _update_tile(self) -> None:
        """Show the part of the image in view (with a margin) at a level fit for the zoom.

        A 20-megapixel image is never converted whole for each zoom step: the pyramid holds
        area-averaged halvings, and only the visible tile of the chosen level is shown.
        """
        pyr = self.pyramid
        if pyr is None:
            return
        rect = self.view.viewRect()
        screen_w = max(1.0, self.view.width())
        screen_h = max(1.0, self.view.height())
        ds = min(rect.width() / screen_w, rect.height() / screen_h)
        level = pyr.level_for(ds)
        f = 2**level
        arr = pyr.level(level)
        lh, lw = arr.shape[:2]
        # visible rect in level pixel indices, then a margin of half a view on each side
        c0 = (rect.left() + 0.5) / f
        c1 = (rect.right() + 0.5) / f
        r0 = (rect.top() + 0.5) / f
        r1 = (rect.bottom() + 0.5) / f
        cur = self._tile
        if cur is not None and cur[0] == level:
            _, tc0, tr0, tc1, tr1 = cur
            if (
                tc0 <= max(c0, 0)
                and tr0 <= max(r0, 0)
                and tc1 >= min(c1, lw)
                and tr1 >= min(r1, lh)
            ):
                return
        mx = 0.25 * (c1 - c0)
        my = 0.25 * (r1 - r0)
        nc0 = int(max(0, math.floor(c0 - mx)))
        nc1 = int(min(lw, math.ceil(c1 + mx)))
        nr0 = int(max(0, math.floor(r0 - my)))
        nr1 = int(min(lh, math.ceil(r1 + my)))
        if nc1 <= nc0 or nr1 <= nr0:
            return
        tile = np.ascontiguousarray(arr[nr0:nr1, nc0:nc1])
        self.image_item.setImage(tile, autoLevels=False, levels=(0, 255))
        self.image_item.setRect(
            QRectF(nc0 * f - 0.5, nr0 * f - 0.5, (nc1 - nc0) * f, (nr1 - nr0) * f)
        )
        self._tile = (level, nc0, nr0, nc1, nr1)

    def set_scale(self, um_per_px: float | None) -> None:
        self.um_per_px = um_per_px
        self.scale_bar.set_scale(um_per_px)

    def clear_overlays(self) -> None:
        for item in self.outlines.values():
            self.view.removeItem(item)
        for item in self.holes.values():
            self.view.removeItem(item)
        self.outlines.clear()
        self.holes.clear()

    def set_outlines(self, shapes: list[OutlineShape]) -> None:
        """Replace the outlines shown."""
        for item in self.outlines.values():
            self.view.removeItem(item)
        self.outlines = {}
        for shape in shapes:
            item = OutlineItem(shape)
            self.view.addItem(item)
            self.outlines[shape.appearance_id] = item
            if shape.flake_id == self.selected_flake:
                item.set_selected(True)
        present = sorted({s.layers for s in shapes if s.layers is not None})
        present_t = sorted({n for s in shapes for _, n in s.terraces if n is not None})
        self.set_legend(
            sorted(set(present) | set(present_t)), any(s.layers is None for s in shapes)
        )

    def set_holes(self, shapes: list[HoleShape]) -> None:
        """Replace the holes shown."""
        self.release_hole()
        for item in self.holes.values():
            self.view.removeItem(item)
        self.holes = {}
        for shape in shapes:
            item = HoleItem(shape)
            self.view.addItem(item)
            self.holes[shape.hole_id] = item

    def hole_at(self, x: float, y: float) -> int | None:
        """The hole whose disk holds (x, y) (the nearest centre), else None."""
        best, best_d = None, math.inf
        for hid, item in self.holes.items():
            hx, hy, r = item.centre_radius()
            d = math.hypot(x - hx, y - hy)
            if d <= r and d < best_d:
                best, best_d = hid, d
        return best

    def pick_hole(self, hole_id: int) -> bool:
        """Make a hole movable and resizable (one at a time)."""
        self.release_hole()
        item = self.holes.get(hole_id)
        if item is None:
            return False
        roi = HoleHandle(item)
        roi.sigRegionChangeFinished.connect(self._on_hole_moved)
        roi.sigRemoveRequested.connect(self._on_hole_remove)
        self.view.addItem(roi)
        item.setVisible(False)
        self._hole_roi = roi
        return True

    def release_hole(self) -> None:
        roi = self._hole_roi
        if roi is None:
            return
        self._hole_roi = None
        self.view.removeItem(roi)
        item = self.holes.get(roi.hole_id)
        if item is not None:
            item.setVisible(True)

    def set_legend(self, layers: list[int], unknown: bool = False) -> None:
        """The legend naming the layer numbers drawn (always shows the palette's name)."""
        rows = []
        for n in layers:
            label = palette.layer_label(n)
            rows.append((label, palette.layer_hex(n)))
        if unknown:
            rows.append(("not assigned", palette.UNKNOWN_COLOUR))
        if not rows:
            self.legend.hide()
            return
        cells = "".join(
            f"<tr><td><span style='color:{c}; font-size:14px'>&#9632;</span></td><td>{t}</td></tr>"
            for t, c in rows
        )
        self.legend.setText(
            f"<table cellspacing='1'>{cells}</table><div>holes: <span style='color:{palette.HOLE_COLOUR}; background:{palette.HOLE_HALO}'>&#9711;</span></div>"
        )
        self.legend.adjustSize()
        self.legend.show()

    def select_flake(self, flake_id: int | None, centre: bool = False) -> None:
        """Mark ``flake_id`` as selected (None: nothing) and optionally bring it into view."""
        self.selected_flake = flake_id
        for item in self.outlines.values():
            item.set_selected(item.shape_data.flake_id == flake_id)
        if centre and flake_id is not None:
            for item in self.outlines.values():
                if item.shape_data.flake_id == flake_id:
                    rect = item.boundingRect()
                    pad = max(rect.width(), rect.height()) * 0.6 + 20
                    self.view.setRange(rect.adjusted(-pad, -pad, pad, pad), padding=0)
                    break

    def fit(self) -> None:
        """Show the whole image."""
        if self.image_shape:
            h, w = self.image_shape
            self.view.setRange(QRectF(-0.5, -0.5, w, h), padding=0.01)

    def zoom(self, factor: float) -> None:
        """Zoom about the view's centre (factor > 1 zooms in)."""
        self.view.scaleBy((1.0 / factor, 1.0 / factor))

    # ---- tools ---------------------------------------------------------------------------
    def set_tool(self, name: str) -> None:
        if name not in TOOLS:
            raise ValueError(f"unknown tool {name!r}")
        self.cancel_tool()
        self.tool = name
        self.release_hole()
        self.setCursor(
            Qt.CursorShape.CrossCursor
            if CANVAS_TOOLS[name].cross_cursor
            else Qt.CursorShape.ArrowCursor
        )
        self.toolChanged.emit(name)

    def cancel_tool(self) -> None:
        """Drop a line or outline in progress, a measured distance shown, and any outline
        being edited (then ``editEnded`` is emitted)."""
        self._points = []
        self._rubber.setData([], [])
        self._measure_text.setVisible(False)
        if self._edit_roi is not None:
            self.view.removeItem(self._edit_roi)
            self._edit_roi = None
            if self._edit_appearance in self.outlines:
                self.outlines[self._edit_appearance].setVisible(True)
            self._edit_appearance = None
            self.editEnded.emit()

    def image_point(self, scene_pos: QPointF) -> tuple[float, float]:
        p = self.view.mapSceneToView(scene_pos)
        return float(p.x()), float(p.y())

    def click(self, x: float, y: float, double: bool = False) -> None:
        """A left click at image point (x, y) with the current tool (the mouse calls this)."""
        CANVAS_TOOLS[self.tool].click(self, x, y, double)

    def finish_outline(self) -> None:
        """Close the outline being drawn (three corners at least) and report it."""
        pts = _dedupe(self._points)
        self._points = []
        self._rubber.setData([], [])
        if len(pts) >= 3:
            self.outlineDrawn.emit(np.array(pts, float))

    def flake_at(self, x: float, y: float) -> int:
        """The flake whose outline holds (x, y) (the smallest if nested), else -1."""
        best, best_area = -1, math.inf
        for item in self.outlines.values():
            if item.contains_image_point(x, y):
                a = item.area_px()
                if a < best_area:
                    best, best_area = item.shape_data.flake_id, a
        return best

    def begin_edit_outline(self, appearance_id: int) -> bool:
        """Turn an outline into an editable polygon: drag corners, click an edge to add one,
        right-click a corner to remove it. Enter keeps the change, Esc drops it."""
        item = self.outlines.get(appearance_id)
        if item is None:
            return False
        self.cancel_tool()
        pts = [tuple(p) for p in np.asarray(item.shape_data.outline_px, float)]
        roi = pg.PolyLineROI(pts, closed=True, pen=pg.mkPen("#FFFFFF", width=2), movable=False)
        roi.setZValue(40)
        self.view.addItem(roi)
        item.setVisible(False)
        self._edit_roi = roi
        self._edit_appearance = appearance_id
        return True

    @property
    def editing(self) -> bool:
        return self._edit_roi is not None

    def edit_points(self) -> np.ndarray | None:
        """The corners of the outline being edited, in image pixels."""
        roi = self._edit_roi
        if roi is None:
            return None
        pts = []
        for handle in roi.getHandles():
            p = roi.mapToParent(handle.pos())
            pts.append((float(p.x()), float(p.y())))
        return np.array(pts, float)

    def finish_edit_outline(self) -> None:
        """Keep the edited outline (reports outlineEdited)."""
        if self._edit_roi is None:
            return
        pts = self.edit_points()
        appearance = self._edit_appearance
        self.cancel_tool()
        if pts is not None and len(pts) >= 3 and appearance is not None:
            self.outlineEdited.emit(appearance, pts)

    # ---- events --------------------------------------------------------------------------
    def _on_mouse_moved(self, scene_pos: QPointF) -> None:
        if self.image_shape is None:
            return
        x, y = self.image_point(scene_pos)
        h, w = self.image_shape
        if -0.5 <= x < w - 0.5 and -0.5 <= y < h - 0.5:
            self.cursorMoved.emit(x, y)
        else:
            self.cursorLeft.emit()
        CANVAS_TOOLS[self.tool].move(self, x, y)

    def _on_mouse_clicked(self, ev) -> None:
        if ev.button() != Qt.MouseButton.LeftButton or self.image_shape is None:
            return
        if self.tool == "select" and self._edit_roi is not None:
            return
        # Clicks on the picked hole or its handle belong to it.
        if self.tool == "select" and self._hole_roi is not None:
            for item in self.scene().items(ev.scenePos()):
                if item is self._hole_roi or isinstance(item, pg.graphicsItems.ROI.Handle):
                    return
        x, y = self.image_point(ev.scenePos())
        self.click(x, y, double=ev.double())

    def _on_hole_moved(self, roi: HoleHandle) -> None:
        x, y, r = roi.centre_radius()
        self.holeChanged.emit(roi.hole_id, x, y, r)

    def _on_hole_remove(self, roi: HoleHandle) -> None:
        hid = roi.hole_id
        self.release_hole()
        self.holeRemoveRequested.emit(hid)

    def eventFilter(self, obj, event) -> bool:  # noqa: N802 - Qt API
        if event.type() == QEvent.Type.Leave:
            self.cursorLeft.emit()
        return super().eventFilter(obj, event)

    def keyPressEvent(self, ev) -> None:  # noqa: N802 - Qt API
        key = ev.key()
        if key == Qt.Key.Key_Escape:
            self.cancel_tool()
            self.release_hole()
            ev.accept()
            return
        if key in (Qt.Key.Key_Delete, Qt.Key.Key_Backspace) and self._hole_roi is not None:
            self._on_hole_remove(self._hole_roi)
            ev.accept()
            return
        if key in (Qt.Key.Key_Return, Qt.Key.Key_Enter):
            if self._edit_roi is not None:
                self.finish_edit_outline()
            else:
                CANVAS_TOOLS[self.tool].enter(self)
            ev.accept()
            return
        super().keyPressEvent(ev)


class ImagePyramid:
    """A uint8 image and its area-averaged halvings (level k is 2^k times smaller), made lazily."""

    def __init__(self, image: np.ndarray) -> None:
        if image.dtype != np.uint8:
            raise ValueError("the display image must be uint8")
        self.levels: list[np.ndarray] = [image]

    def level_for(self, ds: float) -> int:
        """The coarsest level whose pixels are no bigger than ``ds`` image pixels."""
        if not ds > 1 or not math.isfinite(ds):
            return 0
        k = int(math.floor(math.log2(ds) + 0.5))
        h, w = self.levels[0].shape[:2]
        while k > 0 and (w >> k < 16 or h >> k < 16):
            k -= 1
        return k

    def level(self, k: int) -> np.ndarray:
        while len(self.levels) <= k:
            prev = self.levels[-1]
            h, w = prev.shape[:2]
            self.levels.append(
                cv2.resize(prev, (max(1, w // 2), max(1, h // 2)), interpolation=cv2.INTER_AREA)
            )
        return self.levels[k]


def _dedupe(points: list[tuple[float, float]], tol: float = 0.5) -> list[tuple[float, float]]:
    out: list[tuple[float, float]] = []
    for p in points:
        if not out or math.hypot(p[0] - out[-1][0], p[1] - out[-1][1]) > tol:
            out.append(p)
    if len(out) > 1 and math.hypot(out[0][0] - out[-1][0], out[0][1] - out[-1][1]) <= tol:
        out.pop()
    return out
