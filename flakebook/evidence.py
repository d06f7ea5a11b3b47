"""Combining layer-number likelihoods into one posterior.

Every kind of layer evidence (optical contrast, Raman, PL, ...) is a likelihood over
N = 1..N_max plus a last "more" bin for N > N_max (DESIGN.md). This module alone turns them into a
posterior: the product of the likelihoods times the prior (flat unless given), normalised. It
reports the most likely N, its probability, and ``ambiguous_with``: every other N whose posterior
is at least 5%. The "more" bin is reported as N_max + 1 (label ``">N_max"``).

It knows no measurement: it takes arrays (or objects with a ``likelihood`` attribute, such as
:class:`Evidence`, whose optional ``grid`` attribute carries a :class:`GridLikelihood`).
:func:`combine_report` adds what each piece of evidence contributes, which pieces conflict, and a
person's override (:class:`ManualAssignment`), kept beside the combined posterior.

Evidence that shares a systematic parameter (optical contrast, the reflectance spectrum and the
Si-line attenuation all depend on the oxide thickness) must not be multiplied as if independent:
each such likelihood is handed over as a :class:`GridLikelihood`, its values on the nodes of one
shared :class:`ParameterGrid` (made once, by :func:`parameter_grid`, and passed to every producer),
and :func:`combine` multiplies them node by node and marginalises the parameter once:
L(N) = sum_g w_g prod_k L_k(N | theta_g).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

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


@dataclass(frozen=True)
class Evidence:
    """One piece of layer evidence: a likelihood over N = 1..N_max and "more".

    ``method`` names it with its published source (shown to the user), ``reason`` says in a
    sentence what was measured and what it implies. ``likelihood`` is the marginal (maximum 1);
    when the evidence depends on a shared parameter, ``grid`` holds it on the parameter's grid and
    :func:`combine` uses that instead (so the parameter is marginalised once).
    """

    method: str
    likelihood: np.ndarray
    reason: str
    grid: GridLikelihood | None = None
    warnings: tuple[str, ...] = ()
    inputs: dict = field(default_factory=dict, compare=False)

    def __post_init__(self) -> None:
        like = _as_array(self.likelihood)
        if like.max() <= 0:
            raise InputError(f"{self.method}: the likelihood is zero for every layer number")
        like = like / like.max()
        like.setflags(write=False)
        object.__setattr__(self, "likelihood", like)

    @classmethod
    def from_grid(cls, method: str, grid: GridLikelihood, reason: str, **kw) -> Evidence:
        return cls(method, grid.likelihood, reason, grid=grid, **kw)

    def to_dict(self) -> dict:
        d = {"method": self.method, "likelihood": self.likelihood.tolist(), "reason": self.reason}
        if self.grid is not None:
            d["shared_parameter"] = self.grid.grid.parameter
        if self.warnings:
            d["warnings"] = list(self.warnings)
        return d


@dataclass(frozen=True)
class ManualAssignment:
    """A person's layer number with the stated reason; it overrides the evidence."""

    layers: int
    reason: str

    def to_dict(self) -> dict:
        return {"layers": self.layers, "reason": self.reason}


@dataclass(frozen=True)
class Contribution:
    """What one piece of evidence adds.

    ``posterior``: the evidence alone (with the prior). ``information_bits``: the Kullback-Leibler
    divergence KL(P_all || P_without) in bits of the combined posterior from the posterior of all
    the other evidence (leave-one-out): how far the final answer moves because of this evidence
    (0 when it changes nothing). None when the rest alone contradicts itself.
    """

    method: str
    posterior: Posterior
    information_bits: float | None


@dataclass(frozen=True)
class Conflict:
    """Two posteriors that are incompatible (``b`` is ``"the rest"`` for one item against all
    others). ``overlap``: the Bhattacharyya coefficient sum_N sqrt(p_a p_b) of their flat-prior
    posteriors; ``best_a``/``best_b`` their most likely N; ``mass_a_on_b``/``mass_b_on_a`` what
    each puts on the other's best N."""

    a: str
    b: str
    overlap: float
    best_a: int
    best_b: int
    mass_a_on_b: float
    mass_b_on_a: float

    @property
    def text(self) -> str:
        return (
            f"{self.a} points to {self.best_a}L, {self.b} to {self.best_b}L "
            f"(overlap {self.overlap:.2f})"
        )


@dataclass(frozen=True)
class CombinedReport:
    """Combined posterior, each evidence's contribution, conflicts and any manual override.

    ``layers`` is the manual layer number when there is one, else the posterior's most likely N;
    ``posterior`` is always the evidence's own combination.
    """

    posterior: Posterior
    contributions: tuple[Contribution, ...]
    conflicts: tuple[Conflict, ...]
    manual: ManualAssignment | None
    warnings: tuple[str, ...]

    @property
    def layers(self) -> int:
        return self.manual.layers if self.manual is not None else self.posterior.layers

    @property
    def assigned_by(self) -> str:
        return "manual" if self.manual is not None else "evidence"

    def to_dict(self) -> dict:
        return {
            "layers": self.layers,
            "assigned_by": self.assigned_by,
            "manual": None if self.manual is None else self.manual.to_dict(),
            "combined": self.posterior.to_dict(),
            "contributions": [
                {
                    "method": c.method,
                    "layers": c.posterior.layers,
                    "probability": c.posterior.probability,
                    "posterior": c.posterior.posterior.tolist(),
                    "information_bits": c.information_bits,
                }
                for c in self.contributions
            ],
            "conflicts": [
                {
                    "a": c.a,
                    "b": c.b,
                    "overlap": c.overlap,
                    "best_a": c.best_a,
                    "best_b": c.best_b,
                    "text": c.text,
                }
                for c in self.conflicts
            ],
            "warnings": list(self.warnings),
        }


