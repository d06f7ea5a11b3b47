"""The catalogue: every flake in a sortable, filterable table, with export.

:class:`CatalogueModel` holds one row per flake (dicts from the store's catalogue query);
:class:`CatalogueFilter` narrows it (text, layer range, "fully covers a hole", least margin, tag,
stale only); :class:`CatalogueView` is the widget with the filter bar and the actions (recompute
stale, CSV export, picture export through :mod:`flakebook.render`).
"""

from __future__ import annotations

import csv
import math
from collections.abc import Callable
from pathlib import Path

from PySide6.QtCore import (
    QAbstractTableModel,
    QModelIndex,
    QSize,
    QSortFilterProxyModel,
    Qt,
    Signal,
)
from PySide6.QtGui import QBrush, QColor, QPixmap
from PySide6.QtWidgets import (
    QAbstractItemView,
    QCheckBox,
    QDoubleSpinBox,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QLineEdit,
    QPushButton,
    QSpinBox,
    QTableView,
    QVBoxLayout,
    QWidget,
)

from flakebook.errors import InputError
from flakebook.gui import palette
from flakebook.gui.views import View
from flakebook.gui.words import probability

#: (key, header, tooltip) of the columns, in order. Keys follow INTERFACE.md's export.
COLUMNS = (
    ("flake_id", "Flake", "The flake's name in this project"),
    ("sample", "Sample", "The chip the flake lies on"),
    ("area_um2", "Area (µm²)", "Area of the flake's outline in its primary appearance"),
    ("layers", "Layers", "Layer number of the primary terrace (most likely N)"),
    ("probability", "Probability", "Probability of that layer number (combined evidence)"),
    (
        "ambiguous_with",
        "Or perhaps",
        "Other layer numbers with a probability of 5% or more",
    ),
    ("manual", "Set by", "'hand' when a person recorded the assignment, else 'evidence'"),
    ("holes_covered", "Holes", "Holes the flake covers fully"),
    (
        "margin_um",
        "Margin (µm)",
        "Largest margin among the fully covered holes, from the hole's edge to the flake's edge",
    ),
    (
        "thickness_nm",
        "Thickness (nm)",
        "Layers times the material's layer spacing (or a result's own)",
    ),
    (
        "kappa_w_mk",
        "κ (W/mK)",
        "In-plane thermal conductivity of the latest result (none yet: empty)",
    ),
    ("tags", "Tags", "Tags, comma-separated"),
    (
        "stale",
        "Stale",
        "An input changed since this was computed; recompute to bring it up to date",
    ),
)
KEYS = tuple(c[0] for c in COLUMNS)
ID_ROLE = Qt.ItemDataRole.UserRole + 10
_ROOT = QModelIndex()
SORT_ROLE = Qt.ItemDataRole.UserRole + 11


def _text(key: str, value) -> str:
    if value is None:
        return ""
    if key == "probability":
        return probability(value)
    if key in ("area_um2", "margin_um", "thickness_nm"):
        return f"{value:.1f}"
    if key == "kappa_w_mk":
        return f"{value:.3g}"
    if key == "layers":
        return palette.layer_label(value)
    if key == "stale":
        return "stale" if value else ""
    if key == "manual":
        return "hand" if value else "evidence"
    if key == "ambiguous_with":
        return ", ".join(palette.layer_label(int(n)) for n in value)
    if isinstance(value, list | tuple):
        return ", ".join(str(v) for v in value)
    return str(value)


