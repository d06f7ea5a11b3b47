"""Survey in the window: ranked candidates, and watching the camera's folder.

:class:`CandidateList` lists the flakes ranked by the probability that their layer number is in
the target set ("1L, 0.97", "2L or 3L, ambiguous"), each with a thumbnail, and opens one on a
click. :class:`FolderWatch` notices new micrographs in a folder, waits until each has been fully
written (``flakebook.imaging.io.wait_until_readable``, in a worker), adds it to the project and
finds its flakes.
"""

from __future__ import annotations

import logging
from pathlib import Path

from PySide6.QtCore import QFileSystemWatcher, QSize, Qt, QTimer, Signal
from PySide6.QtGui import QBrush, QColor
from PySide6.QtWidgets import (
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QListWidget,
    QListWidgetItem,
    QPushButton,
    QVBoxLayout,
    QWidget,
)

from flakebook.errors import InputError
from flakebook.gui import palette
from flakebook.gui.words import p_text
from flakebook.gui.worker import Job
from flakebook.specs import parse_layer_range

log = logging.getLogger("flakebook.gui")
IMAGE_SUFFIXES = (".png", ".jpg", ".jpeg", ".tif", ".tiff", ".bmp")


def parse_targets(text: str) -> tuple[int, ...]:
    """``1-3`` or ``1,2,5`` as layer numbers (the command line's --target-layers syntax)."""
    return tuple(parse_layer_range(text or "1-3"))


def candidate_text(c: dict) -> str:
    """'1L, 0.97' or '2L or 3L, ambiguous' (or 'set by hand')."""
    layers = c.get("layers")
    if layers is None:
        return "no layer number yet"
    if c.get("manual"):
        return f"{layers}L, set by hand"
    amb = c.get("ambiguous_with") or []
    if amb:
        return " or ".join(palette.layer_label(n) for n in [layers, *amb[:2]]) + ", ambiguous"
    p = c.get("probability")
    label = palette.layer_label(layers)
    return f"{label}, {p_text(p)}" if p is not None else label


class CandidateList(QWidget):
    """Flakes ranked by their chance of having a target layer number."""

    flakeActivated = Signal(int)
    targetsChanged = Signal(tuple)

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("candidates")
        self.targets = QLineEdit("1-3", self)
        self.targets.setObjectName("targetLayers")
        self.targets.setToolTip("Target layer numbers: a range 1-3 or a list 1,2,5")
        self.targets.setMaximumWidth(70)
        self.targets.editingFinished.connect(self._targets_edited)
        self.watch_label = QLabel("", self)
        self.stop_button = QPushButton("Stop watching", self)
        self.stop_button.hide()
        self.stop_button.clicked.connect(self.stop_watch)
        self.list = QListWidget(self)
        self.list.setIconSize(QSize(56, 40))
        self.list.itemActivated.connect(self._open)
        self.list.itemClicked.connect(self._open)
        top = QHBoxLayout()
        top.addWidget(QLabel("Target layers", self))
        top.addWidget(self.targets)
        top.addStretch(1)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addLayout(top)
        lay.addWidget(self.list)
        lay.addWidget(self.watch_label)
        lay.addWidget(self.stop_button)
        self.watcher: FolderWatch | None = None
        self._last_good = "1-3"

    def target_layers(self) -> tuple[int, ...]:
        try:
            t = parse_targets(self.targets.text())
        except InputError:
            self.targets.setText(self._last_good)
            t = parse_targets(self._last_good)
        self._last_good = self.targets.text()
        return t

    def _targets_edited(self) -> None:
        self.targetsChanged.emit(self.target_layers())

    def set_candidates(self, items: list[dict], thumbnail=None) -> None:
        self.list.clear()
        for c in items:
            it = QListWidgetItem(
                f"{c['label']}   {candidate_text(c)}   {p_text(c['score'], 'P(target layers)')}"
            )
            it.setData(Qt.ItemDataRole.UserRole, c["id"])
            if c.get("layers"):
                colour = QColor(palette.layer_hex(c["layers"]))
                colour.setAlpha(70)
                it.setBackground(QBrush(colour))
            if thumbnail is not None:
                pix = thumbnail(c)
                if pix is not None:
                    it.setIcon(pix)
            self.list.addItem(it)

    def _open(self, item: QListWidgetItem) -> None:
        self.flakeActivated.emit(int(item.data(Qt.ItemDataRole.UserRole)))

    # ---- watching ------------------------------------------------------------------------
    def watch(self, folder: Path, session, window, settings: dict | None = None) -> FolderWatch:
        """Watch ``folder``; new images get the microscope ``settings`` (default: those of the
        image shown)."""
        self.stop_watch()
        if settings is None:
            settings = session.microscope_settings(window.current_image)
        self.watcher = FolderWatch(folder, window, settings)
        self.watch_label.setText(f"Watching {folder}")
        self.stop_button.show()
        return self.watcher

    def stop_watch(self) -> None:
        if self.watcher is not None:
            self.watcher.stop()
            self.watcher = None
        self.watch_label.setText("")
        self.stop_button.hide()


class FolderWatch:
    """New image files in ``folder`` are added to the project and surveyed one by one."""

    def __init__(self, folder: Path, window, settings: dict | None = None) -> None:
        self.folder = Path(folder)
        if not self.folder.is_dir():
            raise InputError(f"{folder} is not a folder; choose the folder the camera saves into")
        self.window = window
        self.settings = dict(settings or {})
        self.seen = {p.name for p in self.folder.iterdir()}
        self.queue: list[Path] = []
        self.busy: Job | None = None
        self.fs = QFileSystemWatcher([str(self.folder)])
        self.fs.directoryChanged.connect(lambda *_: self.scan())
        self.timer = QTimer()
        self.timer.setInterval(2000)  # also poll: network shares do not always notify
        self.timer.timeout.connect(self.scan)
        self.timer.start()
        log.info("Watching %s for new images", self.folder)

    def stop(self) -> None:
        self.timer.stop()
        self.fs.removePaths(self.fs.directories())
        if self.busy is not None:
            self.busy.cancel()
        log.info("Stopped watching %s", self.folder)

    def scan(self) -> None:
        for p in sorted(self.folder.iterdir()):
            if (
                p.name in self.seen
                or p.suffix.lower() not in IMAGE_SUFFIXES
                or p.name.startswith(".")
            ):
                continue
            self.seen.add(p.name)
            self.queue.append(p)
        self._next()

    def _next(self) -> None:
        if self.busy is not None or not self.queue:
            return
        path = self.queue.pop(0)
        from flakebook.imaging.io import wait_until_readable

        def wait(progress=None, cancel=None):
            wait_until_readable(path, cancel=cancel)
            return path

        job = Job(f"Waiting for {path.name}", wait)
        self.busy = job

        def ready(p: Path):
            self.busy = None
            w = self.window
            ids = w._guard(lambda: w.import_images([p], settings=self.settings), "Add image") or []
            if ids:
                w._guard(w.find_flakes, "Find flakes")
            self._next()

        def failed(exc):
            self.busy = None
            w = self.window
            w.report_error(exc, f"Watch {path.name}")
            self._next()

        self.window.jobs.start(
            job, on_done=ready, on_error=failed, on_cancel=lambda: setattr(self, "busy", None)
        )
