"""The optics commands against INTERFACE.md: options, JSON keys, formats and exit codes."""

import json

import pytest

from flakebook.cli import main


def _json(capsys, argv):
    code = main([*argv, "--format", "json"])
    out = capsys.readouterr()
    assert code == 0, out.err
    return json.loads(out.out)


def test_materials_keys(capsys):
    """`flakebook materials` lists name, data_set, wavelength_range_nm, reference,
    layer_spacing_nm (INTERFACE.md), and nk_uncertainty (an addition: which data serve which
    thickness and how large the n,k uncertainty is, naming the published sources)."""
    data = _json(capsys, ["materials"])
    names = {m["name"] for m in data["materials"]}
    assert {"SiO2", "Si", "Au", "Si3N4", "hBN", "MoSe2", "MoS2", "WS2", "WSe2"} <= names
    for m in data["materials"]:
        assert set(m) == {
            "name",
            "data_set",
            "wavelength_range_nm",
            "reference",
            "layer_spacing_nm",
            "nk_uncertainty",
        }
    mose2 = next(m for m in data["materials"] if m["name"] == "MoSe2")
    assert "Hsu et al. 2019" in mose2["nk_uncertainty"]
    assert "Munkhbat et al. 2022" in mose2["nk_uncertainty"]
    assert "optics" not in mose2["nk_uncertainty"]  # no module paths in user text
    assert "4L-5L: blend" in mose2["data_set"]
    assert mose2["layer_spacing_nm"] == pytest.approx(0.646)
    assert "Hsu" in mose2["reference"]


def test_contrast_records(capsys):
    """`flakebook contrast` gives records with layers, channel, wavelength_nm, contrast,
    reflectance_flake, reflectance_reference; channel null for one wavelength, wavelength_nm
    null for a band (INTERFACE.md)."""
    data = _json(
        capsys,
        [
            "contrast",
            "--material",
            "MoSe2",
            "--oxide-nm",
            "285",
            "--layers",
            "1-3",
            "--channels",
            "srgb",
            "--na-illumination",
            "0.3",
        ],
    )
    recs = data["records"]
    assert len(recs) == 9
    assert set(recs[0]) == {
        "layers",
        "channel",
        "wavelength_nm",
        "contrast",
        "reflectance_flake",
        "reflectance_reference",
    }
    assert recs[0]["channel"] == "r" and recs[0]["wavelength_nm"] is None
    one = _json(
        capsys,
        [
            "contrast",
            "--material",
            "MoSe2",
            "--substrate",
            "SiO2:285,Si",
            "--layers",
            "1,2",
            "--wavelength-nm",
            "550",
        ],
    )
    assert [r["channel"] for r in one["records"]] == [None, None]
    assert one["records"][0]["wavelength_nm"] == 550
    assert (
        main(
            [
                "contrast",
                "--material",
                "MoSe2",
                "--oxide-nm",
                "285",
                "--layers",
                "1-2",
                "--channels",
                "mono",
                "--format",
                "csv",
            ]
        )
        == 0
    )
    csv = capsys.readouterr().out.splitlines()
    assert csv[0] == "layers,channel,wavelength_nm,contrast,reflectance_flake,reflectance_reference"
    assert len(csv) == 3


def test_contrast_suspended(capsys):
    """Suspended geometry with each hole bottom runs and differs from the supported flake."""
    base = [
        "contrast",
        "--material",
        "WS2",
        "--oxide-nm",
        "90",
        "--layers",
        "1",
        "--wavelength-nm",
        "600",
    ]
    sup = _json(capsys, base)["records"][0]["contrast"]
    for bottom in ("si", "au", "open"):
        extra = ["--geometry", "suspended", "--hole-bottom", bottom]
        if bottom == "au":
            extra += ["--hole-depth-nm", "500"]
        rec = _json(capsys, base + extra)["records"][0]
        assert rec["contrast"] != pytest.approx(sup)


