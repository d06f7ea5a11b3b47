"""The spectra view: a flake's stored spectra, each with its fit.

The raw spectrum (spikes replaced, on the calibrated axis), the estimated baseline, the fitted
lines over it and their residuals, and the fit table with uncertainties; the baseline method, the
line shape and the polarisation can be changed and the spectrum refitted (undoable, through
:mod:`flakebook.gui.tools.spectra`). Spectra are added by dropping files on a flake
(:mod:`flakebook.gui.spectra_drop`). The curves come from flakebook.spectra.analyse, the same
chain as the command line's ``flakebook spectrum``.
"""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, QTimer
from PySide6.QtWidgets import (
    QComboBox,
    QHBoxLayout,
    QLabel,
    QPushButton,
    QSplitter,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from flakebook.gui.views import View

COLUMNS = ("Mode", "Centre", "± (1σ)", "FWHM", "Height", "Area", "S/N")
_CURVES = {
    "data": ("#3a3a3a", 1.0),
    "baseline": ("#8a8a8a", 1.2),
    "fit": ("#1f77b4", 2.0),
}


def _value_err(v, e) -> tuple[str, str]:
    """Centre and error to the digits the error supports (two significant digits)."""
    if v is None:
        return "not found", ""
    if e is None or not e > 0 or not math.isfinite(e):
        return f"{v:.2f}", ""
    d = max(0, 1 - int(math.floor(math.log10(e))))
    return f"{v:.{d}f}", f"{e:.{d}f}"


def _num(v, fmt="{:.3g}") -> str:
    return "" if v is None else fmt.format(v)


class SpectraView(QWidget):
    """The spectra tab (one flake at a time; :meth:`show_flake`)."""

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.setObjectName("spectraView")
        self.window_ = parent
        self.flake_id: int | None = None
        self.spectra: list[dict] = []
        self.title = QLabel("No flake selected. Drop spectrum files on a flake to add them.", self)
        self.title.setWordWrap(True)
        self.chooser = QComboBox(self)
        self.chooser.setObjectName("spectrumChooser")
        self.chooser.setToolTip("The flake's spectra")
        self.chooser.currentIndexChanged.connect(self._draw_current)
        self.baseline = QComboBox(self)
        self.model = QComboBox(self)
        self.polarization = QComboBox(self)
        from flakebook.spectra.analyse import POLARIZATIONS
        from flakebook.spectra.peaks import PEAK_MODELS
        from flakebook.spectra.processing import BASELINE_METHODS

        self.baseline.addItems(list(BASELINE_METHODS))
        self.baseline.setToolTip("Baseline method (pybaselines; imodpoly: Zhao et al. 2007)")
        self.model.addItems(list(PEAK_MODELS))
        self.model.setToolTip("Line shape of the peak fit (lmfit)")
        self.polarization.addItems(list(POLARIZATIONS))
        self.polarization.setToolTip("Parallel or crossed: breathing modes vanish in crossed")
        self.refit_button = QPushButton("Refit", self)
        self.refit_button.setObjectName("refitButton")
        self.refit_button.setToolTip("Fit this spectrum again with the settings chosen (undoable)")
        self.refit_button.clicked.connect(self._refit)
        self.measured_button = QPushButton("AFM / Si line…", self)
        self.measured_button.setObjectName("measuredButton")
        self.measured_button.setToolTip(
            "Record an AFM step height, or the Si Raman line under the flake against the bare "
            "substrate, as layer evidence of this flake (undoable)"
        )
        self.measured_button.setEnabled(False)
        bar = QHBoxLayout()
        bar.addWidget(self.chooser, 2)
        for label, w in (
            ("Baseline", self.baseline),
            ("Line shape", self.model),
            ("Polarisation", self.polarization),
        ):
            bar.addWidget(QLabel(label, self))
            bar.addWidget(w)
        bar.addWidget(self.refit_button)
        bar.addWidget(self.measured_button)
        self.plot = pg.PlotWidget(self)
        self.plot.setBackground("w")
        self.plot.showGrid(x=True, y=True, alpha=0.2)
        self.plot.addLegend(offset=(-10, 10))
        self.resid = pg.PlotWidget(self)
        self.resid.setBackground("w")
        self.resid.setMaximumHeight(140)
        self.resid.setXLink(self.plot)
        self.resid.setLabel("left", "residual")
        self.table = QTableWidget(0, len(COLUMNS), self)
        self.table.setObjectName("fitTable")
        self.table.setHorizontalHeaderLabels(list(COLUMNS))
        self.table.verticalHeader().setVisible(False)
        self.table.horizontalHeader().setStretchLastSection(True)
        self.notes = QLabel("", self)
        self.notes.setWordWrap(True)
        self.notes.setTextFormat(Qt.TextFormat.RichText)
        lower = QWidget(self)
        ll = QVBoxLayout(lower)
        ll.setContentsMargins(0, 0, 0, 0)
        ll.addWidget(self.table)
        ll.addWidget(self.notes)
        plots = QWidget(self)
        pl = QVBoxLayout(plots)
        pl.setContentsMargins(0, 0, 0, 0)
        pl.addWidget(self.plot, 3)
        pl.addWidget(self.resid, 1)
        split = QSplitter(Qt.Orientation.Vertical, self)
        split.addWidget(plots)
        split.addWidget(lower)
        split.setStretchFactor(0, 3)
        split.setStretchFactor(1, 2)
        lay = QVBoxLayout(self)
        lay.addWidget(self.title)
        lay.addLayout(bar)
        lay.addWidget(split, 1)
        self.analysis = None
        self._set_enabled(False)

    # ---- what is shown -----------------------------------------------------------------

    def _set_enabled(self, on: bool) -> None:
        for w in (self.chooser, self.baseline, self.model, self.polarization, self.refit_button):
            w.setEnabled(on)

    def show_flake(self, session, flake_id: int | None) -> None:
        """Show the spectra of ``flake_id`` (None: nothing)."""
        self.session = session
        self.flake_id = flake_id
        keep = self.current_spectrum()
        self.spectra = (
            [] if session is None or flake_id is None else session.spectra_of_flake(flake_id)
        )
        self.chooser.blockSignals(True)
        self.chooser.clear()
        for s in self.spectra:
            stale = " (stale)" if s["stale"] else ""
            self.chooser.addItem(f"{s['name']} ({s['kind']}){stale}", s["id"])
        index = next((i for i, s in enumerate(self.spectra) if s["id"] == keep), 0)
        self.chooser.setCurrentIndex(index if self.spectra else -1)
        self.chooser.blockSignals(False)
        if flake_id is None or session is None:
            self.title.setText("No flake selected. Drop spectrum files on a flake to add them.")
        else:
            label = session.flake_label(flake_id)
            n = len(self.spectra)
            self.title.setText(
                f"<b>{label}</b>: {n} {'spectrum' if n == 1 else 'spectra'}"
                if n
                else f"<b>{label}</b>: no spectra yet. Drop Raman or PL files on the flake "
                "(browser, catalogue or canvas) to fit them."
            )
        self._set_enabled(bool(self.spectra) and not (session and session.read_only))
        self.chooser.setEnabled(bool(self.spectra))
        self.measured_button.setEnabled(
            flake_id is not None and session is not None and not session.read_only
        )
        self._draw_current()

    def current_spectrum(self) -> int | None:
        return self.chooser.currentData() if self.chooser.count() else None

    def current(self) -> dict | None:
        sid = self.current_spectrum()
        return next((s for s in self.spectra if s["id"] == sid), None)

    def _draw_current(self, *_args) -> None:
        self.plot.clear()
        self.resid.clear()
        self.table.setRowCount(0)
        self.notes.setText("")
        self.analysis = None
        s = self.current()
        if s is None:
            return
        for combo, key in (
            (self.baseline, "baseline"),
            (self.model, "peak_model"),
            (self.polarization, "polarization"),
        ):
            value = s["settings"].get(key)
            if value is not None:
                combo.setCurrentText(str(value))
        a = self.session.spectrum_plot(s["id"], s["settings"])
        self.analysis = a
        unit = "Raman shift (cm⁻¹)" if a.x_unit == "cm1" else "photon energy (eV)"
        self.plot.setLabel("bottom", unit)
        self.resid.setLabel("bottom", unit)
        self.plot.plot(a.x, a.y, pen=pg.mkPen(_CURVES["data"][0], width=1), name="spectrum")
        self.plot.plot(
            a.x, a.baseline, pen=pg.mkPen(_CURVES["baseline"][0], width=1.2, style=Qt.PenStyle.DashLine),
            name=f"baseline ({a.settings['baseline']})",
        )  # fmt: skip
        if a.fit is not None:
            for k, region in enumerate(a.fit.regions):
                base = np.interp(region.x, a.x, a.baseline)
                self.plot.plot(
                    region.x, region.best_fit + base, pen=pg.mkPen(_CURVES["fit"][0], width=2),
                    name=f"fit ({a.fit.model})" if k == 0 else None,
                )  # fmt: skip
                self.resid.plot(
                    region.x, region.y - region.best_fit, pen=None, symbol="o", symbolSize=3,
                    symbolBrush="#1f77b4", symbolPen=None,
                )  # fmt: skip
            self.resid.addItem(pg.InfiniteLine(0, angle=0, pen=pg.mkPen("#999")))
        self._fill_table(s, a.kind)

    def _fill_table(self, s: dict, kind: str) -> None:
        rows = s["peaks"]
        self.table.setRowCount(len(rows))
        unit = "cm⁻¹" if kind == "raman" else "eV"
        self.table.setHorizontalHeaderLabels(
            [
                "Mode",
                f"Centre ({unit})",
                f"± ({unit}, 1σ)",
                f"FWHM ({unit})",
                "Height",
                "Area",
                "S/N",
            ]
        )
        for i, p in enumerate(rows):
            c = p["center_cm1"] if kind == "raman" else p.get("center_ev")
            e = p["center_err_cm1"] if kind == "raman" else p.get("center_err_ev")
            w = p["fwhm_cm1"] if kind == "raman" else p.get("fwhm_ev")
            centre, err = _value_err(c if p["found"] else None, e)
            cells = [
                p["mode"],
                centre,
                err,
                _num(w),
                _num(p["height"]),
                _num(p["area"]),
                _num(p["snr"], "{:.1f}"),
            ]
            for j, text in enumerate(cells):
                item = QTableWidgetItem(text)
                item.setFlags(item.flags() & ~Qt.ItemFlag.ItemIsEditable)
                self.table.setItem(i, j, item)
        lines = [f"• {e['feature']}: {e['reason']}" for e in s["evidence"]]
        lines += [f"<span style='color:#B05A00'>{w}</span>" for w in s["warnings"]]
        self.notes.setText("<br>".join(lines))

    def _refit(self) -> None:
        s = self.current()
        if s is None or s["fit_id"] is None or self.window_ is None:
            return
        changes = {}
        for combo, key in (
            (self.baseline, "baseline"),
            (self.model, "peak_model"),
            (self.polarization, "polarization"),
        ):
            if combo.currentText() != s["settings"].get(key):
                changes[key] = combo.currentText()
        if not changes:
            return
        self.window_._guard(
            lambda: self.window_.refit_spectrum(s["fit_id"], **changes), "Refit spectrum"
        )


VIEW = View(
    "Spectra",
    "spectra_view",
    "Ctrl+3",
    "&Spectra view",
    "showSpectra",
    "Show the selected flake's spectra and their fits",
    SpectraView,
)


def connect(window, view: SpectraView) -> None:
    """The view follows the selected flake and every edit, undo and redo; spectrum files
    dropped on a flake (browser, catalogue, canvas) are attached to it."""
    from flakebook.gui import spectra_drop

    def show() -> None:
        if window.tabs.currentWidget() is view:
            window._guard(lambda: view.show_flake(window.session, window.current_flake), "Spectra")

    def update(*_args) -> None:
        QTimer.singleShot(0, show)  # after the window has taken the new selection

    view.measured_button.clicked.connect(
        lambda: window._guard(lambda: window.add_measured_dialog(view.flake_id), "AFM / Si line")
    )
    window.tabs.currentChanged.connect(update)
    window.undo_stack.indexChanged.connect(update)
    window.browser.flakeActivated.connect(update)
    window.catalogue.flakeActivated.connect(update)
    window._spectrum_drops = spectra_drop.install(window)
