"""Benchmark of the project file (not part of the test run).

Run: ``PYTHONPATH=. python tests/benchmarks/bench_store.py``

A project with 2,000 flakes, 4,000 appearances (each with a terrace), 500 images and 10,000
spectra of 1,600 points, plus evidence and an assignment per flake. Measured:
  * opening the project (read-only) plus the catalogue query, against a plain sqlite3 connection
    and SELECT of the same flake rows, as a ratio (target: within 5 times, and under 0.5 s);
  * adding one flake with its outline (one transaction; target: under 20 ms).
Open plus catalogue and the baseline run in interleaved pairs; the best of each and the median
of the paired ratios are printed (machines here are noisy).
"""

from __future__ import annotations

import sqlite3
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from flakebook.store import Project

N_IMAGES, N_FLAKES, N_APPEARANCES, N_SPECTRA, N_POINTS = 500, 2000, 4000, 10_000, 1600
REPEATS = 25


def build(path: Path) -> None:
    rng = np.random.default_rng(2026)
    folder = path.parent / "images"
    folder.mkdir()
    with Project.create(path, clock=lambda: "2026-03-02T09:00:00Z", user="bench") as p:
        with p.transaction():
            samples = [p.add_sample(f"K{i}-bench", "MoSe2", oxide_nm=285.0) for i in range(5)]
            images = []
            for i in range(N_IMAGES):
                f = folder / f"tile_{i:04d}.png"
                f.write_bytes(rng.integers(0, 256, 64, dtype=np.uint8).tobytes())
                images.append(p.add_image(samples[i % 5], f, pixel_size_um=0.1 if i % 2 else 0.2))
            x = np.linspace(100.0, 600.0, N_POINTS)
            flakes = []
            for i in range(N_FLAKES):
                sample = samples[i % 5]
                fl = p.add_flake(sample, f"B{i:05d}", tags=("bench",))
                flakes.append(fl)
                for k in range(N_APPEARANCES // N_FLAKES):
                    img = images[(i * 2 + k) % N_IMAGES]
                    cx, cy = rng.uniform(100, 900, 2)
                    angles = np.linspace(0, 2 * np.pi, 24, endpoint=False)
                    r = rng.uniform(10, 60)
                    outline = np.c_[cx + r * np.cos(angles), cy + r * np.sin(angles)]
                    app = p.add_appearance(fl, img, outline)
                    ter = p.add_terrace(app, (outline - [cx, cy]) * 0.5 + [cx, cy])
                lk = rng.uniform(0, 1, 16)
                ev = p.add_evidence(fl, lk, method="bench", terrace=ter, inputs=[app, ter])
                p.add_assignment(
                    fl, int(np.argmax(lk)) + 1, probability=0.8, method="bench-combine", inputs=[ev]
                )
            for i in range(N_SPECTRA):
                fl = flakes[i % N_FLAKES]
                p.add_spectrum(fl, x, rng.normal(size=N_POINTS), laser_nm=532.0, power_mw=0.3)


def timed(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def main() -> int:
    with tempfile.TemporaryDirectory(prefix="flakebook-bench-") as tmp:
        path = Path(tmp) / "bench.flakebook"
        t0 = time.perf_counter()
        build(path)
        print(
            f"built {path.stat().st_size / 1e6:.0f} MB project in {time.perf_counter() - t0:.1f} s"
        )

        def baseline():
            con = sqlite3.connect(path.resolve().as_uri() + "?mode=ro", uri=True)
            rows = con.execute(
                "SELECT f.id, f.label, f.sample_id, s.name, s.material, f.status, f.tags "
                "FROM flakes f JOIN samples s ON s.id = f.sample_id ORDER BY f.sample_id, f.label"
            ).fetchall()
            con.close()
            assert len(rows) == N_FLAKES

        def ours():
            with Project.open(path, read_only=True) as p:
                rows = p.catalogue()
            assert len(rows) == N_FLAKES and rows[0].layers is not None

        ours()
        # Interleaved pairs, so that both see the same load on a shared machine.
        base_t, ours_t = [], []
        for _ in range(REPEATS):
            base_t.append(timed(baseline))
            ours_t.append(timed(ours))
        base_s, ours_s = min(base_t), min(ours_t)
        ratio = ours_s / base_s
        paired = statistics.median(o / b for o, b in zip(ours_t, base_t))
        print(f"plain sqlite3 open + SELECT of {N_FLAKES} flakes: {base_s * 1e3:.1f} ms (best)")
        print(f"Project.open + catalogue():                {ours_s * 1e3:.1f} ms (best)")
        print(
            f"ratio of the best times: {ratio:.2f}; median of paired ratios: {paired:.2f} "
            f"(target <= 5); under 0.5 s: {ours_s < 0.5}"
        )

        add_times = []
        with Project.open(path) as p:
            sample = p.samples()[0]
            image = p.images_of(sample)[0]
            outline = (
                np.c_[np.cos(np.linspace(0, 6.2, 64)), np.sin(np.linspace(0, 6.2, 64))] * 40 + 200
            )
            for i in range(20):
                t0 = time.perf_counter()
                with p.transaction():
                    fl = p.add_flake(sample, f"NEW-{i:03d}")
                    p.add_appearance(fl, image, outline)
                add_times.append(time.perf_counter() - t0)
        med = statistics.median(add_times)
        print(
            f"add one flake with its outline: median {med * 1e3:.1f} ms, best "
            f"{min(add_times) * 1e3:.1f} ms (target < 20 ms)"
        )
        ok = ratio <= 5 and ours_s < 0.5 and med < 0.020
        print("all targets met" if ok else "TARGET MISSED")
        return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