CONFLICT_OVERLAP = 0.1
#: Two pieces of evidence that each favour one N (top probability at least this) that disagree on N, each
#: putting less than AMBIGUITY_THRESHOLD on the other's answer, conflict even where the
#: Bhattacharyya overlap of their tails stays above CONFLICT_OVERLAP.
CONFLICT_CONFIDENT = 0.5


def _kl_bits(p: np.ndarray, q: np.ndarray) -> float:
    mask = p > 0
    with np.errstate(divide="ignore"):
        terms = p[mask] * (np.log(p[mask]) - np.log(q[mask]))
    return float(np.sum(terms) / math.log(2.0))


def _conflict(a: str, b: str, pa: np.ndarray, pb: np.ndarray) -> Conflict | None:
    overlap = float(np.sum(np.sqrt(pa * pb)))
    ba, bb = int(np.argmax(pa)), int(np.argmax(pb))
    ma, mb = float(pa[bb]), float(pb[ba])
    if overlap < CONFLICT_OVERLAP:
        return Conflict(a, b, overlap, ba + 1, bb + 1, ma, mb)
    confident = min(float(pa[ba]), float(pb[bb])) >= CONFLICT_CONFIDENT
    if ba != bb and confident and max(ma, mb) < AMBIGUITY_THRESHOLD:
        return Conflict(a, b, overlap, ba + 1, bb + 1, ma, mb)
    return None


def _name(item, i: int) -> str:
    return str(getattr(item, "method", "") or f"evidence {i + 1}")


def combine_report(
    items: Sequence,
    prior=None,
    *,
    max_layers: int | None = None,
    manual: ManualAssignment | None = None,
) -> CombinedReport:
    """The combined posterior of ``items`` (as :func:`combine`), each item's contribution
    (:class:`Contribution`: its own posterior and the leave-one-out KL divergence in bits), and
    the conflicts: an item against the rest, or a pair, whose flat-prior posteriors overlap by
    less than 0.1 (Bhattacharyya coefficient; the mass each puts on the other's best N is
    reported beside it), or that each favour a different N (top probability >= 0.5)
    and put less than 5% on the other's.
    Conflicts are listed, never averaged away. ``manual`` overrides the layer number (its
    reason kept); ``max_layers`` (optional) checks the items' length.
    """
    items = list(items)
    if not items:
        raise InputError("no evidence given")
    post = combine(items, prior)
    if max_layers is not None and post.max_layers != max_layers:
        raise InputError(
            f"the evidence covers N = 1..{post.max_layers} and 'more', not 1..{max_layers}"
        )
    size = post.posterior.size
    base = np.ones(size) if prior is None else _as_array(prior)
    base = base / base.sum()
    names = [_name(x, i) for i, x in enumerate(items)]
    flat = [combine([x]).posterior for x in items]
    contributions = []
    for i, item in enumerate(items):
        rest = items[:i] + items[i + 1 :]
        try:
            without = combine(rest, prior).posterior if rest else base
            info = _kl_bits(post.posterior, without)
        except InputError:
            info = None
        contributions.append(Contribution(names[i], combine([item], prior), info))
    conflicts = []
    if len(items) >= 2:
        for i in range(len(items)):
            rest = items[:i] + items[i + 1 :]
            try:
                rest_post = combine(rest).posterior
            except InputError:
                continue
            c = _conflict(
                names[i], "the rest" if len(rest) > 1 else names[1 - i], flat[i], rest_post
            )
            if c is not None and (len(rest) > 1 or i == 0):
                conflicts.append(c)
        if len(items) > 2:
            for i in range(len(items)):
                for j in range(i + 1, len(items)):
                    c = _conflict(names[i], names[j], flat[i], flat[j])
                    if c is not None:
                        conflicts.append(c)
    warnings = [f"conflicting evidence: {c.text}" for c in conflicts]
    if manual is not None:
        if not isinstance(manual, ManualAssignment):
            raise InputError("a manual assignment needs ManualAssignment(layers, reason)")
        if not (isinstance(manual.layers, (int, np.integer)) and 1 <= manual.layers <= size):
            raise InputError(
                f"manual layer number {manual.layers!r} out of range; accepted: 1..{size - 1}, "
                f"or {size} for more than {size - 1}"
            )
        if not str(manual.reason).strip():
            raise InputError("a manual layer number needs a stated reason (none given)")
        p_manual = float(post.posterior[manual.layers - 1])
        if p_manual < AMBIGUITY_THRESHOLD:
            warnings.append(
                f"the manual {manual.layers}L has only {p_manual:.1%} posterior probability "
                "from the evidence"
            )
    return CombinedReport(post, tuple(contributions), tuple(conflicts), manual, tuple(warnings))