class CatalogueModel(QAbstractTableModel):
    """One row per flake; ``thumbnail(row) -> QPixmap | None`` decorates the first column."""

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.rows: list[dict] = []
        self.thumbnail: Callable[[dict], QPixmap | None] | None = None
        self._thumbs: dict[int, QPixmap | None] = {}

    def set_rows(self, rows: list[dict]) -> None:
        self.beginResetModel()
        self.rows = list(rows)
        self._thumbs = {k: v for k, v in self._thumbs.items() if any(r["id"] == k for r in rows)}
        self.endResetModel()

    def forget_thumbnail(self, flake_id: int) -> None:
        self._thumbs.pop(flake_id, None)

    def rowCount(self, parent=_ROOT) -> int:  # noqa: N802 - Qt API
        return 0 if parent.isValid() else len(self.rows)

    def columnCount(self, parent=_ROOT) -> int:  # noqa: N802 - Qt API
        return 0 if parent.isValid() else len(COLUMNS)

    def headerData(self, section, orientation, role=Qt.ItemDataRole.DisplayRole):  # noqa: N802
        if orientation == Qt.Orientation.Horizontal:
            if role == Qt.ItemDataRole.DisplayRole:
                return COLUMNS[section][1]
            if role == Qt.ItemDataRole.ToolTipRole:
                return COLUMNS[section][2]
        return None

    def data(self, index, role=Qt.ItemDataRole.DisplayRole):
        if not index.isValid():
            return None
        row = self.rows[index.row()]
        key = KEYS[index.column()]
        value = row.get(key)
        if role == Qt.ItemDataRole.DisplayRole:
            return _text(key, value)
        if role == SORT_ROLE:
            if isinstance(value, list | tuple):
                return len(value) if key != "tags" else ", ".join(map(str, value))
            if value is None:
                return -math.inf if key not in ("flake_id", "sample", "tags") else ""
            return value
        if role == ID_ROLE:
            return row["id"]
        if role == Qt.ItemDataRole.ForegroundRole and key == "layers" and value:
            return QBrush(QColor("#000000"))
        if role == Qt.ItemDataRole.BackgroundRole:
            if key == "layers" and value:
                c = QColor(palette.layer_hex(value))
                c.setAlpha(150)
                return QBrush(c)
            if row.get("stale"):
                return QBrush(QColor("#FFF1CC"))
        if role == Qt.ItemDataRole.DecorationRole and index.column() == 0 and self.thumbnail:
            fid = row["id"]
            if self._thumbs.get(fid) is None:
                self._thumbs[fid] = self.thumbnail(row)
            return self._thumbs[fid]
        if role == Qt.ItemDataRole.ToolTipRole and row.get("stale"):
            return "Stale: " + (
                row.get("stale_reason") or "an input changed since this was computed"
            )
        return None


class CatalogueFilter(QSortFilterProxyModel):
    """Text, layer range, fully-covers-a-hole, least margin (µm), tag and stale-only filters."""

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.text = ""
        self.layers_min = 0
        self.layers_max = 100
        self.covers_hole = False
        self.margin_min_um = 0.0
        self.stale_only = False
        self.setSortRole(SORT_ROLE)

    def update(self, **kw) -> None:
        """Change filter settings and re-filter."""
        staged = hasattr(self, "beginFilterChange")
        if staged:
            self.beginFilterChange()
        for k, v in kw.items():
            if not hasattr(self, k):
                raise AttributeError(k)
            setattr(self, k, v)
        if staged:
            self.endFilterChange(QSortFilterProxyModel.Direction.Rows)
        else:
            self.invalidateRowsFilter()

    def filterAcceptsRow(self, source_row, source_parent) -> bool:  # noqa: N802 - Qt API
        row = self.sourceModel().rows[source_row]
        if self.text:
            hay = " ".join(
                str(row.get(k) or "") for k in ("flake_id", "sample", "tags", "notes")
            ).lower()
            if not all(word in hay for word in self.text.lower().split()):
                return False
        layers = row.get("layers")
        if self.layers_min > 0 or self.layers_max <= palette.MAX_LAYERS:
            if layers is not None and layers > palette.MAX_LAYERS:
                layers = palette.MAX_LAYERS + 1  # the "more" bin
            if layers is None or not (self.layers_min <= layers <= self.layers_max):
                return False
        if self.covers_hole and not row.get("holes_covered"):
            return False
        if self.margin_min_um > 0:
            m = row.get("margin_um")
            if m is None or m <= self.margin_min_um:
                return False
        if self.stale_only and not row.get("stale"):
            return False
        return True

    def visible_rows(self) -> list[dict]:
        src = self.sourceModel()
        return [src.rows[self.mapToSource(self.index(i, 0)).row()] for i in range(self.rowCount())]


class LayerSpin(QSpinBox):
    """A layer number; its top value is the "more than N_max" bin, shown as ">15L"."""

    def textFromValue(self, value: int) -> str:  # noqa: N802 - Qt API
        if value > palette.MAX_LAYERS:
            return palette.layer_label(value)
        return str(value)

    def valueFromText(self, text: str) -> int:  # noqa: N802 - Qt API
        if text.strip().startswith(">"):
            return palette.MAX_LAYERS + 1
        return int(text.strip().rstrip("L") or 0)

    def validate(self, text, pos):
        from PySide6.QtGui import QValidator

        t = text.strip()
        if t.startswith(">") or t.rstrip("L").isdigit() or not t:
            return QValidator.State.Acceptable if t else QValidator.State.Intermediate, text, pos
        return QValidator.State.Invalid, text, pos


