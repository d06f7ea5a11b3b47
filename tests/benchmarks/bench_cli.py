"""Benchmark: the command line's start-up and a whole-process survey (ratios, same run).

1. ``flakebook --version`` (a fresh interpreter, the parser built, numpy not imported) against a
   bare ``python -c pass``: target at most 3 times.
2. ``flakebook survey IMAGE.png`` of a 20-megapixel RGB micrograph (as in bench_imaging.py) as a
   whole process (start-up, imports, the optics model's tables, the survey, JSON out) against a
   process that imports cv2 and decodes the same file: target at most 3.5 times.

Each timing is the best of ``--repeat`` runs (the machines here are noisy).
Run: PYTHONPATH=. python tests/benchmarks/bench_cli.py [--repeat 3] [--flakes 300]
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))


def verdict(ratio: float, target: float) -> str:
    return "reached" if ratio <= target else "NOT reached"


def best(cmd: list[str], repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        times.append(time.perf_counter() - t)
    return min(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--flakes", type=int, default=300)
    ap.add_argument("--holes-side", type=int, default=12)
    a = ap.parse_args()
    py = sys.executable
    fb = [str(Path(py).with_name("flakebook"))]  # the installed console script

    bare = best([py, "-c", "pass"], a.repeat)
    version = best([*fb, "--version"], a.repeat)
    helped = best([*fb, "survey", "--help"], a.repeat)
    print(f"python -c pass          {bare * 1e3:7.0f} ms")
    print(
        f"flakebook --version     {version * 1e3:7.0f} ms  ratio {version / bare:5.2f} "
        f"(target <= 3: {verdict(version / bare, 3.0)})"
    )
    print(f"flakebook survey --help {helped * 1e3:7.0f} ms  ratio {helped / bare:5.2f}")

    from tests.benchmarks.bench_imaging import draw, write_png

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "k9w_20mp.png"
        write_png(path, draw((3648, 5472), a.flakes, a.holes_side, seed=1))
        decode = best(
            [py, "-c", f"import cv2; cv2.imread({str(path)!r}, cv2.IMREAD_UNCHANGED)"], a.repeat
        )
        survey = best(
            [
                *fb,
                "survey",
                str(path),
                "--material",
                "MoSe2",
                "--oxide-nm",
                "285",
                "--scale-um-per-px",
                "0.069",
                "--channels",
                "srgb",
                "--format",
                "json",
            ],
            a.repeat,
        )
    print(f"import cv2 + decode     {decode * 1e3:7.0f} ms")
    print(
        f"flakebook survey        {survey * 1e3:7.0f} ms  ratio {survey / decode:5.2f} "
        f"(target <= 3.5: {verdict(survey / decode, 3.5)})"
    )


if __name__ == "__main__":
    main()
