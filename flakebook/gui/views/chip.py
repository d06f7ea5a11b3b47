"""The chip map of one sample: every flake at its place on the chip, to find it again at the
microscope. The drawing is the report's (:func:`flakebook.render.chipmap.paint_chip_map`),
painted into the widget at its size; hovering a flake tells its label, layer number and centre,
clicking it selects it everywhere, and the selected flake is marked. Beside the map: each
flake's centre in chip um (a click on a row selects it too) and what could not be placed.
Exports as PNG or SVG, the picture as drawn.
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import QPoint, QPointF, Qt, Signal
from PySide6.QtGui import QPainter
from PySide6.QtWidgets import (
    QComboBox,
    QFileDialog,
    QHBoxLayout,
    QLabel,
    QPushButton,
    QSplitter,
    QToolTip,
    QTreeWidget,
    QTreeWidgetItem,
    QVBoxLayout,
    QWidget,
)

from flakebook.errors import InputError
from flakebook.gui.views import View
from flakebook.render.chipmap import (
    POSITION_HEADER,
    MapFrame,
    flake_at,
    paint_chip_map,
    position_rows,
    unplaced_text,
    write_chip_map,
)
from flakebook.report.chipmap import ChipMap, PlacedFlake, chip_map
from flakebook.wording import layers_text

#: The exported picture's width (pixels); its height follows the chip's shape.
EXPORT_WIDTH_PX = 1200


#: Magnification limits of the map (1: the whole chip) and a wheel step's factor.
MAX_ZOOM, ZOOM_STEP = 40.0, 1.25


class ChipCanvas(QWidget):
    """Paints a :class:`ChipMap` at the widget's size and finds the flake under the mouse.
    The wheel magnifies about the cursor, a drag moves the magnified map, a click picks."""

    flakeClicked = Signal(int)
    zoomChanged = Signal(float)

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("chipCanvas")
        self.setMouseTracking(True)
        self.setMinimumSize(420, 300)
        self.map: ChipMap | None = None
        self.pattern = None
        self.selected: int | None = None
        self.max_layers = 15
        self.frame: MapFrame | None = None
        self.zoom = 1.0
        self.centre_um: tuple[float, float] | None = None
        self._hover: int | None = None
        self._press: QPointF | None = None
        self._dragged = False

    def set_map(self, m: ChipMap | None, pattern=None, max_layers: int = 15, *,
                keep_zoom: bool = False) -> None:  # fmt: skip
        """Show ``m``; a map of another sample starts at the whole chip (``keep_zoom``: the
        same sample redrawn after an edit keeps its magnification)."""
        self.map, self.pattern, self.max_layers = m, pattern, max_layers
        if not keep_zoom:
            self.zoom, self.centre_um = 1.0, None
            self.zoomChanged.emit(self.zoom)
        self.frame = None  # until painted: a click before that finds nothing
        self._hover = None
        QToolTip.hideText()
        self.update()

    def fit(self) -> None:
        """The whole chip again."""
        self.zoom, self.centre_um = 1.0, None
        self.frame = None
        self.zoomChanged.emit(self.zoom)
        self.update()

    def zoom_at(self, pos: QPointF, factor: float) -> None:
        """Magnify by ``factor`` keeping the chip point under ``pos`` where it is."""
        frame = self.frame or self._frame_now()
        if frame is None or frame.area is None:
            return
        new = min(max(self.zoom * factor, 1.0), MAX_ZOOM)
        if new == self.zoom:
            return
        under = frame.to_um(pos.x(), pos.y())
        scale = frame.scale / frame.zoom * new  # the whole-chip scale times the new zoom
        c = frame.area.center()
        self.centre_um = (under[0] + (c.x() - pos.x()) / scale,
                          under[1] + (c.y() - pos.y()) / scale)  # fmt: skip
        self.zoom = new
        self.frame = None
        self.zoomChanged.emit(self.zoom)
        self.update()

    def wheelEvent(self, ev) -> None:  # noqa: N802 - Qt API
        steps = ev.angleDelta().y() / 120.0
        if steps:
            self.zoom_at(ev.position(), ZOOM_STEP**steps)

    def set_selected(self, flake_id: int | None) -> None:
        if flake_id != self.selected:
            self.selected = flake_id
            self.update()

    def paintEvent(self, _ev) -> None:  # noqa: N802 - Qt API
        p = QPainter(self)
        try:
            if self.map is None:
                p.fillRect(self.rect(), Qt.GlobalColor.white)
                p.drawText(self.rect(), Qt.AlignmentFlag.AlignCenter, "No sample to show.")
                self.frame = None
                return
            self.frame = paint_chip_map(
                p, self.map, self.width(), self.height(), pattern=self.pattern,
                selected=self.selected, max_layers=self.max_layers, zoom=self.zoom,
                centre_um=self.centre_um,
            )  # fmt: skip
        finally:
            p.end()

    def flake_at(self, pos: QPointF | QPoint) -> PlacedFlake | None:
        """The flake drawn under ``pos`` (widget pixels), as last painted."""
        if self.map is None:
            return None
        frame = self.frame or self._frame_now()
        if frame is None:
            return None
        return flake_at(frame, self.map, pos.x(), pos.y())

    def _frame_now(self) -> MapFrame | None:
        """The frame for the widget's size without waiting for a paint (drawn on a scratch
        image of the same size)."""
        from PySide6.QtGui import QImage

        if self.map is None or self.width() < 2 or self.height() < 2:
            return None
        img = QImage(self.width(), self.height(), QImage.Format.Format_RGB32)
        p = QPainter(img)
        try:
            self.frame = paint_chip_map(p, self.map, self.width(), self.height(),
                                        pattern=self.pattern, max_layers=self.max_layers,
                                        zoom=self.zoom, centre_um=self.centre_um)  # fmt: skip
        finally:
            p.end()
        return self.frame

    def point_of(self, flake_id: int) -> QPoint | None:
        """Where the flake's centroid is drawn (widget pixels), or None."""
        frame = self.frame or self._frame_now()
        if frame is None or self.map is None:
            return None
        for f in self.map.flakes:
            if f.flake_id == flake_id:
                x, y = frame.to_px(*f.centroid_um)
                return QPoint(round(x), round(y))
        return None

    def mouseMoveEvent(self, ev) -> None:  # noqa: N802 - Qt API
        if self._press is not None and ev.buttons() & Qt.MouseButton.LeftButton:
            d = ev.position() - self._press
            if self._dragged or abs(d.x()) + abs(d.y()) > 4:
                self._dragged = True
                if self.zoom > 1.0 and self.frame is not None:
                    cx, cy = self.centre_um or self.frame.to_um(*_centre(self.frame))
                    self.centre_um = (cx - d.x() / self.frame.scale,
                                      cy - d.y() / self.frame.scale)  # fmt: skip
                    self._press = ev.position()
                    self.update()
                return
        f = self.flake_at(ev.position())
        fid = None if f is None else f.flake_id
        if fid != self._hover:
            self._hover = fid
            self.setCursor(
                Qt.CursorShape.PointingHandCursor if f is not None else Qt.CursorShape.ArrowCursor
            )
        if f is None:
            QToolTip.hideText()
            self.setToolTip("")
            return
        text = hover_text(f, self.max_layers)
        self.setToolTip(text)
        QToolTip.showText(ev.globalPosition().toPoint(), text, self)

    def mousePressEvent(self, ev) -> None:  # noqa: N802 - Qt API
        if ev.button() != Qt.MouseButton.LeftButton:
            return super().mousePressEvent(ev)
        self._press, self._dragged = ev.position(), False

    def mouseReleaseEvent(self, ev) -> None:  # noqa: N802 - Qt API
        if ev.button() != Qt.MouseButton.LeftButton or self._press is None:
            return super().mouseReleaseEvent(ev)
        dragged, self._press, self._dragged = self._dragged, None, False
        if dragged:
            return
        f = self.flake_at(ev.position())
        if f is not None:
            self.flakeClicked.emit(f.flake_id)


