"""The dialog of File > Write report: where the report goes (HTML or PDF by the name's ending,
paper size for a PDF) and which flakes it covers (the selections of ``flakebook report
--select``, plus the flakes chosen in the window). A line under the choices says how many flakes
the selection holds as it changes; OK stays disabled, with the reason in words, while the
selection is empty or the file name is not one a report can be written to.

Raman thermometry heats the sample with a laser. Follow your institution's laser-safety rules
and local regulations.
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import (
    QButtonGroup,
    QComboBox,
    QDialog,
    QDialogButtonBox,
    QFileDialog,
    QFormLayout,
    QGroupBox,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPushButton,
    QRadioButton,
    QVBoxLayout,
    QWidget,
)

from flakebook.errors import FlakebookError
from flakebook.report.content import Selection
from flakebook.store import Flake, Project
from flakebook.wording import count_text

#: The choices of selection: (key, text of the button).
CHOICES = (
    ("all", "All flakes"),
    ("sample", "The flakes of one sample"),
    ("tag", "The flakes with a tag"),
    ("thermal", "Only flakes with a thermal-conductivity result"),
    ("chosen", "The flake selected in the window"),
    ("shown", "The flakes the catalogue shows (as filtered)"),
)
PAPER_CHOICES = (("a4", "A4"), ("letter", "Letter"))


def project_tags(project: Project) -> list[str]:
    """Every tag of the project's flakes, sorted."""
    return sorted({t for f in project.records(Flake) for t in f.tags})


