"""The main window: project browser, image canvas, inspector, catalogue; menus and tools.

Every edit goes through :meth:`MainWindow.edit`: the session writes it to the project at once
(one store transaction), then an :class:`~flakebook.gui.commands.Edit` carrying its inverse is
pushed on the undo stack. Long work (flake finding, hole detection, recompute) runs in a
:class:`~flakebook.gui.worker.Job` with the status bar's progress bar and cancel button.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Callable
from pathlib import Path

import numpy as np
from PySide6.QtCore import QSettings, Qt, QTimer, Signal
from PySide6.QtGui import QAction, QActionGroup, QKeySequence, QUndoStack
from PySide6.QtWidgets import (
    QApplication,
    QDockWidget,
    QFileDialog,
    QInputDialog,
    QLabel,
    QMainWindow,
    QMessageBox,
    QTabWidget,
)

from flakebook import __version__
from flakebook.errors import InputError
from flakebook.gui import palette
from flakebook.gui.browser import ProjectBrowser
from flakebook.gui.canvas import TOOL_HINTS, ImageCanvas
from flakebook.gui.catalogue import CatalogueView
from flakebook.gui.commands import Edit
from flakebook.gui.feedback import SessionLogHandler, SessionLogWindow, show_error
from flakebook.gui.inspector import Inspector
from flakebook.gui.worker import Job, JobBar
from flakebook.specs import parse_channel_values

log = logging.getLogger("flakebook.gui")

PROJECT_SUFFIX = ".flakebook"
IMAGE_SUFFIXES = (".png", ".jpg", ".jpeg", ".tif", ".tiff", ".bmp")
MAX_RECENT = 8
SETTINGS_ORG = "flakebook"
SETTINGS_APP = "flakebook-desktop"


def settings() -> QSettings:
    """The program's settings store (recent projects, window layout)."""
    return QSettings(SETTINGS_ORG, SETTINGS_APP)


