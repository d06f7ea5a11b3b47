"""Combining layer-number likelihoods into one posterior.

Every kind of layer evidence (optical contrast, Raman, PL, ...) is a likelihood over
N = 1..N_max plus a last "more" bin for N > N_max (DESIGN.md). This module alone turns them into a
posterior: the product of the likelihoods times the prior (flat unless given), normalised. It
reports the most likely N, its probability, and ``ambiguous_with``: every other N whose posterior
is at least 5%. The "more" bin is reported as N_max + 1 (label ``">N_max"``).

It knows no measurement: it takes arrays (or objects with a ``likelihood`` attribute).

Evidence that shares a systematic parameter (optical contrast, the reflectance spectrum and the
Si-line attenuation all depend on the oxide thickness) must not be multiplied as if independent:
each such likelihood is handed over as a :class:`GridLikelihood`, its values on the nodes of one
shared :class:`ParameterGrid` (made once, by :func:`parameter_grid`, and passed to every producer),
and :func:`combine` multiplies them node by node and marginalises the parameter once:
L(N) = sum_g w_g prod_k L_k(N | theta_g).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from flakebook.errors import InputError

AMBIGUITY_THRESHOLD = 0.05


@dataclass(frozen=True)
class Posterior:
    """The posterior over N = 1..max_layers and the "more" bin (index max_layers).

    ``layers`` is the most likely N (``max_layers + 1`` standing for "more than max_layers"),
    ``probability`` its posterior probability, ``ambiguous_with`` the other N (same coding) with
    posterior >= 5%, most probable first.
    """

    posterior: np.ndarray
    layers: int
    probability: float
    ambiguous_with: tuple[int, ...]
    max_layers: int

    @property
    def is_more(self) -> bool:
        """True when the most likely bin is "more than max_layers"."""
        return self.layers == self.max_layers + 1

    @property
    def label(self) -> str:
        """``"3L"``, or ``">15L"`` for the "more" bin."""
        return f">{self.max_layers}L" if self.is_more else f"{self.layers}L"

    def to_dict(self) -> dict:
        return {
            "layers": self.layers,
            "probability": self.probability,
            "ambiguous_with": list(self.ambiguous_with),
            "posterior": self.posterior.tolist(),
        }


@dataclass(frozen=True)
class ParameterGrid:
    """Nodes of a shared nuisance parameter and their prior weights (summing to 1).

    ``parameter`` names it with its unit (``"oxide_nm"``). Producers of evidence that depend on
    the parameter evaluate their likelihood at exactly these nodes.
    """

    parameter: str
    nodes: np.ndarray
    weights: np.ndarray

    def same_as(self, other: ParameterGrid) -> bool:
        return (
            self.parameter == other.parameter
            and self.nodes.shape == other.nodes.shape
            and bool(np.allclose(self.nodes, other.nodes, rtol=0, atol=1e-9))
            and bool(np.allclose(self.weights, other.weights, rtol=1e-9, atol=0))
        )


def parameter_grid(
    parameter: str,
    center: float,
    sigma: float,
    *,
    spacing: float | None = None,
    max_nodes: int = 241,
    lower: float | None = 0.0,
) -> ParameterGrid:
    """A uniform grid over +-3 sigma (odd, centre included) with Gaussian weights.

    ``spacing`` defaults to sigma/8 (a likelihood in the parameter can be much narrower than its
    prior); the node count is capped at ``max_nodes``. Nodes below ``lower`` are dropped. With
    ``sigma == 0`` the grid is the one exact value.
    """
    if not (np.isfinite(center) and np.isfinite(sigma) and sigma >= 0):
        raise InputError(
            f"a parameter grid needs a finite centre and a standard deviation >= 0 "
            f"(got {center!r} +- {sigma!r})"
        )
    if sigma == 0:
        nodes, weights = np.array([float(center)]), np.array([1.0])
    else:
        h = spacing if spacing and spacing > 0 else sigma / 8.0
        half = int(min(np.ceil(3.0 * sigma / h), (max_nodes - 1) // 2))
        half = max(half, 3)
        nodes = center + np.linspace(-3.0 * sigma, 3.0 * sigma, 2 * half + 1)
        weights = np.exp(-0.5 * ((nodes - center) / sigma) ** 2)
        if lower is not None:
            keep = nodes >= lower
            nodes, weights = nodes[keep], weights[keep]
        if nodes.size == 0:
            raise InputError(f"no node of the {parameter} grid lies at or above {lower}")
        weights = weights / weights.sum()
    nodes.setflags(write=False)
    weights.setflags(write=False)
    return ParameterGrid(parameter, nodes, weights)


@dataclass(frozen=True)
class GridLikelihood:
    """A likelihood over N given at each node of a shared parameter grid.

    ``log_likelihood`` has shape (len(grid.nodes), max_layers + 1): log L(N | theta_g), any
    common offset. ``likelihood`` (the marginal over the grid, scaled to a maximum of 1) lets it
    stand alone wherever a plain likelihood is accepted.
    """

    grid: ParameterGrid
    log_likelihood: np.ndarray
    method: str = ""

    def __post_init__(self) -> None:
        ll = np.asarray(self.log_likelihood, dtype=float)
        if ll.ndim != 2 or ll.shape[0] != self.grid.nodes.size or ll.shape[1] < 2:
            raise InputError(
                "a grid likelihood needs one row per grid node and one column per N bin "
                f"(got shape {ll.shape} for {self.grid.nodes.size} nodes)"
            )
        if np.any(np.isnan(ll)) or np.any(ll == np.inf):
            raise InputError("a grid log-likelihood must hold numbers below +inf (no NaN)")
        object.__setattr__(self, "log_likelihood", ll)

    @property
    def marginal_log_likelihood(self) -> np.ndarray:
        return _marginal([self.log_likelihood], self.grid.weights)

    @property
    def likelihood(self) -> np.ndarray:
        m = self.marginal_log_likelihood
        return np.exp(m - np.max(m))


def _marginal(log_likes: Sequence[np.ndarray], weights: np.ndarray) -> np.ndarray:
    """log sum_g w_g prod_k L_k[g, :] (each L_k given as a log)."""
    total = np.sum(log_likes, axis=0) + np.log(weights)[:, None]
    top = np.max(total, axis=0)
    finite = np.isfinite(top)
    out = np.full(total.shape[1], -np.inf)
    with np.errstate(invalid="ignore"):
        out[finite] = top[finite] + np.log(np.sum(np.exp(total[:, finite] - top[finite]), axis=0))
    return out


def _grid_of(item) -> GridLikelihood | None:
    if isinstance(item, GridLikelihood):
        return item
    grid = getattr(item, "grid", None)
    return grid if isinstance(grid, GridLikelihood) else None


def _as_array(item) -> np.ndarray:
    arr = getattr(item, "likelihood", item)
    try:
        a = np.asarray(arr, dtype=float)
    except (TypeError, ValueError):
        raise InputError(
            "a likelihood must be a list of numbers over N = 1..N_max and 'more'"
        ) from None
    if a.ndim != 1 or a.size < 2:
        raise InputError(
            f"a likelihood must be a 1-d list over N = 1..N_max plus 'more' (got shape {a.shape})"
        )
    if not np.all(np.isfinite(a)) or np.any(a < 0):
        raise InputError("a likelihood must hold finite numbers >= 0")
    return a


def combine(likelihoods: Sequence, prior=None) -> Posterior:
    """Posterior from one or several likelihoods over the same N bins (flat prior by default).

    Each likelihood is an array of length max_layers + 1 (the last bin "more"), or an object with
    a ``likelihood`` attribute. Raises :class:`InputError` when the lengths differ or the evidence
    leaves no N possible.
    """
    if hasattr(likelihoods, "likelihood") or (
        isinstance(likelihoods, np.ndarray) and likelihoods.ndim == 1
    ):
        likelihoods = [likelihoods]
    likelihoods = list(likelihoods)
    if not likelihoods:
        raise InputError("no likelihood given")
    # Evidence on a shared parameter grid: multiply node by node, marginalise once per grid.
    groups: dict[str, list[GridLikelihood]] = {}
    plain = []
    for item in likelihoods:
        g = _grid_of(item)
        if g is None:
            plain.append(item)
        else:
            groups.setdefault(g.grid.parameter, []).append(g)
    arrays = [_as_array(x) for x in plain]
    for parameter, members in groups.items():
        first = members[0].grid
        if any(not m.grid.same_as(first) for m in members[1:]):
            raise InputError(
                f"evidence that shares {parameter} must be computed on the same grid of it "
                "(make it once with flakebook.evidence.parameter_grid and pass it to each)"
            )
        m = _marginal([x.log_likelihood for x in members], first.weights)
        if not np.any(np.isfinite(m)):
            raise InputError(
                "the evidence contradicts itself: no layer number is compatible with all of it"
            )
        arrays.append(np.exp(m - np.max(m)))
    size = arrays[0].size
    if any(a.size != size for a in arrays):
        raise InputError(
            "likelihoods cover different numbers of layers; accepted: all over the same N_max"
        )
    log_post = np.zeros(size)
    with np.errstate(divide="ignore"):
        for a in arrays:
            # Each likelihood's scale is arbitrary; normalise to its maximum first.
            peak = a.max()
            if peak <= 0:
                raise InputError("a likelihood is zero for every layer number")
            log_post += np.log(a / peak)
        if prior is not None:
            p = _as_array(prior)
            if p.size != size:
                raise InputError("the prior must cover the same N bins as the likelihoods")
            log_post += np.log(p)
    if not np.any(np.isfinite(log_post)):
        raise InputError(
            "the evidence contradicts itself: no layer number is compatible with all of it"
        )
    log_post -= np.max(log_post)
    post = np.exp(log_post)
    post /= post.sum()
    best = int(np.argmax(post))
    others = [i for i in np.argsort(-post, kind="stable") if i != best]
    amb = tuple(int(i) + 1 for i in others if post[i] >= AMBIGUITY_THRESHOLD)
    post.setflags(write=False)
    return Posterior(
        posterior=post,
        layers=best + 1,
        probability=float(post[best]),
        ambiguous_with=amb,
        max_layers=size - 1,
    )
