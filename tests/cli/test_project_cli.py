"""The project commands, their JSON and exit codes (INTERFACE.md; common practice, no source)."""

from __future__ import annotations

import csv
import io
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from flakebook.cli import main
from flakebook.store import Project

ROOT = Path(__file__).resolve().parents[2]


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def _image(path: Path, seed: int) -> Path:
    path.write_bytes(np.random.default_rng(seed).integers(0, 256, 300, dtype=np.uint8).tobytes())
    return path


@pytest.fixture
def campaign(tmp_path, capsys):
    """A project made by ``new`` and filled through the API: two flakes, evidence, an image."""
    code, out, err = run(
        capsys,
        "new",
        tmp_path / "k7",
        "--sample",
        "K7-north",
        "--material",
        "MoSe2",
        "--oxide-nm",
        "285",
    )
    assert code == 0, err
    path = Path(json.loads(out)["project"])
    with Project.open(path, clock=lambda: "2026-03-02T10:00:00Z") as p:
        s = p.sample_by_name("K7-north")
        img = p.add_image(s, _image(tmp_path / "tile.png", 1), pixel_size_um=0.1)
        f1 = p.add_flake(s, "K7N-001")
        p.add_appearance(f1, img, [[0, 0], [100, 0], [100, 100], [0, 100]])
        lk = np.full(16, 0.01)
        lk[1] = 1.0
        p.add_evidence(f1, lk, method="contrast-likelihood", reason="green contrast 0.2")
        p.add_assignment(f1, 2, probability=0.93, ambiguous_with=(3,), method="combined-posterior")
        p.add_flake(s, "K7N-002")
    return path


def test_new_with_substrate_and_info(tmp_path, capsys):
    code, out, _ = run(
        capsys,
        "new",
        tmp_path / "au.flakebook",
        "--sample",
        "G2",
        "--material",
        "WS2",
        "--substrate",
        "Au:100,Ti:5,SiO2:285,Si",
    )
    assert code == 0
    code, out, _ = run(capsys, "info", tmp_path / "au.flakebook")
    info = json.loads(out)
    assert info["samples"][0]["substrate"][0] == {"material": "Au", "thickness_nm": 100.0}
    assert info["project_format"] >= 2 and info["read_only"] is True


@pytest.mark.parametrize(
    "extra, words",
    [
        (["--substrate", "SiO2:285,Si:3"], "semi-infinite"),
        (["--oxide-nm", "-3"], "--oxide-nm"),
        (["--oxide-nm", "285", "--max-layers", "0"], "--max-layers"),
    ],
)
def test_new_refuses_bad_options_and_leaves_no_file(tmp_path, capsys, extra, words):
    code, out, err = run(
        capsys, "new", tmp_path / "x", "--sample", "S", "--material", "MoS2", *extra
    )
    assert code == 2 and words in err and out == ""
    assert list(tmp_path.iterdir()) == []


def test_export_json_and_csv(campaign, tmp_path, capsys):
    code, out, _ = run(capsys, "export", campaign)
    flakes = json.loads(out)["flakes"]
    assert [f["flake_id"] for f in flakes] == ["K7N-001", "K7N-002"]
    f1 = flakes[0]
    assert f1["layers"] == 2 and f1["probability"] == 0.93
    assert f1["area_um2"] == pytest.approx(100.0)
    assert f1["thickness_nm"] == pytest.approx(2 * 0.646)  # MoSe2 spacing, value from memory
    assert flakes[1]["layers"] is None and flakes[1]["thickness_nm"] is None
    code, out, _ = run(capsys, "export", campaign, "--format", "csv")
    rows = list(csv.DictReader(io.StringIO(out)))
    assert rows[0]["flake_id"] == "K7N-001" and rows[1]["layers"] == ""
    code, _, err = run(capsys, "export", campaign, "--out", tmp_path / "cat.csv")
    assert code == 0 and "wrote 2 flakes" in err
    assert (tmp_path / "cat.csv").read_text().startswith("flake_id,sample,area_um2,layers")


def test_assign_shows_evidence_then_records_a_manual_assignment(campaign, capsys):
    code, out, _ = run(capsys, "assign", campaign, "--flake", "K7N-001")
    shown = json.loads(out)
    assert shown["evidence"][0]["most_likely"] == "2"
    assert len(shown["evidence"][0]["likelihood"]) == 16
    assert shown["assignment"]["layers"] == 2 and shown["assignment"]["ambiguous_with"] == [3]
    code, _, err = run(capsys, "assign", campaign, "--flake", "K7N-001", "--layers", "3")
    assert code == 2 and "--reason" in err
    code, _, err = run(
        capsys, "assign", campaign, "--flake", "K7N-001", "--layers", "zwei", "--reason", "x"
    )
    assert code == 2 and "layer number" in err
    code, out, _ = run(
        capsys,
        "assign",
        campaign,
        "--flake",
        "K7N-001",
        "--layers",
        "3",
        "--reason",
        "shear mode at 26 cm-1",
    )
    assert code == 0 and json.loads(out)["layers"] == 3
    code, out, _ = run(capsys, "export", campaign)
    assert json.loads(out)["flakes"][0]["layers"] == 3
    code, _, err = run(capsys, "assign", campaign, "--flake", "NOPE")
    assert code == 2 and "no flake 'NOPE'" in err


