"""Every record kind survives a close and reopen unchanged (common practice, no source)."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from store_helpers import FIXED_CLOCK, populate

from flakebook.errors import InputError, ProjectError
from flakebook.store import KINDS, Project, Sample, Spectrum


def assert_same(a, b):
    """Field-by-field equality, arrays compared with numpy."""
    assert type(a) is type(b)
    for f in dataclasses.fields(a):
        va, vb = getattr(a, f.name), getattr(b, f.name)
        if isinstance(va, np.ndarray) or isinstance(vb, np.ndarray):
            assert va is not None and vb is not None, f.name
            assert va.shape == vb.shape and np.array_equal(va, vb, equal_nan=True), f.name
        else:
            assert va == vb, f"{type(a).__name__}.{f.name}: {va!r} != {vb!r}"


def test_every_kind_round_trips(tmp_path):
    p = Project.create(tmp_path / "rt", clock=lambda: FIXED_CLOCK, user="dana")
    made = populate(p, tmp_path)
    p.close()
    kinds_made = {rec.KIND for rec in made.values()}
    assert kinds_made == set(KINDS), "the builder covers every record kind"
    with Project.open(tmp_path / "rt.flakebook", read_only=True) as q:
        for name, rec in made.items():
            stored = q.get(rec.KIND, rec.id)
            if name == "flake":
                rec = q.get("flake", rec.id)  # updated after the terrace was added
            assert_same(rec, stored)
        s = q.get("sample", made["sample"].id)
        assert s.name == "K7-north µ-chip"
        assert [(x.material, x.thickness_nm) for x in s.substrate] == [
            ("Au", 100.0),
            ("Ti", 5.0),
            ("SiO2", 285.0),
            ("Si", None),
        ]
        assert s.hole_pattern.bottom == "au" and s.hole_pattern.depth_nm == 390.0
        f = q.get("flake", made["flake"].id)
        assert f.tags == ("raman-next", "薄い") and f.label == "K7N-α01"
        ev = q.get("evidence", made["evidence"].id)
        assert [r.kind for r in ev.inputs] == ["appearance", "terrace", "image"]
        assert ev.flakebook_version and ev.computed_at == FIXED_CLOCK
        manual = q.get("assignment", made["manual_assignment"].id)
        assert manual.manual and manual.who == "dana" and manual.assigned_at == FIXED_CLOCK
        assert q.count("flake") == 1
        result = q.get("thermometry_result", made["thermometry_result"].id)
        assert result.source.startswith("radial conduction")


@pytest.mark.parametrize("n", [0, 1, 1_000_000])
def test_arrays_empty_and_large(project, n):
    """Empty and 10^6-point spectra keep every value bit for bit."""
    s = project.add_sample("S", "MoS2", oxide_nm=90)
    rng = np.random.default_rng(7)
    x = np.sort(rng.uniform(0, 4000, n))
    y = rng.normal(size=n)
    spec = project.add_spectrum(None, x, y, sample_id=s.id, kind="pl", x_unit="nm")
    path = project.path
    project.close()
    with Project.open(path, read_only=True) as q:
        got = q.get(Spectrum, spec.id)
        assert got.x.shape == (n,) and got.x.dtype == np.float64
        assert np.array_equal(got.x, x) and np.array_equal(got.y, y)
        assert not got.y.flags.writeable


def test_update_bumps_revision_and_unchanged_update_does_not(project):
    s = project.add_sample("S", "WS2", "SiO2:285,Si")
    assert s.revision == 1
    s2 = project.update(s, notes="re-measured oxide")
    assert s2.revision == 2 and s2.notes == "re-measured oxide"
    assert project.update(s2, notes="re-measured oxide").revision == 2


def test_bad_values_are_refused_with_a_clear_message(project):
    s = project.add_sample("S", "WSe2", oxide_nm=285)
    with pytest.raises(InputError, match="reason"):
        project.assign(project.add_flake(s, "F1"), 3, reason="  ")
    with pytest.raises(InputError, match="bottom"):
        project.add_sample(
            "T", "WSe2", oxide_nm=285, hole_pattern={"bottom": "glass", "diameter_um": 2}
        )
    with pytest.raises(InputError, match="already has a sample"):
        project.add_sample("S", "WSe2", oxide_nm=285)
    with pytest.raises(InputError, match="N x 2"):
        project.add_appearance(1, 1, [1, 2, 3])
    with pytest.raises(InputError, match="needs 16"):
        project.add_evidence(1, np.ones(10), method="x")
    assert project.count("sample") == 1 and project.count("flake") == 1


def test_transaction_is_all_or_nothing(project):
    with pytest.raises(RuntimeError):
        with project.transaction():
            project.add_sample("A", "MoS2", oxide_nm=285)
            project.add_sample("B", "MoS2", oxide_nm=285)
            raise RuntimeError("interrupted")
    assert project.count(Sample) == 0
    with project.transaction():
        project.add_sample("A", "MoS2", oxide_nm=285)
        with pytest.raises(InputError):
            with project.transaction():
                project.add_sample("B", "MoS2", oxide_nm=285)
                project.add_sample("B", "MoS2", oxide_nm=285)
    assert [s.name for s in project.samples()] == ["A"]


def test_delete_cascades_and_read_only_refuses_changes(tmp_path):
    p = Project.create(tmp_path / "d", clock=lambda: FIXED_CLOCK)
    made = populate(p, tmp_path)
    p.delete(made["flake"])
    for kind in ("appearance", "terrace", "evidence", "assignment", "spectrum", "external_result"):
        assert p.count(kind) == 0, kind
    assert p.count("hole") == 1 and p.count("image") == 1
    p.delete("sample", made["sample"].id)
    assert p.count("image") == 0 and p.count("hole") == 0
    p.close()
    with Project.open(tmp_path / "d.flakebook", read_only=True) as q:
        with pytest.raises(ProjectError, match="read-only"):
            q.add_sample("X", "MoS2", oxide_nm=285)


def test_references_to_missing_records_are_input_errors(project):
    s = project.add_sample("S", "MoS2", oxide_nm=285)
    with pytest.raises(InputError, match="does not exist"):
        project.add_flake(999, "F-orphan")
    with pytest.raises(InputError, match="no image with id 42"):
        project.add_appearance(1, 42, [[0, 0], [1, 0], [1, 1]])
    assert project.count("flake") == 0 and project.samples() == [s]


@pytest.mark.parametrize(
    "kind", ["sample", "image", "flake", "appearance", "terrace", "hole", "evidence", "spectrum"]
)
def test_delete_then_restore_gives_back_exactly_the_same_project(tmp_path, kind):
    """Undo of a delete: every row, reference, stale mark and provenance row comes back."""
    p = Project.create(tmp_path / "u", clock=lambda: FIXED_CLOCK)
    made = populate(p, tmp_path)
    p.pack()
    before = p.canonical_dump()
    deleted = p.delete(made[kind])
    assert deleted.count() >= 1
    assert p.canonical_dump() != before
    p.restore(deleted)
    assert p.canonical_dump() == before
    p.close()


def test_delete_marks_what_was_computed_from_cascaded_rows(tmp_path):
    p = Project.create(tmp_path / "c", clock=lambda: FIXED_CLOCK)
    made = populate(p, tmp_path)
    p.delete(made["hole"])  # the thermometry result was computed from it
    assert p.get("thermometry_result", made["thermometry_result"].id).stale
    assert p.get("flake", made["flake"].id).primary_terrace_id == made["terrace"].id
    deleted = p.delete(made["terrace"])  # evidence of the terrace goes; the flake forgets it
    assert p.get("flake", made["flake"].id).primary_terrace_id is None
    assert p.count("evidence") == 0
    p.restore(deleted)
    assert p.get("flake", made["flake"].id).primary_terrace_id == made["terrace"].id
    p.close()


def test_delete_without_undo_keeps_nothing_in_memory(tmp_path):
    p = Project.create(tmp_path / "n", clock=lambda: FIXED_CLOCK)
    made = populate(p, tmp_path)
    assert p.delete(made["sample"], undo=False).count() == 0
    assert p.count("spectrum") == 0 and p.count("flake") == 0
    p.close()
