"""The layer inspector: what is known about the selected flake, and the edits made on it.

Shows the posterior over layer number as a bar chart, the evidence with its reasoning, the model's
contrast-versus-N curve per channel with the measured contrast and its error bar, what would
decide an ambiguity, the holes the flake covers with coverage and margin, tags and notes, and
the manual assignment (a reason is required). Contrast here is C = (R_substrate - R_flake) /
R_substrate per channel, positive when the flake is darker (DESIGN.md).

The inspector computes nothing: :meth:`Inspector.show_flake` takes a plain dict from the
session, and :meth:`Inspector.set_model` takes the curves computed by the optics code in a worker.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QFont
from PySide6.QtWidgets import (
    QApplication,
    QComboBox,
    QFormLayout,
    QGroupBox,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QLineEdit,
    QPlainTextEdit,
    QPushButton,
    QScrollArea,
    QSpinBox,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from flakebook.gui import palette
from flakebook.gui.words import CONTRAST_DEFINITION, p_text

#: Pens for channel curves: red, green and blue channels in Okabe-Ito vermillion, bluish green and
#: blue, told apart by their symbols as well (o, s, t); other channels in the remaining colours.
CHANNEL_STYLE = {
    "r": (palette.OKABE_ITO["vermillion"], "o"),
    "g": (palette.OKABE_ITO["bluish green"], "s"),
    "b": (palette.OKABE_ITO["blue"], "t"),
    "mono": ("#444444", "d"),
}
_SPARE = [palette.OKABE_ITO[k] for k in ("orange", "reddish purple", "sky blue")]


def channel_style(name: str, index: int) -> tuple[str, str]:
    if name in CHANNEL_STYLE:
        return CHANNEL_STYLE[name]
    return _SPARE[index % len(_SPARE)], "+o"[index % 2]


def deciding_hint(
    candidates: list[int],
    model: dict[str, np.ndarray] | None,
    contrast_err: dict[str, float] | None,
    oxide_err_nm: float | None = None,
) -> str:
    """Words for the "what would decide" line when the optics gave no judgement of its own
    (flakebook.optics.layers writes one whenever its contrast evidence is ambiguous): the
    evidence is not ambiguous, the model is still being computed, or the ambiguity comes from
    the combined evidence and only the model differences can be shown."""
    if len(candidates) < 2:
        return "Not ambiguous: no other layer number has 5% or more in the combined evidence."
    a, b = candidates[0], candidates[1]
    if not model:
        return f"{a}L or {b}L: the model curves are still being computed."
    text = (
        f"{a}L or {b}L in the combined evidence; the contrast alone does not call it ambiguous. "
        "Another kind of evidence (a Raman or PL spectrum) or a calibrated oxide"
        + (f" (now ±{oxide_err_nm:g} nm)" if oxide_err_nm else "")
        + " would decide. "
    )
    return text + model_differences(candidates, model, contrast_err)


def model_differences(candidates: list[int], model: dict | None, contrast_err: dict | None) -> str:
    """The model contrast difference per channel between the two leading candidates
    (information only; the optics' decider text, which counts the model's own errors, gives
    the judgement)."""
    if len(candidates) < 2 or not model:
        return ""
    a, b = candidates[0], candidates[1]
    parts = []
    for ch, curve in model.items():
        curve = np.asarray(curve, float)
        if max(a, b) > len(curve):
            continue
        parts.append(f"{ch} {abs(curve[a - 1] - curve[b - 1]):.3f}")
    if not parts:
        return ""
    return f"Model contrast difference {a}L–{b}L per channel: " + ", ".join(parts) + "."


class PanelPlot(pg.PlotWidget):
    """A plot in a scrolling panel: the mouse wheel scrolls the panel unless the user has
    clicked into the plot (until the pointer leaves it); a double-click restores the axes
    (``reset``, set by the owner)."""

    def __init__(self, parent: QWidget | None = None, **kw) -> None:
        super().__init__(parent, **kw)
        self.armed = False
        self.reset = None
        self.setToolTip("Click into the plot to zoom it with the wheel; double-click to reset")

    def mousePressEvent(self, ev) -> None:  # noqa: N802 - Qt API
        self.armed = True
        super().mousePressEvent(ev)

    def mouseDoubleClickEvent(self, ev) -> None:  # noqa: N802 - Qt API
        if self.reset is not None:
            self.reset()
        ev.accept()

    def leaveEvent(self, ev) -> None:  # noqa: N802 - Qt API
        self.armed = False
        super().leaveEvent(ev)

    def wheelEvent(self, ev) -> None:  # noqa: N802 - Qt API
        if self.armed:
            super().wheelEvent(ev)
            return
        # to the scroll area around (the graphics view would not pass it on by itself)
        w = self.parentWidget()
        while w is not None and not isinstance(w, QScrollArea):
            w = w.parentWidget()
        if w is not None:
            QApplication.sendEvent(w.verticalScrollBar(), ev)
        ev.accept()


class Inspector(QScrollArea):
    """The inspector dock's content. Signals carry the user's edits to the window."""

    assignRequested = Signal(int, int, str)  # flake id, layers, reason
    clearAssignmentRequested = Signal(int)
    tagsEdited = Signal(int, list)
    notesEdited = Signal(int, str)
    appearanceRequested = Signal(int, int)  # flake id, image id
    calibrateRequested = Signal()
    primaryTerraceRequested = Signal(int, int)  # flake id, terrace id
    exportPlotRequested = Signal(object)  # the plot widget

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("inspector")
        self.setWidgetResizable(True)
        body = QWidget(self)
        self.setWidget(body)
        self.flake: dict | None = None
        self._ch_items: dict[str, dict] = {}
        self.model_curves: dict[str, np.ndarray] | None = None

        self.title = QLabel("No flake selected", body)
        f = QFont()
        f.setPointSize(f.pointSize() + 3)
        f.setBold(True)
        self.title.setFont(f)
        self.subtitle = QLabel(
            "Select a flake on the image, in the browser or the catalogue.", body
        )
        self.subtitle.setWordWrap(True)

        # Posterior over N
        self.post_plot = pg.PlotWidget(body, background="w")
        self.post_plot.setObjectName("posteriorPlot")
        self.post_plot.setFixedHeight(150)
        self.post_plot.setMouseEnabled(False, False)
        self.post_plot.hideButtons()
        self.post_plot.setLabel("left", "P(N)")
        self.post_plot.setLabel("bottom", "layers N")
        self.post_plot.setYRange(0, 1, padding=0.02)
        self.bars: pg.BarGraphItem | None = None
        self.verdict = QLabel(body)
        self.verdict.setWordWrap(True)
        self.terrace = QComboBox(body)
        self.terrace.setObjectName("primaryTerrace")
        self.terrace.setToolTip(
            "The terrace whose layer number is the flake's: by default the one over a hole, "
            "else the largest"
        )
        self.terrace.activated.connect(self._on_terrace)
        self.terrace_row = QWidget(body)
        tr = QHBoxLayout(self.terrace_row)
        tr.setContentsMargins(0, 0, 0, 0)
        tr.addWidget(QLabel("Layer number of", body))
        tr.addWidget(self.terrace, 1)
        self.evidence = QLabel(body)
        self.evidence.setWordWrap(True)
        self.evidence.setTextFormat(Qt.TextFormat.RichText)

        # Contrast vs N
        self.con_plot = PanelPlot(body, background="w")
        self.con_plot.reset = self._reset_contrast_axes
        self.con_plot.setObjectName("contrastPlot")
        self.con_plot.setFixedHeight(210)
        self.con_plot.hideButtons()
        self.con_plot.setLabel("left", "contrast C")
        self.con_plot.setLabel("bottom", "layers N")
        self.con_key = QLabel(body)
        self.con_key.setTextFormat(Qt.TextFormat.RichText)
        self.con_note = QLabel(
            f"Model per channel (points), measured contrast (line, band ±1σ). {CONTRAST_DEFINITION}.",
            body,
        )
        self.con_note.setWordWrap(True)
        self.decide = QLabel(body)
        self.decide.setWordWrap(True)

        # Holes
        self.holes = QTableWidget(0, 4, body)
        self.holes.setObjectName("coveredHoles")
        self.holes.setHorizontalHeaderLabels(["Hole", "Covered", "Full", "Margin (µm)"])
        self.holes.verticalHeader().setVisible(False)
        self.holes.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Stretch)
        self.holes.setMaximumHeight(120)
        self.holes.setEditTriggers(QTableWidget.EditTrigger.NoEditTriggers)

        self.no_holes = QLabel("No hole under this flake.", body)

        # Appearances
        self.appearances = QLabel(body)
        self.appearances.setWordWrap(True)
        self.appearances.setTextFormat(Qt.TextFormat.RichText)
        self.appearances.linkActivated.connect(self._on_appearance_link)

        # Tags and notes
        self.tags = QLineEdit(body)
        self.tags.setObjectName("tagsEdit")
        self.tags.setPlaceholderText("e.g. raman-next, clean-edge (comma-separated)")
        self.tags.editingFinished.connect(self._on_tags)
        self.notes = QPlainTextEdit(body)
        self.notes.setObjectName("notesEdit")
        self.notes.setMaximumHeight(70)
        self.notes_button = QPushButton("Save notes", body)
        self.notes_button.clicked.connect(self._on_notes)

        # Manual assignment
        self.assign_n = QSpinBox(body)
        self.assign_n.setObjectName("assignLayers")
        self.assign_n.setRange(1, 100)
        self.assign_n.setSuffix(" L")
        self.assign_reason = QLineEdit(body)
        self.assign_reason.setObjectName("assignReason")
        self.assign_reason.setPlaceholderText("Required: why (e.g. shear mode at 18 cm⁻¹)")
        self.assign_button = QPushButton("Record assignment", body)
        self.assign_button.setObjectName("assignButton")
        self.assign_button.setEnabled(False)
        self.assign_reason.textChanged.connect(
            lambda t: self.assign_button.setEnabled(
                bool(t.strip()) and self.flake is not None and not self.read_only
            )
        )
        self.assign_button.clicked.connect(self._on_assign)
        self.clear_button = QPushButton("Back to evidence", body)
        self.clear_button.setToolTip(
            "Remove the manual assignment; the combined evidence decides again"
        )
        self.clear_button.clicked.connect(self._on_clear)
        self.read_only = False
        self.calibrate_button = QPushButton("Calibrate optics from flakes of known N…", body)
        self.calibrate_button.setToolTip(
            "Fit the oxide thickness, contrast scale and n,k model from this sample's flakes "
            "whose layer number is set by hand or confirmed"
        )
        self.calibration_note = QLabel("", body)
        self.calibration_note.setWordWrap(True)
        self.calibrate_button.clicked.connect(self.calibrateRequested)

        lay = QVBoxLayout(body)
        # word-wrapped labels in a scroll area: never let the body shrink below its layout
        lay.setSizeConstraint(QVBoxLayout.SizeConstraint.SetMinAndMaxSize)
        lay.addWidget(self.title)
        lay.addWidget(self.subtitle)
        g1 = QGroupBox("Layer number", body)
        l1 = QVBoxLayout(g1)
        l1.addWidget(self.post_plot)
        l1.addWidget(self.verdict)
        l1.addWidget(self.terrace_row)
        l1.addWidget(self.evidence)
        lay.addWidget(g1)
        g2 = QGroupBox("Contrast against the model", body)
        l2 = QVBoxLayout(g2)
        l2.addWidget(self.con_plot)
        self.con_export = QPushButton("Export plot…", body)
        self.con_export.setToolTip("The contrast-versus-N plot as PNG or SVG")
        self.con_export.clicked.connect(lambda: self.exportPlotRequested.emit(self.con_plot))
        l2.addWidget(self.con_key)
        l2.addWidget(self.con_note)
        l2.addWidget(self.calibration_note)
        l2.addWidget(self.decide)
        l2.addWidget(self.con_export)
        lay.addWidget(g2)
        g3 = QGroupBox("Holes covered", body)
        l3 = QVBoxLayout(g3)
        l3.addWidget(self.holes)
        l3.addWidget(self.no_holes)
        l3.addWidget(self.appearances)
        lay.addWidget(g3)
        g4 = QGroupBox("Tags and notes", body)
        l4 = QFormLayout(g4)
        l4.addRow("Tags", self.tags)
        l4.addRow("Notes", self.notes)
        l4.addRow("", self.notes_button)
        lay.addWidget(g4)
        g5 = QGroupBox("Manual assignment", body)
        l5 = QFormLayout(g5)
        row = QHBoxLayout()
        row.addWidget(self.assign_n)
        row.addWidget(self.assign_button)
        row.addWidget(self.clear_button)
        l5.addRow("Reason", self.assign_reason)
        l5.addRow("Layers", row)
        l5.addRow(self.calibrate_button)
        lay.addWidget(g5)
        lay.addStretch(1)
        self._groups = [g1, g2, g3, g4, g5]
        self.show_flake(None)

    # ---- content -------------------------------------------------------------------------
    def set_read_only(self, read_only: bool) -> None:
        self.read_only = read_only
        for w in (
            self.tags,
            self.notes,
            self.notes_button,
            self.assign_n,
            self.assign_reason,
            self.clear_button,
            self.calibrate_button,
            self.terrace,
        ):
            w.setEnabled(not read_only)
        self.assign_button.setEnabled(False)

    def show_flake(self, flake: dict | None) -> None:
        """Show ``flake`` (a dict from the session) or nothing."""
        self.flake = flake
        for g in self._groups:
            g.setVisible(flake is not None)
        if flake is None:
            if self.bars is not None:
                self.bars.setVisible(False)
            self.title.setText("No flake selected")
            self.subtitle.setText("Select a flake on the image, in the browser or the catalogue.")
            return
        stale = " · stale" if flake.get("stale") else ""
        self.title.setText(flake["label"])
        self.subtitle.setText(
            f"{flake.get('sample', '')} · {flake.get('material', '')} · "
            f"area {flake['area_um2']:.1f} µm²"
            if flake.get("area_um2") is not None
            else f"{flake.get('sample', '')} · {flake.get('material', '')}"
        )
        if stale:
            self.subtitle.setText(self.subtitle.text() + stale)
        self.calibration_note.setText(f"Calibration in use: {flake.get('calibration') or 'none'}")
        self._show_posterior(flake)
        self._show_evidence(flake)
        self._show_contrast(flake)
        self._show_holes(flake)
        self._show_terraces(flake)
        apps = flake.get("appearances") or []
        if apps:
            links = ", ".join(f"<a href='{fid_img}'>{name}</a>" for fid_img, name in apps)
            self.appearances.setText(f"Seen in: {links}")
        else:
            self.appearances.setText("")
        self.tags.setText(", ".join(flake.get("tags") or []))
        self.notes.setPlainText(flake.get("notes") or "")
        layers = flake.get("layers")
        self.assign_n.setMaximum(int(flake.get("max_layers") or 15) + 5)
        self.assign_n.setValue(int(layers) if layers else 1)
        self.assign_reason.clear()
        self.clear_button.setVisible(bool(flake.get("manual")))
        self.set_read_only(self.read_only)
        self._relayout()

    def _show_posterior(self, flake: dict) -> None:
        post = flake.get("posterior")
        plot = self.post_plot
        if self.bars is not None:
            self.bars.setVisible(bool(post))
        if not post:
            self.verdict.setText(
                "No layer evidence yet: find flakes on the image or add a spectrum."
            )
            return
        post = np.asarray(post, float)
        nmax = len(post) - 1
        x = np.arange(1, len(post) + 1)
        brushes = [palette.layer_hex(int(n)) if n <= nmax else palette.THICK_COLOUR for n in x]
        if self.bars is None:  # one bar item, given each flake's bars (never a second one)
            self.bars = pg.BarGraphItem(
                x=x, height=post, width=0.8, brushes=brushes, pen=pg.mkPen("#333333")
            )
            plot.addItem(self.bars)
        else:
            self.bars.setOpts(x=x, height=post, width=0.8, brushes=brushes)
            self.bars.setVisible(True)
        if getattr(self, "_post_nmax", None) != nmax:  # axis changes are slow: only when needed
            self._post_nmax = nmax
            ticks = [(int(n), str(int(n))) for n in x[:-1] if n <= 5 or n % 5 == 0 or n == nmax]
            ticks.append((len(post), palette.layer_label(len(post))))
            plot.getAxis("bottom").setTicks([ticks])
            plot.setXRange(0.4, len(post) + 0.6, padding=0)
        layers = flake.get("layers")
        p = flake.get("probability")
        amb = flake.get("ambiguous_with") or []
        if flake.get("manual"):
            text = f"<b>{palette.layer_label(layers)}</b> set by hand: {flake.get('manual_reason') or ''}"
            if p is not None:
                text += f" (evidence alone: {palette.layer_label(flake.get('evidence_layers'))}, {p_text(flake.get('evidence_probability'))})"
        elif layers is None:
            text = "No layer number yet."
        else:
            text = f"<b>{palette.layer_label(layers)}</b>, {p_text(p)}"
            if amb:
                text += " · ambiguous with " + ", ".join(palette.layer_label(n) for n in amb)
        self.verdict.setText(text)

    def _show_evidence(self, flake: dict) -> None:
        # Contrast, Raman, PL, Si attenuation and AFM side by side: what each says alone, a
        # conflict mark, and the combined probability (flakebook.evidence.combine_report).
        lines = []
        sources_seen: list[str] = []
        for ev in flake.get("evidence") or []:
            src = ""
            if ev.get("source"):
                # a long source (the contrast model's n,k data) once, then by reference
                if ev["source"] in sources_seen:
                    src = " <i>(source as above)</i>"
                else:
                    sources_seen.append(ev["source"])
                    src = f" <i>({ev['source']})</i>"
            stale = " <span style='color:#B05A00'>[stale]</span>" if ev.get("stale") else ""
            says = ""
            if ev.get("layers") is not None:
                weak = " (weak)" if (ev.get("probability") or 0) < 0.5 else ""
                says = (
                    f" → alone most like {palette.layer_label(ev['layers'])}, "
                    f"{p_text(ev['probability'])}{weak}"
                )
            mark = " <b style='color:#C0392B'>⚠ conflict</b>" if ev.get("conflict") else ""
            name = ev.get("name") or ev.get("method", "?")
            lines.append(f"• <b>{name}</b>{says}{mark}: {ev.get('reason') or ''}{src}{stale}")
        combined = flake.get("combined")
        if combined and lines:
            lines.append(
                f"<b>Combined: {palette.layer_label(combined['layers'])}, "
                f"{p_text(combined['probability'])}</b>"
            )
            for text in combined.get("conflicts") or []:
                lines.append(f"<span style='color:#C0392B'>⚠ {text}</span>")
        self.evidence.setText("<br>".join(lines) if lines else "<i>No evidence recorded.</i>")

    def _channel_items(self, ch: str, index: int) -> dict:
        """The plot items of one channel, made once and reused (rebuilding them is slow)."""
        items = self._ch_items.get(ch)
        if items is None:
            colour, symbol = channel_style(ch, index)
            plot = self.con_plot
            items = {
                "colour": colour,
                "model": plot.plot(
                    [],
                    [],
                    pen=pg.mkPen(colour, width=1),
                    symbol=symbol,
                    symbolSize=6,
                    symbolBrush=colour,
                    symbolPen=None,
                ),
                "band": pg.LinearRegionItem(
                    (0, 0),
                    orientation="horizontal",
                    movable=False,
                    brush=pg.mkBrush(colour + "30"),
                    pen=pg.mkPen(None),
                ),
                "line": pg.InfiniteLine(
                    0, angle=0, pen=pg.mkPen(colour, width=1, style=Qt.PenStyle.DashLine)
                ),
                "bar": pg.ErrorBarItem(
                    x=np.array([1.0]),
                    y=np.array([0.0]),
                    height=np.array([0.0]),
                    beam=0.25,
                    pen=pg.mkPen(colour, width=2),
                ),
                "point": plot.plot(
                    [], [], pen=None, symbol="x", symbolSize=10, symbolPen=pg.mkPen(colour, width=2)
                ),
            }
            for key in ("band", "line", "bar"):
                plot.addItem(items[key])
            self._ch_items[ch] = items
        return items

    def _show_contrast(self, flake: dict) -> None:
        plot = self.con_plot
        keys = []
        contrast = flake.get("contrast") or {}
        errs = flake.get("contrast_err") or {}
        raw_model = self.model_curves
        model = (
            None
            if raw_model is None
            else {k: v for k, v in raw_model.items() if not k.startswith("_")}
        )
        decider = (raw_model or {}).get("_decider") or ""
        nmax = int(flake.get("max_layers") or 15)
        best = flake.get("layers")
        n_show = min(nmax, max(6, (best or 1) + 3))
        ys: list[float] = []
        channels = sorted(set(contrast) | set(model or {}))
        for ch, items in self._ch_items.items():
            if ch not in channels:
                for key in ("model", "band", "line", "bar", "point"):
                    items[key].setVisible(False)
        for i, ch in enumerate(channels):
            items = self._channel_items(ch, i)
            colour = items["colour"]
            keys.append(f"<span style='color:{colour}'>&#9679; {ch}</span>")
            if model and ch in model:
                curve = np.asarray(model[ch], float)[:n_show]
                ys.extend(curve.tolist())
                items["model"].setData(np.arange(1, len(curve) + 1), curve)
                items["model"].setVisible(True)
            else:
                items["model"].setVisible(False)
            has = ch in contrast and contrast[ch] is not None
            for key in ("band", "line"):
                items[key].setVisible(has)
            items["bar"].setVisible(bool(has and best))
            items["point"].setVisible(bool(has and best))
            if has:
                c = float(contrast[ch])
                e = float(errs.get(ch) or 0.0)
                ys.extend([c - e, c + e])
                items["band"].setRegion((c - e, c + e))
                items["line"].setValue(c)
                if best:
                    items["bar"].setData(
                        x=np.array([float(best)]), y=np.array([c]), height=np.array([2 * e])
                    )
                    items["point"].setData([best], [c])
        ranges = (n_show, None)
        if ys:
            lo, hi = min(ys), max(ys)
            pad = 0.08 * max(hi - lo, 0.05)
            ranges = (n_show, (round(lo - pad, 3), round(hi + pad, 3)))
        if ranges != getattr(self, "_con_ranges", None):  # range changes are slow: only when needed
            self._con_ranges = ranges
            # never beyond meaningful limits: N within 0.5 .. N_max + 1.5, C within -1 .. 1
            plot.getPlotItem().getViewBox().setLimits(
                xMin=0.5, xMax=nmax + 1.5, yMin=-1.0, yMax=1.0
            )
            self._reset_contrast_axes()
        self.con_key.setText("channels: " + " &nbsp; ".join(keys) if keys else "")
        amb = [best] + list(flake.get("ambiguous_with") or []) if best else []
        text = "<b>What would decide:</b> "
        if decider and len(amb) >= 2 and not flake.get("manual"):
            # the optics' own judgement (model errors included); the numbers below inform it
            text += decider + "<br>" + model_differences(amb, model, errs)
        else:
            text += deciding_hint(amb, model, errs, flake.get("oxide_err_nm"))
        self.decide.setText(text)
        if model is None and contrast:
            self.con_note.setText("Model curves: computing…")
        elif not contrast:
            self.con_note.setText("No contrast measured for this flake.")
        else:
            self.con_note.setText(
                "Model per channel (points), measured contrast (dashed line, band ±1σ, bar at the "
                f"assigned N). {CONTRAST_DEFINITION}."
            )

    def _reset_contrast_axes(self) -> None:
        """The contrast plot's ranges as first shown for this flake."""
        ranges = getattr(self, "_con_ranges", None)
        if ranges is None:
            return
        self.con_plot.setXRange(0.5, ranges[0] + 0.5, padding=0)
        if ranges[1] is not None:
            self.con_plot.setYRange(*ranges[1], padding=0)

    def set_model(self, flake_id: int, curves: dict[str, np.ndarray] | None) -> None:
        """Model contrast per channel (arrays over N = 1..) for flake ``flake_id``."""
        self.model_curves = curves
        if self.flake is not None and self.flake["id"] == flake_id:
            self._show_contrast(self.flake)
            self._relayout()

    def _relayout(self) -> None:
        """Lay the body out again now (label texts changed their heights)."""
        for g in self._groups:
            g.layout().invalidate()
            g.layout().activate()
        self.widget().layout().activate()

    def _show_terraces(self, flake: dict) -> None:
        choices = flake.get("terraces") or []
        self.terrace.blockSignals(True)
        self.terrace.clear()
        for tid, text in choices:
            self.terrace.addItem(text, tid)
        idx = self.terrace.findData(flake.get("primary_terrace_id"))
        self.terrace.setCurrentIndex(max(0, idx))
        self.terrace.blockSignals(False)
        self.terrace_row.setVisible(len(choices) > 1)

    def _on_terrace(self, index: int) -> None:
        if self.flake is None or self.read_only:
            return
        tid = self.terrace.itemData(index)
        if tid is not None and tid != self.flake.get("primary_terrace_id"):
            self.primaryTerraceRequested.emit(self.flake["id"], int(tid))

    def _show_holes(self, flake: dict) -> None:
        holes = flake.get("holes") or []
        self.holes.setRowCount(len(holes))
        for i, h in enumerate(holes):
            cells = [
                str(h.get("label", h.get("hole_id"))),
                f"{100 * h['covered_fraction']:.0f} %"
                if h.get("covered_fraction") is not None
                else "",
                "yes" if h.get("fully_covered") else "no",
                f"{h['margin_um']:.2f}" if h.get("margin_um") is not None else "",
            ]
            for j, c in enumerate(cells):
                self.holes.setItem(i, j, QTableWidgetItem(c))
        self.holes.setVisible(bool(holes))
        self.no_holes.setVisible(not holes)

    # ---- edits ---------------------------------------------------------------------------
    def commit_edits(self) -> None:
        """Send tags and notes typed but not yet saved (called before the selection changes,
        the project closes or the window quits, so that nothing typed is lost)."""
        if self.flake is None or self.read_only:
            return
        self._on_tags()
        self._on_notes()

    def _on_tags(self) -> None:
        if self.flake is None or self.read_only:
            return
        tags = [t.strip() for t in self.tags.text().split(",") if t.strip()]
        if tags != list(self.flake.get("tags") or []):
            self.flake["tags"] = tags  # sent once, also if the window redraws on the way
            self.tagsEdited.emit(self.flake["id"], tags)

    def _on_notes(self) -> None:
        if self.flake is None or self.read_only:
            return
        text = self.notes.toPlainText()
        if text != (self.flake.get("notes") or ""):
            self.flake["notes"] = text
            self.notesEdited.emit(self.flake["id"], text)

    def _on_assign(self) -> None:
        if self.flake is None:
            return
        reason = self.assign_reason.text().strip()
        if reason:
            self.assignRequested.emit(self.flake["id"], self.assign_n.value(), reason)

    def _on_clear(self) -> None:
        if self.flake is not None:
            self.clearAssignmentRequested.emit(self.flake["id"])

    def _on_appearance_link(self, link: str) -> None:
        if self.flake is not None:
            self.appearanceRequested.emit(self.flake["id"], int(link))
