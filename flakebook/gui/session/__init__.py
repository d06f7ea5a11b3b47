"""The window's hold on one open project: reads for the views, edits with their inverses.

A :class:`Session` wraps a :class:`flakebook.store.Project`; it holds no widgets. Every edit
method writes to the project at once (one store transaction) and returns a function that reverts
it, which the window keeps on its undo stack (see :mod:`flakebook.gui.session.base` for how ids
survive an undo).

The class is put together from one mixin per concern, the undo beside the edit it undoes:
:mod:`~flakebook.gui.session.base` (opening, ids, coverage), :mod:`~flakebook.gui.session.reads`
(what the views show), :mod:`~flakebook.gui.session.images` (micrographs, thumbnails),
:mod:`~flakebook.gui.session.records` (flake and sample records),
:mod:`~flakebook.gui.session.analysis` (work for a worker and its results), and each tool's own
edits (``SessionEdits`` in :mod:`flakebook.gui.tools`, taken from the tool registry).
"""

from __future__ import annotations

from flakebook.gui.commands import Undo
from flakebook.gui.session.analysis import Analysis, HoleResult
from flakebook.gui.session.base import ProjectBusy, SessionBase
from flakebook.gui.session.images import (
    Images,
    LinearProbe,
    Shown,
    display_of,
    pixmap_of,
    thumbnail_crop,
)
from flakebook.gui.session.reads import Reads
from flakebook.gui.session.records import Records
from flakebook.gui.session.thermal import Thermal
from flakebook.gui.tools import SESSION_PARTS
from flakebook.pipeline import COMBINED_METHOD, CONTRAST_METHOD


class Session(*SESSION_PARTS, Reads, Images, Records, Thermal, Analysis, SessionBase):
    """One open project as the window sees it (the concerns above in one object)."""


__all__ = [
    "Session",
    "ProjectBusy",
    "Shown",
    "HoleResult",
    "LinearProbe",
    "Undo",
    "display_of",
    "pixmap_of",
    "thumbnail_crop",
    "CONTRAST_METHOD",
    "COMBINED_METHOD",
]
