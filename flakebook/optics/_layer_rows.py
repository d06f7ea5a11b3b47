"""Pieces of the layer likelihood kept out of layers.py: the chi-square quantiles it needs,
shipped as numbers, and the posteriors of many rows at once."""

from __future__ import annotations

import numpy as np

from flakebook import evidence

# The chi-square quantile with upper tail 1e-3 for 1..8 degrees of freedom, as
# scipy.special.chdtri(k, 1e-3) gives it (tests/optics/test_layer_speed.py checks them against
# it), so that a likelihood needs no scipy.special (an import of a few hundred ms).
_CHI2_999 = {
    1: 10.827566170662733,
    2: 13.815510557964274,
    3: 16.26623619623813,
    4: 18.466826952903173,
    5: 20.515005652432876,
    6: 22.457744484825323,
    7: 24.321886347856854,
    8: 26.124481558376143,
}


def _chi2_upper_1e3(k: int) -> float:
    """The chi-square value exceeded with probability 1e-3 at ``k`` degrees of freedom."""
    if k in _CHI2_999:
        return _CHI2_999[k]
    from scipy.special import chdtri

    return float(chdtri(k, 1e-3))


def flat_posteriors(posts: np.ndarray) -> list[evidence.Posterior]:
    """evidence.combine of each row's likelihood with a flat prior, from its normalised values
    (the same rule: most likely bin, its probability, others at >= the ambiguity threshold),
    for all rows at once."""
    posts = np.array(posts, dtype=float, copy=True)
    best = np.argmax(posts, axis=1)
    order = np.argsort(-posts, axis=1, kind="stable")
    ranked = np.take_along_axis(posts, order, axis=1)
    other = (ranked >= evidence.AMBIGUITY_THRESHOLD) & (order != best[:, None])
    out = []
    for r in range(len(posts)):
        post = posts[r].copy()
        post.setflags(write=False)
        k = int(best[r])
        out.append(
            evidence.Posterior(
                posterior=post,
                layers=k + 1,
                probability=float(post[k]),
                ambiguous_with=tuple((order[r][other[r]] + 1).tolist()),
                max_layers=post.size - 1,
            )
        )
    return out
