"""The views of the main window's central tabs, one module each: ``flakebook/gui/views/<name>.py``.

:data:`NAMES` is the one place a view is registered: the main window makes a tab, a View-menu
action and its connections for each (in this order), and ``flakebook open --snapshot --show
NAME`` accepts each name. This module imports no Qt, so the command line can read the names.

A view module defines:

- ``VIEW``, a :class:`View`: the tab's title, the window attribute that holds the widget (e.g.
  ``window.catalogue``), the View-menu action and the widget's class (made with the window as
  its parent);
- ``connect(window, widget) -> None``: its signals to the window's commands (after every view and
  dock is made);
- optionally ``follow(window, widget) -> None``: redraw for the window's project and selected
  flake (called after every refresh and selection).
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass
from types import ModuleType


@dataclass(frozen=True)
class View:
    """How the window shows a view: tab ``title``, window ``attribute``, the View-menu action
    (``shortcut``, ``action_text``, its object name ``action_name``, status ``tip``) and
    ``widget``, the widget's class (called with the window as parent)."""

    title: str
    attribute: str
    shortcut: str
    action_text: str
    action_name: str
    tip: str
    widget: type


#: Every view, in the order of the tabs.
NAMES = ("image", "catalogue", "spectra", "thermal", "kappa", "chip", "map")


def module(name: str) -> ModuleType:
    """The module of the view ``name`` (one of :data:`NAMES`)."""
    if name not in NAMES:
        raise KeyError(f"no view {name!r}; views: {', '.join(NAMES)}")
    return importlib.import_module(f"{__name__}.{name}")


def modules() -> list[ModuleType]:
    """The view modules, in the order of the tabs."""
    return [module(n) for n in NAMES]
