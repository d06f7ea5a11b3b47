"""The window's layer-calibration dialog: which flakes of known layer number to fit.

It says what a calibration needs (flakes of this sample whose layer number is set by hand or
confirmed, with a contrast measured on the bare substrate), lists them as a checklist, and says
in words what is missing. The fit itself is ``flakebook.pipeline_calibration`` (the same one as
``flakebook calibrate PROJECT``), run by the window in a worker.
"""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import (
    QDialog,
    QDialogButtonBox,
    QLabel,
    QListWidget,
    QListWidgetItem,
    QVBoxLayout,
    QWidget,
)

from flakebook.pipeline_calibration import MIN_KNOWN_FLAKES, KnownOnSample


class CalibrationDialog(QDialog):
    """Pick the known flakes of a sample for a layer calibration."""

    def __init__(
        self,
        sample_name: str,
        known: list[KnownOnSample],
        current: str,
        parent: QWidget | None = None,
    ) -> None:
        super().__init__(parent)
        self.setWindowTitle(f"Calibrate layer numbers of {sample_name}")
        self.known = list(known)
        intro = QLabel(
            f"A calibration fits this sample's oxide thickness, the camera's contrast scale and "
            f"the n,k model to flakes whose layer number is known. It needs at least "
            f"{MIN_KNOWN_FLAKES} flakes of {sample_name} whose layer number is set by hand "
            "(Flake ▸ Assign, with a reason such as a Raman or AFM measurement) or confirmed, "
            "each with a contrast measured on the bare substrate.\n\n"
            f"Calibration in use: {current}",
            self,
        )
        intro.setWordWrap(True)
        self.list = QListWidget(self)
        self.list.setObjectName("knownFlakes")
        for k in self.known:
            text = f"{k.label}: {k.layers}L, {k.how}"
            if not k.usable:
                text += " — no contrast measured on the substrate (find flakes on its image)"
            item = QListWidgetItem(text, self.list)
            item.setData(Qt.ItemDataRole.UserRole, k.label)
            if k.usable:
                item.setFlags(item.flags() | Qt.ItemFlag.ItemIsUserCheckable)
                item.setCheckState(Qt.CheckState.Checked)
            else:
                item.setFlags(item.flags() & ~Qt.ItemFlag.ItemIsEnabled)
        self.status = QLabel("", self)
        self.status.setObjectName("calibrationStatus")
        self.status.setWordWrap(True)
        self.buttons = QDialogButtonBox(
            QDialogButtonBox.StandardButton.Ok | QDialogButtonBox.StandardButton.Cancel, self
        )
        self.buttons.button(QDialogButtonBox.StandardButton.Ok).setText("Calibrate")
        self.buttons.accepted.connect(self.accept)
        self.buttons.rejected.connect(self.reject)
        self.list.itemChanged.connect(lambda _item: self._update())
        lay = QVBoxLayout(self)
        lay.addWidget(intro)
        lay.addWidget(self.list)
        lay.addWidget(self.status)
        lay.addWidget(self.buttons)
        self._update()

    def chosen(self) -> list[str]:
        """The labels of the checked flakes."""
        out = []
        for i in range(self.list.count()):
            item = self.list.item(i)
            if item.checkState() == Qt.CheckState.Checked:
                out.append(item.data(Qt.ItemDataRole.UserRole))
        return out

    def _update(self) -> None:
        chosen = self.chosen()
        ok = len(chosen) >= MIN_KNOWN_FLAKES
        self.buttons.button(QDialogButtonBox.StandardButton.Ok).setEnabled(ok)
        if ok:
            self.status.setText(f"{len(chosen)} flakes of known N will be fitted.")
            return
        usable = [k for k in self.known if k.usable]
        if not self.known:
            found = "no flake of known N on this sample yet"
        else:
            found = f"{len(chosen)} chosen of {len(usable)} usable"
        self.status.setText(
            f"Not enough flakes of known N: {found}. Mark at least {MIN_KNOWN_FLAKES} flakes' "
            "layer numbers by hand or confirm them by spectra, then calibrate again."
        )
