"""Benchmark: Monte Carlo kappa against the time of one forward solve (ratios, same run).

1. 10^4 Monte Carlo draws (every input uncertain, variance shares included) with the closed
   form: target under 1 s.
2. The same with kappa(T) = kappa_0 (T_0/T)^alpha over a five-point power series (vectorised
   Kirchhoff transform): target under 20 s.
Each is printed beside the time of one forward solve of the finite-volume solver (centred,
constant kappa; and with kappa(T) at one power) and as a ratio to it.

Run: PYTHONPATH=. python tests/benchmarks/bench_thermal.py
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from flakebook.thermal.inversion import HeatModel  # noqa: E402
from flakebook.thermal.model import solve_membrane  # noqa: E402
from flakebook.thermal.uncertainty import kappa_with_uncertainty  # noqa: E402

ARGS = dict(
    chi_t_cm1_per_k=-0.0056,
    chi_t_err_cm1_per_k=0.0003,
    chi_p_cm1_per_mw=-2.9,
    chi_p_err_cm1_per_mw=0.1,
    absorptance=0.10,
    absorptance_err=0.01,
    hole_radius_um=2.5,
    hole_radius_err_um=0.05,
    beam_radius_um=0.5,
    beam_radius_err_um=0.03,
    layer_spacing_nm=0.646,
    layers=3,
    draws=10_000,
)
ROUNDS = 5


def _median_time(fn, rounds: int) -> float:
    times = []
    for _ in range(rounds):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def main() -> None:
    alpha_model = HeatModel(kappa_alpha=1.0, powers_mw=(0.02, 0.05, 0.1, 0.15, 0.2))
    kappa_with_uncertainty(**{**ARGS, "draws": 200})  # warm up (tables, imports)
    solve_t = _median_time(lambda: solve_membrane(30.0, 1.938, 2.5, 0.5), 50)
    solve_a = _median_time(
        lambda: solve_membrane(30.0, 1.938, 2.5, 0.5, 2e-5, kappa_alpha=1.0, nonlinear="iterate"),
        20,
    )
    mc = _median_time(lambda: kappa_with_uncertainty(**ARGS), ROUNDS)
    mc_a = _median_time(lambda: kappa_with_uncertainty(**ARGS, model=alpha_model), 3)
    print(f"one forward solve (constant kappa): {solve_t * 1e3:.2f} ms")
    print(f"one forward solve (kappa(T), fixed point): {solve_a * 1e3:.2f} ms")
    print(
        f"10^4 draws, closed form:  {mc:.3f} s (target < 1 s) = {mc / solve_t:.0f} forward solves"
        f" -> {'PASS' if mc < 1 else 'FAIL'}"
    )
    print(
        f"10^4 draws, kappa(T):     {mc_a:.3f} s (target < 20 s) = {mc_a / solve_a:.0f} forward "
        f"solves with kappa(T) -> {'PASS' if mc_a < 20 else 'FAIL'}"
    )


if __name__ == "__main__":
    main()
