"""The n,k uncertainty of a layered crystal: a stated, continuous perturbation of its index.

Published n,k of one crystal from different groups disagree by more than their stated errors.
The model keeps the best-suited data as its centre (for the TMDs: Hsu et al. 2019 layer-resolved
n,k for 1-3 layers, blended to Munkhbat et al. 2022 bulk data over 3-6 layers) and turns the
differences of the other published sets from that centre into a Gaussian perturbation:

    n~(N, lambda) = n_centre(N, lambda) + sum_k a_k D_k(N, lambda),   a ~ N(mu, Sigma),

D_k the principal directions (singular vectors times singular values) of the matrix whose rows
are the sets' differences from the centre over (N = 1..6, lambda, Re, Im), divided by sqrt(J)
for J sets. The covariance is thus the mean square of the sets' offsets from the centre: two
sets that agree with each other do not outvote the one they disagree with, they only state how
far from the centre the index may lie. Before calibration mu = 0 and Sigma = I; calibration on
flakes of known N narrows them (:meth:`NkUncertainty.narrowed`). Only the in-plane index is
perturbed (the out-of-plane index barely matters in an illumination cone of NA <= 0.5 on films
of index ~5).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field, replace

import numpy as np

from flakebook.errors import InputError
from flakebook.optics.materials import DataSet, Material

_GRID_STEP_NM = 2.0
_MIN_SHARE = 0.02  # directions whose singular value is below 2% of the largest are dropped
# 1-sigma share of the step from layer-resolved (Hsu et al. 2019) to bulk n,k that a thin flake
# may take: the layer-resolved data are the best-suited centre, bulk-like thin flakes lie at
# 2 sigma (a modelling choice, stated in every description).
LAYER_DIRECTION_SIGMA = 0.5
# Scale of the bulk sets' spread (1: their root-mean-square offset from the bulk centre).
BULK_SPREAD_SCALE = 1.0


def _short_source(ds: DataSet) -> str:
    """'Munkhbat et al. 2022' style name of a data set (for text a user reads)."""
    page = ds.ident.rsplit("/", 1)[-1]
    author = page.split("-")[0]
    import re

    year = re.findall(r"\((\d{4})\)|(\b(?:19|20)\d{2}\b)", ds.reference)
    yr = next((a or b for a, b in year), "")
    return f"{author} et al. {yr}".strip() if author else ds.ident


@dataclass(frozen=True)
class NkUncertainty:
    """Gaussian perturbation of a material's in-plane index (module docstring).

    ``directions``: complex array (K, len(layers), len(wavelength_nm)); row N-1 of a direction
    applies to N layers, the last row to every thicker film. ``mean`` (K,) and ``cov`` (K, K):
    the distribution of the coefficients (0 and I before calibration). ``sources``: the
    published sets whose differences from the centre make the directions.
    """

    material: str
    wavelength_nm: np.ndarray = field(compare=False)
    layers: int
    directions: np.ndarray = field(compare=False)
    mean: np.ndarray = field(compare=False)
    cov: np.ndarray = field(compare=False)
    sources: tuple[str, ...]
    centre: str
    key: str = ""

    @property
    def n_directions(self) -> int:
        return int(self.directions.shape[0])

    def _row(self, layers: int) -> int:
        return min(int(layers), self.layers) - 1

    def rms(self, layers: int) -> tuple[float, float]:
        """RMS over wavelength of the 1-sigma spread of n and of k at ``layers`` layers."""
        d = self.directions[:, self._row(layers), :]  # (K, L)
        chol = np.linalg.cholesky(self.cov + 1e-15 * np.eye(self.n_directions))
        e = np.einsum("kj,kl->jl", chol, d)  # directions of the standardised coefficients
        var_n = np.sum(e.real**2, axis=0)
        var_k = np.sum(e.imag**2, axis=0)
        return float(np.sqrt(var_n.mean())), float(np.sqrt(var_k.mean()))

    def offset(self, coefficients) -> np.ndarray:
        """The index change (len(layers), len(wavelength_nm)) for given coefficients."""
        a = np.asarray(coefficients, float)
        return np.tensordot(a, self.directions, axes=(0, 0))

    def perturbed(self, material: Material, coefficients) -> Material:
        """``material`` with its in-plane index moved by :meth:`offset` (a new Material)."""
        a = np.asarray(coefficients, float)
        if a.shape != (self.n_directions,):
            raise InputError(f"n,k coefficients need {self.n_directions} values, got {a.shape}")
        if not np.any(a):
            return material
        delta = self.offset(a)
        lam = self.wavelength_nm
        tag = ",".join(f"{x:.17g}" for x in a)

        def moved(ds: DataSet, row: int) -> DataSet:
            nk = ds.nk(lam) + delta[row]
            return DataSet(
                ident=f"{ds.ident}~nk[{self.key}:{tag}]",
                reference=ds.reference,
                wavelength_range_nm=(float(lam[0]), float(lam[-1])),
                comment=f"{ds.ident} moved along the n,k uncertainty",
                k_is_zero=False,
                _n=(lam, nk.real.copy()),
                _k=(lam, np.maximum(nk.imag, 0.0)),
            )

        resolved = dict(material.by_layers)
        by_layers = tuple((n, moved(ds, self._row(n))) for n, ds in material.by_layers)
        # The out-of-plane index stays the centre's (layer-resolved sets serve both directions).
        by_e = dict(material.by_layers_extraordinary)
        for n, ds in resolved.items():
            by_e.setdefault(n, ds)
        return replace(
            material,
            ordinary=moved(material.ordinary, self.layers - 1),
            by_layers=by_layers,
            by_layers_extraordinary=tuple(sorted(by_e.items())),
            extraordinary=material.extraordinary or material.ordinary,
        )

    def nodes(self) -> tuple[np.ndarray, np.ndarray]:
        """Coefficient vectors where the model is evaluated: the mean and mean +- each column of
        chol(cov) (shape (2K + 1, K)), and those columns (K, K)."""
        k = self.n_directions
        chol = np.linalg.cholesky(self.cov + 1e-15 * np.eye(k))
        pts = [self.mean]
        for j in range(k):
            pts.append(self.mean + chol[:, j])
            pts.append(self.mean - chol[:, j])
        return np.array(pts), chol

    def narrowed(self, mean, cov) -> NkUncertainty:
        """The same directions with the coefficients' calibrated mean and covariance."""
        mean = np.asarray(mean, float).reshape(self.n_directions)
        cov = np.asarray(cov, float).reshape(self.n_directions, self.n_directions)
        cov = 0.5 * (cov + cov.T)
        tag = ",".join(f"{x:.17g}" for x in np.concatenate([mean, cov.ravel()]))
        return replace(self, mean=mean, cov=cov, key=f"cal[{tag}]")

    @property
    def calibrated(self) -> bool:
        return bool(np.any(self.mean != 0) or not np.allclose(self.cov, np.eye(self.n_directions)))

    def description(self) -> str:
        """One sentence for users: the centre, the sets behind the spread, its size."""
        n1, k1 = self.rms(1)
        nb, kb = self.rms(self.layers)
        state = "after calibration on known flakes" if self.calibrated else "before calibration"
        return (
            f"n,k uncertainty: centre {self.centre}; spread from the differences of "
            f"{', '.join(self.sources[1:])} from {self.sources[0]}, applied at every thickness, as {self.n_directions - 1} Gaussian principal "
            f"directions, and the step from the layer-resolved to the bulk n,k for thin flakes "
            f"({LAYER_DIRECTION_SIGMA:g} of it at 1 sigma); 1-sigma RMS {state}: n {n1:.2f}, k {k1:.2f} at 1L, n {nb:.2f}, "
            f"k {kb:.2f} from {self.layers}L on"
        )

    def to_dict(self) -> dict:
        return {
            "nk_centre": self.centre,
            "nk_sources": list(self.sources),
            "nk_directions": self.n_directions,
            "nk_coefficient_mean": self.mean.tolist(),
            "nk_coefficient_cov": self.cov.tolist(),
            "nk_rms_1l": list(self.rms(1)),
            "nk_rms_bulk": list(self.rms(self.layers)),
            "description": self.description(),
        }


