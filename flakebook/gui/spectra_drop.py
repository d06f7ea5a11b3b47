"""Spectrum files dropped on a flake: in the project browser, in the catalogue, or on the canvas
where the laser spot was (the flake under the drop point, and that point as the spot).

One event filter per target widget's viewport; a drop of spectrum files (text, CSV, JCAMP-DX) on a
flake calls ``window.attach_spectrum_files`` (undoable, :mod:`flakebook.gui.tools.spectra`). Other
drops (micrographs, projects) pass on to the window.
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import QEvent, QObject, QPointF

from flakebook.gui.tools.spectra import is_spectrum_file


def spectrum_paths(mime) -> list[Path]:
    """The spectrum files among dropped URLs."""
    if not mime.hasUrls():
        return []
    return [
        Path(u.toLocalFile()) for u in mime.urls() if u.isLocalFile() and is_spectrum_file(u.path())
    ]


class SpectrumDrop(QObject):
    """Drops of spectrum files on ``viewport``; ``flake_at(pos) -> (flake id or None, spot or
    None)`` says which flake is under the point."""

    def __init__(self, window, viewport, flake_at) -> None:
        super().__init__(viewport)
        self.window = window
        self.flake_at = flake_at
        viewport.setAcceptDrops(True)
        viewport.installEventFilter(self)

    def eventFilter(self, obj, ev) -> bool:  # noqa: N802 - Qt API
        t = ev.type()
        if t not in (QEvent.Type.DragEnter, QEvent.Type.DragMove, QEvent.Type.Drop):
            return False
        paths = spectrum_paths(ev.mimeData())
        if not paths:
            return False  # the window's own drop handling (images, projects)
        pos = ev.position() if hasattr(ev, "position") else QPointF(ev.pos())
        flake, spot = self.flake_at(pos)
        if t != QEvent.Type.Drop:
            if flake is None:
                ev.ignore()
            else:
                ev.acceptProposedAction()
            return True
        if flake is None:
            ev.ignore()
            return True
        ev.acceptProposedAction()
        self.window._guard(
            lambda: self.window.attach_spectrum_files(flake, paths, spot), "Add spectra"
        )
        return True


def install(window) -> list[SpectrumDrop]:
    """Spectrum drops on the browser, the catalogue and the canvas of ``window``."""
    from flakebook.gui.browser import ID_ROLE as BROWSER_ID
    from flakebook.gui.browser import KIND_ROLE
    from flakebook.gui.views.catalogue import ID_ROLE as CATALOGUE_ID

    tree = window.browser.tree

    def in_browser(pos):
        item = tree.itemAt(pos.toPoint())
        while item is not None and item.data(0, KIND_ROLE) not in ("flake", "appearance"):
            item = item.parent()
        return (None if item is None else item.data(0, BROWSER_ID)), None

    table = window.catalogue.table

    def in_catalogue(pos):
        idx = table.indexAt(pos.toPoint())
        return (idx.data(CATALOGUE_ID) if idx.isValid() else None), None

    canvas = window.canvas

    def on_canvas(pos):
        if window.current_image is None:
            return None, None
        x, y = canvas.image_point(canvas.mapToScene(pos.toPoint()))
        fid = canvas.flake_at(x, y)
        return (None, None) if fid < 0 else (fid, (window.current_image, x, y))

    return [
        SpectrumDrop(window, tree.viewport(), in_browser),
        SpectrumDrop(window, table.viewport(), in_catalogue),
        SpectrumDrop(window, canvas.viewport(), on_canvas),
    ]
