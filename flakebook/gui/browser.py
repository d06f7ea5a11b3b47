"""The project browser: samples, their images and flakes; a flake lists its appearances."""

from __future__ import annotations

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QBrush, QColor
from PySide6.QtWidgets import QLineEdit, QTreeWidget, QTreeWidgetItem, QVBoxLayout, QWidget

from flakebook.gui import palette
from flakebook.gui.words import p_text

KIND_ROLE = Qt.ItemDataRole.UserRole
ID_ROLE = Qt.ItemDataRole.UserRole + 1
EXTRA_ROLE = Qt.ItemDataRole.UserRole + 2


class ProjectBrowser(QWidget):
    """A tree: sample > Images > image, sample > Flakes > flake > appearance (image).

    Signals: sampleActivated(sample_id), imageActivated(image_id), flakeActivated(flake_id),
    appearanceActivated(flake_id, image_id).
    """

    sampleActivated = Signal(int)
    imageActivated = Signal(int)
    flakeActivated = Signal(int)
    appearanceActivated = Signal(int, int)

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("projectBrowser")
        self.filter = QLineEdit(self)
        self.filter.setPlaceholderText("Filter flakes and images")
        self.filter.setClearButtonEnabled(True)
        self.filter.textChanged.connect(self._apply_filter)
        self.tree = QTreeWidget(self)
        self.tree.setHeaderLabels(["Item", "Details"])
        self.tree.headerItem().setToolTip(
            1,
            "Material of a sample, pixel size of an image, layer number and its probability of "
            "a flake",
        )
        self.tree.setColumnWidth(0, 170)
        self.tree.setUniformRowHeights(True)
        self.tree.currentItemChanged.connect(self._on_current)
        self.tree.setSelectionMode(QTreeWidget.SelectionMode.ExtendedSelection)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(self.filter)
        lay.addWidget(self.tree)
        self._flake_items: dict[int, QTreeWidgetItem] = {}
        self._image_items: dict[int, QTreeWidgetItem] = {}
        self._quiet = False

    def populate(self, samples: list[dict]) -> None:
        """Fill the tree. ``samples``: dicts with id, name, material, images, flakes; images:
        id, name, um_per_px; flakes: id, label, layers, probability, stale, appearances
        [(image_id, image_name)]."""
        self._quiet = True
        expanded = {
            (it.data(0, KIND_ROLE), it.data(0, ID_ROLE)) for it in self._iter() if it.isExpanded()
        }
        self.tree.clear()
        self._flake_items.clear()
        self._image_items.clear()
        for s in samples:
            top = QTreeWidgetItem([f"{s['name']}", s.get("material") or ""])
            top.setData(0, KIND_ROLE, "sample")
            top.setData(0, ID_ROLE, s["id"])
            top.setToolTip(0, s.get("summary", ""))
            self.tree.addTopLevelItem(top)
            images = QTreeWidgetItem([f"Images ({len(s['images'])})", ""])
            images.setData(0, KIND_ROLE, "images")
            images.setData(0, ID_ROLE, s["id"])
            top.addChild(images)
            for im in s["images"]:
                scale = im.get("um_per_px")
                item = QTreeWidgetItem([im["name"], f"{scale:.4g} µm/px" if scale else "no scale"])
                item.setData(0, KIND_ROLE, "image")
                item.setData(0, ID_ROLE, im["id"])
                item.setToolTip(0, im.get("path", ""))
                images.addChild(item)
                self._image_items[im["id"]] = item
            flakes = QTreeWidgetItem([f"Flakes ({len(s['flakes'])})", ""])
            flakes.setData(0, KIND_ROLE, "flakes")
            flakes.setData(0, ID_ROLE, s["id"])
            top.addChild(flakes)
            for f in s["flakes"]:
                layers = f.get("layers")
                p = f.get("probability")
                text = (
                    "-"
                    if layers is None
                    else (palette.layer_label(layers) + (f", {p_text(p)}" if p is not None else ""))
                )
                if f.get("stale"):
                    text += " (stale)"
                item = QTreeWidgetItem([f["label"], text])
                item.setData(0, KIND_ROLE, "flake")
                item.setData(0, ID_ROLE, f["id"])
                item.setForeground(
                    1, QBrush(QColor(palette.layer_hex(layers))) if layers else QBrush()
                )
                flakes.addChild(item)
                self._flake_items[f["id"]] = item
                for image_id, image_name in f.get("appearances", []):
                    child = QTreeWidgetItem([f"in {image_name}", ""])
                    child.setData(0, KIND_ROLE, "appearance")
                    child.setData(0, ID_ROLE, f["id"])
                    child.setData(0, EXTRA_ROLE, image_id)
                    item.addChild(child)
            top.setExpanded(True)
            images.setExpanded(("images", s["id"]) in expanded or not expanded)
            flakes.setExpanded(("flakes", s["id"]) in expanded or not expanded)
        self._quiet = False
        self._apply_filter(self.filter.text())

    def _iter(self):
        stack = [self.tree.topLevelItem(i) for i in range(self.tree.topLevelItemCount())]
        while stack:
            it = stack.pop()
            yield it
            stack.extend(it.child(i) for i in range(it.childCount()))

    def _apply_filter(self, text: str) -> None:
        text = text.strip().lower()
        for it in self._iter():
            if it.data(0, KIND_ROLE) in ("flake", "image"):
                it.setHidden(bool(text) and text not in it.text(0).lower())

    def selected_images(self) -> list[int]:
        """Images selected in the tree (Ctrl/Shift-click), in tree order; [] for one or none."""
        ids = [
            it.data(0, ID_ROLE)
            for it in self.tree.selectedItems()
            if it.data(0, KIND_ROLE) == "image"
        ]
        return ids if len(ids) > 1 else []

    def select_flake(self, flake_id: int | None) -> None:
        """Show ``flake_id`` as current without emitting signals."""
        self._quiet = True
        item = self._flake_items.get(flake_id) if flake_id is not None else None
        if item is not None:
            self.tree.setCurrentItem(item)
            self.tree.scrollToItem(item)
        else:
            cur = self.tree.currentItem()
            if cur is not None and cur.data(0, KIND_ROLE) in ("flake", "appearance"):
                # no flake current: clicking the one that was must select it again
                self.tree.setCurrentItem(None)
        self._quiet = False

    def select_image(self, image_id: int | None) -> None:
        self._quiet = True
        item = self._image_items.get(image_id) if image_id is not None else None
        if item is not None and self.tree.currentItem() is None:
            self.tree.setCurrentItem(item)
        self._quiet = False

    def _on_current(self, item: QTreeWidgetItem | None, _prev) -> None:
        if self._quiet or item is None:
            return
        kind = item.data(0, KIND_ROLE)
        ident = item.data(0, ID_ROLE)
        if kind == "sample":
            self.sampleActivated.emit(ident)
        elif kind == "image":
            self.imageActivated.emit(ident)
        elif kind == "flake":
            self.flakeActivated.emit(ident)
        elif kind == "appearance":
            self.appearanceActivated.emit(ident, item.data(0, EXTRA_ROLE))