def test_layers_single_channels_and_csv(capsys, tmp_path):
    """`flakebook layers`: results with id, layers, probability, ambiguous_with, likelihood,
    posterior (lists of max-layers + 1) from one wavelength, from channels, and from a CSV."""
    one = _json(
        capsys,
        [
            "layers",
            "--material",
            "MoSe2",
            "--oxide-nm",
            "285",
            "--wavelength-nm",
            "550",
            "--contrast",
            "0.40",
            "--contrast-err",
            "0.02",
            "--max-layers",
            "10",
        ],
    )
    res = one["results"][0]
    for key in ("id", "layers", "probability", "ambiguous_with", "likelihood", "posterior"):
        assert key in res
    assert res["id"] is None and len(res["likelihood"]) == 11 and len(res["posterior"]) == 11
    assert sum(res["posterior"]) == pytest.approx(1.0)
    rgb = _json(
        capsys,
        [
            "layers",
            "--material",
            "MoSe2",
            "--oxide-nm",
            "285",
            "--channels",
            "srgb",
            "--contrast",
            "r=0.66,g=0.50,b=-0.12",
            "--contrast-err",
            "r=0.02,g=0.02,b=0.02",
        ],
    )
    assert rgb["results"][0]["layers"] == 2
    path = tmp_path / "m.csv"
    path.write_text(
        "id,contrast_r,contrast_err_r,contrast_g,contrast_err_g\n"
        "F-01,0.44,0.02,0.34,0.02\nF-02,0.66,0.02,0.50,0.02\n"
    )
    many = _json(
        capsys,
        [
            "layers",
            "--material",
            "MoSe2",
            "--oxide-nm",
            "285",
            "--channels",
            "srgb",
            "--csv",
            str(path),
        ],
    )
    assert [r["id"] for r in many["results"]] == ["F-01", "F-02"]
    assert [r["layers"] for r in many["results"]] == [1, 2]


@pytest.mark.parametrize(
    "argv, fragment",
    [
        (
            [
                "contrast",
                "--material",
                "Unobtainium",
                "--oxide-nm",
                "285",
                "--layers",
                "1",
                "--wavelength-nm",
                "550",
            ],
            "unknown material",
        ),
        (
            [
                "contrast",
                "--material",
                "MoSe2",
                "--substrate",
                "SiO2,Si",
                "--layers",
                "1",
                "--wavelength-nm",
                "550",
            ],
            "thickness",
        ),
        (
            [
                "contrast",
                "--material",
                "MoSe2",
                "--oxide-nm",
                "285",
                "--layers",
                "1",
                "--wavelength-nm",
                "950",
            ],
            "outside",
        ),
        (
            [
                "layers",
                "--material",
                "MoSe2",
                "--oxide-nm",
                "285",
                "--channels",
                "srgb",
                "--contrast",
                "x=0.3",
            ],
            "lacks",
        ),
        (
            [
                "absorptance",
                "--material",
                "MoSe2",
                "--layers",
                "2",
                "--laser-nm",
                "532",
                "--hole-bottom",
                "au",
            ],
            "suspended",
        ),
        (["absorptance", "--material", "MoSe2", "--layers", "2", "--laser-nm", "532"], "substrate"),
    ],
)
def test_bad_input_exits_2(capsys, argv, fragment):
    """Bad input exits 2 with a message of at most three lines naming what is wrong
    (INTERFACE.md)."""
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert fragment in err and len(err.strip().splitlines()) <= 3


def test_absorptance(capsys):
    """`flakebook absorptance` keys; an open through-hole needs no substrate; deep holes warn on
    stderr (INTERFACE.md, issue)."""
    data = _json(
        capsys,
        [
            "absorptance",
            "--material",
            "MoSe2",
            "--layers",
            "3",
            "--laser-nm",
            "532",
            "--geometry",
            "suspended",
            "--hole-bottom",
            "open",
        ],
    )
    for key in ("absorptance_flake", "reflectance", "transmittance", "geometry"):
        assert key in data
    assert data["geometry"] == "suspended" and 0 < data["absorptance_flake"] < 1
    code = main(
        [
            "absorptance",
            "--material",
            "MoSe2",
            "--layers",
            "3",
            "--laser-nm",
            "532",
            "--oxide-nm",
            "285",
            "--geometry",
            "suspended",
            "--hole-bottom",
            "au",
            "--hole-depth-nm",
            "1500",
            "--na-objective",
            "0.5",
            "--format",
            "json",
        ]
    )
    out = capsys.readouterr()
    assert code == 0 and "1 um" in out.err
    assert json.loads(out.out)["warnings"]


