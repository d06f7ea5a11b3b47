"""What a canvas tool is: its action (text, key, hint) and its behaviour on the image canvas.

A tool gets the canvas's clicks, cursor moves and Enter while it is active, and reports what the
user did through one of :class:`~flakebook.gui.canvas.ImageCanvas`'s signals (the canvas holds no
project data). :meth:`CanvasTool.connect` wires that signal to the window's undoable command,
which lives in the same tool module.
"""

from __future__ import annotations


class CanvasTool:
    """A tool of the image canvas; subclasses override the events they answer.

    ``name`` is the canvas's and the action's name (action object name ``tool_<name>``),
    ``text`` the menu text with its & mnemonic, ``key`` the shortcut, ``hint`` the status-bar
    hint; ``read_only``: usable on a project opened read-only; ``cross_cursor``: a cross, not an
    arrow, over the image.
    """

    def __init__(
        self,
        name: str,
        text: str,
        key: str,
        hint: str,
        *,
        read_only: bool = False,
        cross_cursor: bool = True,
    ) -> None:
        self.name, self.text, self.key, self.hint = name, text, key, hint
        self.read_only = read_only
        self.cross_cursor = cross_cursor

    def click(self, canvas, x: float, y: float, double: bool = False) -> None:
        """A left click at image point (x, y)."""

    def move(self, canvas, x: float, y: float) -> None:
        """The cursor moved to image point (x, y)."""

    def enter(self, canvas) -> None:
        """Enter was pressed (no outline being edited)."""

    def connect(self, window) -> None:
        """Connect the canvas signal this tool emits to the window's command."""


class LineTool(CanvasTool):
    """A tool of two clicks: a rubber band follows the cursor from the first; :meth:`line`
    gets both ends."""

    def click(self, canvas, x: float, y: float, double: bool = False) -> None:
        canvas._points.append((x, y))
        if len(canvas._points) == 2:
            (x0, y0), (x1, y1) = canvas._points
            canvas._points = []
            self.line(canvas, x0, y0, x1, y1)
        else:
            canvas._rubber.setData([x, x], [y, y])
            canvas._measure_text.setVisible(False)

    def move(self, canvas, x: float, y: float) -> None:
        if canvas._points:
            x0, y0 = canvas._points[0]
            canvas._rubber.setData([x0, x], [y0, y])

    #: The canvas signal that gets a finished line (x0, y0, x1, y1), for :meth:`line`.
    signal = ""

    def line(self, canvas, x0: float, y0: float, x1: float, y1: float) -> None:
        """The line from (x0, y0) to (x1, y1) is drawn: by default the rubber band goes and the
        canvas's :attr:`signal` reports the line."""
        canvas._rubber.setData([], [])
        getattr(canvas, self.signal).emit(x0, y0, x1, y1)
