"""The image view: the micrograph on the canvas (:mod:`flakebook.gui.canvas`) with its tools.

The canvas widget is a module of its own because the tools (:mod:`flakebook.gui.tools`) act on
it; this module makes it a tab of the window and connects it: the readouts under the cursor, the
active tool's hint, and each tool's signal to its command.
"""

from __future__ import annotations

from flakebook.gui.canvas import ImageCanvas
from flakebook.gui.tools import CANVAS_TOOLS
from flakebook.gui.views import View

VIEW = View("Image", "canvas", "Ctrl+1", "&Image view", "showImage", "Show the image", ImageCanvas)


def connect(window, canvas: ImageCanvas) -> None:
    """Cursor readouts and tool hints to the status bar; each tool's result to its command."""
    canvas.cursorMoved.connect(window._on_cursor)
    canvas.cursorLeft.connect(
        lambda: (window.pos_label.setText(""), window.contrast_label.setText(""))
    )
    canvas.toolChanged.connect(window._on_tool)
    canvas.editEnded.connect(lambda: window._on_tool(canvas.tool))
    for tool in CANVAS_TOOLS.values():
        tool.connect(window)
