"""Fixtures for the window's tests: a small project built through the store API.

The scenario is invented: chip "Q3-west" (MoSe2 on 285 nm SiO2/Si, 4 um holes at 12 um pitch),
one 640 x 480 micrograph at 0.1 um/px drawn from the optics model's channel contrast, three
flakes (1, 2 and 3 layers; the 2-layer one over a hole) with their layer evidence.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import cv2
import numpy as np
import pytest

UM_PER_PX = 0.1
SIZE = (480, 640)  # rows, cols
# flake label -> (layers, polygon in px)
FLAKES = {
    "Q3W-001": (1, [[60, 60], [200, 70], [190, 170], [70, 160]]),
    "Q3W-002": (2, [[250, 200], [420, 190], [430, 330], [240, 340]]),
    "Q3W-003": (3, [[470, 60], [600, 80], [590, 150], [480, 140]]),
}
HOLES = [(335.0, 265.0, 20.0), (100.0, 380.0, 20.0), (550.0, 380.0, 20.0)]
SUBSTRATE_LINEAR = np.array([0.30, 0.22, 0.40])


def _srgb(lin: np.ndarray) -> np.ndarray:
    """IEC 61966-2-1 sRGB encoding of linear values in 0-1."""
    lin = np.clip(lin, 0, 1)
    return np.where(lin <= 0.0031308, 12.92 * lin, 1.055 * lin ** (1 / 2.4) - 0.055)


def _polygon_mask(poly, shape) -> np.ndarray:
    mask = np.zeros(shape, np.uint8)
    cv2.fillPoly(mask, [np.round(np.asarray(poly)).astype(np.int32)], 1)
    return mask.astype(bool)


def draw_micrograph(
    path: Path,
    contrast_of: dict[int, np.ndarray],
    seed: int = 3,
    suspended_of: dict[int, np.ndarray] | None = None,
) -> None:
    """A PNG of the chip: each pixel is the substrate level times (1 - C) with C the model
    contrast of what is there (flake of N layers, supported or over a hole; a bare hole is
    N = 0 over a hole), plus 1% noise. Without ``suspended_of`` holes are simply darker."""
    rng = np.random.default_rng(seed)
    layer_map = np.zeros(SIZE, int)
    for layers, poly in FLAKES.values():
        layer_map[_polygon_mask(poly, SIZE)] = layers
    yy, xx = np.mgrid[0 : SIZE[0], 0 : SIZE[1]]
    in_hole = np.zeros(SIZE, bool)
    for x, y, r in HOLES:
        in_hole |= (xx - x) ** 2 + (yy - y) ** 2 <= r * r
    zero = np.zeros(3)
    sup = np.array([contrast_of.get(n, zero) for n in range(0, 4)])
    lin = SUBSTRATE_LINEAR * (1.0 - sup[layer_map])
    if suspended_of is not None:
        sus = np.array([suspended_of[n] for n in range(0, 4)])
        lin[in_hole] = (SUBSTRATE_LINEAR * (1.0 - sus[layer_map]))[in_hole]
    else:
        lin[in_hole] *= 0.45
    lin *= 1.0 + rng.normal(0, 0.01, lin.shape)
    rgb = np.round(_srgb(lin) * 255).astype(np.uint8)
    cv2.imwrite(str(path), cv2.cvtColor(rgb, cv2.COLOR_RGB2BGR))


def build_project(folder: Path) -> Path:
    """The small project, through flakebook.store.Project and the window's session."""
    from flakebook.evidence import combine
    from flakebook.gui.session import Session
    from flakebook.optics.layers import layer_likelihood
    from flakebook.optics.microscope import channel_contrast
    from flakebook.pipeline import (
        COMBINED_METHOD,
        CONTRAST_METHOD,
        OPTICS_SOURCE,
        optics_hole,
        optics_inputs,
    )
    from flakebook.store import Project

    path = folder / "q3.flakebook"
    p = Project.create(path)
    sample = p.add_sample(
        "Q3-west",
        "MoSe2",
        "SiO2:285,Si",
        hole_pattern={"bottom": "si", "diameter_um": 4.0, "pitch_um": 12.0, "lattice": "square"},
    )
    image_file = folder / "q3w_50x_001.png"
    # Model contrast for the drawing (flakebook.optics, one cached call).
    img_stub = type("I", (), {"illumination": "", "na_illumination": 0.3})()
    material, substrate, microscope = optics_inputs(sample, img_stub)
    table = channel_contrast(material, range(1, 4), substrate, microscope)
    contrast_of = {n: table.contrast[n - 1] for n in (1, 2, 3)}
    over = channel_contrast(
        material, range(0, 4), substrate, microscope, "suspended", optics_hole(sample)
    )
    draw_micrograph(
        image_file, contrast_of, suspended_of={n: over.contrast[n] for n in range(0, 4)}
    )
    img = p.add_image(
        sample,
        image_file,
        pixel_size_um=UM_PER_PX,
        objective="50x",
        na_objective=0.8,
        na_illumination=0.3,
        width_px=SIZE[1],
        height_px=SIZE[0],
    )
    for label, (layers, poly) in FLAKES.items():
        flake = p.add_flake(sample, label)
        app = p.add_appearance(flake, img, np.asarray(poly, float))
        ter = p.add_terrace(app, np.asarray(poly, float), label="T1")
        c = {ch: float(v) for ch, v in zip(table.channels, contrast_of[layers])}
        err = {ch: 0.02 for ch in table.channels}
        lk = layer_likelihood(
            c,
            err,
            material=material,
            substrate=substrate,
            microscope=microscope,
            max_layers=p.max_layers,
        )
        ev = p.add_evidence(
            flake,
            lk.likelihood,
            method=CONTRAST_METHOD,
            terrace=ter,
            inputs=[sample, img, ter],
            parameters={
                "contrast": c,
                "contrast_err": err,
                "geometry": "supported",
                "image_id": img.id,
                "decider": lk.decider,
            },
            source=OPTICS_SOURCE,
            reason="drawn from the model (test scenario)",
        )
        post = combine([lk.likelihood])
        p.add_assignment(
            flake,
            int(post.layers),
            terrace_id=ter.id,
            probability=float(post.probability),
            ambiguous_with=post.ambiguous_with,
            posterior=post.posterior,
            method=COMBINED_METHOD,
            inputs=[ev],
        )
    session = Session(p)
    for x, y, r in HOLES[:2]:
        session.add_hole(img.id, x, y, r)
    p.close()
    return path


