"""Dialogs: a new project, a sample's substrate stack and hole pattern, an image's microscope.

Each dialog checks its values with the same core functions the command line uses (substrate
parsing from the optics package, objective presets from the imaging package) and refuses to
close on a bad value, saying what is wrong in the dialog itself.
"""

from __future__ import annotations

import re
from pathlib import Path

from PySide6.QtWidgets import (
    QComboBox,
    QDialog,
    QDialogButtonBox,
    QDoubleSpinBox,
    QFileDialog,
    QFormLayout,
    QGroupBox,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPushButton,
    QVBoxLayout,
    QWidget,
)

from flakebook.errors import FlakebookError, InputError

DEFAULT_SUBSTRATE = "SiO2:285,Si"


def layered_materials() -> list[str]:
    """Names of the layered materials in the optics library (those with a layer spacing)."""
    try:
        from flakebook.optics.materials import list_materials

        names = [m.name for m in list_materials() if m.layer_spacing_nm]
    except Exception:  # noqa: BLE001 - the dialog still works with a typed name
        names = []
    names = names or ["MoSe2", "MoS2", "WS2", "WSe2"]
    # transition-metal dichalcogenides first (MoSe2 leading: the default), then the others
    tmd = re.compile(r"^(Mo|W|Re|Nb|Ta|Ti|Zr|Hf|Pt|Pd)(S|Se|Te)2$")
    return sorted(names, key=lambda n: (n != "MoSe2", not tmd.match(n), n))


#: The usual substrate stacks: (key, text, function of (oxide nm, gold nm) -> code string).
STACKS = (
    ("oxide", "SiO2 on Si", lambda ox, au: f"SiO2:{ox:g},Si"),
    (
        "gold",
        "Gold-coated (Au on 5 nm Ti on SiO2 on Si)",
        lambda ox, au: f"Au:{au:g},Ti:5,SiO2:{ox:g},Si",
    ),
    ("si", "Bare Si", lambda ox, au: "Si"),
    ("code", "Other stack, as a code string (advanced)", None),
)
_OXIDE = re.compile(r"^SiO2:([0-9.]+),Si$")
_GOLD = re.compile(r"^Au:([0-9.]+),Ti:5,SiO2:([0-9.]+),Si$")


def check_substrate(spec: str) -> str:
    """Parse a substrate spec with the optics package; returns it normalised."""
    from flakebook.optics.substrate import parse_substrate

    return parse_substrate(spec.strip()).spec


def _spin(
    lo: float, hi: float, value: float, decimals: int = 2, suffix: str = "", step: float = 1.0
) -> QDoubleSpinBox:
    s = QDoubleSpinBox()
    s.setRange(lo, hi)
    s.setDecimals(decimals)
    s.setValue(value)
    s.setSingleStep(step)
    if suffix:
        s.setSuffix(suffix)
    return s


