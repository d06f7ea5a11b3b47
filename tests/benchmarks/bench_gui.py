"""Benchmark of the desktop window (not part of the test run).

    PYTHONPATH=. QT_QPA_PLATFORM=offscreen python tests/benchmarks/bench_gui.py

1. Opening a project to a painted window, against a baseline measured in the same run: an empty
   QMainWindow with a pyqtgraph ImageItem showing the same first image (decoded with cv2).
   Target: within 3x the baseline and under 2 s.
2. A pan or zoom step on a 20-megapixel image (5472 x 3648): target under 50 ms per step.
3. Selecting a flake until the inspector shows it: target under 100 ms.

The project is an invented scenario built here through the store API: one chip, one 20-MP
micrograph at 0.069 um/px with 40 flakes and 60 holes, each flake with layer evidence.
"""

from __future__ import annotations

import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import cv2  # noqa: E402
import numpy as np  # noqa: E402

W, H = 5472, 3648
N_FLAKES = 40


def build(folder: Path) -> Path:
    from flakebook.evidence import combine
    from flakebook.gui.session import Session
    from flakebook.pipeline import COMBINED_METHOD, CONTRAST_METHOD
    from flakebook.store import Project

    rng = np.random.default_rng(7)
    img = np.empty((H, W, 3), np.uint8)
    img[:] = (150, 118, 172)
    polys = []
    for _ in range(N_FLAKES):
        cx, cy = rng.uniform(200, W - 200), rng.uniform(200, H - 200)
        k = rng.integers(5, 12)
        ang = np.sort(rng.uniform(0, 2 * np.pi, k))
        rad = rng.uniform(30, 160, k)
        poly = np.stack([cx + rad * np.cos(ang), cy + rad * np.sin(ang)], axis=1)
        polys.append(poly)
        shade = rng.uniform(0.55, 0.95)
        cv2.fillPoly(img, [poly.astype(np.int32)], tuple(int(v * shade) for v in (150, 118, 172)))
    noise = rng.integers(0, 6, img.shape, dtype=np.uint8)
    img = cv2.add(img, noise)
    file = folder / "bench_tile_50x.png"
    cv2.imwrite(str(file), cv2.cvtColor(img, cv2.COLOR_RGB2BGR))
    path = folder / "bench.flakebook"
    p = Project.create(path)
    s = p.add_sample(
        "B5-south",
        "MoSe2",
        "SiO2:285,Si",
        hole_pattern={"bottom": "si", "diameter_um": 4.0, "pitch_um": 12.0},
    )
    im = p.add_image(s, file, pixel_size_um=0.069, objective="50x", width_px=W, height_px=H)
    n = p.max_layers + 1
    for i, poly in enumerate(polys):
        f = p.add_flake(s, f"B5S-{i + 1:03d}")
        a = p.add_appearance(f, im, poly)
        t = p.add_terrace(a, poly)
        lk = np.exp(-0.5 * ((np.arange(1, n + 1) - (1 + i % 5)) / 0.6) ** 2)
        ev = p.add_evidence(
            f,
            lk,
            method=CONTRAST_METHOD,
            terrace=t,
            inputs=[s, im, t],
            parameters={
                "contrast": {"r": 0.1, "g": 0.2, "b": 0.05},
                "contrast_err": {"r": 0.01, "g": 0.01, "b": 0.01},
                "geometry": "supported",
                "image_id": im.id,
            },
        )
        post = combine([lk])
        p.add_assignment(
            f,
            int(post.layers),
            terrace_id=t.id,
            probability=float(post.probability),
            ambiguous_with=post.ambiguous_with,
            posterior=post.posterior,
            method=COMBINED_METHOD,
            inputs=[ev],
        )
    sess = Session(p)
    for i in range(60):
        sess.add_hole(im.id, 100 + (i % 10) * 174.0, 100 + (i // 10) * 174.0, 29.0)
    p.close()
    return path


def painted(app, widget) -> None:
    """Process events and paint the window synchronously (as the screen would show it)."""
    app.processEvents()
    widget.repaint()
    app.processEvents()


def baseline(app, file: Path, auto_downsample: bool = False) -> float:
    import pyqtgraph as pg
    from PySide6.QtWidgets import QMainWindow

    t0 = time.perf_counter()
    win = QMainWindow()
    view = pg.GraphicsView()
    vb = pg.ViewBox(lockAspect=True, invertY=True)
    view.setCentralItem(vb)
    item = pg.ImageItem(autoDownsample=auto_downsample)
    vb.addItem(item)
    win.setCentralWidget(view)
    arr = cv2.cvtColor(cv2.imread(str(file), cv2.IMREAD_UNCHANGED), cv2.COLOR_BGR2RGB)
    item.setImage(arr, levels=(0, 255))
    win.resize(1400, 880)
    win.show()
    painted(app, win)
    dt = time.perf_counter() - t0
    win.close()
    win.deleteLater()
    app.processEvents()
    return dt


def ours(app, path: Path):
    from flakebook.gui.mainwindow import MainWindow

    t0 = time.perf_counter()
    win = MainWindow()
    win.resize(1400, 880)
    win.show()
    win.open_project(path)
    painted(app, win)
    return time.perf_counter() - t0, win


def main() -> int:
    from PySide6.QtCore import QSettings, QThreadPool

    from flakebook.gui.mainwindow import make_app

    tmp = Path(tempfile.mkdtemp(prefix="flakebook-bench-"))
    QSettings.setDefaultFormat(QSettings.Format.IniFormat)
    QSettings.setPath(QSettings.Format.IniFormat, QSettings.Scope.UserScope, str(tmp / "settings"))
    app = make_app()
    print("building the benchmark project (20-MP image, 40 flakes) ...", flush=True)
    path = build(tmp)
    file = tmp / "bench_tile_50x.png"
    # warm-up: imports, fonts, first use of the store and the core
    baseline(app, file)
    _, w = ours(app, path)
    w.close()
    QThreadPool.globalInstance().waitForDone()
    base_t, base_ds_t, our_t = [], [], []
    for _ in range(3):
        base_t.append(baseline(app, file))
        base_ds_t.append(baseline(app, file, auto_downsample=True))
        t, w = ours(app, path)
        our_t.append(t)
        w.close()
        QThreadPool.globalInstance().waitForDone()
        app.processEvents()
    b, o = statistics.median(base_t), statistics.median(our_t)
    b_ds = statistics.median(base_ds_t)
    ok_open = o <= 3 * b and o < 2.0
    print(
        f"open to painted window: flakebook {o * 1000:.0f} ms, baseline (ImageItem, full image) "
        f"{b * 1000:.0f} ms, ratio {o / b:.2f} (target <= 3, and < 2000 ms) "
        f"{'OK' if ok_open else 'NOT MET'}; baseline with autoDownsample {b_ds * 1000:.0f} ms"
    )

    _, w = ours(app, path)
    QThreadPool.globalInstance().waitForDone()
    app.processEvents()
    c = w.canvas
    steps = []
    for k in range(24):
        t0 = time.perf_counter()
        if k < 12:
            c.zoom(1.25)
        else:
            c.view.translateBy((37.0 * (1 + k % 3), 21.0))
        c.repaint()
        app.processEvents()
        steps.append(time.perf_counter() - t0)
    for _ in range(12):
        t0 = time.perf_counter()
        c.zoom(0.8)
        c.repaint()
        app.processEvents()
        steps.append(time.perf_counter() - t0)
    worst, med = max(steps), statistics.median(steps)
    p90 = sorted(steps)[int(0.9 * (len(steps) - 1))]
    print(
        f"pan/zoom step on {W}x{H}: median {med * 1000:.1f} ms, 90th percentile "
        f"{p90 * 1000:.1f} ms, worst {worst * 1000:.1f} ms (target < 50 ms) "
        f"{'OK' if worst < 0.05 else 'NOT MET'}"
    )

    ids = [r["id"] for r in w.catalogue.model.rows]
    # steady state: the optics data (loaded once per session in a worker, ~2 s of CPU that
    # the window shares) is in memory before the timing starts
    w.select_flake(ids[-1])
    t_first = time.perf_counter()
    while time.perf_counter() - t_first < 30 and (w.jobs.busy or w.inspector.model_curves is None):
        app.processEvents()
        QThreadPool.globalInstance().waitForDone(20)
    print(
        f"first selection: contrast model ready after {time.perf_counter() - t_first:.1f} s "
        "(optics data loading in the background)"
    )
    sel = []
    for fid in ids[:20]:
        t0 = time.perf_counter()
        w.select_flake(fid)
        w.inspector.repaint()
        app.processEvents()
        sel.append(time.perf_counter() - t0)
    worst_s, med_s = max(sel), statistics.median(sel)
    p90_s = sorted(sel)[int(0.9 * (len(sel) - 1))]
    print(
        f"select a flake -> inspector: median {med_s * 1000:.1f} ms, 90th percentile "
        f"{p90_s * 1000:.1f} ms, worst {worst_s * 1000:.1f} ms (target < 100 ms) "
        f"{'OK' if worst_s < 0.1 else 'NOT MET'}"
    )
    w.close()
    QThreadPool.globalInstance().waitForDone()
    return 0 if (ok_open and worst < 0.05 and worst_s < 0.1) else 1


if __name__ == "__main__":
    sys.exit(main())