class MainWindow(QMainWindow):
    """The flakebook window. ``session`` is a :class:`flakebook.gui.session.Session` or None."""

    projectChanged = Signal()

    def __init__(self, log_handler: SessionLogHandler | None = None) -> None:
        super().__init__()
        self.setObjectName("flakebookMain")
        self.setWindowTitle("flakebook")
        self.resize(1400, 880)
        self.setAcceptDrops(True)
        self.session = None
        self.current_image: int | None = None
        self.current_flake: int | None = None
        self._linear = None  # linear intensity of the current image (for contrast under cursor)
        self._reference = None  # substrate reference per channel of the current image
        self._channels: tuple[str, ...] = ()
        self._cursor_job: Job | None = None
        self._thumb_job: Job | None = None
        self._model_cache: dict = {}
        self.errors: list[tuple[str, BaseException]] = []  # shown errors (tests read them)
        self.log_handler = log_handler or _install_log_handler()
        self.log_window: SessionLogWindow | None = None

        self.undo_stack = QUndoStack(self)
        self.undo_stack.setUndoLimit(500)

        # central: tabs (image, catalogue; spectra and thermometry join later)
        self.canvas = ImageCanvas(self)
        self.catalogue = CatalogueView(self)
        self.tabs = QTabWidget(self)
        self.tabs.setObjectName("mainTabs")
        self.tabs.setDocumentMode(True)
        self.tabs.addTab(self.canvas, "Image")
        self.tabs.addTab(self.catalogue, "Catalogue")
        self.setCentralWidget(self.tabs)

        self.browser = ProjectBrowser(self)
        self.browser_dock = QDockWidget("Project", self)
        self.browser_dock.setObjectName("projectDock")
        self.browser_dock.setWidget(self.browser)
        self.browser_dock.setMinimumWidth(270)
        self.addDockWidget(Qt.DockWidgetArea.LeftDockWidgetArea, self.browser_dock)

        self.inspector = Inspector(self)
        self.inspector_dock = QDockWidget("Inspector", self)
        self.inspector_dock.setObjectName("inspectorDock")
        self.inspector_dock.setWidget(self.inspector)
        self.inspector_dock.setMinimumWidth(360)
        self.addDockWidget(Qt.DockWidgetArea.RightDockWidgetArea, self.inspector_dock)

        from flakebook.gui.survey import CandidateList

        self.candidates = CandidateList(self)
        self.candidates_dock = QDockWidget("Candidates", self)
        self.candidates_dock.setObjectName("candidatesDock")
        self.candidates_dock.setWidget(self.candidates)
        self.addDockWidget(Qt.DockWidgetArea.LeftDockWidgetArea, self.candidates_dock)
        self.splitDockWidget(self.browser_dock, self.candidates_dock, Qt.Orientation.Vertical)

        # status bar
        sb = self.statusBar()
        self.hint_label = QLabel(self)
        self.pos_label = QLabel(self)
        self.pos_label.setObjectName("cursorPosition")
        self.pos_label.setMinimumWidth(250)
        self.contrast_label = QLabel(self)
        self.contrast_label.setObjectName("cursorContrast")
        self.contrast_label.setMinimumWidth(230)
        self.contrast_label.setToolTip(
            "Contrast of the pixel under the cursor, C = (I_substrate − I_pixel)/I_substrate per "
            "channel in linear intensity, against the image's bare-substrate level "
            "(flakebook.imaging); no flat-field correction, so it is a guide: the flakes' own "
            "contrast in the inspector is the measured one."
        )
        self.scale_label = QLabel(self)
        self.scale_label.setObjectName("pixelSize")
        self.mode_label = QLabel(self)
        self.jobs = JobBar(self)
        sb.addWidget(self.hint_label, 1)
        sb.addPermanentWidget(self.jobs)
        sb.addPermanentWidget(self.pos_label)
        sb.addPermanentWidget(self.contrast_label)
        sb.addPermanentWidget(self.scale_label)
        sb.addPermanentWidget(self.mode_label)

        self._make_actions()
        self._make_menus()
        self._connect()
        self._restore_layout()
        self._update_title()
        self._update_enabled()
        self.canvas.set_tool("select")

    # ---- actions and menus -------------------------------------------------------------------
    def _act(
        self, text: str, slot: Callable | None = None, shortcut=None, tip: str = "", name: str = ""
    ) -> QAction:
        a = QAction(text, self)
        if shortcut is not None:
            a.setShortcut(QKeySequence(shortcut))
            a.setShortcutContext(Qt.ShortcutContext.WindowShortcut)
        if tip:
            a.setStatusTip(tip)
            a.setToolTip(f"{tip} ({a.shortcut().toString()})" if shortcut else tip)
        if slot is not None:
            a.triggered.connect(
                lambda checked=False: self._guard(slot, text.replace("&", "").rstrip("…"))
            )
        if name:
            a.setObjectName(name)
        self.addAction(a)
        return a

    def _make_actions(self) -> None:
        A = self._act
        S = QKeySequence.StandardKey
        self.a_new = A(
            "&New project…", self.new_project, S.New, "Create a new project file", "newProject"
        )
        self.a_open = A(
            "&Open project…", self.open_project_dialog, S.Open, "Open a project file", "openProject"
        )
        self.a_close = A(
            "&Close project", self.close_project, "Ctrl+W", "Close the project", "closeProject"
        )
        self.a_import = A(
            "&Add images…",
            self.import_images_dialog,
            "Ctrl+I",
            "Add micrographs to the current sample",
            "addImages",
        )
        self.a_watch = A(
            "&Watch camera folder…",
            self.watch_folder_dialog,
            "Ctrl+Shift+W",
            "Survey each new image the camera saves in a folder",
            "watchFolder",
        )
        self.a_export_csv = A(
            "Export catalogue as &CSV…",
            self.export_csv_dialog,
            "Ctrl+E",
            "Write the catalogue (as filtered) to a CSV file",
            "exportCsv",
        )
        self.a_export_pic = A(
            "Export &picture of the view…",
            self.export_picture_dialog,
            "Ctrl+Shift+E",
            "Save the image view or the catalogue as PNG or SVG",
            "exportPicture",
        )
        self.a_quit = A("&Quit", self.close, S.Quit, "Quit flakebook", "quit")

        self.a_undo = self.undo_stack.createUndoAction(self, "&Undo")
        self.a_undo.setShortcut(S.Undo)
        self.a_redo = self.undo_stack.createRedoAction(self, "&Redo")
        redo_keys = {QKeySequence(S.Redo).toString(), "Ctrl+Y", "Ctrl+Shift+Z"} - {""}
        self.a_redo.setShortcuts([QKeySequence(k) for k in sorted(redo_keys)])
        self.addAction(self.a_undo)
        self.addAction(self.a_redo)
        self.a_delete = A(
            "&Delete selection",
            self.delete_selected,
            S.Delete,
            "Delete the picked hole, or the selected flake with its outlines",
            "deleteFlake",
        )
        self.a_edit_outline = A(
            "&Edit outline",
            self.edit_outline,
            "E",
            "Drag corners, click an edge to add one, right-click a corner to remove it; Enter keeps",
            "editOutline",
        )
        self.a_sample = A(
            "&Sample settings…",
            self.sample_dialog,
            "Ctrl+Shift+S",
            "Substrate stack and hole pattern of the sample",
            "sampleSettings",
        )
        self.a_new_sample = A(
            "New sa&mple…",
            self.new_sample_dialog,
            "Ctrl+Shift+N",
            "Add a chip to the project",
            "newSample",
        )
        self.a_image_settings = A(
            "&Image settings…",
            self.image_dialog,
            "Ctrl+Shift+I",
            "Objective, pixel size and apertures of the current image",
            "imageSettings",
        )
        self.a_merge = A(
            "&Merge with a neighbour…",
            self.merge_dialog,
            "Ctrl+M",
            "Join the selected flake's outline with a touching one on this image",
            "mergeFlakes",
        )
        self.a_link = A(
            "&Link to a flake…",
            self.link_dialog,
            "L",
            "Say that the selected outline is a flake already seen in another image",
            "linkFlake",
        )

        self.a_fit = A("&Fit image", self.canvas.fit, "F", "Show the whole image", "fitImage")
        self.a_zoom_in = A(
            "Zoom &in", lambda: self.canvas.zoom(1.25), S.ZoomIn, "Zoom in", "zoomIn"
        )
        self.a_zoom_out = A(
            "Zoom &out", lambda: self.canvas.zoom(0.8), S.ZoomOut, "Zoom out", "zoomOut"
        )
        self.a_show_image = A(
            "&Image view",
            lambda: self.tabs.setCurrentWidget(self.canvas),
            "Ctrl+1",
            "Show the image",
            "showImage",
        )
        self.a_show_cat = A(
            "&Catalogue",
            lambda: self.tabs.setCurrentWidget(self.catalogue),
            "Ctrl+2",
            "Show the catalogue",
            "showCatalogue",
        )
        self.a_log = A(
            "Session &log", self.show_log, "Ctrl+L", "Operations of this session", "sessionLog"
        )

        self.tool_group = QActionGroup(self)
        self.tool_group.setExclusive(True)
        self.tool_actions: dict[str, QAction] = {}
        for name, text, key in (
            ("select", "&Select", "V"),
            ("outline", "Draw &outline", "O"),
            ("segment", "Outline from &click", "G"),
            ("hole", "Place &hole", "H"),
            ("scale", "&Scale line", "S"),
            ("measure", "&Measure distance", "M"),
            ("split", "S&plit flake", "P"),
        ):
            a = QAction(text, self)
            a.setObjectName(f"tool_{name}")
            a.setCheckable(True)
            a.setShortcut(QKeySequence(key))
            a.setStatusTip(TOOL_HINTS[name])
            a.setToolTip(f"{text.replace('&', '')} ({key}): {TOOL_HINTS[name]}")
            a.triggered.connect(lambda checked=False, n=name: self.canvas.set_tool(n))
            self.tool_group.addAction(a)
            self.addAction(a)
            self.tool_actions[name] = a
        self.tool_actions["select"].setChecked(True)
        self.a_find = A(
            "&Find flakes",
            self.find_flakes,
            "Ctrl+F",
            "Find flakes on the current image and read their layer numbers",
            "findFlakes",
        )
        self.a_holes = A(
            "Detect &holes",
            self.detect_holes,
            "Ctrl+H",
            "Find the holes of the image and fit their lattice",
            "detectHoles",
        )
        self.a_recompute = A(
            "&Recompute stale",
            self.recompute_stale,
            "Ctrl+R",
            "Bring every stale result up to date",
            "recomputeStale",
        )
        self.a_calibrate = A(
            "&Calibrate optics from known flakes…",
            self.calibrate_dialog,
            "Ctrl+Shift+K",
            "Fit the oxide thickness, dark offsets and contrast scale from flakes of known N",
            "calibrateOptics",
        )
        self.a_cancel = A(
            "Cancel running job",
            self.jobs.cancel_all,
            "Ctrl+.",
            "Stop the running job",
            "cancelJob",
        )
        self.a_about = A("&About flakebook", self.about, None, "", "about")

    def _make_menus(self) -> None:
        mb = self.menuBar()
        m = mb.addMenu("&File")
        for a in (self.a_new, self.a_open):
            m.addAction(a)
        self.recent_menu = m.addMenu("Open &recent")
        self.recent_menu.aboutToShow.connect(self._fill_recent)
        m.addAction(self.a_close)
        m.addSeparator()
        m.addAction(self.a_import)
        m.addAction(self.a_watch)
        m.addSeparator()
        m.addAction(self.a_export_csv)
        m.addAction(self.a_export_pic)
        m.addSeparator()
        m.addAction(self.a_quit)
        m = mb.addMenu("&Edit")
        for a in (self.a_undo, self.a_redo):
            m.addAction(a)
        m.addSeparator()
        for a in (self.a_edit_outline, self.a_merge, self.a_link, self.a_delete):
            m.addAction(a)
        m.addSeparator()
        for a in (self.a_new_sample, self.a_sample, self.a_image_settings):
            m.addAction(a)
        m = mb.addMenu("&View")
        for a in (self.a_show_image, self.a_show_cat):
            m.addAction(a)
        m.addSeparator()
        for a in (self.a_fit, self.a_zoom_in, self.a_zoom_out):
            m.addAction(a)
        m.addSeparator()
        m.addAction(self.browser_dock.toggleViewAction())
        m.addAction(self.candidates_dock.toggleViewAction())
        m.addAction(self.inspector_dock.toggleViewAction())
        m.addAction(self.a_log)
        m = mb.addMenu("&Tools")
        for a in self.tool_actions.values():
            m.addAction(a)
        m.addSeparator()
        for a in (self.a_find, self.a_holes, self.a_calibrate, self.a_recompute, self.a_cancel):
            m.addAction(a)
        m = mb.addMenu("&Help")
        m.addAction(self.a_about)

        tb = self.addToolBar("Main")
        tb.setObjectName("mainToolbar")
        tb.setMovable(False)
        for a in (self.a_open, self.a_import):
            tb.addAction(a)
        tb.addSeparator()
        for a in (self.a_undo, self.a_redo):
            tb.addAction(a)
        tb.addSeparator()
        for a in self.tool_actions.values():
            tb.addAction(a)
        tb.addSeparator()
        for a in (self.a_find, self.a_holes, self.a_fit):
            tb.addAction(a)

    def _connect(self) -> None:
        c = self.canvas
        c.cursorMoved.connect(self._on_cursor)
        c.cursorLeft.connect(lambda: (self.pos_label.setText(""), self.contrast_label.setText("")))
        c.toolChanged.connect(self._on_tool)
        c.flakeClicked.connect(
            lambda fid: self.select_flake(fid if fid >= 0 else None, from_canvas=True)
        )
        c.holePlaced.connect(
            lambda x, y, r: self._guard(lambda: self.add_hole(x, y, r), "Place hole")
        )
        c.holeChanged.connect(
            lambda h, x, y, r: self._guard(lambda: self.move_hole(h, x, y, r), "Move hole")
        )
        c.holeRemoveRequested.connect(
            lambda h: self._guard(lambda: self.delete_hole(h), "Remove hole")
        )
        c.scaleLineDrawn.connect(lambda *p: self._guard(lambda: self.scale_line(*p), "Set scale"))
        c.distanceMeasured.connect(self._on_measured)
        c.splitLineDrawn.connect(
            lambda *pts: self._guard(lambda: self.split_selected(pts[:2], pts[2:]), "Split flake")
        )
        c.outlineDrawn.connect(
            lambda pts: self._guard(lambda: self.add_outline(pts), "New outline")
        )
        c.outlineEdited.connect(
            lambda a, pts: self._guard(lambda: self.change_outline(a, pts), "Edit outline")
        )
        c.segmentRequested.connect(
            lambda x, y: self._guard(lambda: self.segment_at(x, y), "Outline from click")
        )
        b = self.browser
        b.imageActivated.connect(lambda i: self._guard(lambda: self.show_image(i), "Show image"))
        b.flakeActivated.connect(lambda f: self.select_flake(f, centre=True))
        b.appearanceActivated.connect(
            lambda f, i: self._guard(lambda: self.show_appearance(f, i), "Show appearance")
        )
        b.sampleActivated.connect(self._on_sample_activated)
        cat = self.catalogue
        cat.flakeActivated.connect(lambda f: self.select_flake(f, centre=True))
        cat.tagShownRequested.connect(
            lambda: self._guard(self.tag_shown_dialog, "Tag shown flakes")
        )
        cat.recomputeRequested.connect(lambda: self._guard(self.recompute_stale, "Recompute stale"))
        cat.exportCsvRequested.connect(lambda: self._guard(self.export_csv_dialog, "Export CSV"))
        cat.exportPictureRequested.connect(
            lambda: self._guard(self.export_picture_dialog, "Export picture")
        )
        cat.table.doubleClicked.connect(lambda idx: self.tabs.setCurrentWidget(self.canvas))
        ins = self.inspector
        ins.assignRequested.connect(
            lambda f, n, r: self._guard(lambda: self.assign(f, n, r), "Record assignment")
        )
        ins.clearAssignmentRequested.connect(
            lambda f: self._guard(lambda: self.clear_assignment(f), "Back to evidence")
        )
        ins.tagsEdited.connect(lambda f, t: self._guard(lambda: self.set_tags(f, t), "Tags"))
        ins.notesEdited.connect(lambda f, t: self._guard(lambda: self.set_notes(f, t), "Notes"))
        ins.appearanceRequested.connect(
            lambda f, i: self._guard(lambda: self.show_appearance(f, i), "Show appearance")
        )
        ins.primaryTerraceRequested.connect(
            lambda f, t: self._guard(lambda: self.set_primary_terrace(f, t), "Primary terrace")
        )
        ins.exportPlotRequested.connect(
            lambda w: self._guard(lambda: self.export_widget_dialog(w), "Export plot")
        )
        ins.calibrateRequested.connect(
            lambda: self._guard(self.calibrate_dialog, "Calibrate optics")
        )
        self.candidates.targetsChanged.connect(lambda *_: self.refresh())
        self.candidates.flakeActivated.connect(
            lambda f: self._guard(lambda: self.open_candidate(f), "Open candidate")
        )
        self.undo_stack.cleanChanged.connect(self._on_stack_changed)
        self.undo_stack.indexChanged.connect(self._on_stack_changed)

    # ---- helpers -----------------------------------------------------------------------------
    def _guard(self, fn: Callable[[], object], action: str):
        """Run ``fn``; an error becomes a dialog (never a traceback) and nothing is pushed."""
        try:
            return fn()
        except Exception as exc:  # noqa: BLE001 - the window's one catch-all
            self.report_error(exc, action)
            return None

    def report_error(self, exc: BaseException, action: str) -> None:
        self.errors.append((action, exc))
        show_error(self, exc, action)

    def _need_session(self, write: bool = True):
        if self.session is None:
            raise InputError("No project is open; open or create one first (File menu).")
        if write and self.session.read_only:
            raise InputError(
                f"{self.session.path.name} is open read-only; nothing can be changed in this window."
            )
        return self.session

    def _need_image(self) -> int:
        if self.current_image is None:
            raise InputError("No image is shown; pick one in the project browser or add images.")
        return self.current_image

    def edit(
        self,
        text: str,
        do: Callable[[], Callable[[], object]],
        refresh: Callable[[], None] | None = None,
    ) -> None:
        """Apply an edit now (``do`` writes it and returns its undo) and push it on the stack.

        ``do`` returns ``undo``; redo calls ``do`` again (and keeps the new undo it returns).
        """
        s = self._need_session(write=True)
        created = s.epoch
        state = {"undo": do(), "epoch": s.epoch}
        refresh = refresh or self.refresh

        def redo():
            with s.resolving(created):
                state["undo"] = do()
                state["epoch"] = s.epoch

        def undo():
            with s.resolving(state["epoch"]):
                state["undo"]()

        cmd = Edit(text, redo, undo, after=refresh, on_error=self._undo_failed)
        self.undo_stack.push(cmd)
        refresh()

    def _undo_failed(self, exc: BaseException, what: str) -> None:
        self.report_error(exc, what)
        QTimer.singleShot(0, self.undo_stack.clear)
        QTimer.singleShot(0, self.refresh)

    def _on_stack_changed(self, *_args) -> None:
        self._update_title()

    def _update_title(self) -> None:
        if self.session is None:
            self.setWindowTitle("flakebook")
            self.mode_label.setText("")
            return
        ro = " [read-only]" if self.session.read_only else ""
        self.setWindowTitle(f"{self.session.path.name}{ro} – flakebook")
        self.mode_label.setText("read-only" if self.session.read_only else "saved")
        self.mode_label.setToolTip(
            "Opened read-only: edits are disabled."
            if self.session.read_only
            else "Every edit is written to the project file as it happens."
        )

    def _update_enabled(self) -> None:
        has = self.session is not None
        rw = has and not self.session.read_only
        for a in (self.a_close, self.a_export_csv, self.a_export_pic):
            a.setEnabled(has)
        for a in (
            self.a_import,
            self.a_watch,
            self.a_find,
            self.a_holes,
            self.a_recompute,
            self.a_delete,
            self.a_edit_outline,
            self.a_sample,
            self.a_new_sample,
            self.a_image_settings,
            self.a_link,
            self.a_merge,
            self.a_calibrate,
        ):
            a.setEnabled(rw)
        for name, a in self.tool_actions.items():
            a.setEnabled(has and (rw or name in ("select", "measure")))
        self.inspector.set_read_only(not rw)

    # ---- projects ----------------------------------------------------------------------------
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

    # ---- refresh -----------------------------------------------------------------------------
    def refresh(self) -> None:
        """Redraw browser, catalogue, overlays and inspector from the project."""
        s = self.session
        if s is None:
            return
        self.browser.populate(s.browser_tree())
        self.catalogue.model.thumbnail = s.thumbnail
        self.catalogue.set_rows(s.catalogue_rows())
        if self.current_image is not None and not s.has_image(self.current_image):
            self.current_image = None
            self.canvas.set_image(None)
        if self.current_image is not None:
            self._refresh_overlays()
        if self.current_flake is not None and not s.has_flake(self.current_flake):
            self.current_flake = None
        self._show_inspector()
        self.catalogue.select_flake(self.current_flake)
        self.browser.select_flake(self.current_flake)
        self.candidates.set_candidates(s.candidates(self.candidates.target_layers()), s.thumbnail)
        self._start_thumbnails()

    def refresh_holes(self) -> None:
        """After a hole edit: the holes drawn, the catalogue (coverage) and the inspector."""
        s = self.session
        if s is None:
            return
        if self.current_image is not None and s.has_image(self.current_image):
            self.canvas.set_holes(s.hole_shapes(self.current_image))
        self.catalogue.set_rows(s.catalogue_rows())
        self._show_inspector()

    def _start_thumbnails(self) -> None:
        """Thumbnails of flakes on images not yet decoded, made in a worker (once each)."""
        if self._thumb_job is not None and not self._thumb_job.done.is_set():
            return
        run = self.session.thumbnail_job()
        if run is None:
            return
        job = Job("Thumbnails", run)
        self._thumb_job = job
        s = self.session

        def done(crops):
            if self.session is not s:
                return
            s.add_thumbnails(crops)
            self.catalogue.model.set_rows(self.catalogue.model.rows)
            self.candidates.set_candidates(
                s.candidates(self.candidates.target_layers()), s.thumbnail
            )

        self.jobs.start(job, on_done=done, on_error=lambda e: log.warning("Thumbnails: %s", e))

    def _refresh_overlays(self) -> None:
        s = self.session
        outlines, holes = s.overlays(self.current_image)
        self.canvas.set_outlines(outlines)
        self.canvas.set_holes(holes)
        self.canvas.select_flake(self.current_flake)
        info = s.image_info(self.current_image)
        self.canvas.set_scale(info.get("um_per_px"))
        self.canvas.default_hole_radius_px = info.get("default_hole_radius_px") or 20.0
        self._show_scale(info)

    def _show_scale(self, info: dict) -> None:
        um = info.get("um_per_px")
        self.scale_label.setText(f"{um:.4g} µm/px" if um else "no scale: draw a scale line (S)")

    # ---- images and flakes -------------------------------------------------------------------
    def show_image(self, image_id: int, *, overlays: bool = True) -> None:
        s = self._need_session(write=False)
        shown = s.load_image(image_id)
        self.current_image = image_id
        self._linear = None
        self._reference = None
        self._channels = ()
        self.canvas.set_image(shown.display, shown.um_per_px)
        for w in shown.warnings:
            log.warning("%s: %s", shown.name, w)
        if overlays:
            self._refresh_overlays()
        self.browser.select_image(image_id)
        self.tabs.setCurrentWidget(self.canvas)
        # after the first paint: the conversion to linear intensity competes for the CPU
        QTimer.singleShot(
            300, lambda i=image_id: self._start_cursor_job(i) if self.current_image == i else None
        )
        self.hint_label.setText(
            f"{shown.name}: {shown.display.shape[1]} × {shown.display.shape[0]} px"
        )

    def _start_cursor_job(self, image_id: int) -> None:
        """Linear intensity and the substrate level for the contrast under the cursor (worker)."""
        if self._cursor_job is not None:
            self._cursor_job.cancel()
        job = Job("Reading intensities", self.session.cursor_job(image_id))
        self._cursor_job = job

        def done(res, image_id=image_id):
            if self.current_image == image_id:
                self._linear, self._reference, self._channels = res

        self.jobs.start(
            job, on_done=done, on_error=lambda e: log.warning("Contrast under the cursor: %s", e)
        )

    def show_appearance(self, flake_id: int, image_id: int) -> None:
        if image_id != self.current_image:
            self.show_image(image_id)
        self.select_flake(flake_id, centre=True)

    def select_flake(
        self, flake_id: int | None, *, centre: bool = False, from_canvas: bool = False
    ) -> None:
        """Select a flake everywhere: canvas, browser, catalogue, inspector."""
        self.current_flake = flake_id
        if self.session is not None and flake_id is not None and not from_canvas:
            images = self.session.images_of_flake(flake_id)
            if images and self.current_image not in images:
                self._guard(lambda: self.show_image(images[0]), "Show image")
        self.canvas.select_flake(
            flake_id, centre=centre and self.tabs.currentWidget() is self.canvas
        )
        self.browser.select_flake(flake_id)
        self.catalogue.select_flake(flake_id)
        self._show_inspector()

    def _show_inspector(self) -> None:
        if self.session is None or self.current_flake is None:
            self.inspector.show_flake(None)
            return
        details = self.session.flake_details(self.current_flake)
        key = details.get("model_key")
        self.inspector.model_curves = self._model_cache.get(key)
        self.inspector.show_flake(details)
        if key is not None and key not in self._model_cache and details.get("contrast"):
            # after a short pause, so that clicking through the catalogue stays quick
            fid = details["id"]
            QTimer.singleShot(150, lambda d=details, k=key, f=fid: self._start_model(d, k, f))

    def _start_model(self, details: dict, key, fid: int) -> None:
        if self.session is None or self.current_flake != fid or key in self._model_cache:
            return
        self._model_cache[key] = None
        job = Job("Contrast model", self.session.model_job(details))
        self.jobs.start(
            job,
            on_done=lambda curves, k=key, f=fid: self._model_ready(k, f, curves),
            on_error=lambda exc, k=key: (
                self._model_cache.pop(k, None),
                log.warning("Contrast model: %s", exc),
            ),
        )

    def _model_ready(self, key, flake_id: int, curves) -> None:
        self._model_cache[key] = curves
        self.inspector.set_model(flake_id, curves) if self.current_flake == flake_id else None

    def _on_sample_activated(self, sample_id: int) -> None:
        if self.session is None:
            return
        first = self.session.first_image(sample_id)
        if first is not None and first != self.current_image:
            self._guard(lambda: self.show_image(first), "Show image")

    def _on_tool(self, name: str) -> None:
        self.hint_label.setText(TOOL_HINTS.get(name, ""))
        a = self.tool_actions.get(name)
        if a is not None and not a.isChecked():
            a.setChecked(True)

    def _on_cursor(self, x: float, y: float) -> None:
        col, row = int(round(x)), int(round(y))
        um = self.canvas.um_per_px
        text = f"x {col}, y {row} px"
        if um:
            text += f"  ·  {x * um:.2f}, {y * um:.2f} µm"
        self.pos_label.setText(text)
        lin, ref = self._linear, self._reference
        if lin is None or ref is None:
            self.contrast_label.setText("")
            return
        h, w = lin.shape[:2]
        if not (0 <= row < h and 0 <= col < w):
            return
        px = lin[row, col]
        px = np.atleast_1d(px).astype(float)
        parts = []
        for ch, value, r in zip(self._channels, px, np.atleast_1d(ref)):
            if r and math.isfinite(value):
                parts.append(f"{ch} {(r - value) / r:+.3f}")
        self.contrast_label.setText("C  " + "  ".join(parts) if parts else "")

    def _on_measured(self, x0: float, y0: float, x1: float, y1: float) -> None:
        d = math.hypot(x1 - x0, y1 - y0)
        um = self.canvas.um_per_px
        text = f"Distance {d:.1f} px" + (f" = {d * um:.2f} µm" if um else " (no scale set)")
        self.hint_label.setText(text)
        log.info("%s", text)

    # ---- edits -------------------------------------------------------------------------------
    def add_hole(self, x: float, y: float, r: float) -> None:
        s = self._need_session()
        image = self._need_image()
        state: dict = {}

        def do():
            state["id"] = s.add_hole(image, x, y, r, hole_id=state.get("id"))
            return lambda: s.delete_hole(state["id"])

        self.edit(f"Place hole at ({x:.0f}, {y:.0f}) px", do, self.refresh_holes)

    def move_hole(self, hole_id: int, x: float, y: float, r: float) -> None:
        s = self._need_session()
        before = s.hole_geometry(hole_id)

        def do():
            s.update_hole(hole_id, x, y, r)
            return lambda: s.update_hole(hole_id, *before)

        self.edit("Move hole", do, self.refresh_holes)

    def delete_hole(self, hole_id: int) -> None:
        s = self._need_session()

        def do():
            restore = s.delete_hole(hole_id)
            return restore

        self.edit("Remove hole", do, self.refresh_holes)

    def scale_line(
        self, x0: float, y0: float, x1: float, y1: float, length_um: float | None = None
    ) -> None:
        s = self._need_session()
        image = self._need_image()
        d = math.hypot(x1 - x0, y1 - y0)
        if d < 2:
            raise InputError(
                f"The scale line is {d:.1f} px long; draw a line of at least a few pixels."
            )
        if length_um is None:
            length_um, ok = QInputDialog.getDouble(
                self,
                "Scale line",
                f"The line is {d:.1f} px long. Its length in µm:",
                10.0,
                1e-3,
                1e6,
                3,
            )
            if not ok:
                return
        um_per_px = float(length_um) / d
        before = s.image_info(image).get("um_per_px")

        def do():
            s.set_pixel_size(image, um_per_px, method=f"scale line {d:.1f} px = {length_um:g} um")
            return lambda: s.set_pixel_size(image, before, method="undo")

        self.edit(f"Scale {um_per_px:.4g} µm/px", do)

    def add_outline(self, points: np.ndarray, *, label: str | None = None) -> None:
        s = self._need_session()
        image = self._need_image()
        state: dict = {}

        def do():
            state["flake"] = s.add_flake(image, points, label=label or state.get("label"))
            state["label"] = s.flake_label(state["flake"])
            return lambda: s.delete_flake(state["flake"])

        self.edit("New outline", do)
        self.select_flake(state["flake"], from_canvas=True)

    def change_outline(self, appearance_id: int, points: np.ndarray) -> None:
        s = self._need_session()
        before = s.outline(appearance_id)

        def do():
            s.set_outline(appearance_id, points)
            return lambda: s.set_outline(appearance_id, before)

        self.edit("Edit outline", do)

    def edit_outline(self) -> None:
        self._need_session()
        if self.current_flake is None:
            raise InputError("Select a flake first; its outline in this image becomes editable.")
        for app_id, item in self.canvas.outlines.items():
            if item.shape_data.flake_id == self.current_flake:
                self.canvas.set_tool("select")
                self.canvas.begin_edit_outline(app_id)
                self.canvas.setFocus()
                self.hint_label.setText(
                    "Editing: drag corners, click an edge to add a corner, right-click a corner to "
                    "remove it. Enter keeps the change, Esc drops it."
                )
                return
        raise InputError("The selected flake has no outline in this image.")

    def split_selected(self, p0, p1) -> None:
        """Split the selected flake (else the one under the line's middle) along a line."""
        s = self._need_session()
        image = self._need_image()
        fid = self.current_flake
        if fid is None:
            mid = (0.5 * (p0[0] + p1[0]), 0.5 * (p0[1] + p1[1]))
            fid = self.canvas.flake_at(*mid)
            if fid < 0:
                raise InputError("Select the flake to split first (or draw the line across one).")
        state: dict = {}

        def do():
            state["new"], undo = s.split_flake(fid, image, p0, p1)
            return undo

        self.edit(f"Split {s.flake_label(fid)}", do)

    def merge_dialog(self) -> None:
        s = self._need_session()
        image = self._need_image()
        if self.current_flake is None:
            raise InputError(
                "Select the flake to keep first; then choose the one to merge into it."
            )
        others = [
            (it.shape_data.flake_id, it.shape_data.label)
            for it in self.canvas.outlines.values()
            if it.shape_data.flake_id != self.current_flake
        ]
        if not others:
            raise InputError("There is no other flake on this image to merge with.")
        names = [n for _, n in others]
        name, ok = QInputDialog.getItem(
            self,
            "Merge flakes",
            f"Merge into {s.flake_label(self.current_flake)}:",
            names,
            0,
            False,
        )
        if ok:
            self.merge(self.current_flake, others[names.index(name)][0], image)

    def merge(self, keep: int, other: int, image: int) -> None:
        s = self._need_session()
        label = s.flake_label(other)
        self.edit(
            f"Merge {label} into {s.flake_label(keep)}", lambda: s.merge_flakes(keep, other, image)
        )

    def delete_selected(self) -> None:
        """Delete the picked hole, else the selected flake."""
        s = self._need_session()
        roi = self.canvas._hole_roi
        if roi is not None:
            hid = roi.hole_id
            self.canvas.release_hole()
            self.delete_hole(hid)
            return
        if self.current_flake is None:
            raise InputError("Select a flake to delete first.")
        fid = self.current_flake
        label = s.flake_label(fid)

        def do():
            return s.delete_flake(fid)

        self.current_flake = None
        self.edit(f"Delete {label}", do)

    def assign(self, flake_id: int, layers: int, reason: str) -> None:
        s = self._need_session()
        if not reason.strip():
            raise InputError("A manual assignment needs a reason (what you saw that decides it).")

        def do():
            return s.assign(flake_id, layers, reason)

        self.edit(f"Assign {layers}L to {s.flake_label(flake_id)}", do)

    def clear_assignment(self, flake_id: int) -> None:
        s = self._need_session()

        def do():
            return s.clear_manual(flake_id)

        self.edit(f"Back to evidence for {s.flake_label(flake_id)}", do)

    def set_tags(self, flake_id: int, tags: list[str]) -> None:
        s = self._need_session()

        def do():
            return s.set_flake_fields(flake_id, tags=tuple(tags))

        self.edit(f"Tags of {s.flake_label(flake_id)}", do)

    def set_primary_terrace(self, flake_id: int, terrace_id: int) -> None:
        """Choose the terrace whose layer number is the flake's (DESIGN.md)."""
        s = self._need_session()
        self.edit(
            f"Primary terrace of {s.flake_label(flake_id)}",
            lambda: s.set_flake_fields(flake_id, primary_terrace_id=terrace_id),
        )

    def tag_shown_dialog(self) -> None:
        self._need_session()
        tag, ok = QInputDialog.getText(
            self, "Tag shown flakes", "Tag for every flake shown:", text="thermometry"
        )
        if ok:
            self.tag_flakes([r["id"] for r in self.catalogue.proxy.visible_rows()], tag)

    def tag_flakes(self, flake_ids: list[int], tag: str) -> None:
        """Add ``tag`` to each flake (one undoable edit)."""
        s = self._need_session()
        tag = tag.strip()
        if not tag or "," in tag:
            raise InputError(
                f"Tag {tag!r} is not usable; accepted: a word without commas, e.g. thermometry"
            )
        if not flake_ids:
            raise InputError("No flake is shown; loosen the filters first.")

        def do():
            undos = []
            with s.project.transaction():
                for fid in flake_ids:
                    tags = tuple(s.project.get("flake", s._r("flake", fid)).tags)
                    if tag not in tags:
                        undos.append(s.set_flake_fields(fid, tags=(*tags, tag)))

            def undo():
                with s.project.transaction():
                    for u in reversed(undos):
                        u()

            return undo

        self.edit(f"Tag {len(flake_ids)} flake(s) {tag}", do)

    def set_notes(self, flake_id: int, notes: str) -> None:
        s = self._need_session()

        def do():
            return s.set_flake_fields(flake_id, notes=notes)

        self.edit(f"Notes of {s.flake_label(flake_id)}", do)

    # ---- long work ---------------------------------------------------------------------------
    def find_flakes(self, images: list[int] | None = None) -> Job | None:
        """Find flakes on the images selected in the browser (else the one shown), one after
        the other in a worker; each image's result is one undoable edit."""
        s = self._need_session()
        if images is None:
            images = self.browser.selected_images() or [self._need_image()]
        queue = list(images)
        target = self.candidates.target_layers()
        image = queue.pop(0)
        job = Job(f"Find flakes on {s.image_info(image)['name']}", s.survey_job(image, target))

        def done(result):
            def do():
                return s.store_survey(image, result)

            name = s.image_info(image)["name"]
            self._guard(
                lambda: self.edit(f"Find flakes on {name} ({len(result.flakes)} flakes)", do),
                "Find flakes",
            )
            for w in result.warnings:
                log.warning("Find flakes on %s: %s", name, w)
            if queue:
                self._guard(lambda: self.find_flakes(queue), "Find flakes")

        def failed(exc):
            self.report_error(exc, "Find flakes")
            if queue:
                self._guard(lambda: self.find_flakes(queue), "Find flakes")

        self.jobs.start(job, on_done=done, on_error=failed)
        return job

    def segment_at(self, x: float, y: float) -> Job | None:
        s = self._need_session()
        image = self._need_image()
        job = Job("Outline from click", s.segment_job(image, x, y))

        def done(points):
            if points is None:
                self.hint_label.setText("No flake found at that point.")
                return
            self._guard(lambda: self.add_outline(points), "Outline from click")

        self.jobs.start(
            job, on_done=done, on_error=lambda e: self.report_error(e, "Outline from click")
        )
        return job

    def detect_holes(self) -> Job | None:
        s = self._need_session()
        image = self._need_image()
        job = Job("Detect holes", s.holes_job(image))

        def done(result):
            self._guard(
                lambda: self.edit(
                    f"Detect holes ({len(result.holes)})", lambda: s.store_holes(image, result)
                ),
                "Detect holes",
            )

        self.jobs.start(job, on_done=done, on_error=lambda e: self.report_error(e, "Detect holes"))
        return job

    def recompute_stale(self):
        """Recompute every stale record. It writes the project, so it runs on the window's
        thread; the progress bar and its cancel button stay live (events are processed between
        records), and a cancelled run leaves the project as it was (one store transaction)."""
        s = self._need_session()
        cancel = self.jobs.begin_inline("Recompute stale")
        try:
            report = s.recompute_stale(progress=self.jobs.inline_progress, cancel=cancel)
        finally:
            self.jobs.end_inline()
        self.undo_stack.clear()  # recomputed results are not undone one by one
        self.refresh()
        text = f"Recomputed {len(report.recomputed)}"
        if report.unregistered:
            text += f"; {len(report.unregistered)} without a way to recompute them (left stale)"
        if report.failed:
            text += f"; {len(report.failed)} failed (left stale): " + "; ".join(
                str(f[2]) for f in report.failed[:3]
            )
        log.info("Recompute stale: %s", text)
        self.hint_label.setText(text)
        return report

    def calibrate_dialog(self) -> None:
        s = self._need_session()
        sample_id = s.current_sample(self.current_image)
        n = len(s.calibration_observations(sample_id))
        text, ok = QInputDialog.getText(
            self,
            "Calibrate optics",
            f"{n} flake(s) of known layer number (manual assignments) on this sample will be fitted.\n"
            "Dark frame per channel as a fraction of full scale (e.g. r=0.012,g=0.011,b=0.013),\n"
            "or empty: no dark frame, the dark offset is taken as 0 ± 0.005.",
        )
        if ok:
            self.calibrate(sample_id, text)

    def calibrate(self, sample_id: int, dark_text: str = "") -> Job:
        """Fit oxide, dark offsets and contrast scale (flakebook.optics.camera) in a worker."""
        s = self._need_session()
        channels = ("r", "g", "b")
        dark, dark_err = {c: 0.0 for c in channels}, {c: 0.005 for c in channels}
        if dark_text.strip():
            dark = parse_channel_values(dark_text, "Dark frame", channels)
            dark_err = {k: 0.001 for k in dark}
        run, n = s.calibration_job(sample_id, dark, dark_err)
        job = Job(f"Calibrate optics ({n} flakes)", run)

        def done(cal):
            def do():
                return s.store_calibration(sample_id, cal)

            self._guard(lambda: self.edit("Optics calibration", do), "Calibrate optics")
            msg = (
                f"Oxide {cal.oxide_nm:.1f} ± {cal.oxide_err_nm:.1f} nm, contrast scale "
                f"{cal.contrast_scale:.3f} ± {cal.contrast_scale_err:.3f} "
                f"(chi² {cal.chi2:.3g} on {cal.dof} d.o.f.). Contrast evidence of this sample is "
                "marked stale: Recompute stale (Ctrl+R) applies the calibration."
            )
            log.info("Calibrate optics: %s", msg)
            self.hint_label.setText(msg)

        self.jobs.start(
            job, on_done=done, on_error=lambda e: self.report_error(e, "Calibrate optics")
        )
        return job

    def open_candidate(self, flake_id: int) -> None:
        self.select_flake(flake_id, centre=True)
        self.tabs.setCurrentWidget(self.canvas)

    # ---- dialogs -----------------------------------------------------------------------------
    def import_images_dialog(self) -> None:
        self._need_session()
        paths, _ = QFileDialog.getOpenFileNames(
            self, "Add images", "", "Images (*.png *.jpg *.jpeg *.tif *.tiff *.bmp)"
        )
        if paths:
            self.import_images([Path(p) for p in paths])

    def import_images(
        self, paths: list[Path], sample_id: int | None = None, settings: dict | None = None
    ) -> list[int]:
        """Add micrographs to a sample; ``settings`` (objective, pixel size, ...) default to
        those of the image shown (the same microscope session)."""
        s = self._need_session()
        sample_id = sample_id if sample_id is not None else s.current_sample(self.current_image)
        if settings is None:
            settings = s.microscope_settings(self.current_image)
        added: list[int] = []

        def do():
            added[:] = s.add_images(sample_id, paths, settings)
            return lambda: s.delete_images(added)

        self.edit(f"Add {len(paths)} image(s)", do)
        if added:
            self.show_image(added[0])
        return added

    def watch_folder_dialog(self) -> None:
        s = self._need_session()
        folder = QFileDialog.getExistingDirectory(self, "Watch the camera's folder")
        if not folder:
            return
        settings = s.microscope_settings(self.current_image)
        if not settings.get("pixel_size_um"):
            from flakebook.imaging.scale import load_objectives

            presets = load_objectives()
            name, ok = QInputDialog.getItem(
                self,
                "Watch the camera's folder",
                "Objective of the new images:",
                list(presets),
                0,
                False,
            )
            if not ok:
                return
            o = presets[name]
            settings = {"objective": o.name, "pixel_size_um": o.um_per_px, "na_objective": o.na}
        self.candidates.watch(Path(folder), s, self, settings)

    def sample_dialog(self, sample_id: int | None = None) -> None:
        from flakebook.gui.dialogs import SampleDialog

        s = self._need_session()
        sample_id = sample_id if sample_id is not None else s.current_sample(self.current_image)
        dlg = SampleDialog(self, s.sample_values(sample_id))
        if dlg.exec() != SampleDialog.DialogCode.Accepted:
            return
        values = dlg.values()
        self.edit("Sample settings", lambda: s.update_sample(sample_id, values))

    def new_sample_dialog(self) -> None:
        from flakebook.gui.dialogs import SampleDialog

        s = self._need_session()
        dlg = SampleDialog(self, None)
        if dlg.exec() != SampleDialog.DialogCode.Accepted:
            return
        values = dlg.values()
        state: dict = {}

        def do():
            state["id"] = s.add_sample(values)
            return lambda: s.delete_sample(state["id"])

        self.edit(f"New sample {values['name']}", do)

    def image_dialog(self) -> None:
        from flakebook.gui.dialogs import ImageDialog

        s = self._need_session()
        image = self._need_image()
        dlg = ImageDialog(self, s.image_values(image))
        if dlg.exec() != ImageDialog.DialogCode.Accepted:
            return
        values = dlg.values()
        self.edit("Image settings", lambda: s.update_image(image, values))

    def link_dialog(self) -> None:
        s = self._need_session()
        if self.current_flake is None or self.current_image is None:
            raise InputError("Select the outline to link first.")
        choices = s.link_choices(self.current_flake)
        if not choices:
            raise InputError("There is no other flake of this sample to link to.")
        names = [c[1] for c in choices]
        name, ok = QInputDialog.getItem(
            self, "Link to a flake", "This outline shows the flake:", names, 0, False
        )
        if not ok:
            return
        target = choices[names.index(name)][0]
        src = self.current_flake

        def do():
            return s.link_flake(src, target)

        self.current_flake = target
        self.edit(f"Link to {name}", do)

    def export_csv_dialog(self) -> None:
        self._need_session(write=False)
        path, _ = QFileDialog.getSaveFileName(
            self, "Export catalogue", str(self.session.path.with_suffix(".csv")), "CSV (*.csv)"
        )
        if path:
            self.catalogue.export_csv(path)
            log.info("Exported the catalogue to %s", path)

    def export_picture_dialog(self) -> None:
        self._need_session(write=False)
        path, _ = QFileDialog.getSaveFileName(
            self, "Export picture", "", "PNG (*.png);;SVG (*.svg)"
        )
        if path:
            self.export_picture(path)

    def export_widget_dialog(self, widget) -> None:
        path, _ = QFileDialog.getSaveFileName(self, "Export plot", "", "PNG (*.png);;SVG (*.svg)")
        if path:
            from flakebook.render.export import widget_picture

            out = widget_picture(widget, path, scale=2.0 if path.lower().endswith(".png") else 1.0)
            log.info("Exported a plot to %s", out)

    def export_picture(self, path: str | Path) -> Path:
        """The current tab as PNG or SVG: the catalogue table, or the image view with overlays."""
        from flakebook.render.export import widget_picture

        if self.tabs.currentWidget() is self.catalogue:
            out = self.catalogue.export_picture(path)
        else:
            out = widget_picture(self.canvas, path)
        log.info("Exported a picture to %s", out)
        return out

    def show_log(self) -> None:
        if self.log_window is None:
            self.log_window = SessionLogWindow(self.log_handler, self)
        self.log_window.show()
        self.log_window.raise_()

    def about(self) -> None:
        QMessageBox.about(
            self,
            "About flakebook",
            f"<b>flakebook {__version__}</b><p>A notebook for atomically thin flakes: layer number "
            "from optical contrast, Raman and PL; suspended membranes; Raman thermometry.</p>"
            f"<p>Layer colours: Okabe–Ito colour-blind-safe palette ({', '.join(t for t, _ in palette.legend_entries()[:3])}, …).</p>"
            "<p>Laser safety: follow your institution's laser-safety rules and local regulations.</p>",
        )

    # ---- drag and drop -----------------------------------------------------------------------
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

    # ---- layout and closing --------------------------------------------------------------
    def _restore_layout(self) -> None:
        st = settings()
        geo = st.value("geometry")
        state = st.value("windowState")
        if geo is not None:
            self.restoreGeometry(geo)
        if state is not None:
            self.restoreState(state)

    def closeEvent(self, ev) -> None:  # noqa: N802 - Qt API
        if self.canvas.editing:
            self.canvas.finish_edit_outline()
        st = settings()
        st.setValue("geometry", self.saveGeometry())
        st.setValue("windowState", self.saveState())
        self.close_project()
        super().closeEvent(ev)


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


def _install_log_handler() -> SessionLogHandler:
    root = logging.getLogger("flakebook")
    for h in root.handlers:
        if isinstance(h, SessionLogHandler):
            return h
    handler = SessionLogHandler()
    root.addHandler(handler)
    if root.level == logging.NOTSET or root.level > logging.INFO:
        root.setLevel(logging.INFO)
    return handler


def make_app(argv: list[str] | None = None) -> QApplication:
    """The QApplication (one per process)."""
    app = QApplication.instance()
    if app is None:
        app = QApplication(argv or ["flakebook"])
        app.setOrganizationName(SETTINGS_ORG)
        app.setApplicationName(SETTINGS_APP)
    return app
