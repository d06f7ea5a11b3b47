"""Benchmark: the sample campaign's full HTML report against its figures alone (same run).

The baseline draws every figure the report holds (flake cards, contrast versus N, spectra with
their fits, omega(T) and omega(P), kappa versus N, the chip maps) offscreen; the full report adds reading the
project, the content, the HTML and writing the file. Target: at most 2 times the figures' time,
and under 5 s. Each timing is the best of ``--repeat`` runs (the machines here are noisy).
Run: PYTHONPATH=. python tests/benchmarks/bench_report.py [--repeat 3]
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")


def figures_only(project, content) -> int:
    from flakebook.render.chipmap import chip_map_png
    from flakebook.render.figures import (
        contrast_figure,
        kappa_figure,
        series_figure,
        spectrum_figure,
    )
    from flakebook.render.report import _card_png

    n = 0
    kappa_figure(content.kappa_rows)
    for m, pattern in content.chip_maps:
        chip_map_png(m, pattern=pattern, max_layers=content.max_layers)
        n += 1
    for card in content.cards:
        if card.has_image:
            _card_png(project, card.flake_id, set())
            n += 1
        if card.contrast is not None:
            lay = int(card.layers.rstrip("L")) if card.layers[:1].isdigit() else None
            contrast_figure(project, card.contrast, lay)
            n += 1
        for s in card.spectra:
            spectrum_figure(project, s)
            n += 1
        for t in card.thermal:
            series_figure(t.series, "temperature")
            series_figure(t.series, "power")
            n += 2
    return n


def best(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args()
    from flakebook.demo import build_demo
    from flakebook.pipeline_spectra import flake_report
    from flakebook.render.export import ensure_app
    from flakebook.render.report import write_report
    from flakebook.report.content import build_report
    from flakebook.store import Project

    ensure_app()
    with tempfile.TemporaryDirectory() as tmp:
        path = build_demo(Path(tmp) / "demo")
        with Project.open(path, read_only=True) as p:
            content = build_report(p, "all", combined=flake_report)
            figures_only(p, content)  # warm the optical constants' caches for both timings
            t_fig = best(lambda: figures_only(p, content), a.repeat)
            out = Path(tmp) / "campaign.html"
            t_all = best(lambda: write_report(p, out), a.repeat)
            n = figures_only(p, content)
    ratio = t_all / t_fig
    print(f"figures alone ({n} figures + kappa): {t_fig:.2f} s (baseline)")
    print(f"full HTML report: {t_all:.2f} s = {ratio:.2f} x baseline (target <= 2 and < 5 s)")
    print("PASS" if ratio <= 2 and t_all < 5 else "FAIL")


if __name__ == "__main__":
    main()