def _centre(frame: MapFrame) -> tuple[float, float]:
    c = (frame.area or frame.plot).center()
    return c.x(), c.y()


def _fingerprint(m: ChipMap) -> tuple:
    """Everything drawn of a map, comparable: the same map need not be drawn again."""
    return (
        m.sample,
        m.images,
        tuple(
            (f.flake_id, f.label, f.layers, f.image_id, f.outline_um.tobytes()) for f in m.flakes
        ),
        m.holes,
        m.unplaced_images,
        m.unplaced_flakes,
    )


def hover_text(f: PlacedFlake, max_layers: int = 15) -> str:
    n = layers_text(f.layers, max_layers) if f.layers is not None else "not assigned"
    x, y = f.centroid_um
    return f"{f.label}: N = {n}\ncentre x {x:.1f} µm, y {y:.1f} µm\nclick to select"


class ChipMapView(QWidget):
    """A sample's chip map; :meth:`show_project` with the open project, :meth:`show_sample`
    to choose the sample, :meth:`set_selected` to mark the selected flake."""

    flakeActivated = Signal(int)
    exportRequested = Signal(str)  # "png" or "svg": the window asks for the file

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("chipView")
        self.project = None
        self.map: ChipMap | None = None
        self.pattern = None
        self.max_layers = 15
        self._stale = True
        self._selected: int | None = None
        self._seen_selection: int | None = None
        self._key = None  # what the shown map was drawn from
        self.sample = QComboBox(self)
        self.sample.setObjectName("chipSample")
        self.sample.setMinimumWidth(160)
        self.sample.setToolTip("The sample (chip) whose map is shown")
        self.sample.currentIndexChanged.connect(lambda _i: self._rebuild())
        self.png = QPushButton("Export PNG…", self)
        self.png.setObjectName("chipExportPng")
        self.png.clicked.connect(lambda: self.exportRequested.emit("png"))
        self.svg = QPushButton("Export SVG…", self)
        self.svg.setObjectName("chipExportSvg")
        self.svg.clicked.connect(lambda: self.exportRequested.emit("svg"))
        self.fit = QPushButton("Whole chip", self)
        self.fit.setObjectName("chipFit")
        self.fit.setToolTip("Show the whole chip again (the wheel magnifies, a drag moves)")
        self.zoom_label = QLabel(self)
        self.canvas = ChipCanvas(self)
        self.canvas.zoomChanged.connect(self._zoom_changed)
        self.fit.clicked.connect(self.canvas.fit)
        self._zoom_changed(1.0)
        self.canvas.flakeClicked.connect(self.flakeActivated)
        self.positions = QTreeWidget(self)
        self.positions.setObjectName("chipPositions")
        self.positions.setHeaderLabels(list(POSITION_HEADER))
        self.positions.setRootIsDecorated(False)
        self.positions.setUniformRowHeights(True)
        # queued: the selection it makes redraws this list, not while its click is delivered
        self.positions.itemClicked.connect(self._row_clicked, Qt.ConnectionType.QueuedConnection)
        self.unplaced = QLabel(self)
        self.unplaced.setObjectName("chipUnplaced")
        self.unplaced.setWordWrap(True)
        self.unplaced.setAlignment(Qt.AlignmentFlag.AlignTop | Qt.AlignmentFlag.AlignLeft)
        self.unplaced.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        bar = QHBoxLayout()
        bar.addWidget(QLabel("Sample:", self))
        bar.addWidget(self.sample)
        bar.addSpacing(12)
        bar.addWidget(self.png)
        bar.addWidget(self.svg)
        bar.addSpacing(12)
        bar.addWidget(self.fit)
        bar.addWidget(self.zoom_label)
        bar.addStretch(1)
        below = QWidget(self)
        lay_below = QHBoxLayout(below)
        lay_below.setContentsMargins(0, 0, 0, 0)
        lay_below.addWidget(self.positions, 3)
        lay_below.addWidget(self.unplaced, 2)
        split = QSplitter(Qt.Orientation.Vertical, self)
        split.addWidget(self.canvas)
        split.addWidget(below)
        split.setStretchFactor(0, 4)
        split.setStretchFactor(1, 1)
        split.setSizes([640, 170])
        lay = QVBoxLayout(self)
        lay.addLayout(bar)
        lay.addWidget(split, 1)

    # ---- what is shown ------------------------------------------------------------------------

    def show_project(self, project, selected: int | None = None) -> None:
        """Follow the project (None: nothing open) and the window's selected flake. Drawn at
        once when the view is in front, else when it is next shown."""
        if project is not self.project:
            self.project = project
            self._seen_selection = None
        self._selected = selected
        self._stale = True
        if self.isVisible():
            self._rebuild()

    def show_sample(self, name: str) -> None:
        """Show the sample ``name``; InputError naming the samples when there is no such one."""
        self._ensure_current()
        names = self.sample_names()
        if name not in names:
            raise InputError(
                f"no sample {name!r} in the project; accepted: "
                + (", ".join(names) if names else "none (the project has no samples)")
            )
        self.sample.setCurrentIndex(names.index(name))
        self._rebuild()

    def sample_names(self) -> list[str]:
        return [self.sample.itemText(i) for i in range(self.sample.count())]

    def set_selected(self, flake_id: int | None) -> None:
        self._selected = flake_id
        self.canvas.set_selected(flake_id)
        self._select_row(flake_id)

    def showEvent(self, ev) -> None:  # noqa: N802 - Qt API
        super().showEvent(ev)
        self._ensure_current()

    def _ensure_current(self) -> None:
        if self._stale:
            self._rebuild()

    def _rebuild(self) -> None:
        """The samples in the chooser and the chosen sample's map, from the project now: a
        sample switched, a re-survey or an undo all draw afresh (nothing of the old map kept)."""
        self._stale = False
        p = self.project
        if p is None:
            self._set_samples([])
            self._key = None
            self._show_map(None)
            return
        samples = p.samples()
        self._set_samples([s.name for s in samples])
        self._follow_selection(samples)
        name = self.sample.currentText()
        sample = next((s for s in samples if s.name == name), None)
        if sample is None:
            self._key = None
            self._show_map(None)
            return
        self.max_layers = p.max_layers
        m = chip_map(p, sample)
        key = (_fingerprint(m), sample.hole_pattern, self.max_layers)
        if key == self._key and self.map is not None:
            self.set_selected(self._selected)  # the same map: only the mark moves
            return
        same_sample = self._key is not None and self._key[0][0] == m.sample
        self._key = key
        self._show_map(m, sample.hole_pattern, keep_zoom=same_sample)

    def _set_samples(self, names: list[str]) -> None:
        if names == self.sample_names():
            return
        keep = self.sample.currentText()
        self.sample.blockSignals(True)
        try:
            self.sample.clear()
            self.sample.addItems(names)
            if keep in names:
                self.sample.setCurrentIndex(names.index(keep))
        finally:
            self.sample.blockSignals(False)

    def _follow_selection(self, samples) -> None:
        """A flake newly selected elsewhere on another sample: show that sample's map."""
        fid = self._selected
        if fid is None or fid == self._seen_selection:
            return
        self._seen_selection = fid
        from flakebook.store import Flake

        rows = self.project.records(Flake, id=fid)
        if not rows:
            return
        on = next((s.name for s in samples if s.id == rows[0].sample_id), None)
        names = self.sample_names()
        if on in names and on != self.sample.currentText():
            self.sample.blockSignals(True)
            self.sample.setCurrentIndex(names.index(on))
            self.sample.blockSignals(False)

    def _zoom_changed(self, zoom: float) -> None:
        self.fit.setEnabled(zoom > 1.0)
        self.zoom_label.setText(
            f"magnified {zoom:.3g}×" if zoom > 1.0 else "wheel: magnify · drag: move"
        )

    def _show_map(self, m: ChipMap | None, pattern=None, *, keep_zoom: bool = False) -> None:
        self.map, self.pattern = m, pattern
        self.canvas.set_map(m, pattern, self.max_layers, keep_zoom=keep_zoom)
        self.canvas.set_selected(self._selected)
        self.positions.clear()
        self.png.setEnabled(m is not None)
        self.svg.setEnabled(m is not None)
        if m is None:
            self.unplaced.setText(
                "No project is open." if self.project is None else "The project has no samples."
            )
            return
        ids = {f.label: f.flake_id for f in m.flakes}
        for row in position_rows(m, self.max_layers):
            item = QTreeWidgetItem(row)
            item.setData(0, Qt.ItemDataRole.UserRole, ids[row[0]])
            for col in (2, 3):
                item.setTextAlignment(col, Qt.AlignmentFlag.AlignRight)
            self.positions.addTopLevelItem(item)
        for col in range(len(POSITION_HEADER)):
            self.positions.resizeColumnToContents(col)
        self._select_row(self._selected)
        self.unplaced.setText(unplaced_text(m))

    def _select_row(self, flake_id: int | None) -> None:
        self.positions.blockSignals(True)
        try:
            self.positions.clearSelection()
            for i in range(self.positions.topLevelItemCount()):
                item = self.positions.topLevelItem(i)
                if item.data(0, Qt.ItemDataRole.UserRole) == flake_id:
                    item.setSelected(True)
                    self.positions.scrollToItem(item)
        finally:
            self.positions.blockSignals(False)

    def _row_clicked(self, item: QTreeWidgetItem, _col: int) -> None:
        fid = item.data(0, Qt.ItemDataRole.UserRole)
        if fid is not None:
            self.flakeActivated.emit(int(fid))

    # ---- export -------------------------------------------------------------------------------

    def export_picture(self, path: str | Path) -> Path:
        """The map as shown (sample, selected flake) to a PNG or SVG file."""
        self._ensure_current()
        if self.map is None:
            raise InputError("There is no chip map to export: open a project with a sample.")
        return write_chip_map(self.map, path, width_px=EXPORT_WIDTH_PX, pattern=self.pattern,
                              selected=self._selected, max_layers=self.max_layers)  # fmt: skip

    def export_dialog(self, kind: str) -> Path | None:
        self._ensure_current()
        if self.map is None:
            raise InputError("There is no chip map to export: open a project with a sample.")
        name = f"chip-{self.map.sample}.{kind}"
        filt = "PNG (*.png)" if kind == "png" else "SVG (*.svg)"
        path, _ = QFileDialog.getSaveFileName(self, "Export chip map", name, filt)
        if not path:
            return None
        if not path.lower().endswith(f".{kind}"):
            path += f".{kind}"
        return self.export_picture(path)


VIEW = View(
    "Chip map",
    "chip_view",
    "Ctrl+6",
    "C&hip map",
    "showChipMap",
    "Show every flake of a sample at its place on the chip",
    ChipMapView,
)


def follow(window, view: ChipMapView) -> None:
    """Redraw for the window's project and mark its selected flake."""
    s = window.session
    view.show_project(None if s is None else s.project, window.current_flake)


def connect(window, view: ChipMapView) -> None:
    """A flake clicked on the map (or in its list) is selected everywhere; the map stays in
    front. Exports ask for a file."""

    def activate(fid: int) -> None:
        window.select_flake(fid, keep_view=True)

    view.flakeActivated.connect(lambda f: window._guard(lambda: activate(f), "Select flake"))
    view.exportRequested.connect(
        lambda kind: window._guard(lambda: _export(window, view, kind), "Export chip map")
    )


def _export(window, view: ChipMapView, kind: str) -> None:
    out = view.export_dialog(kind)
    if out is not None:
        window.hint_label.setText(f"Chip map written to {out}")
