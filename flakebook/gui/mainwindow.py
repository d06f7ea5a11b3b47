"""The main window: it assembles the docks, the views, the menus and the status bar.

The window's behaviour comes from mixins, one per concern (see :mod:`flakebook.gui`): the
tools' commands (:data:`flakebook.gui.tools.WINDOW_PARTS`) and :mod:`flakebook.gui.window`
(projects, display, flake edits, long work, dialogs and exports, and the edit path in
:class:`~flakebook.gui.window.base.WindowBase`). The central tabs are the registered views
(:mod:`flakebook.gui.views`).
"""

from __future__ import annotations

import logging
from collections.abc import Callable

from PySide6.QtCore import QEvent, QObject, QSize, Qt, Signal
from PySide6.QtGui import QAction, QActionGroup, QKeySequence, QUndoStack
from PySide6.QtWidgets import (
    QAbstractSpinBox,
    QApplication,
    QDockWidget,
    QLabel,
    QMainWindow,
    QTabWidget,
)

from flakebook.gui import icons, views
from flakebook.gui.browser import ProjectBrowser
from flakebook.gui.feedback import SessionLogHandler, SessionLogWindow
from flakebook.gui.inspector import Inspector
from flakebook.gui.tools import CANVAS_TOOLS, WINDOW_PARTS
from flakebook.gui.window.analysis import Analysis
from flakebook.gui.window.base import WindowBase
from flakebook.gui.window.display import Display
from flakebook.gui.window.flakes import FlakeEdits
from flakebook.gui.window.projects import (
    IMAGE_SUFFIXES,
    MAX_RECENT,
    PROJECT_SUFFIX,
    SETTINGS_APP,
    SETTINGS_ORG,
    Projects,
    add_recent,
    recent_projects,
    settings,
)
from flakebook.gui.window.reports import Reports
from flakebook.gui.window.samples import Exports, SettingsDialogs
from flakebook.gui.words import CONTRAST_DEFINITION
from flakebook.gui.worker import Job, JobBar


