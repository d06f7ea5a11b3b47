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