def _known_csv(tmp_path, rows):
    from flakebook.optics.materials import get_material
    from flakebook.optics.microscope import Microscope, channel_contrast
    from flakebook.optics.substrate import Substrate

    table = channel_contrast(
        get_material("MoSe2"), range(1, 7), Substrate.from_oxide(288.0), Microscope(0.3)
    ).contrast
    lines = [
        "id,layers,contrast_r,contrast_err_r,contrast_g,contrast_err_g,contrast_b,contrast_err_b"
    ]
    for ident, n, true_n in rows:
        r, g, b = table[true_n - 1]
        lines.append(f"{ident},{n},{r:.4f},0.01,{g:.4f},0.01,{b:.4f},0.01")
    path = tmp_path / "known.csv"
    path.write_text("\n".join(lines) + "\n")
    return path


def test_calibrate_then_layers(capsys, tmp_path):
    """`calibrate` writes the INTERFACE.md keys; `layers --calibration` uses it and refuses
    options that contradict it; a known flake whose stated N is wrong is named in a warning.
    Truth: flakebook's own model on 288 nm (a plumbing check; the physics of the fit is checked
    against tmm in tests/optics/test_layers_truths.py)."""
    known = _known_csv(tmp_path, [("K1", 1, 1), ("K2", 2, 2), ("K3", 3, 3), ("K6", 6, 6)])
    out = tmp_path / "cal.json"
    base = ["--material", "MoSe2", "--oxide-nm", "285", "--channels", "srgb"]
    data = _json(
        capsys, ["calibrate", *base, "--oxide-err-nm", "5", "--csv", str(known), "--out", str(out)]
    )
    assert set(data) >= {
        "oxide_nm",
        "oxide_err_nm",
        "contrast_scale",
        "contrast_scale_err",
        "dark_offset",
        "optical_model",
        "flakes_used",
        "residuals",
        "warnings",
    }
    assert data["oxide_nm"] == pytest.approx(288.0, abs=0.5)
    assert data["dark_offset"] is None and data["warnings"] == []
    assert {r["channel"] for r in data["residuals"]} == {"r", "g", "b"}
    assert json.loads(out.read_text())["oxide_nm"] == data["oxide_nm"]
    meas = tmp_path / "m.csv"
    meas.write_text(
        known.read_text()
        .replace("layers,", "")
        .replace(",1,", ",")
        .replace(",2,", ",")
        .replace(",3,", ",")
        .replace(",6,", ",")
    )
    res = _json(
        capsys,
        [
            "layers",
            "--material",
            "MoSe2",
            "--channels",
            "srgb",
            "--csv",
            str(meas),
            "--calibration",
            str(out),
        ],
    )
    assert [r["layers"] for r in res["results"]] == [1, 2, 3, 6]
    code = main(
        [
            "layers",
            *base[:2],
            "--oxide-nm",
            "290",
            "--channels",
            "srgb",
            "--csv",
            str(meas),
            "--calibration",
            str(out),
        ]
    )
    err = capsys.readouterr().err
    assert code == 2 and "contradict" in err and "SiO2:290" in err
    code = main(
        ["layers", *base, "--oxide-err-nm", "3", "--csv", str(meas), "--calibration", str(out)]
    )
    assert code == 2 and "--oxide-err-nm" in capsys.readouterr().err
    bad = _known_csv(
        tmp_path, [("K1", 1, 1), ("K2", 2, 2), ("K3", 3, 3), ("K6", 6, 6), ("W", 2, 4)]
    )
    data = _json(capsys, ["calibrate", *base, "--oxide-err-nm", "5", "--csv", str(bad)])
    assert any("W (2L) does not fit" in w for w in data["warnings"])


def test_calibrate_refuses_bad_known_table(capsys, tmp_path):
    """A known-flake table without the layers column, or with a non-integer N, is refused
    with exit 2 and a message naming the file and what is accepted."""
    path = tmp_path / "k.csv"
    path.write_text("id,contrast_g\nA,0.3\n")
    argv = [
        "calibrate",
        "--material",
        "MoSe2",
        "--oxide-nm",
        "285",
        "--channels",
        "srgb",
        "--csv",
        str(path),
    ]
    assert main(argv) == 2 and "layers column" in capsys.readouterr().err
    path.write_text("id,layers,contrast_g\nA,2.5,0.3\n")
    assert main(argv) == 2 and "accepted" in capsys.readouterr().err
