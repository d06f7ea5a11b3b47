"""Evidence that shares the oxide (optical contrast and the Si-line attenuation) is combined
with the oxide integrated once (issue: spectra, combination).

The truth is a direct integral, not the grid machinery under test: at each node of a
Gauss-Hermite rule over the calibrated oxide (mean 285 nm, s.d. 3 nm, the sample project's
calibration) both likelihoods are evaluated with the oxide taken as exact, multiplied, and summed
with the rule's weights: the marginal of a shared nuisance is the integral of the product of the
conditional likelihoods (common practice, no source; the Gauss-Hermite rule from numpy). The
naive product of the two marginals, which counts the oxide's uncertainty twice, differs from it
by more than the tolerance, so the check can fail.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest
from scipy.special import logsumexp

from flakebook import pipeline
from flakebook.evidence import Evidence as CoreEvidence
from flakebook.evidence import combine, parameter_grid
from flakebook.optics.substrate import parse_substrate
from flakebook.pipeline_spectra import SI_METHOD, evidence_item, terrace_evidence
from flakebook.spectra.layer_evidence import si_attenuation_evidence
from flakebook.store import Image, Project, Sample
from flakebook.substrate import format_substrate

SAMPLE = Path(__file__).resolve().parents[1] / "sample_project" / "k7-campaign.flakebook"
RATIO, RATIO_ERR = 0.35, 0.03  # between the thin-film model's 2L and 3L Si-line ratios


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    path = tmp_path_factory.mktemp("oxide") / "k7.flakebook"
    shutil.copy(SAMPLE, path)
    project = Project.open(path)
    flake = project.find_flake("K7N-02")
    pipeline.add_si_evidence(project, flake, RATIO, RATIO_ERR)
    pipeline.assign_flake(project, flake)
    yield project, flake
    project.close()


def _pair(project, flake):
    recs = terrace_evidence(project, flake)
    contrast = next(r for r in recs if r.method == pipeline.CONTRAST_METHOD)
    si = next(r for r in recs if r.method == SI_METHOD)
    return contrast, si


def test_both_are_stored_on_the_one_oxide_grid(recorded):
    project, flake = recorded
    contrast, si = _pair(project, flake)
    sample = project.get(Sample, flake.sample_id)
    name = pipeline.oxide_grid_name(sample)
    assert contrast.parameters["grid"]["parameter"] == name
    assert si.parameters["grid"]["parameter"] == name
    assert contrast.parameters["grid"]["nodes"] == si.parameters["grid"]["nodes"]
    # the Si evidence depends on the calibration whose oxide it integrates
    assert "calibration" in {ref.kind for ref in si.inputs}


def test_shared_oxide_is_integrated_once(recorded):
    project, flake = recorded
    contrast, si = _pair(project, flake)
    sample = project.get(Sample, flake.sample_id)
    image = project.get(Image, contrast.parameters["image_id"])
    cal = pipeline.calibration_values(project, sample)
    assert cal["oxide_err_nm"] == pytest.approx(3.0)
    substrate = parse_substrate(format_substrate(sample.substrate))

    x, w = np.polynomial.hermite_e.hermegauss(24)
    terms = []
    for xi, wi in zip(x, w / w.sum()):
        t = float(cal["oxide_nm"] + cal["oxide_err_nm"] * xi)
        exact = dict(cal, oxide_nm=t, oxide_err_nm=0.0, layer_calibration=None)
        lk, _ = pipeline.contrast_likelihood(
            sample, image, exact, contrast.parameters["contrast"],
            contrast.parameters.get("contrast_err"), max_layers=contrast.max_layers,
            explain=False,
        )  # fmt: skip
        ev = si_attenuation_evidence(
            RATIO, RATIO_ERR, sample.material, substrate, parameter_grid("oxide_nm", t, 0.0),
            max_layers=contrast.max_layers,
        )  # fmt: skip
        terms.append(np.log(wi) + lk.log_likelihood + ev.grid.log_likelihood[0])
    joint = logsumexp(np.array(terms), axis=0)
    truth = combine([CoreEvidence("direct integral", np.exp(joint - joint.max()), "")])

    stored = combine([evidence_item(contrast), evidence_item(si)])
    naive = combine([CoreEvidence("c", np.array(contrast.likelihood), ""),
                     CoreEvidence("s", np.array(si.likelihood), "")])  # fmt: skip
    assert stored.layers == truth.layers == 3
    # log posterior of the neighbours 2L and 4L, where the oxide matters
    lp = lambda post: np.log(post.posterior[[1, 3]])  # noqa: E731
    np.testing.assert_allclose(lp(stored), lp(truth), atol=0.1)
    assert np.max(np.abs(lp(naive) - lp(truth))) > 0.3  # the check could fail
    assert stored.probability == pytest.approx(truth.probability, abs=0.01)


def test_flake_assignment_uses_the_shared_grid(recorded):
    """The flake's recorded assignment is the combination of its evidence on the shared grid."""
    project, flake = recorded
    recs = terrace_evidence(project, flake)
    asg = project.latest_assignment(flake)
    computed = [a for a in project.assignments_of(flake.id) if not a.manual][-1]
    post = combine([evidence_item(r) for r in recs])
    np.testing.assert_allclose(computed.posterior, post.posterior, atol=1e-9)
    assert asg is not None
