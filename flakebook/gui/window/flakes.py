"""Edits of a flake's record from the inspector and the catalogue: assignment, tags, notes,
primary terrace (each one undoable edit).
"""

from __future__ import annotations

import logging

from PySide6.QtWidgets import QInputDialog

from flakebook.errors import InputError
from flakebook.wording import count_text

log = logging.getLogger("flakebook.gui")


class FlakeEdits:
    """Assignments, tags, notes and the primary terrace of flakes."""

    def assign(self, flake_id: int, layers: int, reason: str) -> None:
        s = self._need_session()
        if not reason.strip():
            raise InputError("A manual assignment needs a reason (what you saw that decides it).")

        def do():
            return s.assign(flake_id, layers, reason)

        self.edit(f"Assign {layers}L to {s.flake_label(flake_id)}", do)

    def clear_assignment(self, flake_id: int) -> None:
        s = self._need_session()

        def do():
            return s.clear_manual(flake_id)

        self.edit(f"Back to evidence for {s.flake_label(flake_id)}", do)

    def set_tags(self, flake_id: int, tags: list[str]) -> None:
        s = self._need_session()

        def do():
            return s.set_flake_fields(flake_id, tags=tuple(tags))

        self.edit(f"Tags of {s.flake_label(flake_id)}", do)

    def set_primary_terrace(self, flake_id: int, terrace_id: int) -> None:
        """Choose the terrace whose layer number is the flake's (DESIGN.md)."""
        s = self._need_session()
        self.edit(
            f"Primary terrace of {s.flake_label(flake_id)}",
            lambda: s.set_flake_fields(flake_id, primary_terrace_id=terrace_id),
        )

    def tag_shown_dialog(self) -> None:
        self._need_session()
        tag, ok = QInputDialog.getText(
            self, "Tag shown flakes", "Tag for every flake shown:", text="thermometry"
        )
        if ok:
            self.tag_flakes([r["id"] for r in self.catalogue.proxy.visible_rows()], tag)

    def tag_flakes(self, flake_ids: list[int], tag: str) -> None:
        """Add ``tag`` to each flake (one undoable edit)."""
        s = self._need_session()
        tag = tag.strip()
        if not tag or "," in tag:
            raise InputError(
                f"Tag {tag!r} is not usable; accepted: a word without commas, e.g. thermometry"
            )
        if not flake_ids:
            raise InputError("No flake is shown; loosen the filters first.")

        def do():
            undos = []
            with s.project.transaction():
                for fid in flake_ids:
                    tags = tuple(s.project.get("flake", s._r("flake", fid)).tags)
                    if tag not in tags:
                        undos.append(s.set_flake_fields(fid, tags=(*tags, tag)))

            def undo():
                with s.project.transaction():
                    for u in reversed(undos):
                        u()

            return undo

        self.edit(f"Tag {count_text(len(flake_ids), 'flake')} {tag}", do)

    def set_notes(self, flake_id: int, notes: str) -> None:
        s = self._need_session()

        def do():
            return s.set_flake_fields(flake_id, notes=notes)

        self.edit(f"Notes of {s.flake_label(flake_id)}", do)