@pytest.fixture(scope="session")
def _template(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("template")
    build_project(folder)
    return folder


@pytest.fixture
def project_path(_template, tmp_path) -> Path:
    """A fresh copy of the small project (and its image) for one test."""
    for f in _template.iterdir():
        if not f.name.endswith(".lock"):
            shutil.copy2(f, tmp_path / f.name)
    return tmp_path / "q3.flakebook"


@pytest.fixture(autouse=True)
def _isolated_settings(tmp_path, monkeypatch):
    """Recent projects and window layout go to a throw-away settings file."""
    from PySide6.QtCore import QSettings

    QSettings.setDefaultFormat(QSettings.Format.IniFormat)
    QSettings.setPath(
        QSettings.Format.IniFormat, QSettings.Scope.UserScope, str(tmp_path / "settings")
    )
    yield


@pytest.fixture
def window(qtbot, project_path):
    """The main window with the small project open read-write."""
    from flakebook.gui.mainwindow import MainWindow

    w = MainWindow()
    qtbot.addWidget(w)
    w.resize(1300, 850)
    w.show()
    w.open_project(project_path)
    qtbot.waitUntil(lambda: not w.jobs.busy, timeout=10000)
    yield w
    w.close_project()
    _stop_workers(w)


def _stop_workers(w) -> None:
    """Stop the window's worker jobs before pytest-qt deletes it: a job finishing into a deleted
    window, or left running at the interpreter's exit, can crash Qt."""
    from PySide6.QtCore import QThreadPool

    w.jobs.abandon_all()
    QThreadPool.globalInstance().waitForDone(5000)
