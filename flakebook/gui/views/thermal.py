"""The thermometry view of one membrane: omega(T) and omega(P) with their fits and residuals, the
absorptance for its hole, kappa with its interval and variance shares, and the heat-model
settings (recomputed in a worker, undoable). The laser-safety caution stays visible.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (
    QCheckBox,
    QComboBox,
    QDoubleSpinBox,
    QFileDialog,
    QFormLayout,
    QGridLayout,
    QHBoxLayout,
    QLabel,
    QMessageBox,
    QPushButton,
    QVBoxLayout,
    QWidget,
)

from flakebook.gui.views import View
from flakebook.gui.worker import Job
from flakebook.pipeline_thermal import DEFAULT_MAX_POWER_MW, LASER_SAFETY, ModelOptions
from flakebook.wording import count_text

_AXES = {"temperature": ("stage temperature", "K"), "power": ("power at the sample", "mW")}


class ThermalView(QWidget):
    """One membrane's thermometry; ``show_flake(details)`` with the session's thermal details."""

    importRequested = Signal(str)  # kind
    recomputeRequested = Signal()

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("thermalView")
        self.details: dict | None = None
        self.caution = QLabel(LASER_SAFETY, self)
        self.caution.setObjectName("laserCaution")
        self.caution.setWordWrap(True)
        self.caution.setStyleSheet("font-weight: bold; padding: 4px;")
        self.title = QLabel("No flake selected", self)
        self.plots, self.residuals = {}, {}
        grid = QGridLayout()
        for col, kind in enumerate(("temperature", "power")):
            name, unit = _AXES[kind]
            plot = pg.PlotWidget(self)
            plot.setLabel("left", "mode centre (cm⁻¹)")
            plot.setLabel("bottom", f"{name} ({unit})")
            res = pg.PlotWidget(self)
            res.setMaximumHeight(130)
            res.setLabel("left", "residual (cm⁻¹)")
            res.setXLink(plot)
            # The axes say their unit; a factor pyqtgraph would put beside it ("x0.001") on
            # one plot and not on its linked residuals reads as another unit.
            for w in (plot, res):
                for side in ("left", "bottom"):
                    w.getAxis(side).enableAutoSIPrefix(False)
            self.plots[kind], self.residuals[kind] = plot, res
            grid.addWidget(plot, 0, col)
            grid.addWidget(res, 1, col)
        self.chi = QLabel(self)
        self.chi.setObjectName("chiLabel")
        self.absorptance = QLabel(self)
        self.absorptance.setObjectName("absorptanceLabel")
        self.absorptance.setWordWrap(True)
        self.kappa = QLabel(self)
        self.kappa.setObjectName("kappaLabel")
        self.warnings = QLabel(self)
        self.warnings.setWordWrap(True)
        self.shares = pg.PlotWidget(self)
        self.share_text = QLabel(self)
        self.share_text.setObjectName("shareText")
        self.share_text.setWordWrap(True)
        self.shares.setMaximumHeight(110)
        self.shares.setLabel("bottom", "share of var(ln κ)")
        self.shares.hideAxis("left")

        self.weighting = QComboBox(self)
        self.weighting.setObjectName("weighting")
        self.weighting.addItems(["intensity", "confocal"])
        self.conductance = QDoubleSpinBox(self)
        self.conductance.setObjectName("interfaceConductance")
        self.conductance.setRange(0.0, 1e9)
        self.conductance.setDecimals(0)
        self.conductance.setSpecialValueText("none (edge at the sink)")
        self.conductance.setSuffix(" W/m²K")
        self.conductance_err = QDoubleSpinBox(self)
        self.conductance_err.setObjectName("interfaceConductanceErr")
        self.conductance_err.setRange(0.0, 1e9)
        self.conductance_err.setDecimals(0)
        self.conductance_err.setSpecialValueText("exact")
        self.conductance_err.setPrefix("± ")
        self.conductance_err.setSuffix(" W/m²K")
        self.conductance_err.setToolTip(
            "Standard deviation of g, drawn in the Monte Carlo (log-normal)"
        )
        self.alpha = QDoubleSpinBox(self)
        self.alpha.setObjectName("kappaAlpha")
        self.alpha.setRange(0.0, 3.0)
        self.alpha.setSingleStep(0.1)
        self.max_power = QDoubleSpinBox(self)
        self.max_power.setObjectName("maxPower")
        self.max_power.setRange(0.001, 100.0)
        self.max_power.setDecimals(3)
        self.max_power.setValue(_saved_power_limit())
        self.max_power.setSuffix(" mW")
        self.max_power.valueChanged.connect(_save_power_limit)
        self.max_power.setToolTip("A power step above this asks for confirmation: it can "
                                  "destroy a membrane")  # fmt: skip
        self.recompute = QPushButton("Recompute κ", self)
        self.recompute.setObjectName("recomputeKappa")
        self.recompute.clicked.connect(self.recomputeRequested)
        self.import_t = QPushButton("Import temperature series…", self)
        self.import_t.clicked.connect(lambda: self.importRequested.emit("temperature"))
        self.import_p = QPushButton("Import power series…", self)
        self.import_p.clicked.connect(lambda: self.importRequested.emit("power"))
        self.import_s = QPushButton("Import supported-part power series…", self)
        self.import_s.setToolTip("A power series with the beam on the supported part of the "
                                 "same flake: it fixes the interface conductance g")  # fmt: skip
        self.import_s.clicked.connect(lambda: self.importRequested.emit("supported-power"))
        self.g_from_series = QCheckBox("g from the supported-part series", self)
        self.g_from_series.setObjectName("conductanceFromSeries")
        form = QFormLayout()
        form.addRow("Weighting", self.weighting)
        form.addRow("Supported region, g", self.conductance)
        form.addRow("Error of g", self.conductance_err)
        form.addRow("", self.g_from_series)
        form.addRow("κ(T) exponent α", self.alpha)
        form.addRow("Power limit", self.max_power)
        side = QVBoxLayout()
        side.addLayout(form)
        side.addWidget(self.recompute)
        side.addWidget(self.import_t)
        side.addWidget(self.import_p)
        side.addWidget(self.import_s)
        side.addWidget(self.chi)
        side.addWidget(self.absorptance)
        side.addWidget(self.kappa)
        side.addWidget(self.shares)
        side.addWidget(self.share_text)
        side.addStretch(1)
        panel = QWidget(self)
        panel.setLayout(side)
        panel.setMaximumWidth(420)  # the plots get the rest of the width
        body = QHBoxLayout()
        body.addLayout(grid, 1)
        body.addWidget(panel)
        lay = QVBoxLayout(self)
        lay.addWidget(self.caution)
        lay.addWidget(self.title)
        lay.addLayout(body, 1)
        lay.addWidget(self.warnings)

    def _g_fields(self, *_args) -> None:
        """A fitted g replaces the typed one."""
        typed = not self.g_from_series.isChecked()
        self.conductance.setEnabled(typed)
        self.conductance_err.setEnabled(typed)

    def options(self) -> ModelOptions:
        """The heat-model settings as chosen."""
        fitted = self.g_from_series.isChecked()
        g = 0.0 if fitted else self.conductance.value()
        return ModelOptions(
            weighting=self.weighting.currentText(),
            interface_conductance_w_m2k=g if g > 0 else None,
            interface_conductance_err_w_m2k=self.conductance_err.value() if g > 0 else 0.0,
            conductance_from_series=fitted,
            kappa_alpha=self.alpha.value(),
            draws=4000,
        )

    def show_flake(self, details: dict | None) -> None:
        self.details = details
        for kind in self.plots:
            self.plots[kind].clear()
            self.residuals[kind].clear()
        self.shares.clear()
        self.share_text.setText("")
        if details is None:
            self.title.setText("No flake selected")
            for w in (self.chi, self.absorptance, self.kappa, self.warnings):
                w.setText("")
            return
        self.title.setText(f"<b>{details['label']}</b> ({details['material']}): Raman thermometry")
        for kind, s in details["series"].items():
            self._plot_series(kind, s)
        c = details.get("coefficients")
        if c is None:
            self.chi.setText("No series yet: import a temperature and a power series.")
        else:
            parts = []
            if c["chi_t_cm1_per_k"] is not None:
                parts.append(f"χ_T = {c['chi_t_cm1_per_k']:.4f} ± {c['chi_t_err_cm1_per_k']:.4f} "
                             "cm⁻¹/K")  # fmt: skip
            if c["chi_p_cm1_per_mw"] is not None:
                parts.append(f"χ_P = {c['chi_p_cm1_per_mw']:.3g} ± {c['chi_p_err_cm1_per_mw']:.2g}"
                             " cm⁻¹/mW")  # fmt: skip
            sup = c.get("supported")
            if sup:
                parts.append(f"χ_P on the supported part = {sup['chi_p_cm1_per_mw']:.3g} ± "
                             f"{sup['chi_p_err_cm1_per_mw']:.2g} cm⁻¹/mW")  # fmt: skip
            self.chi.setText("\n".join(parts))
        k = details.get("kappa")
        warns = list(c["warnings"]) if c else []
        if k is None:
            self.kappa.setText("κ: not computed yet")
            self.absorptance.setText("")
        else:
            stale = " (stale)" if k["stale"] else ""
            self.kappa.setText(
                "<b>κ = "
                + kappa_interval_text(k["kappa_w_mk"], k["kappa_p16_w_mk"], k["kappa_p84_w_mk"])
                + f"</b>{stale}"
            )
            where = k.get("hole_bottom") or "?"
            depth = f", {k['hole_depth_nm']:g} nm deep" if k.get("hole_depth_nm") else ""
            self.absorptance.setText(
                f"Absorptance at {k.get('laser_nm') or 0:g} nm over its hole ({where} bottom"
                f"{depth}): {k['absorptance']:.3f} ± {k['absorptance_err'] or 0:.3f}"
                " (thin-film model)"
            )
            shares = k["variance_share"]
            names = [n for n, v in shares.items() if v > 0]
            left = 0.0
            for i, n in enumerate(names):
                v = shares[n]
                color = pg.intColor(i, hues=max(len(names), 1))
                self.shares.addItem(pg.BarGraphItem(x0=[left], y=[0], width=[v], height=0.8,
                                                    brush=color))  # fmt: skip
                name = SHARE_NAMES.get(n, n.replace("_", " "))
                # inside its segment only where the words fit (about 0.022 of the bar a letter)
                if v > 0.022 * len(name) + 0.02:
                    t = pg.TextItem(name, anchor=(0.5, 0.5))
                    t.setPos(left + v / 2, 0)
                    self.shares.addItem(t)
                left += v
            text = ", ".join(
                f"{SHARE_NAMES.get(n, n)} {shares[n]:.0%}"
                for n in sorted(names, key=lambda n: -shares[n])
            )
            self.shares.setToolTip(text)
            self.share_text.setText(f"Variance of ln κ: {text}")
            warns = list(k["warnings"])
            opts = k.get("options") or {}
            self._set_options(opts)
        self.warnings.setText("\n".join(f"• {w}" for w in warns[:6]))

    def _set_options(self, opts: dict) -> None:
        boxes = (self.weighting, self.conductance, self.conductance_err, self.alpha,
                 self.g_from_series)  # fmt: skip
        for w in boxes:
            w.blockSignals(True)
        self.weighting.setCurrentText(opts.get("weighting", "intensity"))
        self.conductance.setValue(opts.get("interface_conductance_w_m2k") or 0.0)
        self.conductance_err.setValue(opts.get("interface_conductance_err_w_m2k") or 0.0)
        self.alpha.setValue(opts.get("kappa_alpha", 0.0))
        self.g_from_series.setChecked(bool(opts.get("conductance_from_series")))
        self._g_fields()
        for w in boxes:
            w.blockSignals(False)

    def _plot_series(self, kind: str, s: dict) -> None:
        pts = s["points"]
        x = np.array([p["x"] for p in pts])
        y = np.array([p["center_cm1"] for p in pts])
        e = np.array([p["center_err_cm1"] for p in pts])
        fit = s["fit"]
        supported = kind == "supported-power"  # drawn with the membrane's power series
        plot, res = (
            self.plots["power" if supported else kind],
            self.residuals["power" if supported else kind],
        )
        top = int(np.argmax(x))
        down = np.arange(x.size) > top  # taken on the way back down (hysteresis check)
        plot.addItem(pg.ErrorBarItem(x=x, y=y, top=e, bottom=e))
        plot.plot(x[~down], y[~down], pen=None, symbol="s" if supported else "o",
                  symbolBrush="c" if supported else "w",
                  name="beam on the supported part" if supported else None)  # fmt: skip
        if down.any():
            plot.plot(x[down], y[down], pen=None, symbol="t", symbolBrush="r",
                      name="on the way down")  # fmt: skip
        xs = np.linspace(x.min(), x.max(), 50)
        line = pg.mkPen("c" if supported else "y", width=2, style=Qt.PenStyle.DashLine if supported
                        else Qt.PenStyle.SolidLine)  # fmt: skip
        plot.plot(xs, fit["intercept"] + fit["slope"] * xs, pen=line)
        if any("does not come back" in w for w in fit["warnings"]):
            t = pg.TextItem("does not come back on the way down", color="r", anchor=(0, 1))
            t.setPos(float(x.min()), float(y.min()))
            plot.addItem(t)
        r = y - (fit["intercept"] + fit["slope"] * x)
        res.addItem(pg.ErrorBarItem(x=x, y=r, top=e, bottom=e))
        res.plot(x, r, pen=None, symbol="o", symbolSize=6)
        res.addLine(y=0)

    def confirm_power(self, powers: list[float]) -> bool:
        """Ask before importing a power series with a step above the limit."""
        limit = self.max_power.value()
        high = [p for p in powers if p > limit]
        if not high:
            return True
        answer = QMessageBox.question(
            self,
            "Power above the limit",
            f"{count_text(len(high), 'step')} of this power series exceed {limit:g} mW at the sample "
            f"(highest {max(high):g} mW). Such a power can destroy a membrane. Import anyway?\n\n"
            + LASER_SAFETY,
        )
        return answer == QMessageBox.StandardButton.Yes


POWER_LIMIT_KEY = "thermometry/max_power_mw"

#: The Monte Carlo inputs of ``variance_share`` (INTERFACE.md) in words.
SHARE_NAMES = {
    "chi_t": "χ_T",
    "chi_p": "χ_P",
    "chi_t+chi_p": "χ_T and χ_P",
    "absorptance": "absorptance",
    "hole_radius": "hole radius",
    "beam_radius": "beam radius",
    "hole_depth": "hole depth",
    "layers": "layer number",
    "interface_conductance": "g",
}


def kappa_interval_text(kappa: float, p16: float, p84: float) -> str:
    """``"26.0 W/mK (16–84%: 21.1–33.0)"``: every number to the decimals of two significant
    figures of the narrower side of the interval (the project's rounding rule)."""
    import math

    half = min(abs(kappa - p16), abs(p84 - kappa))
    digits = 0 if not half > 0 else max(0, 1 - math.floor(math.log10(half)))
    return f"{kappa:.{digits}f} W/mK (16–84%: {p16:.{digits}f}–{p84:.{digits}f})"


def _saved_power_limit() -> float:
    """The user's power limit (mW at the sample), kept across sessions; the default without."""
    from flakebook.gui.window.projects import settings

    try:
        value = float(settings().value(POWER_LIMIT_KEY, DEFAULT_MAX_POWER_MW))
    except (TypeError, ValueError):
        return DEFAULT_MAX_POWER_MW
    return value if 0.001 <= value <= 100.0 else DEFAULT_MAX_POWER_MW


def _save_power_limit(value: float) -> None:
    from flakebook.gui.window.projects import settings

    settings().setValue(POWER_LIMIT_KEY, float(value))


VIEW = View(
    "Thermometry",
    "thermal",
    "Ctrl+4",
    "&Thermometry",
    "showThermal",
    "Show the thermometry of the selected membrane",
    ThermalView,
)


def follow(window, view: ThermalView) -> None:
    """Show the window's selected flake."""
    s = window.session
    if s is None or window.current_flake is None or not s.has_flake(window.current_flake):
        view.show_flake(None)
        return
    view.show_flake(s.thermal_details(window.current_flake))


def import_series(window, view: ThermalView, kind: str, path: str | None = None) -> None:
    """Import a series onto the selected flake (undoable); a power above the limit asks first."""
    from flakebook.errors import InputError

    s = window._need_session(write=True)
    fid = window.current_flake
    if fid is None:
        raise InputError("No flake is selected; select a membrane first.")
    if path is None:
        path, _ = QFileDialog.getOpenFileName(view, f"{kind} series table", "", "CSV (*.csv)")
        if not path:
            return
    if kind != "temperature" and not view.confirm_power(s.series_powers(path)):
        return
    limit = view.max_power.value()
    window.edit(f"Import {kind} series",
                lambda: s.import_series(fid, kind, path, max_power_mw=limit))  # fmt: skip


def recompute_kappa(window, view: ThermalView) -> Job | None:
    """Recompute kappa of the selected flake with the view's settings in a worker; storing it
    is an undoable edit."""
    from flakebook.errors import InputError

    s = window._need_session(write=True)
    fid = window.current_flake
    if fid is None:
        raise InputError("No flake is selected; select a membrane first.")
    run = s.kappa_job(fid, view.options())

    def done(out):
        inputs, result = out
        window._guard(lambda: window.edit("Recompute κ", lambda: s.store_kappa(inputs, result)),
                      "Recompute κ")  # fmt: skip

    return window.jobs.start(
        Job("κ", run), done, lambda exc: window.report_error(exc, "Recompute κ")
    )


def connect(window, view: ThermalView) -> None:
    """Imports and recomputes from the view; the model settings recompute when changed."""
    guard = window._guard
    view.importRequested.connect(lambda k: guard(lambda: import_series(window, view, k), "Import"))
    view.recomputeRequested.connect(lambda: guard(lambda: recompute_kappa(window, view), "κ"))
    view.g_from_series.toggled.connect(view._g_fields)
    for sig in (view.weighting.currentTextChanged, view.conductance.editingFinished,
                view.conductance_err.editingFinished, view.g_from_series.toggled,
                view.alpha.editingFinished):  # fmt: skip
        sig.connect(lambda *_: view.details and view.details.get("kappa") and guard(
            lambda: recompute_kappa(window, view), "κ"))  # fmt: skip