class ReportDialog(QDialog):
    """Output file, paper and selection of a report. ``chosen``: label of the flake selected in
    the window (or None); ``shown``: labels of the flakes the catalogue shows."""

    def __init__(
        self,
        project: Project,
        default_path: Path,
        *,
        chosen: str | None = None,
        shown: list[str] | None = None,
        parent: QWidget | None = None,
    ) -> None:
        super().__init__(parent)
        self.setObjectName("reportDialog")
        self.setWindowTitle("Write report")
        self.project = project
        self.chosen_label = chosen
        self.shown_labels = list(shown or [])
        self._count = 0

        self.path = QLineEdit(str(default_path))
        self.path.setObjectName("reportPath")
        self.path.setToolTip("A name ending in .html (one file, opens in any browser) or .pdf")
        browse = QPushButton("Browse…")
        browse.setObjectName("reportBrowse")
        browse.clicked.connect(self._browse)
        row = QHBoxLayout()
        row.addWidget(self.path, 1)
        row.addWidget(browse)
        self.paper = QComboBox()
        self.paper.setObjectName("reportPaper")
        for key, text in PAPER_CHOICES:
            self.paper.addItem(text, key)
        self.paper.setToolTip("Paper size of a PDF report")
        out = QFormLayout()
        out.addRow("Report file", row)
        out.addRow("Paper (PDF)", self.paper)

        box = QGroupBox("Flakes in the report")
        grid = QFormLayout(box)
        self.group = QButtonGroup(self)
        self.buttons_of: dict[str, QRadioButton] = {}
        self.sample = QComboBox()
        self.sample.setObjectName("reportSample")
        for s in project.samples():
            self.sample.addItem(s.name)
        self.tag = QComboBox()
        self.tag.setObjectName("reportTag")
        for t in project_tags(project):
            self.tag.addItem(t)
        extra = {"sample": self.sample, "tag": self.tag}
        for i, (key, text) in enumerate(CHOICES):
            if key == "chosen":
                text = f"{text} ({chosen or 'none is selected'})"
            if key == "shown":
                text = f"{text}: {count_text(len(self.shown_labels), 'flake')}"
            b = QRadioButton(text)
            b.setObjectName(f"reportSelect_{key}")
            self.group.addButton(b, i)
            self.buttons_of[key] = b
            if key in extra:
                grid.addRow(b, extra[key])
            else:
                grid.addRow(b)
        self.buttons_of["sample"].setEnabled(self.sample.count() > 0)
        self.buttons_of["tag"].setEnabled(self.tag.count() > 0)
        if not self.tag.count():
            self.tag.addItem("(no flake has a tag)")
        self.buttons_of["chosen"].setEnabled(bool(chosen))
        self.buttons_of["all"].setChecked(True)

        self.count = QLabel()
        self.count.setObjectName("reportCount")
        self.count.setWordWrap(True)
        self.reason = QLabel()
        self.reason.setObjectName("reportReason")
        self.reason.setWordWrap(True)
        self.reason.setStyleSheet("color: #B00020;")
        caution = QLabel(
            "The report repeats the laser-safety caution: follow your institution's laser-safety "
            "rules and local regulations."
        )
        caution.setWordWrap(True)
        caution.setStyleSheet("color: #555;")

        self.buttons = QDialogButtonBox(
            QDialogButtonBox.StandardButton.Ok | QDialogButtonBox.StandardButton.Cancel
        )
        self.ok = self.buttons.button(QDialogButtonBox.StandardButton.Ok)
        self.ok.setText("Write")
        self.buttons.accepted.connect(self.accept)
        self.buttons.rejected.connect(self.reject)
        lay = QVBoxLayout(self)
        lay.addLayout(out)
        lay.addWidget(box)
        lay.addWidget(self.count)
        lay.addWidget(self.reason)
        lay.addWidget(caution)
        lay.addWidget(self.buttons)

        self.group.idToggled.connect(lambda *_: self.update_state())
        for key, combo in (("sample", self.sample), ("tag", self.tag)):
            # a pick (even of the name already shown) checks the choice beside it
            combo.currentIndexChanged.connect(lambda *_, k=key: self._pick(k))
            combo.activated.connect(lambda *_, k=key: self._pick(k))
        self.path.textChanged.connect(lambda *_: self.update_state())
        self.resize(560, self.sizeHint().height())
        self.update_state()

    # ---- what the dialog holds ------------------------------------------------------------
    def choice(self) -> str:
        """The key of the checked selection (see :data:`CHOICES`)."""
        return CHOICES[self.group.checkedId()][0]

    def set_choice(self, key: str, value: str | None = None) -> None:
        """Check the selection ``key``; ``value``: the sample's name or the tag."""
        if not self.buttons_of[key].isEnabled():
            raise ValueError(f"the choice {key!r} is not available in this dialog")
        if value is not None:
            combo = {"sample": self.sample, "tag": self.tag}[key]
            i = combo.findText(value)
            if i < 0:
                raise ValueError(f"{value!r} is not among the choices of {key}")
            combo.setCurrentIndex(i)
        self.buttons_of[key].setChecked(True)

    def selection(self) -> Selection:
        """The checked selection as the report builder takes it."""
        key = self.choice()
        if key == "sample":
            return Selection("sample", self.sample.currentText())
        if key == "tag":
            return Selection("tag", self.tag.currentText())
        if key == "chosen":
            return Selection.of_flakes([self.chosen_label] if self.chosen_label else [])
        if key == "shown":
            return Selection.of_flakes(self.shown_labels)
        return Selection(key)

    def out_path(self) -> Path:
        return Path(self.path.text().strip()).expanduser()

    def paper_size(self) -> str:
        return self.paper.currentData()

    def values(self) -> dict:
        """``out`` (Path), ``select`` (Selection), ``paper`` (a4 or letter)."""
        return {"out": self.out_path(), "select": self.selection(), "paper": self.paper_size()}

    @property
    def flake_count(self) -> int:
        """How many flakes the selection holds (as the count line says)."""
        return self._count

    # ---- live checks --------------------------------------------------------------------
    def _pick(self, key: str) -> None:
        if self.buttons_of[key].isEnabled():
            self.buttons_of[key].setChecked(True)
        self.update_state()

    def _path_problem(self) -> str:
        text = self.path.text().strip()
        if not text:
            return "Choose the report file: a name ending in .html or .pdf."
        suffix = Path(text).suffix.lower()
        if suffix not in (".html", ".pdf"):
            return (
                f"{Path(text).name}: a report is written as HTML or PDF; give the name the "
                "ending .html or .pdf."
            )
        return ""

    def update_state(self) -> None:
        """Recount the selection, enable the paper for a PDF, and say why OK is disabled."""
        self.paper.setEnabled(self.out_path().suffix.lower() == ".pdf")
        problem = ""
        try:
            sel = self.selection()
            self._count = len(sel.flakes(self.project))
        except FlakebookError as exc:
            self._count = 0
            problem = str(exc)
        if not problem:
            cards = count_text(self._count, "flake card")
            self.count.setText(f"The report will hold {cards}: {sel.describe()}.")
            if self._count == 0:
                problem = (
                    "This selection holds no flakes, so there is nothing to report on: choose "
                    "another selection."
                )
        else:
            self.count.setText("The report will hold no flake cards.")
        problem = problem or self._path_problem()
        self.reason.setText(problem)
        self.reason.setVisible(bool(problem))
        self.ok.setEnabled(not problem)
        self.ok.setToolTip(problem)

    def _browse(self) -> None:
        path, chosen = QFileDialog.getSaveFileName(
            self,
            "Write report",
            self.path.text().strip(),
            "HTML report (*.html);;PDF report (*.pdf)",
        )
        if path:
            if Path(path).suffix.lower() not in (".html", ".pdf"):
                path += ".pdf" if "pdf" in chosen.lower() else ".html"
            self.path.setText(path)
