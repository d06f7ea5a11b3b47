"""Link to a flake: an outline in one image is a flake already seen in another image."""

from __future__ import annotations

import logging

from PySide6.QtWidgets import QInputDialog

from flakebook.errors import InputError
from flakebook.gui.commands import Undo
from flakebook.store import Flake, FlakeHole

log = logging.getLogger("flakebook.gui")


class SessionEdits:
    """Move an outline (and what hangs on it) over to another flake."""

    def link_choices(self, flake_id: int) -> list[tuple[int, str]]:
        p = self.project
        f = self._get(Flake, flake_id)
        return [(o.id, o.label) for o in p.flakes_of(f.sample_id) if o.id != f.id]

    def link_flake(self, source_id: int, target_id: int) -> Undo:
        """The outline(s) of ``source`` are another image's view of ``target``: move them over."""
        p = self.project
        src = self._r("flake", source_id)
        dst = self._r("flake", target_id)
        apps = p.appearances_of(src)
        target_images = {a.image_id for a in p.appearances_of(dst)}
        if any(a.image_id in target_images for a in apps):
            raise InputError(
                "The chosen flake already has an outline in this image; pick another one."
            )
        moved = [("appearance", a.id) for a in apps]
        moved += [("evidence", e.id) for e in p.evidence_of(src)]
        moved += [("flake_hole", lk.id) for lk in p.records(FlakeHole, flake_id=src)]
        moved += [("assignment", a.id) for a in p.assignments_of(src) if a.manual]
        deleted = []
        with p.transaction():
            for kind, rid in moved:
                p.update(p.get(kind, rid), flake_id=dst)
            for a in p.assignments_of(src):
                deleted.append(p.delete(a))
            deleted.append(p.delete(Flake, src))

        def undo():
            with p.transaction():
                for d in reversed(deleted):
                    p.restore(d)
                for kind, rid in moved:
                    p.update(p.get(kind, rid), flake_id=src)

        return undo


class WindowCommands:
    """Choose the flake the selected outline shows (undoable)."""

    def link_dialog(self) -> None:
        s = self._need_session()
        if self.current_flake is None or self.current_image is None:
            raise InputError("Select the outline to link first.")
        choices = s.link_choices(self.current_flake)
        if not choices:
            raise InputError("There is no other flake of this sample to link to.")
        names = [c[1] for c in choices]
        name, ok = QInputDialog.getItem(
            self, "Link to a flake", "This outline shows the flake:", names, 0, False
        )
        if not ok:
            return
        target = choices[names.index(name)][0]
        src = self.current_flake

        def do():
            return s.link_flake(src, target)

        self.current_flake = target
        self.edit(f"Link to {name}", do)
