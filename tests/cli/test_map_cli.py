"""``flakebook spectrum MAP --map --project P --image ID [--offset-um X,Y]``: the map's fits are
stored on the image's sample with their placement, and bad input is refused with the project
left as it was (docs/interface.md; exit codes and the unchanged project: common practice, no
source).

The map is drawn with MoSe2 lines at stated centres: A1g near 241 cm^-1, E2g(1) near 287 cm^-1,
and the B2g(1) line near 353 cm^-1 present from two layers on and absent in a monolayer
(Tonndorf et al., Opt. Express 21, 4908 (2013); values from memory, as in the rule table). The
truth of each pixel is what it was drawn with; the layer numbers are the program's fits.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import cv2
import numpy as np
import pytest

from flakebook.cli import main
from flakebook.store import Project


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def lorentz(x, c, fwhm, h):
    return h / (1 + ((x - c) / (fwhm / 2)) ** 2)


def sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


#: Drawn truth per column of the 4 x 6 map: 0 = bare substrate (Si line only), 1 = monolayer,
#: 2 = bilayer.
TRUTH = np.array([0, 1, 1, 2, 2, 0])


def write_map(path: Path, *, kind="raman", axis=(200.0, 560.0), unit_line="x_unit=cm1") -> Path:
    rng = np.random.default_rng(7)
    x = np.linspace(*axis, 900)
    lines = ["# laser: 532 nm", f"#flakebook-map {unit_line} kind={kind}"]
    lines.append("spectral_axis " + " ".join(f"{v:.3f}" for v in x))
    for j in range(4):
        for i, n in enumerate(TRUTH):
            y = 120 + 0.05 * x + lorentz(x, 520.7, 3.5, 900)
            if n:
                y = y + lorentz(x, 241.6 - 0.6 * (n == 1), 3.5, 900) + lorentz(x, 287.0, 4, 120)
            if n >= 2:
                y = y + lorentz(x, 353.0, 4, 90)
            y = y + rng.normal(0, 4, x.size)
            lines.append(f"{i * 0.5} {j * 0.5} " + " ".join(f"{v:.2f}" for v in y))
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.fixture
def project(tmp_path):
    """A MoSe2 chip with one 200 x 100 px micrograph of 0.1 um pixels at stage (50, 20) um,
    and one without a stage position."""
    path = tmp_path / "k9.flakebook"
    img = tmp_path / "k9_50x.png"
    cv2.imwrite(str(img), np.full((100, 200, 3), 128, np.uint8))
    img2 = tmp_path / "k9_nostage.png"
    cv2.imwrite(str(img2), np.full((100, 200, 3), 90, np.uint8))
    with Project.create(path) as p:
        s = p.add_sample("K9", "MoSe2", oxide_nm=285)
        p.add_image(s, img, pixel_size_um=0.1, width_px=200, height_px=100, stage_x_um=50.0,
                    stage_y_um=20.0)  # fmt: skip
        p.add_image(s, img2, pixel_size_um=0.1, width_px=200, height_px=100)
    return path


def test_map_is_stored_on_its_image_with_its_placement(tmp_path, capsys, project):
    path = write_map(tmp_path / "k9_map.txt")
    code, out, err = run(
        capsys, "spectrum", path, "--map", "--material", "MoSe2", "--project", project,
        "--image", "k9_50x", "--offset-um", "3,2.5", "--format", "json",
    )  # fmt: skip
    assert code == 0, err
    row = json.loads(out)["maps"][0]
    assert row["image_id"] == 1 and row["offset_um"] == [3.0, 2.5] and row["shape"] == [4, 6]
    assert not row["warnings"], row["warnings"]
    assert row["empty_pixels"] == 8 and row["layer_counts"]["1"] == 8, "bare pixels are not 1L"
    assert sum(row["layer_counts"].values()) == 16
    with Project.open(project, read_only=True) as p:
        rec = p.raman_maps_on(1)[0]
        assert rec.id == row["map_id"] and rec.sample_id == 1 and rec.source_sha256 == sha(path)
        assert rec.flakebook_version and rec.settings["laser_nm"] == 532.0
        layers = rec.quantity("layers")
        from flakebook.pipeline_maps import empty_mask

        empty = empty_mask(rec)
    assert np.all(empty[:, TRUTH == 0]), "bare substrate is empty, not a layer number"
    assert not empty[:, TRUTH > 0].any()
    assert np.all(layers[:, TRUTH == 1] == 1)
    assert np.all(layers[:, TRUTH == 2] >= 2), "B2g present: not a monolayer"


def test_map_placed_by_stage_position_when_no_offset(tmp_path, capsys, project):
    """Without --offset-um the map's positions are chip coordinates: the image's centre pixel
    ((cols - 1) / 2, (rows - 1) / 2) is at its stage position (50, 20) um."""
    code, out, err = run(
        capsys, "spectrum", write_map(tmp_path / "m.txt"), "--map", "--material", "MoSe2",
        "--project", project, "--image", "1", "--format", "json",
    )  # fmt: skip
    assert code == 0, err
    row = json.loads(out)["maps"][0]
    assert row["offset_um"] == pytest.approx([99.5 * 0.1 - 50.0, 49.5 * 0.1 - 20.0])
    assert any("outside" in w for w in row["warnings"]), "a map off the image is warned about"
    with Project.open(project, read_only=True) as p:
        assert len(p.raman_maps_of()) == 1, "a map outside its image is still stored"


@pytest.mark.parametrize(
    "make, argv, says",
    [
        (lambda d: write_map(d / "m.txt"), ["--image", "nope"], "no image 'nope'"),
        (lambda d: write_map(d / "m.txt"), ["--image", "2"], "--offset-um"),
        (lambda d: write_map(d / "pl.txt", kind="pl"), ["--image", "1"], "PL map"),
        (lambda d: write_map(d / "m.txt"), ["--flake", "K9-01"], "not on a flake"),
        (lambda d: write_map(d / "m.txt"), [], "--image ID"),
        (lambda d: write_map(d / "m.txt"), ["--image", "1", "--offset-um", "3"], "two numbers"),
        (
            lambda d: write_map(d / "nm.txt", axis=(540.0, 560.0), unit_line=""),
            ["--image", "1", "--offset-um", "0,0"],
            "looks like a wavelength in nm",
        ),
        (
            lambda d: write_map(d / "far.txt", axis=(540.0, 600.0)),
            ["--image", "1", "--offset-um", "0,0"],
            "no Raman mode of MoSe2",
        ),
    ],
)
def test_bad_map_input_exits_2_and_stores_nothing(tmp_path, capsys, project, make, argv, says):
    before = sha(project)
    code, _, err = run(
        capsys, "spectrum", make(tmp_path), "--map", "--material", "MoSe2", "--project", project,
        *argv,
    )  # fmt: skip
    assert code == 2 and says in err and len(err.strip().splitlines()) <= 3, err
    assert sha(project) == before


def test_out_dir_still_works_with_project(tmp_path, capsys, project):
    out_dir = tmp_path / "out"
    code, out, err = run(
        capsys, "spectrum", write_map(tmp_path / "m.txt"), "--map", "--material", "MoSe2",
        "--project", project, "--image", "1", "--offset-um", "0,0", "--out-dir", out_dir,
    )  # fmt: skip
    assert code == 0, err
    assert (out_dir / "m_layers.npy").is_file() and json.loads(out)["maps"][0]["map_id"] == 1
