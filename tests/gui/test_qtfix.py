"""The guard against the bindings' reference-count bug (flakebook/_qtguard.py)."""

import sys

from PySide6.QtCore import QObject, Signal

import flakebook.gui  # noqa: F401 - applies the guard


class _Emitter(QObject):
    ping = Signal(float, str)


def test_many_emissions_survive():
    """More emissions than True had references before the guard: the process must survive.

    Common practice, no source: the bug (PySide6 6.12 on Python 3.11, Signal.emit returning an
    unowned True) was found here; without the guard this loop aborts the interpreter.
    """
    e = _Emitter()
    got = []
    e.ping.connect(lambda f, t: got.append(f))
    n = 20000
    for i in range(n):
        e.ping.emit(float(i), "x")
    assert len(got) == n
    assert sys.getrefcount(True) > 0
