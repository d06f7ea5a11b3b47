"""Calibration of layer probabilities: one helper shared by every test of layer evidence.

The expected calibration error (ECE) of the top probability: the top probabilities of the
simulated flakes are put into 10 equal-width bins over [0, 1]; in each bin the mean top
probability is compared with the fraction of flakes whose most likely N is right, and the
absolute differences are averaged, weighted by the bins' counts (Guo et al., "On Calibration of
Modern Neural Networks", ICML 2017, eq. 3; common practice). Tests of layer evidence use at least
2,000 simulated flakes whose truth is rendered independently of the likelihood under test.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

N_BINS = 10
MIN_FLAKES = 2000
CONFIDENT = 0.9


@dataclass(frozen=True)
class CalibrationReport:
    n: int
    accuracy: float  # fraction whose most likely N is the truth
    confidently_wrong: float  # fraction with top probability >= 0.9 and wrong
    ece: float

    def __str__(self) -> str:
        return (
            f"n={self.n} right={self.accuracy:.3f} "
            f"confidently_wrong={self.confidently_wrong:.3f} ECE={self.ece:.3f}"
        )


def expected_calibration_error(top_probability, correct, n_bins: int = N_BINS) -> float:
    """ECE of the top probabilities (array) against whether each call was right (bool array)."""
    p = np.asarray(top_probability, dtype=float)
    ok = np.asarray(correct, dtype=bool)
    if p.shape != ok.shape or p.ndim != 1 or p.size == 0:
        raise ValueError("top_probability and correct must be 1-d arrays of one length")
    edges = np.linspace(0.0, 1.0, n_bins + 1)
    idx = np.clip(np.digitize(p, edges[1:-1], right=True), 0, n_bins - 1)
    ece = 0.0
    for b in range(n_bins):
        sel = idx == b
        if np.any(sel):
            ece += sel.mean() * abs(p[sel].mean() - ok[sel].mean())
    return float(ece)


def calibration_report(posteriors, truths) -> CalibrationReport:
    """Accuracy, confidently-wrong fraction and ECE from posteriors (rows over N = 1.. and the
    "more" bin) and the true layer numbers (1-based)."""
    post = np.asarray(posteriors, dtype=float)
    truth = np.asarray(truths, dtype=int)
    best = np.argmax(post, axis=1) + 1
    top = post[np.arange(post.shape[0]), best - 1]
    ok = best == truth
    return CalibrationReport(
        n=int(truth.size),
        accuracy=float(ok.mean()),
        confidently_wrong=float(np.mean((top >= CONFIDENT) & ~ok)),
        ece=expected_calibration_error(top, ok),
    )
