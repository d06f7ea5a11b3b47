"""Edits of flake and sample records (fields, assignments, deletion), each returning its undo."""

from __future__ import annotations

from flakebook.errors import InputError
from flakebook.gui.commands import Undo
from flakebook.store import Assignment, Flake, HolePattern, Sample
from flakebook.substrate import format_substrate


class Records:
    """Flake fields, manual assignments, deleting flakes, sample settings."""

    def set_flake_fields(self, flake_id: int, **fields) -> Undo:
        p = self.project
        flake = self._get(Flake, flake_id)
        before = {k: getattr(flake, k) for k in fields}
        p.update(flake, **fields)
        return lambda: p.update(self._get(Flake, flake.id), **before)

    def assign(self, flake_id: int, layers: int, reason: str) -> Undo:
        p = self.project
        rec = p.assign(self._r("flake", flake_id), int(layers), reason=reason)
        return lambda: p.delete(Assignment, self._r("assignment", rec.id))

    def clear_manual(self, flake_id: int) -> Undo:
        """Remove the flake's manual assignments (the evidence decides again)."""
        p = self.project
        fid = self._r("flake", flake_id)
        manual = [a for a in p.assignments_of(fid) if a.manual]
        if not manual:
            raise InputError("This flake has no manual assignment to remove.")
        with p.transaction():
            deleted = [p.delete(a) for a in manual]

        def restore():
            with p.transaction():
                for d in reversed(deleted):
                    p.restore(d)

        return restore

    def delete_flake(self, flake_id: int) -> Undo:
        """Delete a flake and all that is on it; the undo restores the same rows and ids."""
        p = self.project
        deleted = p.delete(Flake, self._r("flake", flake_id))
        return lambda: p.restore(deleted)

    def sample_values(self, sample_id: int) -> dict:
        s = self._get(Sample, sample_id)
        return {
            "name": s.name,
            "material": s.material,
            "substrate": format_substrate(s.substrate),
            "hole_pattern": s.hole_pattern.to_dict() if s.hole_pattern else None,
            "notes": s.notes,
        }

    def _sample_fields(self, values: dict) -> dict:
        from flakebook.substrate import parse_substrate

        hp = values.get("hole_pattern")
        return {
            "name": values["name"],
            "material": values["material"],
            "substrate": parse_substrate(values["substrate"]),
            "hole_pattern": HolePattern(**hp) if hp else None,
            "notes": values.get("notes", ""),
        }

    def update_sample(self, sample_id: int, values: dict) -> Undo:
        p = self.project
        s = self._get(Sample, sample_id)
        before = {
            k: getattr(s, k) for k in ("name", "material", "substrate", "hole_pattern", "notes")
        }
        p.update(s, **self._sample_fields(values))
        return lambda: p.update(self._get(Sample, s.id), **before)

    def add_sample(self, values: dict) -> int:
        v = self._sample_fields(values)
        return self.project.add_sample(
            v["name"],
            v["material"],
            values["substrate"],
            hole_pattern=v["hole_pattern"],
            notes=v["notes"],
        ).id

    def delete_sample(self, sample_id: int) -> None:
        s = self._get(Sample, sample_id)
        if self.project.images_of(s) or self.project.flakes_of(s):
            raise InputError(f"Sample {s.name} has images or flakes now; it is not removed.")
        self.project.delete(s)
