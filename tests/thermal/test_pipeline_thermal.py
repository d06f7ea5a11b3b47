"""Series import, kappa from a flake's records, hand-off checks and the command line's refusals.

The series are invented (drawn Lorentzians with Poisson noise); the checks compare with the
drawing parameters and with the published disk result 2 pi kappa t R_m = ln(R/W) + gamma/2
(REFERENCES.md, radial conduction with a Gaussian source; Cai et al., Nano Lett. 10, 1645 (2010)).
"""

from __future__ import annotations

import math
import subprocess
import sys

import numpy as np
import pytest

from flakebook import pipeline_thermal as pt
from flakebook.errors import InputError
from flakebook.store import Project

CHI_T, CHI_P = -0.011, -4.0  # drawn coefficients (invented)


def _write(path, x, y):
    path.write_text("\n".join(f"{a:.4f},{b:.0f}" for a, b in zip(x, y)) + "\n", encoding="utf-8")


def _series(folder, kind, values, shift, seed):
    rng = np.random.default_rng(seed)
    folder.mkdir()
    rows = ["file," + ("stage_temperature_k" if kind == "temperature" else "power_mw")]
    for k, v in enumerate(values):
        x = np.linspace(200.0, 300.0, 500)
        y = 60 + 2000 / (1 + ((x - 241.5 - shift(v)) / 2.1) ** 2)
        name = f"s{k:02d}.csv"
        _write(folder / name, x, rng.poisson(y).astype(float))
        rows.append(f"{name},{v}")
    (folder / "series.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    return folder


@pytest.fixture
def project(tmp_path):
    p = Project.create(tmp_path / "t.flakebook")
    s = p.add_sample("Z1", "MoSe2", oxide_nm=285.0, hole_pattern={
        "bottom": "au", "diameter_um": 5.0, "depth_nm": 250.0})  # fmt: skip
    import cv2

    cv2.imwrite(str(tmp_path / "m.png"), np.full((100, 100, 3), 128, np.uint8))
    img = p.add_image(s, tmp_path / "m.png", pixel_size_um=0.1, na_objective=0.8)
    f = p.add_flake(s, "Z1-001")
    h = p.add_hole(img, (50.0, 50.0), 25.0, radius_um=2.5, radius_err_um=0.02)
    p.link_flake_hole(f, h, covered_fraction=1.0, fully_covered=True, margin_um=2.0)
    p.assign(f, 3, reason="known from the shear mode")
    p.add_beam_profile("50x", 532.0, 0.5, radius_err_um=0.02, method="edge scan")
    yield p, tmp_path
    p.close()


def test_series_import_recovers_coefficients_and_kappa_matches_disk_formula(project):
    p, tmp = project
    temps = [295.0, 315.0, 335.0, 355.0, 375.0]
    pt.import_series(p, "Z1-001", "temperature",
                     _series(tmp / "t", "temperature", temps, lambda v: CHI_T * (v - 295), 1))  # fmt: skip
    powers = [0.05, 0.1, 0.15, 0.2, 0.25, 0.2, 0.1]
    _, coeff = pt.import_series(p, "Z1-001", "power",
                                _series(tmp / "p", "power", powers, lambda v: CHI_P * v, 2),
                                max_power_mw=0.2)  # fmt: skip
    assert coeff.chi_t_cm1_per_k == pytest.approx(CHI_T, abs=3 * coeff.chi_t_err_cm1_per_k + 1e-4)
    assert coeff.chi_p_cm1_per_mw == pytest.approx(CHI_P, abs=3 * coeff.chi_p_err_cm1_per_mw + 0.05)
    assert any("above the power limit" in w for w in coeff.details["warnings"])
    result, rec = pt.flake_kappa(p, "Z1-001", pt.ModelOptions(draws=500))
    t_m = 3 * 0.646e-9
    r_meas = coeff.chi_p_cm1_per_mw * 1e3 / (rec.absorptance * coeff.chi_t_cm1_per_k)
    g = math.log(2.5 / 0.5) + 0.5772156649015329 / 2
    assert rec.kappa_w_mk == pytest.approx(g / (2 * math.pi * t_m * r_meas), rel=1e-3)
    assert rec.kappa_p16_w_mk <= rec.kappa_median_w_mk <= rec.kappa_p84_w_mk
    assert not rec.stale
    # a new layer number makes the result stale; recompute brings it back with the new N
    p.assign(p.find_flake("Z1-001"), 2, reason="second look")
    assert p.get("thermometry_result", rec.id).stale
    p.recompute_stale()
    again = p.get("thermometry_result", rec.id)
    assert not again.stale and again.layers == 2


def test_one_point_series_and_missing_column_are_refused(project, tmp_path):
    p, tmp = project
    one = _series(tmp / "one", "temperature", [295.0], lambda v: 0.0, 3)
    with pytest.raises(InputError, match="gives no slope"):
        pt.import_series(p, "Z1-001", "temperature", one)
    with pytest.raises(InputError, match="power_mw"):
        pt.import_series(p, "Z1-001", "power", one / "series.csv")
    assert p.thermometry_of(p.find_flake("Z1-001")) == ([], [])


def test_handoff_rows_checked_with_their_line(project):
    p, tmp = project
    head = "flake_id,kappa_w_mk,kappa_p16_w_mk,kappa_p84_w_mk,method,note\n"
    for body, what in (("Z1-001,2e4,,,x,\n", "below 10000"), ("Z1-001,-3,,,x,\n", "above 0"),
                       ("Z1-001,30,35,40,x,\n", "ordered"), ("Z1-001,nan,,,x,\n", "finite")):  # fmt: skip
        f = tmp / "r.csv"
        f.write_text(head + "Z1-001,30,25,35,m,\n" + body, encoding="utf-8")
        with pytest.raises(InputError, match="line 3") as exc:
            p.import_external_results(f)
        assert what in str(exc.value)
    assert p.external_results_of(p.find_flake("Z1-001")) == []


@pytest.mark.parametrize(
    "extra, says",
    [
        (["--chi-t-cm1-per-k", "0.0056"], "chi_T"),
        (["--chi-p-cm1-per-mw", "2.9"], "chi_P"),
        (["--absorptance", "1.5"], "(0, 1)"),
        (["--beam-radius-um", "3"], "W < R"),
    ],
)
def test_cli_refuses_bad_inputs_in_three_lines(extra, says):
    """Exit 2 with a short message (INTERFACE.md exit codes)."""
    args = {"--chi-t-cm1-per-k": "-0.0056", "--chi-p-cm1-per-mw": "-2.9", "--absorptance": "0.1",
            "--hole-radius-um": "2.5", "--beam-radius-um": "0.5"}  # fmt: skip
    args.update(dict(zip(extra[::2], extra[1::2])))
    cmd = [sys.executable, "-m", "flakebook", "kappa", "--material", "MoSe2", "--layers", "3"]
    cmd += [x for kv in args.items() for x in kv]
    run = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert run.returncode == 2
    lines = [ln for ln in run.stderr.splitlines() if not ln.startswith("warning")]
    assert 1 <= len(lines) <= 3 and says in run.stderr


def test_cli_worked_example():
    """REFERENCES.md worked example: kappa = 30.1 W/m/K."""
    cmd = [sys.executable, "-m", "flakebook", "kappa", "--material", "MoSe2", "--layers", "3",
           "--chi-t-cm1-per-k", "-0.0056", "--chi-p-cm1-per-mw", "-2.9", "--absorptance", "0.10",
           "--hole-radius-um", "2.5", "--beam-radius-um", "0.5", "--format", "json"]  # fmt: skip
    run = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    import json

    assert json.loads(run.stdout)["kappa_w_mk"] == pytest.approx(30.1, abs=0.05)


def test_interface_conductance_error_and_hole_depth_error_reach_the_interval(project):
    """The interface conductance's error is drawn in the Monte Carlo (its own variance_share
    key) and the hole depth's error recorded on the sample's hole pattern is used instead of
    the 5% stand-in; an error without a conductance is refused."""
    from flakebook.errors import InputError

    with pytest.raises(InputError, match="without an interface conductance"):
        pt.ModelOptions(interface_conductance_err_w_m2k=2e6).heat_model()
    p, tmp = project
    temps = [295.0, 315.0, 335.0, 355.0, 375.0]
    pt.import_series(p, "Z1-001", "temperature",
                     _series(tmp / "t", "temperature", temps, lambda v: CHI_T * (v - 295), 1))  # fmt: skip
    powers = [0.05, 0.1, 0.15, 0.2, 0.1]
    pt.import_series(p, "Z1-001", "power", _series(tmp / "p", "power", powers,
                                                   lambda v: CHI_P * v, 2))  # fmt: skip
    opts = pt.ModelOptions(draws=500, interface_conductance_w_m2k=1e5,
                           interface_conductance_err_w_m2k=4e4)  # fmt: skip
    _, rec = pt.flake_kappa(p, "Z1-001", opts)
    assert rec.details["result"]["variance_share"]["interface_conductance"] > 0
    assert any("taken as 5%" in w for w in rec.details["result"]["warnings"])
    s = p.sample_by_name("Z1")
    p.update(s, hole_pattern={"bottom": "au", "diameter_um": 5.0, "depth_nm": 250.0,
                                     "depth_err_nm": 4.0})  # fmt: skip
    _, rec = pt.flake_kappa(p, "Z1-001", pt.ModelOptions(draws=500))
    assert not any("taken as 5%" in w for w in rec.details["result"]["warnings"])
    assert rec.details["inputs"]["hole_depth_err_nm"] == 4.0


def test_cli_series_import_then_kappa_from_the_project(project):
    """The command line end to end: `series import` of a temperature and a power series (a
    folder with its CSV), then `kappa --project --flake` gives the drawn coefficients back and
    a kappa matching the published disk formula (REFERENCES.md); a folder without the CSV's
    value column is refused with exit 2 and nothing stored."""
    import json

    p, tmp = project
    path = str(p.path)
    p.close()
    temps = _series(tmp / "tt", "temperature", [295.0, 315.0, 335.0, 355.0, 375.0],
                    lambda v: CHI_T * (v - 295), 5)  # fmt: skip
    powers = _series(tmp / "pp", "power", [0.05, 0.1, 0.15, 0.2, 0.25, 0.2, 0.1],
                     lambda v: CHI_P * v, 6)  # fmt: skip

    def cli(*args):
        return subprocess.run(
            [sys.executable, "-m", "flakebook", *args, "--format", "json"],
            capture_output=True, text=True, timeout=300,
        )  # fmt: skip

    bad = cli("series", "import", path, "--flake", "Z1-001", "--kind", "power",
              str(temps / "series.csv"))  # fmt: skip
    assert bad.returncode == 2 and len(bad.stderr.strip().splitlines()) <= 3, bad.stderr
    for kind, folder in (("temperature", temps), ("power", powers)):
        done = cli("series", "import", path, "--flake", "Z1-001", "--kind", kind, str(folder))
        assert done.returncode == 0, done.stderr
    out = cli("kappa", "--project", path, "--flake", "Z1-001", "--draws", "400")
    assert out.returncode == 0, out.stderr
    res = json.loads(out.stdout)
    assert res["kappa_p16_w_mk"] <= res["kappa_median_w_mk"] <= res["kappa_p84_w_mk"]
    with Project.open(path, read_only=True) as q:
        _, results = q.thermometry_of(q.find_flake("Z1-001"))
        coeff = [r for r in results if r.method == pt.SERIES_METHOD][-1]
    assert coeff.chi_t_cm1_per_k == pytest.approx(CHI_T, abs=3 * coeff.chi_t_err_cm1_per_k + 1e-4)
    assert coeff.chi_p_cm1_per_mw == pytest.approx(CHI_P, abs=3 * coeff.chi_p_err_cm1_per_mw + 0.05)
    r_meas = coeff.chi_p_cm1_per_mw * 1e3 / (res["absorptance"] * coeff.chi_t_cm1_per_k)
    g = math.log(2.5 / 0.5) + 0.5772156649015329 / 2
    assert res["kappa_w_mk"] == pytest.approx(g / (2 * math.pi * 3 * 0.646e-9 * r_meas), rel=1e-3)


def test_conductance_fitted_from_a_supported_power_series(project):
    """A power series with the beam on the supported part of the same flake fixes g: series
    drawn from a true kappa and g (the membrane with its supported annulus, and the flake on
    the substrate, whose model is checked against the K0 Green's function in test_model), the
    analysis returns both, with g's spread drawn in the Monte Carlo; without the series it says
    what is missing, and g given as well is refused."""
    from flakebook.errors import InputError
    from flakebook.optics.absorptance import absorptance
    from flakebook.optics.materials import get_material
    from flakebook.optics.substrate import parse_substrate
    from flakebook.thermal import model

    p, tmp = project
    kappa, g, t_nm, w_um, r_um = 28.0, 2e6, 3 * 0.646, 0.5, 2.5
    mat = get_material("MoSe2")
    a_sup = absorptance(mat, 3, 532.0, parse_substrate("SiO2:285,Si"), geometry="supported",
                        na_objective=0.8).absorptance_flake  # fmt: skip
    temps = [295.0, 315.0, 335.0, 355.0, 375.0]
    pt.import_series(p, "Z1-001", "temperature",
                     _series(tmp / "t", "temperature", temps, lambda v: CHI_T * (v - 295), 1))  # fmt: skip
    # the membrane's chi_P from the true kappa and g, for its own absorptance
    geo = model.solve_membrane(kappa, t_nm, r_um, w_um, interface_conductance_w_m2k=g)
    powers = [0.05, 0.1, 0.15, 0.2, 0.1]
    with pytest.raises(InputError):
        pt.ModelOptions(conductance_from_series=True, interface_conductance_w_m2k=1e6).heat_model()
    _, coeff = pt.import_series(p, "Z1-001", "power", _series(tmp / "p", "power", powers,
                                lambda v: CHI_P * v, 2))  # fmt: skip
    with pytest.raises(InputError, match="no supported-part power series"):
        pt.flake_kappa(p, "Z1-001", pt.ModelOptions(draws=300, conductance_from_series=True))
    base = pt.kappa_inputs(p, "Z1-001")
    a_mem = base["absorptance"]
    chi_t = coeff.chi_t_cm1_per_k
    chi_p_mem = chi_t * a_mem * geo.geometry_factor / (2 * math.pi * kappa * t_nm * 1e-9) * 1e-3
    gs = model.supported_geometry_factor(g, kappa, t_nm, w_um)
    chi_p_sup = chi_t * a_sup * gs / (2 * math.pi * kappa * t_nm * 1e-9) * 1e-3
    pt.import_series(p, "Z1-001", "power", _series(tmp / "p2", "power", powers,
                                                   lambda v: chi_p_mem * v, 4))  # fmt: skip
    pt.import_series(p, "Z1-001", "supported-power", _series(tmp / "s", "power", powers,
                                                             lambda v: chi_p_sup * v, 5))  # fmt: skip
    opts = pt.ModelOptions(draws=500, conductance_from_series=True)
    result, rec = pt.flake_kappa(p, "Z1-001", opts)
    fitted = rec.details["inputs"]["fitted_conductance"]
    co = pt.latest_coefficients(p, p.find_flake("Z1-001"))
    # the drawn series scatter: compare with what the fitted slopes imply, to their errors
    rel_p = co.chi_p_err_cm1_per_mw / abs(co.chi_p_cm1_per_mw)
    assert result.kappa_w_mk == pytest.approx(kappa, rel=3 * rel_p + 0.02)
    assert fitted["conductance_err_w_m2k"] > 0
    assert fitted["conductance_w_m2k"] == pytest.approx(g, abs=3 * fitted["conductance_err_w_m2k"])
    assert result.variance_share["interface_conductance"] > 0
    assert any("supported-part power series" in w for w in result.warnings)
    # recompute reads the options back and fits g again
    p.assign(p.find_flake("Z1-001"), 3, reason="again")
    p.recompute_stale()
    assert not p.get("thermometry_result", rec.id).stale
