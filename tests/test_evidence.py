"""Combining layer likelihoods into a posterior (DESIGN.md's definitions)."""

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.evidence import combine


def test_flat_prior_normalises_the_likelihood():
    """With a flat prior the posterior is the normalised likelihood (Bayes' rule; common
    practice, no source); the last bin is "more than N_max"."""
    like = np.array([0.1, 0.6, 0.3, 0.0, 0.0])
    post = combine([like])
    np.testing.assert_allclose(post.posterior, like / like.sum())
    assert post.layers == 2 and post.probability == pytest.approx(0.6)
    assert post.ambiguous_with == (3, 1)  # most probable first, each >= 5%
    assert post.max_layers == 4 and post.label == "2L"


def test_product_of_evidence_and_prior():
    """Independent evidence multiplies; a prior multiplies too; each likelihood's scale is
    irrelevant (Bayes' rule; common practice, no source)."""
    a = np.array([1.0, 1.0, 0.1, 0.01])
    b = 1e-30 * np.array([0.1, 1.0, 1.0, 0.01])
    post = combine([a, b])
    expected = a * b / np.sum(a * b)
    np.testing.assert_allclose(post.posterior, expected, rtol=1e-12)
    assert post.layers == 2
    prior = np.array([0.7, 0.1, 0.1, 0.1])
    with_prior = combine([a, b], prior=prior)
    np.testing.assert_allclose(
        with_prior.posterior, a * b * prior / np.sum(a * b * prior), rtol=1e-12
    )


def test_ambiguity_threshold_is_five_percent():
    """ambiguous_with lists every other N whose posterior is at least 5% (DESIGN.md)."""
    post = combine([np.array([0.9, 0.05, 0.0499, 0.0001])])
    assert post.ambiguous_with == (2,)


def test_more_bin_and_objects_with_likelihood():
    """The "more" bin is reported as N_max + 1; objects with a likelihood attribute are
    accepted (common practice, no source)."""

    class Ev:
        likelihood = np.array([0.0, 0.1, 0.9])

    post = combine([Ev()])
    assert post.layers == 3 and post.is_more and post.label == ">2L"
    assert post.to_dict()["ambiguous_with"] == [2]


def test_bad_evidence_refused():
    """Mismatched lengths, negative values and contradictory evidence are refused."""
    with pytest.raises(InputError, match="different"):
        combine([np.ones(4), np.ones(5)])
    with pytest.raises(InputError):
        combine([np.array([0.5, -0.1, 0.2])])
    with pytest.raises(InputError, match="contradicts"):
        combine([np.array([1.0, 0.0, 0.0]), np.array([0.0, 1.0, 0.0])])
    with pytest.raises(InputError):
        combine([])


def _gaussian_evidence(grid, y, slope, sigma):
    """log N(y | slope[N] * theta, sigma^2) on the grid nodes, for N bins given by slope."""
    th = grid.nodes[:, None]
    return -0.5 * ((y - slope[None, :] * th) / sigma) ** 2


def test_shared_parameter_is_marginalised_once():
    """Two pieces of evidence that share a nuisance parameter: the combined likelihood is
    integral w(theta) L1(N|theta) L2(N|theta) dtheta, not the product of the two marginals.
    Checked against scipy.integrate.quad of the same integrand (general-purpose reference)."""
    from scipy.integrate import quad

    from flakebook.evidence import GridLikelihood, parameter_grid

    center, sd = 285.0, 4.0
    grid = parameter_grid("oxide_nm", center, sd, spacing=0.05, max_nodes=2001)
    slope1 = np.array([1.000, 1.010, 1.020, 1.030])
    slope2 = np.array([1.000, 0.995, 0.990, 0.985])
    y1, s1, y2, s2 = 288.0, 0.5, 284.0, 0.5
    g1 = GridLikelihood(grid, _gaussian_evidence(grid, y1, slope1, s1))
    g2 = GridLikelihood(grid, _gaussian_evidence(grid, y2, slope2, s2))
    post = combine([g1, g2])

    def joint(n):
        def f(t):
            return (
                np.exp(-0.5 * ((t - center) / sd) ** 2)
                * np.exp(-0.5 * ((y1 - slope1[n] * t) / s1) ** 2)
                * np.exp(-0.5 * ((y2 - slope2[n] * t) / s2) ** 2)
            )

        return quad(f, center - 6 * sd, center + 6 * sd, points=[y1, y2], limit=200)[0]

    truth = np.array([joint(n) for n in range(4)])
    np.testing.assert_allclose(post.posterior, truth / truth.sum(), rtol=2e-3, atol=1e-6)
    # Multiplying the marginals as if independent gives a different (wrong) answer here.
    naive = g1.likelihood * g2.likelihood
    assert np.max(np.abs(naive / naive.sum() - truth / truth.sum())) > 0.05


def test_grid_evidence_mixes_with_plain_and_needs_one_grid():
    """Plain likelihoods multiply the marginalised grid group; evidence on two different grids
    of the same parameter is refused (common practice, no source)."""
    from flakebook.evidence import GridLikelihood, parameter_grid

    grid = parameter_grid("oxide_nm", 285.0, 3.0)
    g = GridLikelihood(grid, np.log(np.tile([0.2, 1.0, 0.5], (grid.nodes.size, 1))))
    post = combine([g, np.array([1.0, 1.0, 0.0])])
    np.testing.assert_allclose(post.posterior, [0.2 / 1.2, 1.0 / 1.2, 0.0])
    other = parameter_grid("oxide_nm", 290.0, 3.0)
    g2 = GridLikelihood(other, np.zeros((other.nodes.size, 3)))
    with pytest.raises(InputError, match="same grid"):
        combine([g, g2])
    exact = parameter_grid("oxide_nm", 285.0, 0.0)
    assert exact.nodes.tolist() == [285.0] and exact.weights.tolist() == [1.0]
    with pytest.raises(InputError):
        parameter_grid("oxide_nm", 285.0, -1.0)
