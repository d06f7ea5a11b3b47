"""Merge with a neighbour: two touching outlines of one image become one flake."""

from __future__ import annotations

import logging

from PySide6.QtWidgets import QInputDialog

from flakebook.errors import InputError
from flakebook.gui.commands import Undo
from flakebook.store import Evidence, Flake, FlakeHole, Terrace

log = logging.getLogger("flakebook.gui")


class SessionEdits:
    """Merge two flakes' outlines in one image (flakebook.gui.geometry.merge_outlines)."""

    def merge_flakes(self, keep_id: int, other_id: int, image_id: int) -> Undo:
        """Merge ``other``'s outline in this image into ``keep``'s (its terraces, evidence and
        hole links move over; ``other`` goes when it has no other appearance)."""
        from flakebook.gui.geometry import merge_outlines

        p = self.project
        keep, other = self._r("flake", keep_id), self._r("flake", other_id)
        iid = self._r("image", image_id)
        if keep == other:
            raise InputError("Choose another flake to merge with.")
        ka = next((a for a in p.appearances_of(keep) if a.image_id == iid), None)
        oa = next((a for a in p.appearances_of(other) if a.image_id == iid), None)
        if ka is None or oa is None:
            raise InputError("Both flakes need an outline in the image shown.")
        union = merge_outlines(ka.outline_px, oa.outline_px)
        before = ka.outline_px.copy()
        moved_t = [t.id for t in p.records(Terrace, appearance_id=oa.id)]
        moved_e = [e.id for e in p.evidence_of(other)]
        deleted = []
        with p.transaction():
            for tid in moved_t:
                p.update(p.get(Terrace, tid), appearance_id=ka.id)
            for eid in moved_e:
                p.update(p.get(Evidence, eid), flake_id=keep)
            for asg in p.assignments_of(other):
                deleted.append(p.delete(asg))
            for lk in p.records(FlakeHole, flake_id=other):
                deleted.append(p.delete(lk))
            deleted.append(p.delete(oa))
            if not p.appearances_of(other):
                deleted.append(p.delete(Flake, other))
            self.set_outline(ka.id, union)

        def undo():
            with p.transaction():
                for d in reversed(deleted):
                    p.restore(d)
                for tid in moved_t:
                    p.update(p.get(Terrace, tid), appearance_id=oa.id)
                for eid in moved_e:
                    p.update(p.get(Evidence, eid), flake_id=other)
                self.set_outline(ka.id, before)

        return undo


class WindowCommands:
    """Choose the flake to merge into the selected one (undoable)."""

    def merge_dialog(self) -> None:
        s = self._need_session()
        image = self._need_image()
        if self.current_flake is None:
            raise InputError(
                "Select the flake to keep first; then choose the one to merge into it."
            )
        others = [
            (it.shape_data.flake_id, it.shape_data.label)
            for it in self.canvas.outlines.values()
            if it.shape_data.flake_id != self.current_flake
        ]
        if not others:
            raise InputError("There is no other flake on this image to merge with.")
        names = [n for _, n in others]
        name, ok = QInputDialog.getItem(
            self,
            "Merge flakes",
            f"Merge into {s.flake_label(self.current_flake)}:",
            names,
            0,
            False,
        )
        if ok:
            self.merge(self.current_flake, others[names.index(name)][0], image)

    def merge(self, keep: int, other: int, image: int) -> None:
        s = self._need_session()
        label = s.flake_label(other)
        self.edit(
            f"Merge {label} into {s.flake_label(keep)}", lambda: s.merge_flakes(keep, other, image)
        )
