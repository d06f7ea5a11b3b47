"""Builders for the store tests: a project holding one record of every kind, file hashes."""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np

from flakebook.store import Project

FIXED_CLOCK = "2026-03-02T09:30:00Z"


def sha256(path: Path) -> str:
    """SHA-256 of a file's bytes."""
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def folder_state(folder: Path) -> dict[str, str]:
    """Every file in a folder with its hash (to show that nothing was created or changed)."""
    return {p.name: sha256(p) for p in sorted(Path(folder).iterdir()) if p.is_file()}


def write_image(path: Path, seed: int = 0, size: int = 256) -> Path:
    """A stand-in image file (random bytes; the store only hashes and copies them)."""
    rng = np.random.default_rng(seed)
    path.write_bytes(b"\x89PNG\r\n\x1a\n" + rng.integers(0, 256, size, dtype=np.uint8).tobytes())
    return path


def populate(p: Project, folder: Path) -> dict:
    """Add one record of every kind (with unicode text) to ``p``; returns them by kind."""
    img_file = write_image(folder / "k7n_50x_001.png", 1)
    s = p.add_sample(
        "K7-north µ-chip",
        "MoSe2",
        "Au:100,Ti:5,SiO2:285,Si",
        hole_pattern={"bottom": "au", "diameter_um": 4.0, "pitch_um": 12.0, "depth_nm": 390},
        notes="exfoliated twice – tape Nº 3",
    )
    img = p.add_image(
        s,
        img_file,
        pixel_size_um=0.104,
        objective="50x",
        na_objective=0.55,
        na_illumination=0.3,
        illumination="halogen",
        camera={"exposure_ms": 12.5, "gain": 1.0},
        stage_x_um=1200.5,
        stage_y_um=-340.0,
        width_px=2048,
        height_px=1536,
    )
    f = p.add_flake(
        s, "K7N-α01", tags=("raman-next", "薄い"), notes="edge folded", status="candidate"
    )
    a = p.add_appearance(f, img, [[100, 100], [300, 110], [320, 280], [90, 260]])
    t = p.add_terrace(a, [[120, 120], [200, 120], [200, 200], [120, 200]], label="T1 ✓")
    f = p.update(f, primary_terrace_id=t.id)
    h = p.add_hole(
        img, (160.0, 160.0), 19.2, radius_err_um=0.05, source="detected", lattice_i=3, lattice_j=-1
    )
    link = p.link_flake_hole(
        f, h, covered_fraction=1.0, fully_covered=True, margin_um=1.3, terrace_id=t.id
    )
    beam = p.add_beam_profile(
        "100x", 532.0, 0.42, radius_err_um=0.02, method="knife edge", measured_on="2026-02-20"
    )
    series = p.add_thermometry_series(
        f, "power", laser_nm=532.0, mode="A1g", beam_profile_id=beam, hole_id=h
    )
    x = np.linspace(100.0, 600.0, 1600)
    spec = p.add_spectrum(
        f,
        x,
        np.exp(-((x - 241.0) ** 2) / 8.0),
        terrace_id=t.id,
        series_id=series,
        kind="raman",
        laser_nm=532.0,
        power_mw=0.35,
        spot_image_id=img,
        spot_x_px=160.0,
        spot_y_px=161.5,
        polarization="XX",
        stage_temperature_k=295.0,
        integration_s=30.0,
        metadata={"grating_l_mm": 1800, "operator": "Dana Ø"},
        source_path="spectra/α01.txt",
        source_sha256="0" * 64,
    )
    lk = np.linspace(1.0, 0.0, p.max_layers + 1)
    ev = p.add_evidence(
        f,
        lk,
        method="contrast-likelihood",
        terrace=t,
        inputs=[a, t, img],
        parameters={"channels": ["r", "g", "b"], "na_illumination": 0.3},
        source="refractive index data: test set",
        reason="green-channel contrast 0.21 ± 0.02",
    )
    asg = p.add_assignment(
        f,
        2,
        terrace_id=t,
        probability=0.91,
        ambiguous_with=(3,),
        posterior=lk / lk.sum(),
        method="combined-posterior",
        inputs=[ev],
    )
    manual = p.assign(f, 2, reason="shear mode at 23 cm⁻¹ settles it")
    result = p.add_thermometry_result(
        f,
        layers=2,
        thickness_nm=1.3,
        layer_spacing_nm=0.65,
        kappa_w_mk=42.0,
        kappa_median_w_mk=41.5,
        kappa_p16_w_mk=35.0,
        kappa_p84_w_mk=50.0,
        chi_t_cm1_per_k=-0.0123,
        chi_t_err_cm1_per_k=0.0005,
        chi_p_cm1_per_mw=-1.1,
        chi_p_err_cm1_per_mw=0.05,
        absorptance=0.08,
        absorptance_err=0.01,
        details={"variance_share": {"absorptance": 0.6, "chi_t": 0.4}},
        method="gaussian-disk",
        source="radial conduction with a Gaussian source (standard result)",
        inputs=[series, spec, beam, h],
    )
    ext = p.add_external_result(
        f,
        kappa_w_mk=40.0,
        kappa_p16_w_mk=33.0,
        kappa_p84_w_mk=47.0,
        method="other model",
        note="from colleague",
    )
    cal = p.add_calibration(
        s,
        image_id=img.id,
        oxide_nm=287.0,
        oxide_err_nm=2.0,
        dark_offset={"r": 0.01, "g": 0.012, "b": 0.009},
        dark_offset_err={"r": 0.001, "g": 0.001, "b": 0.001},
        contrast_scale={"r": 1.02, "g": 0.98, "b": 1.0},
        contrast_scale_err={"r": 0.02, "g": 0.02, "b": 0.03},
        method="known-flakes",
    )
    fit = p.add_spectrum_fit(
        spec,
        settings={"kind": "raman", "baseline": "imodpoly", "peak_model": "lorentzian"},
        peaks=[{"mode": "A1g", "center_cm1": 241.0, "center_err_cm1": 0.05}],
        calibration={"shift_cm1": 0.1},
        warnings=("ein Hinweis",),
        method="spectrum fit",
        inputs=[spec],
    )
    rules = p.add_rule_calibration(
        s,
        "MoSe2",
        532.0,
        {"material": "MoSe2", "rules": []},
        flakes_used=("K7N-α01",),
        method="known flakes",
    )
    rmap = p.add_raman_map(
        s,
        image_id=img.id,
        offset_x_um=-3.5,
        offset_y_um=12.25,
        name="K7N-α01 Karte",
        material="MoSe2",
        laser_nm=532.0,
        max_layers=15,
        x_um=np.array([0.0, 0.5, 1.0]),
        y_um=np.array([0.0, 0.5]),
        quantities=("A1g_center_cm1", "layers"),
        maps=np.array(
            [[[241.0, np.nan, 241.5], [240.9, 241.1, 241.2]], [[1, np.nan, 2], [1, 1, 2]]]
        ),
        settings={"laser_nm": 532.0, "shift_cm1": 0.0},
        warnings=("eine Warnung",),
        method="Raman map fit",
        source_path="maps/k7n_α01.txt",
        inputs=[rules],
    )
    return {
        "raman_map": rmap,
        "spectrum_fit": fit,
        "rule_calibration": rules,
        "sample": s,
        "image": img,
        "flake": f,
        "appearance": a,
        "terrace": t,
        "hole": h,
        "flake_hole": link,
        "beam_profile": beam,
        "thermometry_series": series,
        "spectrum": spec,
        "evidence": ev,
        "assignment": asg,
        "manual_assignment": manual,
        "thermometry_result": result,
        "external_result": ext,
        "calibration": cal,
    }
