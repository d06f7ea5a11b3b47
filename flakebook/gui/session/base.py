"""The session's footing: opening and closing the project, record ids across undo, coverage.

A record deleted and restored by undo comes back with a new id; the session keeps an alias
from the old id to the new one so that older commands on the undo stack still find it.
"""

from __future__ import annotations

from collections.abc import Sequence
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from flakebook.errors import ProjectError
from flakebook.gui.commands import Undo
from flakebook.store import (
    Appearance,
    Flake,
    FlakeHole,
    Hole,
    Image,
    Project,
    ProjectLocked,
    Sample,
)


class ProjectBusy(ProjectError):
    """The project is held read-write by another window or program."""


class SessionBase:
    """Opening, ids and aliases, labels, and hole coverage kept up to date."""

    def __init__(self, project: Project) -> None:
        self.project = project
        self._alias: dict[tuple[str, int], list[tuple[int, int]]] = {}
        self._ctx: int | None = None
        self._resolved: set[tuple[str, int]] = set()
        self.epoch = 0
        self._raw: dict[int, np.ndarray] = {}  # decoded image data (last two)
        self._micro: dict[int, object] = {}
        self._thumbs: dict[tuple[int, int], object] = {}

    @classmethod
    def open(cls, path: Path, *, read_only: bool = False) -> SessionBase:
        """Open ``path``; :class:`ProjectBusy` when another program holds it read-write."""
        try:
            project = Project.open(path, read_only=read_only)
        except ProjectLocked as exc:
            raise ProjectBusy(str(exc)) from None
        return cls(project)

    @classmethod
    def create(cls, path: Path, sample: dict) -> SessionBase:
        """A new project file with its first sample."""
        project = Project.create(path)
        try:
            project.add_sample(
                sample["name"],
                sample["material"],
                sample["substrate"],
                hole_pattern=sample.get("hole_pattern"),
                notes=sample.get("notes", ""),
            )
        except BaseException:
            project.close()
            raise
        return cls(project)

    @property
    def path(self) -> Path:
        return self.project.path

    @property
    def read_only(self) -> bool:
        return self.project.read_only

    @property
    def warnings(self) -> list[str]:
        return list(self.project.warnings)

    def close(self) -> None:
        self.project.close()

    @contextmanager
    def resolving(self, epoch: int):
        """Resolve ids captured at ``epoch`` (an undo or redo runs in a new epoch of its own)."""
        prev, prev_resolved = self._ctx, self._resolved
        self._ctx = epoch
        self._resolved = set()
        self.epoch += 1
        try:
            yield
        finally:
            self._ctx, self._resolved = prev, prev_resolved

    def _r(self, kind: str, rid: int) -> int:
        e = self._ctx
        if e is None or rid is None or (kind, rid) in self._resolved:
            return rid  # live already (resolution is idempotent within an undo or redo)
        start = rid
        for _ in range(1000):
            later = [(ep, new) for ep, new in self._alias.get((kind, rid), ()) if ep > e]
            if not later:
                break
            e, rid = min(later)
        if rid != start:
            self._resolved.add((kind, rid))
        return rid

    def _alias_to(self, kind: str, old: int, new: int) -> None:
        if old != new:
            self._alias.setdefault((kind, old), []).append((self.epoch, new))

    def _born(self, kind: str, rid: int) -> None:
        """A record was stored with id ``rid`` (kept for symmetry; epochs keep ids apart)."""

    def _get(self, cls, rid: int):
        return self.project.get(cls, self._r(cls.KIND, rid))

    def _undo_made(self, made: Sequence[tuple[type, int]]) -> Undo:
        """An undo deleting the records an edit made, ``(record class, id)`` (those still
        there; read when the undo runs, so a list filled later counts)."""
        p = self.project

        def undo():
            with p.transaction():
                for cls, rid in made:
                    rid = self._r(cls.KIND, rid)
                    if p.records(cls, id=rid):
                        p.delete(cls, rid)

        return undo

    def next_label(self, sample: Sample) -> str:
        used = {f.label for f in self.project.records(Flake)}
        k = len(self.project.flakes_of(sample)) + 1
        while f"{sample.name}-{k:03d}" in used:
            k += 1
        return f"{sample.name}-{k:03d}"

    def _update_coverage_for_hole(self, hole: Hole) -> None:
        """Coverage of this hole by every flake outlined in its image (imaging.holes)."""
        from flakebook.imaging.holes import hole_coverage

        p = self.project
        img = p.get(Image, hole.image_id)
        for a in p.records(Appearance, image_id=img.id):
            cov = hole_coverage(
                a.outline_px,
                ((hole.center_x_px, hole.center_y_px), hole.radius_px),
                img.pixel_size_um or 1.0,
            )
            old = p.records(FlakeHole, flake_id=a.flake_id, hole_id=hole.id)
            if cov.covered_fraction <= 1e-9:
                for lk in old:
                    p.delete(lk)
                continue
            p.link_flake_hole(
                a.flake_id,
                hole.id,
                covered_fraction=cov.covered_fraction,
                fully_covered=cov.fully_covered,
                margin_um=cov.margin_um if img.pixel_size_um else None,
            )

    def _update_coverage_for_appearance(self, app: Appearance) -> None:
        p = self.project
        for hole in p.holes_of(app.image_id):
            self._update_coverage_for_hole(hole)