class MainWindow(
    *WINDOW_PARTS,
    Projects,
    Display,
    FlakeEdits,
    Analysis,
    SettingsDialogs,
    Exports,
    Reports,
    WindowBase,
    QMainWindow,
):
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

        # central: a tab per registered view (flakebook.gui.views), e.g. self.canvas. The views
        # are made before the tabs: the order of making sets the keyboard focus chain.
        self.views: dict[str, object] = {}
        for name in views.NAMES:
            view = views.module(name).VIEW
            self.views[name] = view.widget(self)
            setattr(self, view.attribute, self.views[name])
        self.tabs = QTabWidget(self)
        self.tabs.setObjectName("mainTabs")
        self.tabs.setDocumentMode(True)
        for name, widget in self.views.items():
            self.tabs.addTab(widget, views.module(name).VIEW.title)
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
            f"{CONTRAST_DEFINITION}, here for the pixel under the cursor against the image's "
            "bare-substrate level, in linear intensity; no flat-field correction, so it is a "
            "guide: the flakes' own contrast in the inspector is the measured one."
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
        self._undo_keys = _UndoKeys(self)
        QApplication.instance().installEventFilter(self._undo_keys)
        self._connect()
        self._restore_layout()
        self._update_title()
        self._update_enabled()
        self.canvas.set_tool("select")

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
        self.a_report = A(
            "Write &report…",
            self.report_dialog,
            "Ctrl+Shift+R",
            "Write the campaign report (HTML or PDF) of all or some flakes",
            "writeReport",
        )
        self.a_quit = A("&Quit", self.close, S.Quit, "Quit flakebook", "quit")

        self.a_undo = self.undo_stack.createUndoAction(self, "&Undo")
        self.a_undo.setShortcut(S.Undo)
        self.a_redo = self.undo_stack.createRedoAction(self, "&Redo")
        redo_keys = {QKeySequence(S.Redo).toString(), "Ctrl+Y", "Ctrl+Shift+Z"} - {""}
        self.a_redo.setShortcuts([QKeySequence(k) for k in sorted(redo_keys)])
        self.addAction(self.a_undo)
        self.addAction(self.a_redo)
        self.a_undo.setObjectName("undo")
        self.a_redo.setObjectName("redo")
        # the toolbar shows icons only: undo and redo say what they do in their tooltips
        self.undo_stack.undoTextChanged.connect(lambda t: self._undo_tip(self.a_undo, "Undo", t))
        self.undo_stack.redoTextChanged.connect(lambda t: self._undo_tip(self.a_redo, "Redo", t))
        self._undo_tip(self.a_undo, "Undo", "")
        self._undo_tip(self.a_redo, "Redo", "")
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
        self.view_actions: dict[str, QAction] = {}
        for name in views.NAMES:
            v = views.module(name).VIEW
            self.view_actions[name] = A(
                v.action_text, lambda n=name: self.show_view(n), v.shortcut, v.tip, v.action_name
            )
        self.a_log = A(
            "Session &log", self.show_log, "Ctrl+L", "Operations of this session", "sessionLog"
        )

        self.tool_group = QActionGroup(self)
        self.tool_group.setExclusive(True)
        self.tool_actions: dict[str, QAction] = {}
        for name, tool in CANVAS_TOOLS.items():
            a = QAction(tool.text, self)
            a.setObjectName(f"tool_{name}")
            a.setCheckable(True)
            a.setShortcut(QKeySequence(tool.key))
            a.setStatusTip(tool.hint)
            a.setToolTip(f"{tool.text.replace('&', '')} ({tool.key}): {tool.hint}")
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
        m.addAction(self.a_report)
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
        for a in self.view_actions.values():
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
        # icons of one size (flakebook.gui.icons), so no button moves or changes width
        tb.setToolButtonStyle(Qt.ToolButtonStyle.ToolButtonIconOnly)
        tb.setIconSize(QSize(24, 24))
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
        for a in tb.actions():
            if not a.isSeparator():
                a.setIcon(icons.icon(a.objectName()))

    @staticmethod
    def _undo_tip(action: QAction, verb: str, text: str) -> None:
        keys = action.shortcut().toString(QKeySequence.SequenceFormat.NativeText)
        what = f"{verb} {text[0].lower() + text[1:]}" if text else f"Nothing to {verb.lower()}"
        action.setToolTip(f"{what} ({keys})" if keys else what)

    def _connect(self) -> None:
        for name in views.NAMES:
            views.module(name).connect(self, self.views[name])
        b = self.browser
        b.imageActivated.connect(lambda i: self._guard(lambda: self.show_image(i), "Show image"))
        b.flakeActivated.connect(lambda f: self.select_flake(f, centre=True))
        b.appearanceActivated.connect(
            lambda f, i: self._guard(lambda: self.show_appearance(f, i), "Show appearance")
        )
        b.sampleActivated.connect(self._on_sample_activated)
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

    def show_view(self, name: str) -> None:
        """Bring the view ``name`` (one of :data:`flakebook.gui.views.NAMES`) to the front."""
        self.tabs.setCurrentWidget(self.views[name])

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
        app = QApplication.instance()
        if app is not None and self._undo_keys is not None:
            # An application-wide filter must not outlive the window it serves.
            app.removeEventFilter(self._undo_keys)
            self._undo_keys = None
        super().closeEvent(ev)


class _UndoKeys(QObject):
    """Undo and redo keys reach the window while a spin box has the focus, unless the box
    has a change of its own to undo (or redo). Installed on the application while the window
    is open."""

    def eventFilter(self, obj, ev) -> bool:  # noqa: N802 - Qt API
        if ev.type() == QEvent.Type.ShortcutOverride and isinstance(obj, QAbstractSpinBox):
            edit = obj.lineEdit()
            if ev.matches(QKeySequence.StandardKey.Undo) and not edit.isUndoAvailable():
                ev.ignore()
                return True
            if ev.matches(QKeySequence.StandardKey.Redo) and not edit.isRedoAvailable():
                ev.ignore()
                return True
        return False


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


__all__ = [
    "IMAGE_SUFFIXES",
    "MAX_RECENT",
    "PROJECT_SUFFIX",
    "SETTINGS_APP",
    "SETTINGS_ORG",
    "MainWindow",
    "add_recent",
    "make_app",
    "recent_projects",
    "settings",
]
