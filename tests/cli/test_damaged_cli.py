"""Project commands on damaged files, a full disk, moved images and special files: exit 2 with
at most three lines (0 with a warning where the result is still sound), never an internal error,
and the project file byte-identical afterwards (INTERFACE.md exit codes; common practice, no
source)."""

from __future__ import annotations

import errno
import hashlib
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from flakebook.cli import main
from flakebook.store import Project
from tests.store.damage import DAMAGES, break_sample_reference, wrong_type


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture
def campaign(tmp_path):
    path = tmp_path / "k7.flakebook"
    with Project.create(path, clock=lambda: "2026-03-02T10:00:00Z") as p:
        s = p.add_sample("K7-north", "MoSe2", "SiO2:285,Si")
        tile = tmp_path / "tile.png"
        tile.write_bytes(np.random.default_rng(3).integers(0, 256, 300, dtype=np.uint8).tobytes())
        img = p.add_image(s, tile, pixel_size_um=0.1)
        f1 = p.add_flake(s, "K7N-001")
        p.add_appearance(f1, img, [[0, 0], [100, 0], [100, 100], [0, 100]])
        p.add_assignment(f1, 2, probability=0.9, method="combined-posterior")
        p.add_flake(s, "K7N-002")
        p.add_flake(s, "K7N-003")
    return path


def _commands(tmp_path: Path, path: Path) -> list[list]:
    results = tmp_path / "results.csv"
    results.write_text(
        "flake_id,kappa_w_mk,kappa_p16_w_mk,kappa_p84_w_mk,method,note\nK7N-001,40,35,45,x,\n"
    )
    return [
        ["info", path],
        ["export", path],
        ["export", path, "--out", tmp_path / "cat.csv"],
        ["assign", path, "--flake", "K7N-001"],
        ["assign", path, "--flake", "K7N-001", "--layers", "2", "--reason", "shear mode"],
        ["pack", path],
        ["relink", path, "--search", tmp_path],
        ["recompute", path],
        ["handoff", "export", path, "--flakes", "K7N-001", "--out", tmp_path / "h.json"],
        ["handoff", "import", path, results],
    ]


@pytest.mark.parametrize("damage", sorted(DAMAGES))
def test_damaged_file_every_command_refuses_in_three_lines_and_changes_nothing(
    campaign, tmp_path, capsys, damage
):
    DAMAGES[damage](campaign)
    before = digest(campaign)
    for argv in _commands(tmp_path, campaign):
        code, out, err = run(capsys, *argv)
        assert code == 2, (argv[0], code, err)
        assert "internal error" not in err and "Traceback" not in err
        assert 1 <= len(err.strip().splitlines()) <= 3, err
        assert "damaged" in err, (argv[0], err)
        assert digest(campaign) == before, argv[0]
        assert not (tmp_path / "cat.csv").exists() and not (tmp_path / "h.json").exists()
        assert not Path(str(campaign) + ".lock").exists()


def test_export_and_info_warn_of_a_flake_whose_sample_reference_is_broken(
    campaign, tmp_path, capsys
):
    fid = break_sample_reference(campaign, "K7N-002")
    before = digest(campaign)
    code, out, err = run(capsys, "export", campaign)
    assert code == 0
    assert [f["flake_id"] for f in json.loads(out)["flakes"]] == ["K7N-001", "K7N-003"]
    assert f"1 flake could not be read: its sample reference is broken (flake id {fid})" in err
    code, out, err = run(capsys, "export", campaign, "--format", "csv")
    assert code == 0 and "sample reference is broken" in err and "K7N-002" not in out
    code, out, err = run(capsys, "info", campaign)
    assert code == 0 and f"sample reference is broken (flake id {fid})" in err
    assert json.loads(out)["unreadable"] == [
        f"1 flake could not be read: its sample reference is broken (flake id {fid})"
    ]
    assert digest(campaign) == before


