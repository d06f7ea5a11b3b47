"""``flakebook spectrum``, ``assign`` with spectra and ``calibrate-rules``: their JSON, exit codes and
refusals (docs/interface.md; exit codes and the unchanged project on bad input: common practice,
no source). The spectra are drawn with lines at stated centres: MoSe2 A1g/E2g/B2g near the
bilayer values of Tonndorf et al., Opt. Express 21, 4908 (2013), and the shear and breathing
modes of the linear chain at N = 2 (Zhao et al., Nano Lett. 13, 1007 (2013)); values from
memory, as in the rule table.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pytest

from flakebook import pipeline
from flakebook.cli import main
from flakebook.spectra.rules import load_rule_table
from flakebook.store import Project


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def lorentz(x, c, fwhm, h):
    return h / (1 + ((x - c) / (fwhm / 2)) ** 2)


def write(path: Path, x, y, header="Raman shift (cm-1)\tcounts") -> Path:
    lines = ["# Laser wavelength: 532 nm", header]
    lines += [f"{a:.4f}\t{b:.3f}" for a, b in zip(x, y, strict=True)]
    path.write_text("\n".join(lines) + "\n")
    return path


def high(tmp_path, seed=1):
    rng = np.random.default_rng(seed)
    x = np.linspace(150, 560, 1400)
    y = 200 + 0.1 * x + lorentz(x, 241.6, 3, 1000) + lorentz(x, 287.0, 4, 120)
    y = y + lorentz(x, 353.0, 4, 60) + lorentz(x, 520.7, 3.5, 800) + rng.normal(0, 5, x.size)
    return write(tmp_path / "hf.txt", x, y)


def low(tmp_path, seed=2):
    t = load_rule_table("MoSe2")
    sh = float(t.rule("shear mode").center(np.array([2]))[0])
    br = float(t.rule("breathing mode").center(np.array([2]))[0])
    rng = np.random.default_rng(seed)
    x = np.linspace(5, 60, 600)
    y = 50 + lorentz(x, sh, 1.5, 300) + lorentz(x, br, 1.5, 200) + rng.normal(0, 5, x.size)
    return write(tmp_path / "lf.txt", x, y)


def sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture
def project(tmp_path):
    """A MoSe2 flake whose (invented) contrast evidence says 3L."""
    path = tmp_path / "k9.flakebook"
    with Project.create(path) as p:
        s = p.add_sample("K9", "MoSe2", oxide_nm=285)
        f = p.add_flake(s, "K9-07")
        lk = np.exp(-0.5 * ((np.arange(1, 17) - 3.0) / 0.3) ** 2)
        ev = p.add_evidence(
            f, lk, method=pipeline.CONTRAST_METHOD, inputs=[s], parameters={"contrast": {"g": 0.3}}
        )
        pipeline.add_combined(p, f, None, [ev])
    return path


def test_spectrum_json_has_the_interface_keys(tmp_path, capsys):
    code, out, err = run(capsys, "spectrum", high(tmp_path), "--material", "MoSe2")
    assert code == 0, err
    s = json.loads(out)["spectra"][0]
    assert {"path", "peaks", "evidence", "layers", "probability", "warnings"} <= set(s)
    a1g = next(p for p in s["peaks"] if p["mode"] == "A1g")
    assert {
        "mode",
        "center_cm1",
        "center_err_cm1",
        "center_ev",
        "fwhm_cm1",
        "height",
        "area",
    } <= set(a1g)
    assert a1g["center_cm1"] == pytest.approx(241.6, abs=0.05) and a1g["center_ev"] is None
    assert all({"method", "likelihood", "reason"} <= set(e) for e in s["evidence"])
    assert len(s["evidence"][0]["likelihood"]) == 16


@pytest.mark.parametrize(
    "argv, says",
    [
        (["--material", "Graphene"], "accepted"),
        (["--material", "MoSe2", "--project", "x.flakebook"], "--flake"),
        (["--material", "MoSe2", "--peak-model", "boxcar"], "invalid choice"),
    ],
)
def test_bad_options_exit_2(tmp_path, capsys, argv, says):
    code, _, err = run(capsys, "spectrum", high(tmp_path), *argv)
    assert code == 2 and says in err and len(err.strip().splitlines()) <= 3, err


def test_bad_file_stores_nothing(tmp_path, capsys, project):
    before = sha(project)
    bad = tmp_path / "bad.txt"
    bad.write_text("Raman shift (cm-1)\tcounts\n100\t1\n101\tnan\n102\t3\n")
    code, _, err = run(
        capsys, "spectrum", high(tmp_path), bad, "--material", "MoSe2",
        "--project", project, "--flake", "K9-07",
    )  # fmt: skip
    assert code == 2 and "bad.txt" in err and len(err.strip().splitlines()) <= 3
    code, _, err = run(
        capsys, "spectrum", high(tmp_path), "--material", "MoS2",
        "--project", project, "--flake", "K9-07",
    )  # fmt: skip
    assert code == 2 and "MoSe2" in err
    assert sha(project) == before


def test_attach_then_assign_shows_the_conflict_and_records_a_manual_layer(
    tmp_path, capsys, project
):
    code, out, err = run(
        capsys, "spectrum", high(tmp_path), low(tmp_path), "--material", "MoSe2",
        "--project", project, "--flake", "K9-07",
    )  # fmt: skip
    assert code == 0, err
    got = json.loads(out)
    assert got["flake"]["layers"] == 2 and got["flake"]["conflicts"]
    code, out, _ = run(capsys, "assign", project, "--flake", "K9-07", "--format", "json")
    shown = json.loads(out)
    cats = {e["category"] for e in shown["evidence"]}
    assert cats == {"contrast", "Raman"}
    assert shown["combined"]["layers"] == 2 and shown["combined"]["conflicts"]
    assert all(e["contribution"] is not None for e in shown["evidence"])
    code, out, _ = run(capsys, "assign", project, "--flake", "K9-07", "--format", "table")
    assert "CONFLICT" in out and "Raman" in out
    code, _, err = run(
        capsys, "assign", project, "--flake", "K9-07", "--layers", "2",
        "--reason", "breathing mode at 33 cm^-1",
    )  # fmt: skip
    assert code == 0, err
    with Project.open(project, read_only=True) as p:
        assert p.latest_assignment(p.find_flake("K9-07")).manual


def test_afm_evidence_needs_its_error_and_stores_nothing_without(tmp_path, capsys, project):
    before = sha(project)
    code, _, err = run(capsys, "assign", project, "--flake", "K9-07", "--afm-height-nm", "2.0")
    assert code == 2 and sha(project) == before
    code, out, err = run(
        capsys, "assign", project, "--flake", "K9-07", "--afm-height-nm", "2.4",
        "--afm-height-err-nm", "0.2", "--format", "json",
    )  # fmt: skip
    assert code == 0, err
    assert "AFM" in {e["category"] for e in json.loads(out)["evidence"]}


def test_map_writes_arrays_csv_and_png(tmp_path, capsys):
    """A 3 x 4 map whose left half carries the B2g line (few layers) and right half not
    (monolayer, Tonndorf et al. 2013: B2g absent in 1L)."""
    rng = np.random.default_rng(4)
    x = np.linspace(200, 380, 500)
    lines = [
        "#flakebook-map x_unit=cm1 kind=raman",
        "spectral_axis " + " ".join(f"{v:.3f}" for v in x),
    ]
    for j in range(3):
        for i in range(4):
            y = 100 + lorentz(x, 241.0, 3, 900) + lorentz(x, 287.0, 4, 100)
            if i < 2:
                y = y + lorentz(x, 353.0, 4, 80)
            y = y + rng.normal(0, 4, x.size)
            lines.append(f"{i * 0.5} {j * 0.5} " + " ".join(f"{v:.2f}" for v in y))
    path = tmp_path / "map.txt"
    path.write_text("\n".join(lines) + "\n")
    out_dir = tmp_path / "maps"
    code, out, err = run(
        capsys, "spectrum", path, "--map", "--material", "MoSe2", "--out-dir", out_dir
    )
    assert code == 0, err
    m = json.loads(out)["maps"][0]
    assert m["shape"] == [3, 4]
    layers = np.load(out_dir / "map_layers.npy")
    assert np.all(layers[:, 2:] == 1) and np.all(layers[:, :2] >= 2)
    assert (out_dir / "map_A1g_center_cm1.png").stat().st_size > 0
    assert (out_dir / "map_layers.csv").read_text().startswith("y_um\\x_um,0,0.5,1,1.5")
