"""The Raman map view: a stored map's quantity (a mode's position, a separation, the most likely
layer number N or its probability) as an image with its colour bar and unit, laid over the
micrograph it was taken on (or beside it), aligned by the map's placement
(:mod:`flakebook.pipeline_maps`: the map origin's offset in um from the image's pixel origin).

Beside the micrograph, both plots show the map's frame and its surroundings in the image's um.
Pixels without a flake line (bare substrate) are left empty, never coloured as a layer number.
Hovering a pixel shows its values with their standard errors. The shown map exports as a PNG
(what the view shows) and as arrays (.npy and .csv of the quantity).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QRectF, Qt, QTimer
from PySide6.QtWidgets import (
    QCheckBox,
    QComboBox,
    QFileDialog,
    QHBoxLayout,
    QLabel,
    QPushButton,
    QSlider,
    QVBoxLayout,
    QWidget,
)

from flakebook import pipeline_maps as pm
from flakebook.gui.views import View
from flakebook.render.palette import THICK_COLOUR, layer_hex

EMPTY_TEXT = "No Raman map in this project. Store one with: flakebook spectrum MAP.txt --map " \
             "--project P --image ID"  # fmt: skip


def _rgb(hex_colour: str) -> tuple[int, int, int]:
    h = hex_colour.lstrip("#")
    return int(h[0:2], 16), int(h[2:4], 16), int(h[4:6], 16)


#: A pixel whose most likely N has less than this many times the probability a flat posterior
#: gives each bin is shown as "not determined", not as a layer number (a weak spectrum at a
#: flake's edge says little; its argmax is a coin toss). Common practice, no source.
UNDETERMINED_FACTOR = 2.0
UNDETERMINED_COLOUR = "#E6E6E6"


def undetermined(probability: np.ndarray, max_layers: int) -> np.ndarray:
    """Pixels whose top probability is below UNDETERMINED_FACTOR / (max_layers + 1)."""
    with np.errstate(invalid="ignore"):
        return ~(probability >= UNDETERMINED_FACTOR / (max_layers + 1))


def layer_classes(values: np.ndarray, shown: np.ndarray) -> list[int]:
    """The layer numbers present among the shown pixels, ascending."""
    v = values[shown & np.isfinite(values)]
    return sorted({int(n) for n in v})


def layer_colormap(classes: list[int], max_layers: int) -> pg.ColorMap:
    """A stepped colour map with one step per layer number of ``classes`` (at 1..k), in the
    layer palette of the outlines; the "more than N_max" bin in the thick-flake colour."""
    k = max(1, len(classes))
    pos, colours = [], []
    for i, n in enumerate(classes or [1]):
        if n == 0:
            c = _rgb(UNDETERMINED_COLOUR)
        else:
            c = _rgb(layer_hex(n) if n <= max_layers else THICK_COLOUR)
        lo, hi = i / k, (i + 1) / k
        pos += [lo, hi - 1e-6 if i < k - 1 else hi]
        colours += [c, c]
    return pg.ColorMap(pos, colours)


def colour_levels(values: np.ndarray, shown: np.ndarray, quantity: str) -> tuple[float, float]:
    """The colour bar's range: the 1st to 99th percentile of the shown pixels (0-1 for a
    probability, whole layer numbers for N)."""
    v = values[shown & np.isfinite(values)]
    if quantity == "probability":
        return 0.0, 1.0
    if quantity == "layers":  # class indices 1..k (layer_classes)
        return 0.5, len({int(n) for n in v}) + 0.5 if v.size else 1.5
    if v.size == 0:
        return 0.0, 1.0
    lo, hi = np.percentile(v, [1, 99])
    if not hi > lo:
        lo, hi = lo - 0.5, hi + 0.5
    return float(lo), float(hi)


def map_rgba(
    values: np.ndarray, shown: np.ndarray, cmap: pg.ColorMap, levels: tuple[float, float]
) -> np.ndarray:
    """RGBA (rows, cols, 4) of ``values`` through ``cmap``; transparent where not ``shown``."""
    lo, hi = levels
    t = np.clip((np.nan_to_num(values, nan=lo) - lo) / (hi - lo), 0.0, 1.0)
    lut = cmap.getLookupTable(0.0, 1.0, 256, alpha=True)
    rgba = lut[np.round(t * 255).astype(int)].astype(np.uint8)
    rgba[..., 3] = np.where(shown & np.isfinite(values), 255, 0)
    return rgba


class MapView(QWidget):
    """One stored Raman map; ``show_map(session, map_id)`` (None: the first of the project)."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("mapView")
        self.session = None
        self.record = None  # the shown RamanMap
        self.image = None  # its Image record (None: not placed)
        self.micrograph: np.ndarray | None = None
        self.values: np.ndarray | None = None  # the shown quantity, NaN where empty
        self.empty: np.ndarray | None = None
        self.levels = (0.0, 1.0)
        self.chooser = QComboBox(self)
        self.chooser.setObjectName("mapChooser")
        self.chooser.setSizeAdjustPolicy(
            QComboBox.SizeAdjustPolicy.AdjustToMinimumContentsLengthWithIcon
        )
        self.chooser.setMinimumContentsLength(24)
        self.quantity = QComboBox(self)
        self.quantity.setObjectName("mapQuantity")
        self.quantity.setSizeAdjustPolicy(
            QComboBox.SizeAdjustPolicy.AdjustToMinimumContentsLengthWithIcon
        )
        self.quantity.setMinimumContentsLength(20)
        self.over = QCheckBox("Over the micrograph", self)
        self.over.setObjectName("mapOver")
        self.over.setChecked(True)
        self.opacity = QSlider(Qt.Orientation.Horizontal, self)
        self.opacity.setObjectName("mapOpacity")
        self.opacity.setRange(10, 100)
        self.opacity.setValue(80)
        self.opacity.setMinimumWidth(90)
        self.opacity.setMaximumWidth(140)
        self.opacity.setToolTip("Opacity of the map over the micrograph")
        self.png = QPushButton("Export PNG…", self)
        self.arrays = QPushButton("Export arrays…", self)
        self.import_button = QPushButton("Import map…", self)
        self.import_button.setObjectName("mapImport")
        self.import_button.setToolTip(
            "Fit a Raman map file (flakebook map text format) and lay it on the micrograph shown "
            "in the Image tab, by its stage position (undoable)"
        )
        bar = QHBoxLayout()
        bar.addWidget(QLabel("Map", self))
        bar.addWidget(self.chooser)
        bar.addWidget(QLabel("Show", self))
        bar.addWidget(self.quantity)
        bar.addStretch(1)
        bar.addWidget(self.import_button)
        tools = QHBoxLayout()
        tools.addWidget(self.over)
        tools.addWidget(QLabel("opacity", self))
        tools.addWidget(self.opacity)
        tools.addStretch(1)
        tools.addWidget(self.png)
        tools.addWidget(self.arrays)
        self.title = QLabel(EMPTY_TEXT, self)
        self.title.setObjectName("mapTitle")
        self.title.setWordWrap(True)
        self.graphics = pg.GraphicsLayoutWidget(self)
        self.graphics.setBackground("w")
        self.hover = QLabel(" ", self)
        self.hover.setObjectName("mapHover")
        self.hover.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.notes = QLabel("", self)
        self.notes.setWordWrap(True)
        lay = QVBoxLayout(self)
        lay.addLayout(bar)
        lay.addWidget(self.title)
        lay.addWidget(self.graphics, 1)
        lay.addWidget(self.hover)
        lay.addWidget(self.notes)
        lay.addLayout(tools)
        self.plots: list[pg.PlotItem] = []
        self.map_item: pg.ImageItem | None = None
        self.photo_items: list[pg.ImageItem] = []
        self.colour_bar: pg.ColorBarItem | None = None
        self.chooser.currentIndexChanged.connect(self._map_chosen)
        self.quantity.currentIndexChanged.connect(self._draw)
        self.over.toggled.connect(self._draw)
        self.opacity.valueChanged.connect(self._set_opacity)
        self.graphics.scene().sigMouseMoved.connect(self._on_mouse)
        self._set_enabled(False)

    # ---- choosing ------------------------------------------------------------------------

    def _set_enabled(self, on: bool) -> None:
        for w in (self.chooser, self.quantity, self.over, self.opacity, self.png, self.arrays):
            w.setEnabled(on)

    def show_map(self, session, map_id: int | None = None) -> None:
        """List ``session``'s maps and show ``map_id`` (None: keep the shown one, else the
        first). Another session forgets everything shown before."""
        if session is not self.session:
            self._forget()
        self.session = session
        keep = map_id if map_id is not None else self.chooser.currentData()
        maps = [] if session is None else session.project.raman_maps_of()
        self.chooser.blockSignals(True)
        self.chooser.clear()
        for m in maps:
            where = f"image {m.image_id}" if m.image_id is not None else "not placed"
            self.chooser.addItem(f"{m.name or 'map'} (map {m.id}, {where})", m.id)
        index = next((i for i, m in enumerate(maps) if m.id == keep), 0)
        self.chooser.setCurrentIndex(index if maps else -1)
        self.chooser.blockSignals(False)
        self._set_enabled(bool(maps))
        self._map_chosen()

    def current_map(self) -> int | None:
        return self.chooser.currentData() if self.chooser.count() else None

    def _forget(self) -> None:
        """Drop the shown map, its micrograph and every drawn item."""
        self.record = self.image = self.micrograph = None
        self.values = self.empty = None
        self._clear_plots()
        self.quantity.blockSignals(True)
        self.quantity.clear()
        self.quantity.blockSignals(False)
        self.hover.setText(" ")
        self.notes.setText("")

    def _map_chosen(self, *_args) -> None:
        mid = self.current_map()
        s = self.session
        if s is None or mid is None:
            self._forget()
            self.title.setText(EMPTY_TEXT if s is not None else "No project open.")
            self.notes.setText("")
            return
        rec = s.project.get("raman_map", mid)
        same = self.record is not None and self.record.id == rec.id
        self.record = rec
        self.image = s.project.get("image", rec.image_id) if rec.image_id is not None else None
        self.micrograph = None
        if self.image is not None:
            self.micrograph = s.load_image(self.image.id).display
        keep = self.quantity.currentData() if same else None
        names = pm.shown_quantities(rec)
        self.quantity.blockSignals(True)
        self.quantity.clear()
        for q in names:
            unit = pm.quantity_unit(q)
            self.quantity.addItem(pm.quantity_label(q) + (f" ({unit})" if unit else ""), q)
        default = keep if keep in names else "layers"
        self.quantity.setCurrentIndex(names.index(default) if default in names else 0)
        self.quantity.blockSignals(False)
        self.over.setEnabled(self.image is not None)
        self.opacity.setEnabled(self.image is not None)
        self._draw()

    # ---- drawing -------------------------------------------------------------------------

    def current_quantity(self) -> str | None:
        return self.quantity.currentData() if self.quantity.count() else None

    def _clear_plots(self) -> None:
        self.graphics.clear()
        self.plots = []
        self.map_item = None
        self.photo_items = []
        self.colour_bar = None

    def _draw(self, *_args) -> None:
        self._clear_plots()
        rec, q = self.record, self.current_quantity()
        if rec is None or q is None:
            return
        self.empty = pm.empty_mask(rec)
        self.values = np.where(self.empty, np.nan, rec.quantity(q))
        shown = ~self.empty
        self.levels = colour_levels(self.values, shown, q)
        coloured = self.values
        classes: list[int] = []
        if q == "layers":  # drawn with "not determined" (0) for weak pixels; exported as stored
            weak = undetermined(rec.quantity("probability"), rec.max_layers)
            drawn = np.where(np.isfinite(self.values) & weak, 0.0, self.values)
            classes = layer_classes(drawn, shown)
            cmap = layer_colormap(classes, rec.max_layers)
            coloured = np.searchsorted(classes, np.nan_to_num(drawn, nan=0)) + 1.0
            coloured = np.where(np.isfinite(drawn), coloured, np.nan)
            self.levels = (0.5, len(classes) + 0.5) if classes else (0.5, 1.5)
        else:
            cmap = pg.colormap.get("viridis")
        rgba = map_rgba(coloured, shown, cmap, self.levels)
        placed = self.image is not None and self.micrograph is not None
        beside = placed and not self.over.isChecked()
        photo = Path(self.image.path).name if placed else ""
        what = pm.quantity_label(q)
        if beside:
            photo_plot = self._new_plot(0, f"{photo} (map frame in orange)")
            self._add_photo(photo_plot)
            map_plot = self._new_plot(1, what)
            self._frame(photo_plot)
            self._frame(map_plot)
        else:
            map_plot = self._new_plot(0, f"{what} over {photo}" if placed else what)
            if placed:
                self._add_photo(map_plot)
        self.map_item = pg.ImageItem(rgba, axisOrder="row-major")
        self.map_item.setRect(self._map_rect())
        self.map_item.setOpacity(self.opacity.value() / 100 if placed and not beside else 1.0)
        map_plot.addItem(self.map_item)
        unit = pm.quantity_unit(q)
        label = pm.quantity_label(q) + (f" ({unit})" if unit else "")
        self.colour_bar = pg.ColorBarItem(
            values=self.levels, colorMap=cmap, label=label, interactive=False, width=18
        )
        if classes:
            ticks = [(i + 1, _layer_text(n, rec.max_layers)) for i, n in enumerate(classes)]
            self.colour_bar.axis.setTicks([ticks, []])
        self.graphics.addItem(self.colour_bar, 0, len(self.plots))
        if beside:  # both plots on the map's frame and a margin around it (once laid out)
            self._frame_both()
            QTimer.singleShot(0, self._frame_both)
        else:
            for p in self.plots:
                p.autoRange()
        self._write_title(rec, q)

    def _frame_both(self) -> None:
        if self.record is None:
            return
        r = self._map_rect()
        pad = 0.3 * max(r.width(), r.height())
        for p in self.plots:
            p.setRange(r.adjusted(-pad, -pad, pad, pad), padding=0)

    def _new_plot(self, col: int, name: str) -> pg.PlotItem:
        p = self.graphics.addPlot(row=0, col=col)
        p.setAspectLocked(True)
        p.invertY(True)
        p.showGrid(x=False, y=False)
        frame = "image" if self.image is not None else "map"
        p.setLabel("bottom", f"x ({frame} µm)")
        p.setLabel("left", f"y ({frame} µm)")
        p.setTitle(name)
        self.plots.append(p)
        return p

    def _add_photo(self, plot: pg.PlotItem) -> None:
        s = self.image.pixel_size_um
        h, w = self.micrograph.shape[:2]
        item = pg.ImageItem(self.micrograph, axisOrder="row-major")
        item.setRect(QRectF(-0.5 * s, -0.5 * s, w * s, h * s))
        item.setZValue(-10)
        plot.addItem(item)
        self.photo_items.append(item)

    def _frame(self, plot: pg.PlotItem) -> None:
        r = self._map_rect()
        xs = [r.left(), r.right(), r.right(), r.left(), r.left()]
        ys = [r.top(), r.top(), r.bottom(), r.bottom(), r.top()]
        plot.plot(xs, ys, pen=pg.mkPen("#D55E00", width=2))

    def _map_rect(self) -> QRectF:
        """The map's outer frame in the plot's coordinates: image um (from the image's pixel
        origin) when placed, else the map's own um."""
        rec = self.record
        x0, x1, y0, y1 = pm.grid_edges(rec.x_um, rec.y_um)
        ox, oy = (rec.offset_x_um, rec.offset_y_um) if self.image is not None else (0.0, 0.0)
        return QRectF(ox + x0, oy + y0, x1 - x0, y1 - y0)

    def _set_opacity(self, value: int) -> None:
        if self.map_item is not None and self.over.isChecked() and self.image is not None:
            self.map_item.setOpacity(value / 100)

    def _write_title(self, rec, q: str) -> None:
        n_empty = int(self.empty.sum())
        rows, cols = rec.shape
        where = (
            f"over image {self.image.id} ({Path(self.image.path).name}), origin at "
            f"({rec.offset_x_um:.2f}, {rec.offset_y_um:.2f}) µm from its top-left pixel"
            if self.image is not None
            else "not placed on a micrograph"
        )
        self.title.setText(
            f"<b>{rec.name or 'map'}</b> (map {rec.id}): {rows} × {cols} spectra, {where}; "
            f"{n_empty} without flake lines (shown empty)"
        )
        notes = [
            f"Fitted by flakebook {rec.flakebook_version} ({rec.method}); rule table "
            f"{rec.settings.get('rule_table', '?')}; laser {rec.laser_nm:g} nm."
        ]
        notes += [f"<span style='color:#B05A00'>{w}</span>" for w in rec.warnings]
        if rec.stale:
            notes.append("<span style='color:#B05A00'>stale: recompute to refit</span>")
        self.notes.setText(" ".join(notes))

    # ---- hover ---------------------------------------------------------------------------

    def pixel_at(self, x_um: float, y_um: float) -> tuple[int, int] | None:
        """The map pixel (row, col) at plot coordinates, None outside the map."""
        rec = self.record
        if rec is None:
            return None
        r = self._map_rect()
        if not (r.left() <= x_um < r.right() and r.top() <= y_um < r.bottom()):
            return None
        rows, cols = rec.shape
        col = int((x_um - r.left()) / r.width() * cols)
        row = int((y_um - r.top()) / r.height() * rows)
        return min(row, rows - 1), min(col, cols - 1)

    def pixel_text(self, row: int, col: int) -> str:
        """What the hover line says of one map pixel."""
        rec = self.record
        head = f"x {rec.x_um[col]:g}, y {rec.y_um[row]:g} µm (map) · row {row}, col {col}: "
        if self.empty[row, col]:
            return head + (
                f"no flake line (none with S/N ≥ {pm.FLAKE_LINE_SNR:g} and FWHM ≤ "
                f"{pm.FLAKE_LINE_MAX_FWHM_CM1:g} cm⁻¹): bare substrate"
            )
        parts = []
        q = self.current_quantity()
        order = [q] + [n for n in pm.shown_quantities(rec) if n != q]
        for name in order:
            if name.endswith(("_fwhm_cm1", "_height", "_snr")) and name != q:
                continue
            v = rec.quantity(name)[row, col]
            if name == "layers":
                p = rec.quantity("probability")[row, col]
                n = int(v) if np.isfinite(v) else None
                label = "-" if n is None else (f">{rec.max_layers}" if n > rec.max_layers else n)
                if n is not None and undetermined(np.array(p), rec.max_layers):
                    parts.append(f"N not determined (most likely {label}, p = {p:.2f})")
                else:
                    parts.append(f"N = {label} (p = {p:.2f})")
                continue
            if name == "probability" and name != q:
                continue
            if not np.isfinite(v):
                parts.append(f"{name.split('_')[0]} not found")
                continue
            err = pm.error_of(name)
            e = rec.quantity(err)[row, col] if err in rec.quantities else None
            parts.append(f"{_short(name)} {_value_err(v, e)} {pm.quantity_unit(name)}".strip())
        return head + "; ".join(parts)

    def _on_mouse(self, pos) -> None:
        if self.record is None or not self.plots:
            return
        for p in self.plots:
            if p.sceneBoundingRect().contains(pos):
                pt = p.vb.mapSceneToView(pos)
                at = self.pixel_at(pt.x(), pt.y())
                self.hover.setText(self.pixel_text(*at) if at else " ")
                return

    # ---- export --------------------------------------------------------------------------

    def export_png(self, path: str | Path) -> Path:
        """The view as shown (map, micrograph, colour bar) as a PNG."""
        path = Path(path)
        if not self.graphics.grab().save(str(path), "PNG"):
            from flakebook.errors import InputError

            raise InputError(f"cannot write {path}; accepted: a writable .png path")
        return path

    def export_arrays(self, path: str | Path) -> list[Path]:
        """The shown quantity as ``<path>.npy`` and ``<path>.csv`` (rows along y, with the map's
        x_um/y_um; empty pixels NaN in .npy and blank in .csv)."""
        path = Path(path).with_suffix("")
        values = self.values
        np.save(path.with_suffix(".npy"), values)
        rec = self.record
        lines = ["y_um\\x_um," + ",".join(f"{x:g}" for x in rec.x_um)]
        for y, row in zip(rec.y_um, values, strict=True):
            lines.append(
                f"{y:g}," + ",".join("" if not np.isfinite(v) else f"{v:.6g}" for v in row)
            )
        path.with_suffix(".csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
        return [path.with_suffix(".npy"), path.with_suffix(".csv")]

    def _png_dialog(self) -> None:
        if self.record is None:
            return
        name = f"{self.record.name or 'map'}_{self.current_quantity()}.png".replace(" ", "_")
        path, _ = QFileDialog.getSaveFileName(self, "Export map as PNG", name, "PNG (*.png)")
        if path:
            self.export_png(path)

    def _arrays_dialog(self) -> None:
        if self.record is None:
            return
        name = f"{self.record.name or 'map'}_{self.current_quantity()}".replace(" ", "_")
        path, _ = QFileDialog.getSaveFileName(
            self, "Export map arrays (.npy and .csv)", name, "NumPy and CSV (*.npy *.csv)"
        )
        if path:
            self.export_arrays(path)


def _layer_text(n: int, max_layers: int) -> str:
    if n == 0:
        return "?"  # not determined (the hover says so)
    return f">{max_layers}L" if n > max_layers else f"{n}L"


def _short(name: str) -> str:
    if name.endswith("_separation_cm1"):
        b, _, a = name[: -len("_separation_cm1")].partition("-")
        return f"{b}−{a}"
    return name.split("_")[0] + ("" if name.endswith("_center_cm1") else " " + name.split("_")[1])


def _value_err(v: float, e: float | None) -> str:
    import math

    if e is None or not np.isfinite(e) or not e > 0:
        return f"{v:.2f}"
    d = max(0, 1 - int(math.floor(math.log10(e))))
    return f"{v:.{d}f} ± {e:.{d}f}"


VIEW = View(
    "Raman map",
    "map_view",
    "Ctrl+7",
    "&Raman map",
    "showRamanMap",
    "Show a stored Raman map (mode positions, separations, layer number) over its micrograph",
    MapView,
)


def follow(window, view: MapView) -> None:
    """Keep to the window's project: another project is shown afresh (nothing of the old one
    kept); the same project is re-listed when the view is in front."""
    s = window.session
    if s is not view.session or window.tabs.currentWidget() is view:
        view.show_map(s)


def connect(window, view: MapView) -> None:
    """The view is re-listed when brought to the front and when the project changes; exports
    through the window's guard."""
    window.tabs.currentChanged.connect(
        lambda *_: (
            window.tabs.currentWidget() is view
            and window._guard(lambda: view.show_map(window.session), "Raman map")
        )
    )
    # another project (or none): nothing of the old one stays on screen
    window.projectChanged.connect(
        lambda: window._guard(lambda: view.show_map(window.session), "Raman map")
    )
    view.import_button.clicked.connect(
        lambda: window._guard(window.import_map_dialog, "Import Raman map")
    )
    view.png.clicked.connect(lambda: window._guard(view._png_dialog, "Export map"))
    view.arrays.clicked.connect(lambda: window._guard(view._arrays_dialog, "Export map"))