def test_a_value_of_the_wrong_type_exits_2_or_warns_never_internal(campaign, tmp_path, capsys):
    fid = wrong_type(campaign, "K7N-003")
    before = digest(campaign)
    code, out, err = run(capsys, "export", campaign)
    assert code == 0 and f"tags are not readable (flake id {fid})" in err
    for argv in _commands(tmp_path, campaign):
        code, out, err = run(capsys, *argv)
        assert code in (0, 2), (argv[0], err)
        assert "internal error" not in err and len(err.strip().splitlines()) <= 3
    code, out, err = run(capsys, "assign", campaign, "--flake", "K7N-003")
    assert code == 2 and f"flake id {fid} cannot be read: its tags" in err
    code, out, err = run(
        capsys, "assign", campaign, "--flake", "K7N-001", "--layers", "3", "--reason", "x"
    )
    assert code == 0, "the intact flakes stay editable"
    assert digest(campaign) != before


def _no_space(*args, **kwargs):
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


@pytest.mark.parametrize(
    "argv",
    [
        ["export", "{p}", "--out", "{d}/cat.csv"],
        ["export", "{p}", "--out", "{d}/cat.json", "--format", "json"],
        ["handoff", "export", "{p}", "--flakes", "K7N-001", "--out", "{d}/h.json"],
    ],
)
def test_output_on_a_full_disk_is_named_and_leaves_no_file(
    campaign, tmp_path, capsys, monkeypatch, argv
):
    """ENOSPC simulated on the OS write: exit 2, 'the disk is full', no partial output file."""
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    argv = [a.format(p=campaign, d=out_dir) for a in argv]
    before = digest(campaign)
    monkeypatch.setattr(os, "write", _no_space)
    code, out, err = run(capsys, *argv)
    monkeypatch.undo()
    assert code == 2 and "the disk is full" in err, err
    assert len(err.strip().splitlines()) <= 3
    assert list(out_dir.iterdir()) == [], "no empty or partial file, no temporary"
    assert digest(campaign) == before


def test_survey_into_a_project_on_a_full_disk_names_the_disk(tmp_path):
    """survey --project when the project cannot grow (SQLITE_FULL from max_page_count, set on
    every read-write connection of the child process)."""
    from tests.imaging.test_cli import ARGS, _png

    _png(tmp_path / "a.png")
    proj = tmp_path / "run.flakebook"
    with Project.create(proj) as p:
        p.add_sample("chip-A", "MoSe2", oxide_nm=285)
    before = digest(proj)
    child = (
        "import sys\n"
        "from flakebook.store import project as pm\n"
        "real = pm._ProjectCore._connect_rw\n"
        "def full(path):\n"
        "    con = real(path)\n"
        "    n = con.execute('PRAGMA page_count').fetchone()[0]\n"
        "    con.execute(f'PRAGMA max_page_count = {n}')\n"
        "    return con\n"
        "pm._ProjectCore._connect_rw = staticmethod(full)\n"
        "from flakebook.cli import main\n"
        "sys.exit(main(sys.argv[1:]))\n"
    )
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[2]))
    out = subprocess.run(
        [sys.executable, "-c", child, "survey", str(tmp_path / "a.png"), *ARGS]
        + ["--project", str(proj), "--format", "json"],
        capture_output=True,
        text=True,
        env=env,
        timeout=300,
    )
    assert "the disk is full" in out.stderr, out.stderr
    assert "savepoint" not in out.stderr and "internal error" not in out.stderr
    assert out.returncode == 2
    assert digest(proj) == before


def test_info_names_missing_and_changed_images(campaign, tmp_path, capsys):
    """Moved images (relink finds them) and edited ones: exit 0, one warning naming each."""
    with Project.open(campaign) as p:
        s = p.sample_by_name("K7-north")
        second = tmp_path / "tile_2.png"
        second.write_bytes(b"\x89PNG" + bytes(range(200)))
        p.add_image(s, second, pixel_size_um=0.1)
    code, out, err = run(capsys, "info", campaign)
    assert code == 0 and err == ""
    info = json.loads(out)
    assert info["images_missing"] == [] and info["images_changed"] == []
    moved = tmp_path / "moved"
    moved.mkdir()
    (tmp_path / "tile.png").rename(moved / "tile.png")
    second.write_bytes(b"\x89PNG" + bytes(range(201)))
    before = digest(campaign)
    code, out, err = run(capsys, "info", campaign)
    assert code == 0
    info = json.loads(out)
    assert [m["path"] for m in info["images_missing"]] == ["tile.png"]
    assert [c["path"] for c in info["images_changed"]] == ["tile_2.png"]
    lines = err.strip().splitlines()
    assert any("tile.png" in line and "missing" in line for line in lines), err
    assert any("tile_2.png" in line and "changed" in line for line in lines), err
    assert any("relink" in line for line in lines)
    assert digest(campaign) == before
    code, out, err = run(capsys, "info", campaign, "--format", "table")
    assert code == 0 and "tile.png" in err


