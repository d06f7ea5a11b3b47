"""Calibration of Raman/AFM layer probabilities on simulated flakes (tests/calibration.py).

The truth is rendered independently of the likelihood under test: each flake's true feature
values come from the rule table perturbed within its stated spread by a uniform draw (not the
Gaussian the likelihood assumes), the spectrometer offset is uniform with the stated standard
deviation, measurement noise is Laplace with the stated standard error, and detection
probabilities are perturbed by up to +-0.03. The true N is uniform over the bins 1..15 and
"more" (N uniform in 16..100), matching the flat prior over bins.
"""

import numpy as np

from flakebook.evidence import combine
from flakebook.spectra.layer_evidence import (
    Feature,
    afm_evidence,
    raman_evidence,
    raman_offset_grid,
)
from flakebook.spectra.rules import load_rule_table
from tests.calibration import MIN_FLAKES, calibration_report

MAX_LAYERS = 15
S_CAL = 0.5


def _uniform(rng, sd):
    return rng.uniform(-np.sqrt(3) * sd, np.sqrt(3) * sd)


def _laplace(rng, sd):
    return rng.laplace(0.0, sd / np.sqrt(2))


def _true_n(rng):
    b = int(rng.integers(1, MAX_LAYERS + 2))
    return b if b <= MAX_LAYERS else int(rng.integers(MAX_LAYERS + 1, 101))


def _found(rng, rule, n, extra=1.0):
    p = float(np.clip(rule.detection([n])[0] * extra + rng.uniform(-0.03, 0.03), 0, 1))
    return rng.random() < p


def _simulate(material, n_flakes, seed, with_afm):
    table = load_rule_table(material)
    grid = raman_offset_grid(S_CAL)
    rng = np.random.default_rng(seed)
    posts, truths = [], []
    for _ in range(n_flakes):
        n = _true_n(rng)
        offset = _uniform(rng, S_CAL)
        feats = []
        for rule in table.rules:
            if rule.kind in ("pl_energy", "pl_ratio"):
                continue
            if rule.kind in ("shear", "breathing"):
                edge_ok = rule.center([n])[0] >= 8.0 if n > 1 else False
                if not (edge_ok and _found(rng, rule, n)):
                    feats.append(Feature(rule.modes[0], found=False))
                    continue
                err = rng.uniform(0.1, 0.5)
                bulk = rule.chain_bulk_cm1 + _uniform(rng, rule.chain_bulk_err_cm1)
                f = np.cos(np.pi / (2 * n)) if rule.kind == "shear" else np.sin(np.pi / (2 * n))
                x = bulk * f + _uniform(rng, rule.floor) + offset + _laplace(rng, err)
                feats.append(Feature(rule.modes[0], x, err))
            elif rule.kind == "presence":
                feats.append(Feature(rule.modes[0], 353.0, 0.5, found=_found(rng, rule, n)))
                if not feats[-1].found:
                    feats[-1] = Feature(rule.modes[0], found=False)
            else:
                err = rng.uniform(0.1, 0.4)
                true = rule.center([n])[0] + _uniform(rng, rule.spread([n])[0])
                if rule.kind == "separation":
                    e1 = err / np.sqrt(2)
                    base = 385.0 + offset
                    feats.append(Feature(rule.modes[0], base + _laplace(rng, e1), e1))
                    feats.append(Feature(rule.modes[1], base + true + _laplace(rng, e1), e1))
                else:
                    feats.append(Feature(rule.modes[0], true + offset + _laplace(rng, err), err))
        evs = list(raman_evidence(feats, table, max_layers=MAX_LAYERS, offset_grid=grid))
        if with_afm:
            h = n * table.layer_spacing_nm * (1 + _uniform(rng, 0.02)) + 0.5 + _uniform(rng, 0.4)
            evs.append(afm_evidence(h + _laplace(rng, 0.3), 0.3, material=material))
        posts.append(combine(evs).posterior)
        truths.append(min(n, MAX_LAYERS + 1))
    return calibration_report(np.array(posts), np.array(truths))


def test_mos2_raman_and_afm_probabilities_are_calibrated():
    """MoS2: E2g-A1g separation (Lee et al. 2010), shear and breathing modes (Zhang et al. 2013)
    and an AFM step on 2,400 simulated flakes: ECE < 0.05 (Guo et al. 2017 via
    tests/calibration.py); tables from memory, so this checks the likelihood's honesty, not the
    tables' values."""
    rep = _simulate("MoS2", 2400, 11, with_afm=True)
    print(rep)
    assert rep.n >= MIN_FLAKES
    assert rep.ece < 0.05
    assert rep.accuracy > 0.4


def test_mose2_raman_probabilities_are_calibrated():
    """MoSe2: A1g position and B2g presence (Tonndorf et al. 2013), shear and breathing modes,
    two offset-sharing positions on one raman_offset_cm1 grid, 2,400 simulated flakes: ECE <
    0.05 (tests/calibration.py)."""
    rep = _simulate("MoSe2", 2400, 12, with_afm=False)
    print(rep)
    assert rep.n >= MIN_FLAKES
    assert rep.ece < 0.05
