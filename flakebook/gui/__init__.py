"""The desktop program (PySide6, pyqtgraph). The only package besides render/ that imports Qt."""