class SampleForm(QWidget):
    """Name, material, substrate stack, hole pattern and notes of a sample."""

    def __init__(self, values: dict | None = None, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        v = values or {}
        self.name = QLineEdit(v.get("name", ""))
        self.name.setObjectName("sampleName")
        self.name.setPlaceholderText("e.g. K7-north")
        self.material = QComboBox()
        self.material.setEditable(True)
        self.material.addItems(layered_materials())
        if v.get("material"):
            self.material.setCurrentText(v["material"])
        self.substrate = QLineEdit(v.get("substrate") or DEFAULT_SUBSTRATE)
        self.substrate.setObjectName("sampleSubstrate")
        self.substrate.setToolTip(
            "The stack as a code string: layers from the top down, MATERIAL:THICKNESS_NM, the "
            "last one without a thickness, e.g. SiO2:285,Si or Au:100,Ti:5,SiO2:285,Si"
        )
        # the usual stacks as a form; the code string above is the advanced choice
        self.stack = QComboBox()
        self.stack.setObjectName("substrateStack")
        for key, text, _fn in STACKS:
            self.stack.addItem(text, key)
        self.oxide = _spin(0.0, 10000, 285.0, 1, " nm", 5)
        self.oxide.setToolTip("Thickness of the SiO2 layer")
        self.gold = _spin(1.0, 10000, 100.0, 1, " nm", 10)
        self.gold.setToolTip("Thickness of the gold coating")
        self._syncing = False
        code = self.substrate.text().strip()
        if m := _OXIDE.match(code):
            self.oxide.setValue(float(m.group(1)))
            self.stack.setCurrentIndex(self.stack.findData("oxide"))
        elif m := _GOLD.match(code):
            self.gold.setValue(float(m.group(1)))
            self.oxide.setValue(float(m.group(2)))
            self.stack.setCurrentIndex(self.stack.findData("gold"))
        elif code == "Si":
            self.stack.setCurrentIndex(self.stack.findData("si"))
        else:
            self.stack.setCurrentIndex(self.stack.findData("code"))
        self.stack.currentIndexChanged.connect(self._stack_changed)
        self.oxide.valueChanged.connect(self._stack_changed)
        self.gold.valueChanged.connect(self._stack_changed)
        self.substrate.textChanged.connect(self._code_typed)
        hp = v.get("hole_pattern") or {}
        self.holes = QGroupBox("Patterned with holes")
        self.holes.setCheckable(True)
        self.holes.setChecked(bool(hp))
        self.bottom = QComboBox()
        self.bottom.addItem("etched down to the silicon", "si")
        self.bottom.addItem("gold at the bottom", "au")
        self.bottom.addItem("open through-hole (nothing below)", "open")
        if hp.get("bottom"):
            self.bottom.setCurrentIndex(max(0, self.bottom.findData(hp["bottom"])))
        self.diameter = _spin(0.1, 1000, hp.get("diameter_um", 4.0), 2, " µm", 0.5)
        self.pitch = _spin(0.0, 10000, hp.get("pitch_um") or 12.0, 2, " µm", 1.0)
        self.pitch.setSpecialValueText("none")
        self.lattice = QComboBox()
        self.lattice.addItems(["square", "hexagonal"])
        self.lattice.setCurrentText(hp.get("lattice", "square"))
        self.angle = _spin(-180, 180, hp.get("angle_deg", 0.0), 1, " °")
        self.depth = _spin(0.0, 1e6, hp.get("depth_nm") or 0.0, 1, " nm", 10)
        self.depth.setSpecialValueText("default (through the top layers)")
        self.depth_err = _spin(0.0, 1e5, hp.get("depth_err_nm") or 0.0, 1, " nm", 1)
        self.depth_err.setPrefix("± ")
        self.depth_err.setSpecialValueText("not measured (5% is assumed in thermometry)")
        self.depth_err.setToolTip("Standard deviation of the hole depth, e.g. from a profilometer")

        def _depth_fields(*_args) -> None:
            open_hole = self.bottom.currentData() == "open"
            self.depth.setEnabled(not open_hole)
            self.depth_err.setEnabled(not open_hole and self.depth.value() > 0)

        self.bottom.currentIndexChanged.connect(_depth_fields)
        self.depth.valueChanged.connect(_depth_fields)
        _depth_fields()
        hl = QFormLayout(self.holes)
        hl.addRow("Bottom", self.bottom)
        hl.addRow("Diameter", self.diameter)
        hl.addRow("Pitch", self.pitch)
        hl.addRow("Lattice", self.lattice)
        hl.addRow("Angle", self.angle)
        hl.addRow("Depth", self.depth)
        hl.addRow("Depth error", self.depth_err)
        self.notes = QLineEdit(v.get("notes", ""))
        form = QFormLayout(self)
        form.addRow("Sample name", self.name)
        form.addRow("Flake material", self.material)
        form.addRow("Substrate", self.stack)
        form.addRow("SiO2 thickness", self.oxide)
        form.addRow("Gold thickness", self.gold)
        form.addRow("Stack code (top down)", self.substrate)
        self._form = form
        self._show_stack_fields()
        form.addRow(self.holes)
        form.addRow("Notes", self.notes)

    def _stack_changed(self, *_args) -> None:
        fn = dict((k, f) for k, _t, f in STACKS)[self.stack.currentData()]
        if fn is not None:
            self._syncing = True
            self.substrate.setText(fn(self.oxide.value(), self.gold.value()))
            self._syncing = False
        self._show_stack_fields()

    def _code_typed(self, _text: str) -> None:
        if not self._syncing and self.stack.currentData() != "code":
            self.stack.blockSignals(True)
            self.stack.setCurrentIndex(self.stack.findData("code"))
            self.stack.blockSignals(False)
            self._show_stack_fields()

    def _show_stack_fields(self) -> None:
        key = self.stack.currentData()
        for widget, shown in (
            (self.oxide, key in ("oxide", "gold")),
            (self.gold, key == "gold"),
        ):
            widget.setEnabled(shown)
            self._form.setRowVisible(widget, shown)

    def values(self) -> dict:
        """The checked values; raises InputError naming the bad one."""
        name = self.name.text().strip()
        if not name:
            raise InputError("The sample needs a name (e.g. the chip's label).")
        material = self.material.currentText().strip()
        if not material:
            raise InputError("Choose the flake material (e.g. MoSe2).")
        substrate = check_substrate(self.substrate.text())
        pattern = None
        if self.holes.isChecked():
            pattern = {
                "bottom": self.bottom.currentData(),
                "diameter_um": self.diameter.value(),
                "pitch_um": self.pitch.value() or None,
                "lattice": self.lattice.currentText(),
                "angle_deg": self.angle.value(),
                "depth_nm": (self.depth.value() or None)
                if self.bottom.currentData() != "open"
                else None,
            }
            if pattern["depth_nm"] is not None and self.depth_err.value() > 0:
                pattern["depth_err_nm"] = self.depth_err.value()
            if pattern["pitch_um"] is not None and pattern["pitch_um"] <= pattern["diameter_um"]:
                raise InputError(
                    f"Hole pitch {pattern['pitch_um']:g} µm is not larger than the diameter "
                    f"{pattern['diameter_um']:g} µm; accepted: a pitch above the diameter, or none."
                )
        return {
            "name": name,
            "material": material,
            "substrate": substrate,
            "hole_pattern": pattern,
            "notes": self.notes.text().strip(),
        }


class _Checked(QDialog):
    """A dialog whose OK checks ``values()`` and shows a refusal inline."""

    def _build(self, body: QWidget) -> None:
        self.error = QLabel()
        self.error.setObjectName("dialogError")
        self.error.setWordWrap(True)
        self.error.setStyleSheet("color: #B00020;")
        self.error.hide()
        self.buttons = QDialogButtonBox(
            QDialogButtonBox.StandardButton.Ok | QDialogButtonBox.StandardButton.Cancel
        )
        self.buttons.accepted.connect(self.accept)
        self.buttons.rejected.connect(self.reject)
        lay = QVBoxLayout(self)
        lay.addWidget(body)
        lay.addWidget(self.error)
        lay.addWidget(self.buttons)

    def accept(self) -> None:
        try:
            self._values = self._collect()
        except FlakebookError as exc:
            self.error.setText(str(exc))
            self.error.show()
            return
        super().accept()

    def values(self) -> dict:
        return self._values


class SampleDialog(_Checked):
    """A sample's substrate stack and hole pattern (new sample when ``values`` is None)."""

    def __init__(self, parent: QWidget | None, values: dict | None) -> None:
        super().__init__(parent)
        self.setObjectName("sampleDialog")
        self.setWindowTitle("New sample" if values is None else f"Sample {values.get('name', '')}")
        self.form = SampleForm(values, self)
        self._build(self.form)

    def _collect(self) -> dict:
        return self.form.values()


class NewProjectDialog(_Checked):
    """Where the new project file goes, and its first sample."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("newProjectDialog")
        self.setWindowTitle("New project")
        body = QWidget(self)
        self.path = QLineEdit()
        self.path.setObjectName("projectPath")
        self.path.setPlaceholderText("folder/campaign.flakebook")
        browse = QPushButton("Choose…")
        browse.clicked.connect(self._browse)
        row = QHBoxLayout()
        row.addWidget(self.path)
        row.addWidget(browse)
        self.form = SampleForm(None, body)
        lay = QVBoxLayout(body)
        f = QFormLayout()
        f.addRow("Project file", row)
        lay.addLayout(f)
        lay.addWidget(QLabel("First sample (chip):"))
        lay.addWidget(self.form)
        self._build(body)

    def _browse(self) -> None:
        path, _ = QFileDialog.getSaveFileName(
            self, "New project", "", "flakebook projects (*.flakebook)"
        )
        if path:
            if not path.endswith(".flakebook"):
                path += ".flakebook"
            self.path.setText(path)

    def _collect(self) -> dict:
        text = self.path.text().strip()
        if not text:
            raise InputError("Choose where the project file goes.")
        path = Path(text)
        if path.suffix != ".flakebook":
            path = (
                path.with_suffix(path.suffix + ".flakebook")
                if path.suffix
                else path.with_suffix(".flakebook")
            )
        if path.exists():
            raise InputError(
                f"{path} already exists; choose another name (open it from File > Open instead)."
            )
        if not path.parent.exists():
            raise InputError(f"The folder {path.parent} does not exist.")
        return {"path": path, "sample": self.form.values()}


class ImageDialog(_Checked):
    """An image's microscope: objective preset (sets the pixel size), apertures, illumination."""

    def __init__(self, parent: QWidget | None, values: dict) -> None:
        super().__init__(parent)
        self.setObjectName("imageDialog")
        self.setWindowTitle(f"Image {values.get('name', '')}")
        body = QWidget(self)
        try:
            from flakebook.imaging.scale import load_objectives

            self.presets = load_objectives()
        except (ImportError, FlakebookError):
            self.presets = {}
        self.objective = QComboBox()
        self.objective.addItem("(none / custom)", "")
        for name, obj in self.presets.items():
            note = " example" if obj.example else ""
            self.objective.addItem(f"{name}  NA {obj.na:g}  {obj.um_per_px:g} µm/px{note}", name)
        idx = self.objective.findData(values.get("objective") or "")
        self.objective.setCurrentIndex(max(0, idx))
        self.pixel = _spin(0.0, 100.0, values.get("pixel_size_um") or 0.0, 5, " µm/px", 0.001)
        self.pixel.setObjectName("pixelSizeEdit")
        self.pixel.setSpecialValueText("unknown")
        self.na_obj = _spin(0.0, 1.6, values.get("na_objective") or 0.0, 2, "", 0.05)
        self.na_obj.setSpecialValueText("unknown")
        self.na_ill = _spin(0.0, 1.6, values.get("na_illumination") or 0.0, 2, "", 0.05)
        self.illumination = QComboBox()
        self.illumination.setEditable(True)
        self.illumination.addItems(["halogen", "blackbody:3200", "band:450-650"])
        self.illumination.setCurrentText(values.get("illumination") or "halogen")
        self.illumination.setToolTip(
            "halogen | blackbody:TEMPERATURE_K | band:LO-HI (nm) | a single wavelength in nm"
        )
        self.objective.currentIndexChanged.connect(self._preset)
        self.note = QLabel(
            "Preset values are examples until measured for your microscope (resources/objectives.json)."
        )
        self.note.setWordWrap(True)
        f = QFormLayout(body)
        f.addRow("Objective", self.objective)
        f.addRow("Pixel size", self.pixel)
        f.addRow("NA objective", self.na_obj)
        f.addRow("NA illumination", self.na_ill)
        f.addRow("Illumination", self.illumination)
        f.addRow(self.note)
        self._build(body)

    def _preset(self) -> None:
        name = self.objective.currentData()
        obj = self.presets.get(name)
        if obj is not None:
            self.pixel.setValue(obj.um_per_px)
            self.na_obj.setValue(obj.na)

    def _collect(self) -> dict:
        return {
            "objective": self.objective.currentData() or "",
            "pixel_size_um": self.pixel.value() or None,
            "na_objective": self.na_obj.value() or None,
            "na_illumination": self.na_ill.value(),
            "illumination": self.illumination.currentText().strip(),
        }
