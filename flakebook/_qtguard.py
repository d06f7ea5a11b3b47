"""A guard against a reference-count bug of the Qt bindings on Python 3.11.

With PySide6 6.12 on Python 3.11, every ``Signal.emit()`` returns ``True`` without taking a
reference to it, so each emission lowers ``True``'s reference count by one; after a few thousand
emissions (pyqtgraph emits on every pan and zoom) the interpreter aborts with "bool_dealloc:
deallocating True or False". From Python 3.12 on, ``True``, ``False`` and ``None`` are immortal
and the bug is harmless. On older Pythons this module raises the reference counts of those three
singletons far enough that the leak can never bring them to zero during a session. They are never
freed anyway (they live as long as the interpreter), so nothing else changes.

Imported by flakebook.gui and flakebook.render before any Qt use. Checked by tests/gui/test_qtfix.py, which emits a signal more often than ``True`` had
references and survives.
"""

from __future__ import annotations

import ctypes
import sys

_MARGIN = 1 << 40  # references added; a session would need 10^12 emissions to use them up
_applied = False


def apply() -> bool:
    """Protect True, False and None on Python < 3.12 (once per process); True if applied."""
    global _applied
    if _applied or sys.version_info >= (3, 12) or sys.implementation.name != "cpython":
        return _applied
    for obj in (True, False, None):
        ctypes.c_ssize_t.from_address(id(obj)).value += _MARGIN
    _applied = True
    return True
