"""Damaged project files: refused read-write with a way out, and reads that name the rows they
cannot read instead of skipping them (SQLite's quick_check; common practice, no source)."""

from __future__ import annotations

import pytest
from damage import DAMAGES, break_sample_reference, corrupt_page, drop_table, wrong_type
from store_helpers import FIXED_CLOCK, folder_state, write_image

from flakebook.errors import ProjectError
from flakebook.store import Project
from flakebook.store.lock import lock_path


def _campaign(tmp_path):
    path = tmp_path / "k7.flakebook"
    with Project.create(path, clock=lambda: FIXED_CLOCK) as p:
        s = p.add_sample("K7-north", "MoSe2", "SiO2:285,Si")
        img = p.add_image(s, write_image(tmp_path / "tile.png", 1), pixel_size_um=0.1)
        f1 = p.add_flake(s, "K7N-001")
        p.add_appearance(f1, img, [[0, 0], [100, 0], [100, 100], [0, 100]])
        p.add_flake(s, "K7N-002")
        p.add_flake(s, "K7N-003")
    return path


@pytest.mark.parametrize("damage", sorted(DAMAGES))
def test_read_write_open_refuses_a_damaged_file_and_says_what_works(tmp_path, damage):
    path = _campaign(tmp_path)
    DAMAGES[damage](path)
    before = folder_state(tmp_path)
    with pytest.raises(ProjectError) as exc:
        Project.open(path)
    text = str(exc.value)
    assert "damaged" in text and "was not changed" in text
    assert "backup" in text
    assert len(text.splitlines()) <= 3
    assert folder_state(tmp_path) == before, "nothing written, no lock left behind"
    assert not lock_path(path).exists()


def test_corrupted_page_read_only_names_the_damage_on_reading(tmp_path):
    path = _campaign(tmp_path)
    corrupt_page(path, "flakes")
    before = folder_state(tmp_path)
    with pytest.raises(ProjectError, match="integrity check"):
        Project.open(path)
    with Project.open(path, read_only=True) as p:
        with pytest.raises(ProjectError, match="is damaged .*malformed"):
            p.catalogue()
        with pytest.raises(ProjectError, match="is damaged .*malformed"):
            p.records("flake")
    assert folder_state(tmp_path) == before


def test_a_dropped_table_is_named_also_read_only(tmp_path):
    path = _campaign(tmp_path)
    drop_table(path, "holes")
    with pytest.raises(ProjectError, match="table holes is missing"):
        Project.open(path, read_only=True)


def test_catalogue_and_export_name_a_flake_whose_sample_reference_is_broken(tmp_path):
    path = _campaign(tmp_path)
    fid = break_sample_reference(path, "K7N-002")
    with Project.open(path, read_only=True) as p:
        rows = p.catalogue()
        assert [r.label for r in rows] == ["K7N-001", "K7N-003"]
        assert rows.problems == (
            f"1 flake could not be read: its sample reference is broken (flake id {fid})",
        )
        export = p.export_rows()
        assert [r["flake_id"] for r in export] == ["K7N-001", "K7N-003"]
        assert export.problems == rows.problems


def test_a_value_of_the_wrong_type_is_named_not_skipped(tmp_path):
    path = _campaign(tmp_path)
    fid = wrong_type(path, "K7N-003")
    with Project.open(path, read_only=True) as p:
        rows = p.catalogue()
        assert [r.label for r in rows] == ["K7N-001", "K7N-002"]
        assert rows.problems == (
            f"1 flake could not be read: its tags are not readable (flake id {fid})",
        )
        with pytest.raises(ProjectError, match=f"flake id {fid} cannot be read: its tags"):
            p.records("flake")
        assert p.find_flake("K7N-001").label == "K7N-001", "the intact rows still read"
