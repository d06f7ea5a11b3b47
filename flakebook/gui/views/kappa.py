"""Thermal conductivity against layer number across the catalogue: every flake's latest kappa
(flakebook's and imported ones) with its 16-84% interval, linear or log axes, an optional
comparison series from a CSV (columns ``layers``, ``kappa_w_mk``, optional ``kappa_p16_w_mk``,
``kappa_p84_w_mk``), export to PNG, SVG and CSV. Clicking a point selects its flake everywhere.
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Signal
from PySide6.QtWidgets import (
    QCheckBox,
    QFileDialog,
    QHBoxLayout,
    QLabel,
    QPushButton,
    QVBoxLayout,
    QWidget,
)

from flakebook.errors import InputError
from flakebook.gui.views import View

# Where flakebook's, an external analysis's and a comparison series' points at one N would sit on
# top of each other, each set is moved sideways by this many layers (on log axes by this many
# hundredths of a decade): the groups stand side by side at every N, each within a quarter-layer
# of its integer.
DODGE = {"flakebook": -0.12, "external": 0.12, "comparison": 0.0}

CSV_COLUMNS = ("flake_id", "source", "layers", "kappa_w_mk", "kappa_p16_w_mk", "kappa_p84_w_mk",
               "stale", "method")  # fmt: skip


class KappaView(QWidget):
    """kappa versus N; ``set_points(rows)`` with the session's kappa points."""

    flakeActivated = Signal(int)

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("kappaView")
        self.rows: list[dict] = []
        self.comparison: list[dict] = []
        self.plot = pg.PlotWidget(self)
        self.plot.setLabel("left", "in-plane thermal conductivity κ (W/mK)")
        self.plot.setLabel("bottom", "layer number N")
        self.plot.addLegend()
        self.log_x = QCheckBox("log N", self)
        self.log_y = QCheckBox("log κ", self)
        self.log_x.toggled.connect(self._redraw)
        self.log_y.toggled.connect(self._redraw)
        self.compare = QPushButton("Comparison CSV…", self)
        self.compare.clicked.connect(self._load_dialog)
        self.png = QPushButton("Export PNG/SVG…", self)
        self.png.clicked.connect(self._picture_dialog)
        self.csv_button = QPushButton("Export CSV…", self)
        self.csv_button.clicked.connect(self._csv_dialog)
        self.note = QLabel("Error bars: 16–84% interval. Raman thermometry heats the sample with "
                           "a laser: follow your institution's laser-safety rules.", self)  # fmt: skip
        bar = QHBoxLayout()
        for w in (self.log_x, self.log_y, self.compare, self.png, self.csv_button):
            bar.addWidget(w)
        bar.addStretch(1)
        lay = QVBoxLayout(self)
        lay.addLayout(bar)
        lay.addWidget(self.plot, 1)
        lay.addWidget(self.note)
        self._scatter: list[tuple[pg.ScatterPlotItem, list[dict]]] = []

    def set_points(self, rows: list[dict]) -> None:
        self.rows = list(rows)
        self._redraw()

    def _redraw(self, *_args) -> None:
        self.plot.clear()
        self._scatter = []
        lx, ly = self.log_x.isChecked(), self.log_y.isChecked()
        # Error bars and scatter points know nothing of the plot's log mode: both are given
        # log10 values, on linear axes labelled as logarithmic.
        self.plot.setLogMode(x=lx, y=ly)
        groups = [("flakebook", "o", (80, 170, 255)), ("external", "s", (255, 170, 60))]
        sets = [(name, sym, col, [r for r in self.rows if r["source"] == name])
                for name, sym, col in groups]  # fmt: skip
        if self.comparison:
            sets.append(("comparison", "t", (160, 160, 160), self.comparison))
        for name, sym, col, rows in sets:
            if not rows:
                continue
            n = np.array([float(r["layers"]) for r in rows])
            k = np.array([float(r["kappa_w_mk"]) for r in rows])
            lo = np.array([float(r.get("kappa_p16_w_mk") or r["kappa_w_mk"]) for r in rows])
            hi = np.array([float(r.get("kappa_p84_w_mk") or r["kappa_w_mk"]) for r in rows])
            d = DODGE[name]
            xs = np.log10(n) + 0.1 * d if lx else n + d
            if ly:
                ys, top, bottom = (
                    np.log10(k),
                    np.log10(hi) - np.log10(k),
                    np.log10(k) - np.log10(lo),
                )
            else:
                ys, top, bottom = k, hi - k, k - lo
            self.plot.addItem(pg.ErrorBarItem(x=xs, y=ys, top=top, bottom=bottom, pen=col))
            sc = pg.ScatterPlotItem(x=xs, y=ys, symbol=sym, size=10, brush=col, name=name,
                                    data=list(range(len(rows))))  # fmt: skip
            if name != "comparison":
                sc.sigClicked.connect(lambda item, pts, *_, rows=rows: self._clicked(rows, pts))
            self.plot.addItem(sc)
            self._scatter.append((sc, rows))
        self._layer_axis(lx, sets)

    def _layer_axis(self, log_x: bool, sets) -> None:
        """The layer number is an integer: ticks at whole N only, the range half a layer beyond
        the outermost points (on log axes the same in decades)."""
        ns = [float(r["layers"]) for *_, rows in sets for r in rows]
        top = max([3.0, *ns])
        whole = range(1, int(np.ceil(top)) + 1)
        step = max(1, int(np.ceil(len(whole) / 12)))  # at most about a dozen labels
        shown = [i for i in whole if (i - 1) % step == 0 or i == whole[-1]]
        axis = self.plot.getAxis("bottom")
        if log_x:
            axis.setTicks([[(float(np.log10(i)), str(i)) for i in shown]])
            self.plot.setXRange(np.log10(0.8), np.log10(top * 1.25), padding=0)
        else:
            axis.setTicks([[(float(i), str(i)) for i in shown]])
            self.plot.setXRange(0.5, top + 0.5, padding=0)

    def _clicked(self, rows: list[dict], points) -> None:
        if len(points):
            self.flakeActivated.emit(int(rows[int(points[0].data())]["id"]))

    def load_comparison(self, path: str | Path) -> int:
        """Read a comparison series; returns its number of points."""
        path = Path(path)
        try:
            reader = csv.DictReader(path.read_text(encoding="utf-8-sig").splitlines())
        except (OSError, UnicodeDecodeError) as exc:
            raise InputError(f"{path} cannot be read as UTF-8 text ({exc})") from None
        header = reader.fieldnames or []
        if "layers" not in header or "kappa_w_mk" not in header:
            raise InputError(f"{path}: accepted: a CSV with the columns layers and kappa_w_mk "
                             "(optionally kappa_p16_w_mk, kappa_p84_w_mk)")  # fmt: skip
        rows = []
        for lineno, r in enumerate(reader, start=2):
            try:
                row = {"layers": float(r["layers"]), "kappa_w_mk": float(r["kappa_w_mk"])}
                for c in ("kappa_p16_w_mk", "kappa_p84_w_mk"):
                    row[c] = float(r[c]) if r.get(c) else None
            except (TypeError, ValueError):
                raise InputError(f"{path} line {lineno}: not a number; accepted: numbers") from None
            if row["layers"] <= 0 or row["kappa_w_mk"] <= 0:
                raise InputError(f"{path} line {lineno}: layers and kappa must be positive")
            rows.append(row)
        self.comparison = rows
        self._redraw()
        return len(rows)

    def export_csv(self, path: str | Path) -> Path:
        path = Path(path)
        with path.open("w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(CSV_COLUMNS)
            for r in self.rows:
                w.writerow(["" if r.get(c if c != "flake_id" else "label") is None
                            else r.get(c if c != "flake_id" else "label") for c in CSV_COLUMNS])  # fmt: skip
        return path

    def export_picture(self, path: str | Path) -> Path:
        from flakebook.render.export import widget_picture

        return widget_picture(self.plot, path)

    def _load_dialog(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Comparison series", "", "CSV (*.csv)")
        if path:
            self.load_comparison(path)

    def _picture_dialog(self) -> None:
        path, _ = QFileDialog.getSaveFileName(
            self, "Export plot", "kappa.svg", "SVG (*.svg);;PNG (*.png)"
        )
        if path:
            self.export_picture(path)

    def _csv_dialog(self) -> None:
        path, _ = QFileDialog.getSaveFileName(self, "Export κ", "kappa.csv", "CSV (*.csv)")
        if path:
            self.export_csv(path)


VIEW = View(
    "κ vs N",
    "kappa_view",
    "Ctrl+5",
    "κ &versus layers",
    "showKappa",
    "Show thermal conductivity against layer number",
    KappaView,
)


def follow(window, view: KappaView) -> None:
    """Redraw from the project."""
    s = window.session
    view.set_points([] if s is None else s.kappa_points())


def connect(window, view: KappaView) -> None:
    """Clicking a point selects its flake everywhere."""
    view.flakeActivated.connect(lambda f: window.select_flake(f))
