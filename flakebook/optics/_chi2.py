"""Chi-square quantiles the layer likelihood needs, shipped as numbers."""

from __future__ import annotations

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