class CatalogueView(QWidget):
    """The catalogue tab. Signals: flakeActivated(id), recomputeRequested(), exportCsvRequested(),
    exportPictureRequested()."""

    flakeActivated = Signal(int)
    recomputeRequested = Signal()
    exportCsvRequested = Signal()
    exportPictureRequested = Signal()
    tagShownRequested = Signal()

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("catalogue")
        self.model = CatalogueModel(self)
        self.proxy = CatalogueFilter(self)
        self.proxy.setSourceModel(self.model)
        self.table = QTableView(self)
        self.table.setObjectName("catalogueTable")
        self.table.setModel(self.proxy)
        self.table.setSortingEnabled(True)
        self.table.sortByColumn(0, Qt.SortOrder.AscendingOrder)
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.table.setAlternatingRowColors(True)
        self.table.verticalHeader().setVisible(False)
        self.table.verticalHeader().setDefaultSectionSize(34)
        self.table.setIconSize(QSize(44, 30))
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Interactive)
        self.table.horizontalHeader().setStretchLastSection(True)
        self.table.selectionModel().currentRowChanged.connect(self._on_current)

        self.search = QLineEdit(self)
        self.search.setPlaceholderText("Search name, sample, tags, notes")
        self.search.setClearButtonEnabled(True)
        self.search.textChanged.connect(lambda t: self.proxy.update(text=t))
        self.lmin = QSpinBox(self)
        top = palette.MAX_LAYERS + 1  # the "more than N_max" bin
        self.lmin.setRange(0, top)
        self.lmin.setSpecialValueText("any")
        self.lmin.setToolTip("Fewest layers shown (any: no lower bound)")
        self.lmax = LayerSpin(self)
        self.lmax.setRange(1, top)
        self.lmax.setValue(top)
        self.lmax.setToolTip("Most layers shown")
        self.lmin.valueChanged.connect(lambda v: self.proxy.update(layers_min=v))
        self.lmax.valueChanged.connect(lambda v: self.proxy.update(layers_max=v))
        self.covers = QCheckBox("fully covers a hole", self)
        self.covers.toggled.connect(lambda v: self.proxy.update(covers_hole=v))
        self.margin = QDoubleSpinBox(self)
        self.margin.setRange(0, 1000)
        self.margin.setDecimals(1)
        self.margin.setSingleStep(0.5)
        self.margin.setSuffix(" µm")
        self.margin.setToolTip("Only flakes whose margin around a covered hole is larger than this")
        self.margin.valueChanged.connect(lambda v: self.proxy.update(margin_min_um=v))
        self.stale = QCheckBox("stale only", self)
        self.stale.toggled.connect(lambda v: self.proxy.update(stale_only=v))
        self.count = QLabel(self)
        self.proxy.rowsInserted.connect(self._count)
        self.proxy.rowsRemoved.connect(self._count)
        self.proxy.modelReset.connect(self._count)
        self.proxy.layoutChanged.connect(self._count)

        self.tag_button = QPushButton("Tag shown flakes…", self)
        self.tag_button.setObjectName("tagShown")
        self.tag_button.setToolTip("Add one tag (e.g. thermometry) to every flake the filters show")
        self.tag_button.clicked.connect(self.tagShownRequested)
        self.recompute_button = QPushButton("Recompute stale", self)
        self.recompute_button.clicked.connect(self.recomputeRequested)
        self.csv_button = QPushButton("Export CSV…", self)
        self.csv_button.clicked.connect(self.exportCsvRequested)
        self.pic_button = QPushButton("Export picture…", self)
        self.pic_button.setToolTip("The table as shown (filtered and sorted), as PNG or SVG")
        self.pic_button.clicked.connect(self.exportPictureRequested)

        bar = QHBoxLayout()
        bar.addWidget(self.search, 2)
        bar.addWidget(QLabel("Layers", self))
        bar.addWidget(self.lmin)
        bar.addWidget(QLabel("to", self))
        bar.addWidget(self.lmax)
        bar.addWidget(self.covers)
        bar.addWidget(QLabel("margin >", self))
        bar.addWidget(self.margin)
        bar.addWidget(self.stale)
        bar.addStretch(1)
        bar2 = QHBoxLayout()
        bar2.addWidget(self.count)
        bar2.addStretch(1)
        bar2.addWidget(self.tag_button)
        bar2.addWidget(self.recompute_button)
        bar2.addWidget(self.csv_button)
        bar2.addWidget(self.pic_button)
        lay = QVBoxLayout(self)
        lay.addLayout(bar)
        lay.addWidget(self.table)
        lay.addLayout(bar2)
        self._quiet = False
        self._count()

    def set_rows(self, rows: list[dict]) -> None:
        current = self.current_flake()
        self._quiet = True
        first = not self.model.rows
        self.model.set_rows(rows)
        if first and rows:
            self._fit_columns()
        self.select_flake(current)
        self._quiet = False
        self._count()

    def _fit_columns(self) -> None:
        """Column widths from the header and the first rows (not every row: that is slow)."""
        fm = self.table.fontMetrics()
        for i, (key, head, _tip) in enumerate(COLUMNS):
            texts = [head] + [_text(key, r.get(key)) for r in self.model.rows[:50]]
            w = max(fm.horizontalAdvance(t) for t in texts) + 18
            if i == 0:
                w += 50  # the thumbnail
            self.table.setColumnWidth(i, min(w, 260))

    def _count(self, *args) -> None:
        total = len(self.model.rows)
        shown = self.proxy.rowCount()
        stale = sum(1 for r in self.model.rows if r.get("stale"))
        text = f"{shown} of {total} flakes shown"
        if stale:
            text += f" · {stale} stale"
        self.count.setText(text)
        self.recompute_button.setEnabled(stale > 0)

    def current_flake(self) -> int | None:
        idx = self.table.currentIndex()
        return idx.data(ID_ROLE) if idx.isValid() else None

    def select_flake(self, flake_id: int | None) -> None:
        """Select the row of ``flake_id`` without emitting flakeActivated."""
        quiet, self._quiet = self._quiet, True
        try:
            for i in range(self.proxy.rowCount() if flake_id is not None else 0):
                idx = self.proxy.index(i, 0)
                if idx.data(ID_ROLE) == flake_id:
                    self.table.setCurrentIndex(idx)
                    self.table.scrollTo(idx)
                    return
            # no row is current either: a click on the row that was current must select it
            self.table.clearSelection()
            self.table.selectionModel().clearCurrentIndex()
        finally:
            self._quiet = quiet

    def _on_current(self, current, _previous) -> None:
        if self._quiet or not current.isValid():
            return
        self.flakeActivated.emit(current.data(ID_ROLE))

    def export_csv(self, path: str | Path, *, visible_only: bool = True) -> Path:
        """Write the rows (as filtered and sorted) to CSV with INTERFACE.md's keys."""
        path = Path(path)
        if path.suffix.lower() != ".csv":
            raise InputError(
                f"{path.name}: the catalogue is exported as CSV; accepted: a .csv file name"
            )
        rows = self.proxy.visible_rows() if visible_only else self.model.rows
        with path.open("w", newline="", encoding="utf-8") as fh:
            writer = csv.writer(fh)
            writer.writerow(KEYS)
            for r in rows:
                out = []
                for k in KEYS:
                    v = r.get(k)
                    if isinstance(v, list | tuple):
                        v = ";".join(str(x) for x in v)
                    elif isinstance(v, bool):
                        v = "true" if v else "false"
                    out.append("" if v is None else v)
                writer.writerow(out)
        return path

    def export_picture(self, path: str | Path) -> Path:
        """The table as shown, drawn offscreen to PNG or SVG (flakebook.render)."""
        from flakebook.render.export import table_picture

        rows = self.proxy.visible_rows()
        header = [c[1] for c in COLUMNS]
        cells = [[_text(k, r.get(k)) for k in KEYS] for r in rows]
        return table_picture(
            path,
            header,
            cells,
            title=f"flakebook catalogue · {len(rows)} flakes",
            marks=[bool(r.get("stale")) for r in rows],
        )


# ---- the view in the window (flakebook.gui.views) ----------------------------------------------
VIEW = View(
    "Catalogue",
    "catalogue",
    "Ctrl+2",
    "&Catalogue",
    "showCatalogue",
    "Show the catalogue",
    CatalogueView,
)


def connect(window, cat: CatalogueView) -> None:
    """Selecting, tagging, recomputing and exporting from the catalogue."""
    guard = window._guard
    cat.flakeActivated.connect(lambda f: window.select_flake(f, centre=True))
    cat.tagShownRequested.connect(lambda: guard(window.tag_shown_dialog, "Tag shown flakes"))
    cat.recomputeRequested.connect(lambda: guard(window.recompute_stale, "Recompute stale"))
    cat.exportCsvRequested.connect(lambda: guard(window.export_csv_dialog, "Export CSV"))
    cat.exportPictureRequested.connect(
        lambda: guard(window.export_picture_dialog, "Export picture")
    )
    cat.table.doubleClicked.connect(lambda idx: window.tabs.setCurrentWidget(window.canvas))
