"""What the store's operations return (not records kept in the file): catalogue rows, image file
checks, the rows a delete removed (for undo) and recompute reports.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple


class CatalogueRow(NamedTuple):
    """One flake in the catalogue with its latest assignment and whether anything is stale.

    ``holes_covered`` counts the holes it covers fully; ``margin_um`` is the largest margin to
    the flake's edge among them (None without a fully covered hole or a margin).
    """

    flake_id: int
    label: str
    sample_id: int
    sample: str
    material: str
    status: str
    tags: tuple
    area_um2: float | None
    layers: int | None
    probability: float | None
    primary_terrace_id: int | None
    manual: bool
    holes_covered: int
    margin_um: float | None
    stale: bool


@dataclass(frozen=True)
class ImageCheck:
    """The state of an image's file: ``ok``, ``missing`` or ``changed`` (hash differs)."""

    image_id: int
    path: str
    status: str
    embedded: bool
    file: str


@dataclass(frozen=True)
class DeletedRows:
    """What ``Project.delete`` removed, for ``Project.restore`` (undo): the rows of every table
    (columns and values), references the delete emptied, stale marks it set, and the
    provenance rows of deleted derived records."""

    rows: tuple = ()
    nulled: tuple = ()
    staled: tuple = ()
    dependencies: tuple = ()

    def count(self) -> int:
        """How many rows were deleted."""
        return sum(len(rows) for _, _, rows in self.rows)


@dataclass(frozen=True)
class RecomputeReport:
    """What ``recompute_stale`` did: recomputed, no recomputer registered, or failed."""

    recomputed: tuple = ()
    unregistered: tuple = ()
    failed: tuple = ()

    @property
    def ok(self) -> bool:
        """True when nothing stayed stale."""
        return not self.unregistered and not self.failed


__all__ = ["CatalogueRow", "ImageCheck", "DeletedRows", "RecomputeReport"]
