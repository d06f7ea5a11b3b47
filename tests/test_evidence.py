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


def test_agreeing_evidence_sharpens_and_conflicts_are_flagged():
    """Two agreeing independent pieces of evidence give a sharper posterior than either; a pair
    pointing to different N is listed as a conflict, not averaged away (Bayes' rule; common
    practice, no source)."""
    from flakebook.evidence import combine_report
    from flakebook.spectra.layer_evidence import Feature, afm_evidence, raman_evidence

    (sep,) = raman_evidence([Feature("E2g", 385.0, 0.2), Feature("A1g", 406.8, 0.2)], "MoS2")
    afm2 = afm_evidence(1.73, 0.25, material="MoS2")
    rep = combine_report([sep, afm2])
    assert rep.posterior.layers == 2 and not rep.conflicts
    assert rep.posterior.probability > max(c.posterior.probability for c in rep.contributions)
    assert all(c.information_bits > 0 for c in rep.contributions)
    (sep1,) = raman_evidence([Feature("E2g", 385.0, 0.2), Feature("A1g", 404.0, 0.2)], "MoS2")
    afm6 = afm_evidence(0.5 + 6 * 0.615, 0.2, material="MoS2")
    bad = combine_report([sep1, afm6])
    assert bad.conflicts and bad.conflicts[0].overlap < 0.1
    assert {bad.conflicts[0].best_a, bad.conflicts[0].best_b} == {1, 6}
    assert any("conflicting" in w for w in bad.warnings)


def test_flat_evidence_adds_nothing_and_manual_override_is_kept_alongside():
    """Evidence that is flat adds 0 bits (leave-one-out KL divergence); a manual assignment
    overrides the layer number, keeps its reason, and the combined posterior is still reported
    (DESIGN.md)."""
    from flakebook.evidence import Evidence, ManualAssignment, combine_report

    a = Evidence("a", np.array([0.1, 1.0, 0.2, 0.01]), "test")
    flat = Evidence("flat", np.ones(4), "test")
    rep = combine_report([a, flat], manual=ManualAssignment(3, "AFM on the same terrace"))
    assert rep.contributions[1].information_bits == pytest.approx(0.0, abs=1e-12)
    assert rep.layers == 3 and rep.assigned_by == "manual" and rep.posterior.layers == 2
    d = rep.to_dict()
    assert d["manual"]["reason"] == "AFM on the same terrace" and d["combined"]["layers"] == 2
    low = combine_report([a], manual=ManualAssignment(4, "seen as bulk"))
    assert any("only" in w for w in low.warnings)
    with pytest.raises(InputError, match="reason"):
        combine_report([a], manual=ManualAssignment(2, "  "))
    with pytest.raises(InputError, match="range"):
        combine_report([a], manual=ManualAssignment(9, "x"))


def test_two_raman_positions_share_the_offset_once():
    """MoSe2 A1g position and shear mode both move with the spectrometer's offset: the combined
    likelihood is integral N(d; 0, s_cal) L_A1g(N|d) L_shear(N|d) dd, checked against
    scipy.integrate.quad (general-purpose reference); multiplying the two marginals as if
    independent double-counts the offset and differs."""
    from scipy.integrate import quad
    from scipy.stats import norm

    from flakebook.spectra.layer_evidence import Feature, raman_evidence, raman_offset_grid
    from flakebook.spectra.rules import load_rule_table

    table = load_rule_table("MoSe2")
    s_cal = 1.5
    grid = raman_offset_grid(s_cal)
    feats = [Feature("A1g", 243.0, 0.1), Feature("shear", 23.0, 0.1)]
    evs = [e for e in raman_evidence(feats, table, offset_grid=grid, max_layers=5)]
    assert all(e.grid is not None for e in evs)
    post = combine(evs)
    a1g, shear = table.rule("A1g position"), table.rule("shear mode")

    def like(n):
        def f(d):
            out = norm.pdf(d, 0, s_cal)
            for rule, x in ((a1g, 243.0), (shear, 23.0)):
                mu, s = rule.center([n])[0], rule.spread([n])[0]
                out *= rule.detection([n])[0] * norm.pdf(x - d, mu, np.hypot(0.1, s))
            return out

        return quad(f, -8 * s_cal, 8 * s_cal, limit=200)[0]

    truth = np.array([like(n) for n in range(2, 6)])
    np.testing.assert_allclose(
        post.posterior[1:5] / post.posterior[1:5].sum(), truth / truth.sum(), rtol=5e-3
    )
    naive = evs[0].likelihood * evs[1].likelihood
    naive = naive[1:5] / naive[1:5].sum()
    assert np.max(np.abs(naive - truth / truth.sum())) > 0.02


def test_two_confident_answers_that_disagree_conflict():
    """Contrast says 3L at 0.95 with 4% on 2L, Raman says 2L at 0.999: a conflict a researcher
    must see, although the posteriors' tails overlap by more than 0.1; weak evidence (top below
    0.5) that leans elsewhere is no conflict (common practice, no source)."""
    from flakebook.evidence import combine_report

    contrast = np.array([0.005, 0.04, 0.95, 0.005, 0.0])
    raman = np.array([0.0005, 0.999, 0.0005, 0.0, 0.0])
    rep = combine_report([contrast, raman])
    assert rep.conflicts and {rep.conflicts[0].best_a, rep.conflicts[0].best_b} == {2, 3}
    weak = np.array([0.25, 0.2, 0.03, 0.45, 0.07])
    assert not combine_report([contrast, weak]).conflicts