_CHILD = "import sys\nfrom flakebook.cli import main\nsys.exit(main(sys.argv[1:]))\n"


def _cli(*argv, timeout=60):
    """The command in a child process, so that a read that would hang fails the test."""
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[2]))
    return subprocess.run(
        [sys.executable, "-c", _CHILD, *map(str, argv)],
        capture_output=True,
        text=True,
        env=env,
        timeout=timeout,
    )


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs FIFOs (POSIX)")
def test_pack_never_reads_a_fifo_in_place_of_an_image(campaign, tmp_path):
    tile = tmp_path / "tile.png"
    tile.unlink()
    os.mkfifo(tile)
    before = digest(campaign)
    out = _cli("pack", campaign)
    assert out.returncode == 2, out.stderr
    assert "tile.png" in out.stderr and "not a regular file" in out.stderr
    assert len(out.stderr.strip().splitlines()) <= 3
    assert digest(campaign) == before
    with Project.open(campaign, read_only=True) as p:
        (check,) = p.check_images()
        assert check.status == "missing" and "not a regular file" in check.note


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs FIFOs (POSIX)")
def test_reading_and_relinking_skip_special_files(campaign, tmp_path):
    """An image whose file is a FIFO is refused, not read (image_bytes in a child process); a
    FIFO in the searched folder is passed over by relink (an empty image would match its size)."""
    with Project.open(campaign) as p:
        empty = tmp_path / "blank.png"
        empty.write_bytes(b"")
        p.add_image(p.sample_by_name("K7-north"), empty, pixel_size_um=0.1)
    (tmp_path / "tile.png").unlink()
    os.mkfifo(tmp_path / "tile.png")
    child = (
        "import sys\n"
        "from flakebook.errors import ProjectError\n"
        "from flakebook.store import Project\n"
        "with Project.open(sys.argv[1], read_only=True) as p:\n"
        "    try:\n"
        "        p.image_bytes(p.records('image')[0])\n"
        "    except ProjectError as exc:\n"
        "        print(exc)\n"
    )
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[2]))
    out = subprocess.run(
        [sys.executable, "-c", child, str(campaign)],
        capture_output=True,
        text=True,
        env=env,
        timeout=60,
    )
    assert "not a regular file" in out.stdout, out.stdout + out.stderr
    empty.unlink()
    search = tmp_path / "search"
    search.mkdir()
    os.mkfifo(search / "blank.png")
    out = _cli("relink", campaign, "--search", search, "--format", "json")
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout)["relinked"] == []


def test_pack_reports_images_outside_the_project_folder(tmp_path, capsys):
    folder = tmp_path / "campaign"
    folder.mkdir()
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    far = elsewhere / "far.png"
    far.write_bytes(b"\x89PNG" + bytes(range(100)))
    near = folder / "near.png"
    near.write_bytes(b"\x89PNG" + bytes(range(50)))
    path = folder / "k7.flakebook"
    with Project.create(path) as p:
        s = p.add_sample("K7-north", "MoSe2", "SiO2:285,Si")
        p.add_image(s, far, pixel_size_um=0.1)
        p.add_image(s, near, pixel_size_um=0.1)
        stored = p.records("image")[0].path
    assert stored.startswith("../elsewhere/")
    far.write_bytes(b"something else")
    before = digest(path)
    code, out, err = run(capsys, "pack", path)
    assert code == 2 and "changed" in err and digest(path) == before, "the hash is checked"
    far.write_bytes(b"\x89PNG" + bytes(range(100)))
    code, out, err = run(capsys, "pack", path)
    assert code == 0
    result = json.loads(out)
    assert result["embedded"] == 2
    assert [o["path"] for o in result["outside_folder"]] == [stored]
    assert "outside the project folder" in err and stored in err
