"""The tools, one module each, found by name: ``flakebook/gui/tools/<name>.py``.

A tool module holds, side by side, what the tool does on the canvas (``TOOL``, a
:class:`~flakebook.gui.tools.base.CanvasTool`; absent for tools that are only a menu action, such
as merge and link), its edits on the session (``SessionEdits``, each returning its undo) and the
window's undoable commands that call them (``WindowCommands``). :data:`MODULES` below is the one
place a tool is registered: the canvas takes its tools from :data:`CANVAS_TOOLS` (in this order
on the toolbar and in the Tools menu), :class:`~flakebook.gui.session.Session` its parts from
:data:`SESSION_PARTS` and :class:`~flakebook.gui.mainwindow.MainWindow` from :data:`WINDOW_PARTS`.
"""

from __future__ import annotations

from flakebook.gui.tools import (
    evidence,
    hole,
    link,
    measure,
    merge,
    outline,
    ramanmap,
    scale,
    segment,
    select,
    spectra,
    split,
)
from flakebook.gui.tools.base import CanvasTool

#: Every tool, in the order of the toolbar.
MODULES = (
    select,
    outline,
    segment,
    hole,
    scale,
    measure,
    split,
    merge,
    link,
    spectra,
    evidence,
    ramanmap,
)

CANVAS_TOOLS: dict[str, CanvasTool] = {m.TOOL.name: m.TOOL for m in MODULES if hasattr(m, "TOOL")}
SESSION_PARTS: tuple[type, ...] = tuple(
    m.SessionEdits for m in MODULES if hasattr(m, "SessionEdits")
)
WINDOW_PARTS: tuple[type, ...] = tuple(
    m.WindowCommands for m in MODULES if hasattr(m, "WindowCommands")
)

__all__ = ["CANVAS_TOOLS", "MODULES", "SESSION_PARTS", "WINDOW_PARTS", "CanvasTool"]