def nk_uncertainty(material: Material) -> NkUncertainty | None:
    """The n,k uncertainty of ``material`` (None when it has no other published sets)."""
    if not material.bulk_alternatives or material.handover_layers is None:
        return None
    return _nk_uncertainty(material)


@functools.lru_cache(maxsize=32)
def _nk_uncertainty(material: Material) -> NkUncertainty:
    top = material.handover_layers[1]
    sets = [o for o, _ in material.bulk_alternatives]
    lo = max(material.wavelength_range_nm()[0], *(s.wavelength_range_nm[0] for s in sets))
    hi = min(material.wavelength_range_nm()[1], *(s.wavelength_range_nm[1] for s in sets))
    lam = np.linspace(lo, hi, int(round((hi - lo) / _GRID_STEP_NM)) + 1)
    bulk = material.ordinary.nk(lam)
    rows = []
    for s in sets:
        # The same index change at every N: published sets of one crystal disagree by about as
        # much at every thickness; layer-resolved and bulk centre differ by physics, not error.
        d = np.repeat((s.nk(lam) - bulk)[None, :], top, axis=0)  # (top, L)
        rows.append(np.concatenate([d.real.ravel(), d.imag.ravel()]))
    mat = np.array(rows) / np.sqrt(len(rows))
    _, sv, vt = np.linalg.svd(mat, full_matrices=False)
    keep = sv > _MIN_SHARE * sv[0]
    half = top * lam.size
    dirs = BULK_SPREAD_SCALE * sv[keep, None] * vt[keep]
    directions = (dirs[:, :half] + 1j * dirs[:, half:]).reshape(-1, top, lam.size)
    # How bulk-like a thin flake's index is: the step from the layer-resolved centre to the bulk
    # set, zero from the last hand-over layer on, with a stated 1-sigma share.
    centre = np.array([material.nk(lam, n) for n in range(1, top + 1)])
    layer_dir = LAYER_DIRECTION_SIGMA * (bulk[None, :] - centre)
    directions = np.concatenate([directions, layer_dir[None]], axis=0)
    directions.setflags(write=False)
    k = directions.shape[0]
    resolved = sorted(n for n, ds in material.by_layers if not ds.ident.startswith("blend:"))
    return NkUncertainty(
        material=material.name,
        wavelength_nm=lam,
        layers=top,
        directions=directions,
        mean=np.zeros(k),
        cov=np.eye(k),
        sources=tuple(_short_source(s) for s in [material.ordinary, *sets]),
        centre=(
            f"{_short_source(dict(material.by_layers)[resolved[0]])} layer-resolved n,k for "
            f"{resolved[0]}-{resolved[-1]}L, blended to {_short_source(material.ordinary)} "
            f"from {material.handover_layers[0]}L to {top}L"
        ),
    )
