"""Combining layer-number likelihoods into one posterior.

Every kind of layer evidence (optical contrast, Raman, PL, ...) is a likelihood over
N = 1..N_max plus a last "more" bin for N > N_max (DESIGN.md). This module alone turns them into a
posterior: the product of the likelihoods times the prior (flat unless given), normalised. It
reports the most likely N, its probability, and ``ambiguous_with``: every other N whose posterior
is at least 5%. The "more" bin is reported as N_max + 1 (label ``">N_max"``).

It knows no measurement: it takes arrays (or objects with a ``likelihood`` attribute).
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
    arrays = [_as_array(x) for x in likelihoods]
    if not arrays:
        raise InputError("no likelihood given")
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