def test_pack_relink_recompute(campaign, tmp_path, capsys):
    moved = tmp_path / "moved"
    moved.mkdir()
    (tmp_path / "tile.png").rename(moved / "tile.png")
    code, _, err = run(capsys, "pack", campaign)
    assert code == 2 and "tile.png (missing)" in err
    code, out, _ = run(capsys, "relink", campaign, "--search", moved)
    assert code == 0 and json.loads(out)["relinked"][0]["path"] == "moved/tile.png"
    code, out, _ = run(capsys, "pack", campaign)
    assert code == 0 and json.loads(out) == {"embedded": 1, "images": 1, "outside_folder": []}
    with Project.open(campaign) as p:
        app = p.appearances_of(p.find_flake("K7N-001"))[0]
        ev = p.evidence_of(app.flake_id)[0]
        p.update(ev, inputs=[app])
        p.update(app, outline_px=[[0, 0], [50, 0], [50, 50]])
    code, out, err = run(capsys, "recompute", campaign)
    result = json.loads(out)
    assert code == 0 and result["stale_left"] == 1
    assert result["unregistered"][0]["method"] == "contrast-likelihood"
    assert "no recompute function for contrast-likelihood" in err
    code, out, _ = run(capsys, "export", campaign)
    assert json.loads(out)["flakes"][0]["stale"] is True


def test_handoff_export_and_import(campaign, tmp_path, capsys):
    code, _, err = run(
        capsys,
        "handoff",
        "export",
        campaign,
        "--flakes",
        "K7N-001,K7N-002",
        "--out",
        tmp_path / "h.json",
    )
    assert code == 0
    bundle = json.loads((tmp_path / "h.json").read_text())
    assert [f["flake_id"] for f in bundle["flakes"]] == ["K7N-001", "K7N-002"]
    good = tmp_path / "results.csv"
    good.write_text(
        "flake_id,kappa_w_mk,kappa_p16_w_mk,kappa_p84_w_mk,method,note\n"
        'K7N-001,38.5,33,44,phonon BTE,"fit, 2 params"\n'
        "K7N-002,,,,none,no data\n"
    )
    bad = tmp_path / "bad.csv"
    bad.write_text(
        "flake_id,kappa_w_mk,kappa_p16_w_mk,kappa_p84_w_mk,method,note\n"
        "K7N-001,40,35,45,x,\n"
        "K7N-002,fast,1,2,x,\n"
    )
    before = campaign.read_bytes()
    code, _, err = run(capsys, "handoff", "import", campaign, bad)
    assert (
        code == 2
        and "line 3" in err
        and "kappa_w_mk 'fast'" in err
        and "nothing was imported" in err
    )
    assert campaign.read_bytes() == before
    missing = tmp_path / "missing.csv"
    missing.write_text("flake_id,kappa_w_mk\nK7N-001,3\n")
    code, _, err = run(capsys, "handoff", "import", campaign, missing)
    assert code == 2 and "kappa_p16_w_mk" in err
    unknown = tmp_path / "unknown.csv"
    unknown.write_text(
        "flake_id,kappa_w_mk,kappa_p16_w_mk,kappa_p84_w_mk,method,note\nZZ-9,3,2,4,x,\n"
    )
    code, _, err = run(capsys, "handoff", "import", campaign, unknown)
    assert code == 2 and "no flake 'ZZ-9'" in err
    code, out, _ = run(capsys, "handoff", "import", campaign, good)
    assert code == 0 and len(json.loads(out)["imported"]) == 2
    code, out, _ = run(capsys, "export", campaign)
    f1 = json.loads(out)["flakes"][0]
    assert (f1["kappa_w_mk"], f1["kappa_p16_w_mk"], f1["kappa_p84_w_mk"]) == (38.5, 33.0, 44.0)


def test_refused_files_exit_2_in_a_real_process(campaign, tmp_path):
    """The console entry point: a locked project and a text file exit 2 with a short message."""
    text = tmp_path / "notes.flakebook"
    text.write_text("not a project")
    env = {"PYTHONPATH": str(ROOT)}
    out = subprocess.run(
        [sys.executable, "-m", "flakebook", "info", str(text)],
        capture_output=True,
        text=True,
        env=env,
    )
    assert out.returncode == 2 and "not a flakebook project" in out.stderr
    assert len(out.stderr.strip().splitlines()) <= 3
    with Project.open(campaign):
        out = subprocess.run(
            [sys.executable, "-m", "flakebook", "pack", str(campaign)],
            capture_output=True,
            text=True,
            env=env,
        )
        assert out.returncode == 2 and "already open by" in out.stderr and "read-only" in out.stderr
        out = subprocess.run(
            [sys.executable, "-m", "flakebook", "export", str(campaign)],
            capture_output=True,
            text=True,
            env=env,
        )
        assert out.returncode == 0, "reading works while another program holds the project"


def test_assign_prints_the_combined_evidence(campaign, capsys):
    """With flakebook.evidence present, the stored likelihoods are combined (flat prior): one
    piece of evidence peaked at N = 2 gives N = 2 (Bayes' rule; common practice, no source)."""
    pytest.importorskip("flakebook.evidence")
    code, out, _ = run(capsys, "assign", campaign, "--flake", "K7N-001")
    combined = json.loads(out)["combined"]
    assert combined["layers"] == 2
    assert combined["probability"] == pytest.approx(1.0 / (1.0 + 15 * 0.01), rel=1e-9)
    assert len(combined["posterior"]) == 16
