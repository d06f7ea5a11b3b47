"""Opening, creating and closing projects; the recent-projects list; files dropped on the window."""

from __future__ import annotations

import logging
from pathlib import Path

from PySide6.QtCore import QSettings
from PySide6.QtWidgets import QFileDialog, QMessageBox

from flakebook.errors import InputError
from flakebook.gui import palette

log = logging.getLogger("flakebook.gui")


PROJECT_SUFFIX = ".flakebook"
IMAGE_SUFFIXES = (".png", ".jpg", ".jpeg", ".tif", ".tiff", ".bmp")
MAX_RECENT = 8
SETTINGS_ORG = "flakebook"
SETTINGS_APP = "flakebook-desktop"


def settings() -> QSettings:
    """The program's settings store (recent projects, window layout)."""
    return QSettings(SETTINGS_ORG, SETTINGS_APP)


class Projects:
    """Open, create and close a project; drops; the recent list."""

    def open_project(self, path: str | Path, *, read_only: bool = False, ask: bool = True) -> bool:
        """Open a project; when another window holds it read-write, offer read-only."""
        from flakebook.gui.session import ProjectBusy, Session

        path = Path(path)
        if self.session is not None and self.session.path.resolve() == path.resolve():
            return True  # already open in this window
        try:
            session = Session.open(path, read_only=read_only)
        except ProjectBusy as busy:
            if not ask:
                raise
            answer = QMessageBox.question(
                self,
                "Project in use",
                f"{busy}\n\nOpen it read-only? You can look at everything but not change it.",
                QMessageBox.StandardButton.Open | QMessageBox.StandardButton.Cancel,
            )
            if answer != QMessageBox.StandardButton.Open:
                return False
            session = Session.open(path, read_only=True)
        self._set_session(session)
        for w in session.warnings:
            log.warning("%s", w)
        return True

    def _set_session(self, session) -> None:
        self.close_project()
        self.session = session
        palette.MAX_LAYERS = session.project.max_layers
        add_recent(session.path)
        log.info("Opened %s%s", session.path, " read-only" if session.read_only else "")
        self.undo_stack.clear()
        first = session.first_image()
        self.canvas.set_empty_text(
            f"{session.path.name} has no micrograph yet.\n\nAdd micrographs (Ctrl+I), drop them "
            "here, or watch the camera's folder (Ctrl+Shift+W)."
        )
        if first is not None:
            self._guard(lambda: self.show_image(first, overlays=False), "Show image")
        self.refresh()
        self._update_title()
        self._update_enabled()
        self.projectChanged.emit()

    def close_project(self) -> None:
        if self.session is None:
            return
        self._guard(self.inspector.commit_edits, "Save notes")
        self.jobs.abandon_all()
        self.canvas.cancel_tool()
        path = self.session.path
        self.session.close()
        self.session = None
        self.current_image = None
        self.current_flake = None
        self._linear = None
        self._reference = None
        self.undo_stack.clear()
        self.canvas.set_image(None)
        self.browser.populate([])
        self.catalogue.set_rows([])
        self.candidates.set_candidates([])
        self.inspector.show_flake(None)
        self._model_cache.clear()
        if hasattr(self, "_show_open_report"):  # the last report was of the project closed
            self.last_report = None
            self._show_open_report(None)
        log.info("Closed %s", path)
        self._update_title()
        self._update_enabled()
        self.projectChanged.emit()

    def new_project(self) -> None:
        from flakebook.gui.dialogs import NewProjectDialog

        dlg = NewProjectDialog(self)
        if dlg.exec() != NewProjectDialog.DialogCode.Accepted:
            return
        self.create_project(**dlg.values())

    def create_project(self, path: str | Path, sample: dict) -> None:
        from flakebook.gui.session import Session

        session = Session.create(Path(path), sample)
        log.info("Created %s", session.path)
        self._set_session(session)

    def open_project_dialog(self) -> None:
        start = str(Path(recent_projects()[0]).parent) if recent_projects() else ""
        path, _ = QFileDialog.getOpenFileName(
            self, "Open project", start, f"flakebook projects (*{PROJECT_SUFFIX});;All files (*)"
        )
        if path:
            self.open_project(path)

    def _fill_recent(self) -> None:
        self.recent_menu.clear()
        items = recent_projects()
        if not items:
            a = self.recent_menu.addAction("(none yet)")
            a.setEnabled(False)
        for i, p in enumerate(items):
            a = self.recent_menu.addAction(f"&{i + 1} {Path(p).name}  –  {Path(p).parent}")
            a.triggered.connect(
                lambda checked=False, p=p: self._guard(lambda: self.open_project(p), "Open project")
            )
        self.recent_menu.addSeparator()
        self.recent_menu.addAction("Clear list", lambda: settings().setValue("recent", []))

    def dragEnterEvent(self, ev) -> None:  # noqa: N802 - Qt API
        if ev.mimeData().hasUrls() and any(
            _droppable(u.toLocalFile()) for u in ev.mimeData().urls()
        ):
            ev.acceptProposedAction()
        else:
            ev.ignore()

    def dropEvent(self, ev) -> None:  # noqa: N802 - Qt API
        paths = [Path(u.toLocalFile()) for u in ev.mimeData().urls() if u.isLocalFile()]
        ev.acceptProposedAction()
        self.drop_paths(paths)

    def drop_paths(self, paths: list[Path]) -> None:
        """A project opens; images (or folders of images) are added to the current sample."""
        projects = [p for p in paths if p.suffix.lower() == PROJECT_SUFFIX]
        if projects:
            self._guard(lambda: self.open_project(projects[0]), "Open project")
            return
        images: list[Path] = []
        for p in paths:
            if p.is_dir():
                images.extend(sorted(q for q in p.iterdir() if q.suffix.lower() in IMAGE_SUFFIXES))
            elif p.suffix.lower() in IMAGE_SUFFIXES:
                images.append(p)
        if not images:
            self.report_error(
                InputError(
                    "Nothing to add: drop a .flakebook project, micrographs (PNG, JPEG, TIFF, BMP) or a folder of them."
                ),
                "Drop",
            )
            return
        self._guard(lambda: self.import_images(images), "Add images")


def _droppable(path: str) -> bool:
    p = Path(path)
    return p.is_dir() or p.suffix.lower() in IMAGE_SUFFIXES + (PROJECT_SUFFIX,)


def recent_projects() -> list[str]:
    """Recent project paths, newest first, only those still on disk."""
    value = settings().value("recent", [])
    if isinstance(value, str):
        value = [value]
    return [p for p in (value or []) if Path(p).exists()]


def add_recent(path: Path) -> None:
    items = [str(Path(path).resolve())] + [
        p for p in recent_projects() if p != str(Path(path).resolve())
    ]
    settings().setValue("recent", items[:MAX_RECENT])
