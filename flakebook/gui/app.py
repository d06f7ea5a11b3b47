"""Starting the desktop program, and rendering it offscreen for ``--snapshot``."""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

from flakebook.errors import InputError

#: Views that show one flake: `--show NAME:ID`.
PER_FLAKE = ("spectra", "thermal")
#: Views that show one stored record of their own: `--show map:ID` (a Raman map's id or name).
PER_RECORD = ("map",)
#: Views that show one sample: `--show NAME:SAMPLE`.
PER_SAMPLE = ("chip",)


def _headless() -> bool:
    return (
        sys.platform.startswith("linux")
        and not os.environ.get("DISPLAY")
        and not os.environ.get("WAYLAND_DISPLAY")
    )


def _prepare_platform(offscreen: bool) -> None:
    """Offscreen for a snapshot without a display; a clear refusal for a window without one."""
    if offscreen:
        if _headless():
            os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
        return
    if _headless() and not os.environ.get("QT_QPA_PLATFORM"):
        raise InputError(
            "no display found (DISPLAY is not set), so the window cannot open; "
            "use --snapshot FILE.png to render it offscreen, or the commands (flakebook --help)"
        )


def parse_show(text: str | None) -> tuple[str, str | None]:
    """A registered view's name (``image``, ``catalogue``, ``spectra``, ...) | ``flake:ID`` |
    ``spectra:ID`` | ``thermal:ID`` | ``chip:SAMPLE`` | ``map:ID`` (a Raman map) -> (view,
    argument)."""
    from flakebook.gui.views import NAMES

    per_id = (*PER_FLAKE, *PER_RECORD)
    accepted = ", ".join(
        sorted(
            [*NAMES, "flake:ID", *(f"{n}:ID" for n in per_id),
             *(f"{n}:SAMPLE" for n in PER_SAMPLE)]
        )
    )  # fmt: skip
    if not text:
        return "image", None
    view, _, arg = text.partition(":")
    view = view.strip().lower()
    if view in ("flake", *per_id, *PER_SAMPLE) and arg.strip():
        return view, arg.strip()
    if view in NAMES and not arg:
        return view, None  # a per-flake view without ID shows the selected flake (or none)
    named = accepted.replace("flake:ID", "flake:ID (a flake's name)")
    raise InputError(f"--show {text!r} is not a view; accepted: {named}")


def settle(app, seconds: float = 0.0, until=None) -> None:
    """Process events (for ``seconds``, or until ``until()`` is true, at most 10 s)."""
    from PySide6.QtCore import QThreadPool

    end = time.perf_counter() + max(seconds, 0.0)
    limit = time.perf_counter() + 10.0
    while True:
        app.processEvents()
        done_waiting = time.perf_counter() >= end
        if until is not None:
            done_waiting = done_waiting and until()
        if done_waiting or time.perf_counter() > limit:
            break
        QThreadPool.globalInstance().waitForDone(20)
    app.processEvents()


def run(
    project: str | None = None,
    *,
    snapshot: str | None = None,
    show: str | None = None,
    read_only: bool = False,
) -> int:
    """Start the window (and the event loop), or render a snapshot and return."""
    if snapshot is not None:
        snap = Path(snapshot)
        if snap.suffix.lower() != ".png":
            raise InputError(
                f"--snapshot {snapshot}: the snapshot is a PNG; accepted: a file name ending in .png"
            )
        if not snap.resolve().parent.is_dir():
            raise InputError(
                f"--snapshot {snapshot}: the folder {snap.resolve().parent} does not exist"
            )
    view, arg = parse_show(show)
    _prepare_platform(offscreen=snapshot is not None)
    from PySide6.QtWidgets import QApplication

    from flakebook.gui.mainwindow import MainWindow, make_app

    # The process ends after this when the application is ours (the command line), not when
    # a caller made it (tests, scripts): only then is the window torn down here.
    owns_app = QApplication.instance() is None
    app = make_app([sys.argv[0]])
    window = MainWindow()
    if project is not None:
        path = Path(project)
        if not path.exists():
            raise InputError(
                f"{project}: no such project file; accepted: an existing .flakebook file"
            )
        if snapshot is not None:
            window.open_project(path, read_only=True, ask=False)
        else:
            window._guard(lambda: window.open_project(path, read_only=read_only), "Open project")
    if snapshot is None:
        window.show()
        if view != "image" or arg:
            window._guard(lambda: show_view(window, view, arg), "Show")
        code = app.exec()
        if owns_app:
            _tear_down(app, window)
        return code
    window.resize(1500, 920)
    window.show()
    try:
        show_view(window, view, arg)
    except BaseException:
        # a --show the project cannot satisfy: the window's workers stopped before the message
        window.close()
        if owns_app:
            _tear_down(app, window)
        raise
    settle(app, 0.3, until=lambda: not window.jobs.busy)
    window.repaint()
    image = window.grab()
    if not image.save(str(snapshot), "PNG"):
        raise InputError(f"--snapshot {snapshot}: could not write the PNG")
    window.close()
    if owns_app:
        _tear_down(app, window)
    return 0


def _tear_down(app, window) -> None:
    """Stop the workers and delete the window while Qt still runs: left to the interpreter's
    exit, the scene's items could be destroyed after the application (a crash at exit)."""
    from PySide6.QtCore import QCoreApplication, QEvent, QThreadPool

    window.jobs.abandon_all()
    QThreadPool.globalInstance().waitForDone(5000)
    window.deleteLater()
    QCoreApplication.sendPostedEvents(None, QEvent.Type.DeferredDelete)
    app.processEvents()


def show_view(window, view: str, arg: str | None) -> None:
    """Put the window in the state ``--show`` names: a view in front, or a flake selected."""
    if view in PER_RECORD and arg:
        if window.session is None:
            raise InputError(f"--show {view}:ID needs a project")
        from flakebook.pipeline_maps import find_map

        rec = find_map(window.session.project, arg)
        window.show_view(view)
        window.map_view.show_map(window.session, rec.id)
    elif view in ("flake", *PER_FLAKE) and arg:
        if window.session is None:
            raise InputError(f"--show {view}:ID needs a project")
        flake = window.session.project.find_flake(arg)
        window.select_flake(flake.id, centre=view != "thermal")
        window.show_view("image" if view == "flake" else view)
        if view == "spectra":
            window.spectra_view.show_flake(window.session, flake.id)
    elif view in PER_SAMPLE and arg:
        if window.session is None:
            raise InputError(f"--show {view}:{arg} needs a project")
        names = [s.name for s in window.session.project.samples()]
        if arg not in names:
            raise InputError(
                f"--show {view}:{arg}: the project has no sample {arg!r}; accepted: "
                + (", ".join(f"{view}:{n}" for n in names) if names else "none (no samples yet)")
            )
        window.show_view(view)
        window.views[view].show_sample(arg)
    else:
        window.show_view(view)
