"""The desktop program (PySide6, pyqtgraph). The only package besides render/ that imports Qt."""

from flakebook import _qtguard

_qtguard.apply()
