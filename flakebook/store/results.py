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


class CatalogueRows(list):
    """Catalogue (or export) rows, and ``problems``: the flakes that could not be read, named
    with their reason and id (for the user to see), never skipped silently."""

    def __init__(self, rows=(), problems=()) -> None:
        super().__init__(rows)
        self.problems: tuple[str, ...] = tuple(problems)


def unreadable_summary(unreadable: list[tuple[int, str]], kind: str = "flake") -> list[str]:
    """Messages for rows that could not be read, grouped by reason: ``(id, reason)`` pairs with
    the reason worded for one row (``"its sample reference is broken"``), e.g. "1 flake could
    not be read: its sample reference is broken (flake id 7)"."""
    by_reason: dict[str, list[int]] = {}
    for rid, reason in unreadable:
        by_reason.setdefault(reason, []).append(rid)
    out = []
    for reason, ids in by_reason.items():
        if len(ids) == 1:
            out.append(f"1 {kind} could not be read: {reason} ({kind} id {ids[0]})")
        else:
            shown = ", ".join(map(str, ids[:10])) + (", ..." if len(ids) > 10 else "")
            plural = reason.replace("its ", "their ", 1)
            out.append(f"{len(ids)} {kind}s could not be read: {plural} ({kind} ids {shown})")
    return out


@dataclass(frozen=True)
class ImageCheck:
    """The state of an image's file: ``ok``, ``missing`` or ``changed`` (hash differs).

    ``note`` says more where there is more to say (a FIFO or a device in the file's place is
    ``missing``, with the note "not a regular file (a FIFO)": it is never read)."""

    image_id: int
    path: str
    status: str
    embedded: bool
    file: str
    note: str = ""


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


__all__ = [
    "CatalogueRow",
    "CatalogueRows",
    "unreadable_summary",
    "ImageCheck",
    "DeletedRows",
    "RecomputeReport",
]
