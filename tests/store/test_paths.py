"""Image files: relative paths, hashes, moved/changed files reported, relink, pack (common
practice, no source; SHA-256 as hashlib computes it, FIPS 180-4)."""

from __future__ import annotations

import hashlib
import shutil

import pytest
from store_helpers import FIXED_CLOCK, folder_state, write_image

from flakebook.errors import ProjectError
from flakebook.store import Project


@pytest.fixture
def proj(tmp_path):
    (tmp_path / "camera").mkdir()
    files = [write_image(tmp_path / "camera" / f"tile_{i:02d}.png", i) for i in range(3)]
    p = Project.create(tmp_path / "p", clock=lambda: FIXED_CLOCK)
    s = p.add_sample("K7-north", "MoSe2", oxide_nm=285)
    imgs = [p.add_image(s, f, pixel_size_um=0.2) for f in files]
    yield p, imgs, files
    p.close()


def test_paths_are_relative_and_hashed(proj, tmp_path):
    p, imgs, files = proj
    assert imgs[0].path == "camera/tile_00.png"
    assert imgs[0].sha256 == hashlib.sha256(files[0].read_bytes()).hexdigest()
    assert imgs[0].size_bytes == files[0].stat().st_size
    assert [c.status for c in p.check_images()] == ["ok", "ok", "ok"]
    assert p.image_bytes(imgs[1]) == files[1].read_bytes()


def test_moved_and_changed_images_are_reported_and_relinked(proj, tmp_path):
    p, imgs, files = proj
    (tmp_path / "archive" / "day1").mkdir(parents=True)
    shutil.move(files[0], tmp_path / "archive" / "day1" / "renamed.png")
    original = files[1].read_bytes()
    files[1].write_bytes(original + b"edited")
    status = {c.image_id: c.status for c in p.check_images()}
    assert status == {imgs[0].id: "missing", imgs[1].id: "changed", imgs[2].id: "ok"}
    with pytest.raises(ProjectError, match="missing"):
        p.image_bytes(imgs[0])
    with pytest.raises(ProjectError, match="changed"):
        p.image_bytes(imgs[1])
    (tmp_path / "archive" / "backup_of_tile_01.png").write_bytes(original)
    result = p.relink(tmp_path / "archive")
    assert dict(result["relinked"]) == {
        imgs[0].id: "archive/day1/renamed.png",
        imgs[1].id: "archive/backup_of_tile_01.png",
    }
    assert result["not_found"] == []
    assert [c.status for c in p.check_images()] == ["ok", "ok", "ok"]
    assert p.get("image", imgs[0].id).revision == 1, "same content: nothing becomes stale"


def test_relink_reports_what_it_cannot_find(proj, tmp_path):
    p, imgs, files = proj
    files[2].unlink()
    (tmp_path / "empty").mkdir()
    assert p.relink(tmp_path / "empty") == {"relinked": [], "not_found": [imgs[2].id]}


def test_pack_embeds_every_image_and_the_file_stands_alone(proj, tmp_path):
    p, imgs, files = proj
    contents = [f.read_bytes() for f in files]
    assert p.pack() == 3
    assert p.pack() == 0
    path = p.path
    p.close()
    moved = tmp_path / "mailed"
    moved.mkdir()
    shutil.copy2(path, moved / "p.flakebook")
    with Project.open(moved / "p.flakebook", read_only=True) as q:
        checks = q.check_images()
        assert [c.status for c in checks] == ["missing"] * 3
        assert all(c.embedded for c in checks)
        assert [q.image_bytes(i) for i in imgs] == contents


def test_pack_is_all_or_nothing(proj, tmp_path):
    p, imgs, files = proj
    files[1].unlink()
    path = p.path
    before = folder_state(tmp_path)
    with pytest.raises(ProjectError, match="tile_01.png \\(missing\\)"):
        p.pack()
    assert folder_state(tmp_path) == before
    assert p.info()["images_embedded"] == 0
    assert path.exists()
