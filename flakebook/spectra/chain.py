"""Linear chain model of the interlayer shear and breathing modes of a layered crystal.

N rigid layers of mass per area ``mu`` coupled to their nearest neighbours by a force constant
per area ``K`` (N/m^3), free at both ends. The dynamical matrix is (K/mu) times the tridiagonal
matrix with diagonal (1, 2, ..., 2, 1) and off-diagonal -1; its eigenvalues are
w_k^2 = (4K/mu) sin^2(k pi / 2N), k = 0..N-1 (k = 0 the rigid translation). The highest branch
is w_bulk cos(pi/2N), the lowest non-zero one w_bulk sin(pi/2N), with w_bulk = sqrt(4K/mu) the
bulk-like (zone-boundary) frequency. The shear modes use the in-plane constant, the breathing
modes the out-of-plane one. Frequencies are in cm^-1 (w / (2 pi c)).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from flakebook.errors import InputError

ATOMIC_MASS_KG = 1.66053906660e-27  # CODATA 2018
SPEED_OF_LIGHT_CM_S = 2.99792458e10  # exact (SI definition)


def mass_per_area(formula_mass_u: float, a_angstrom: float) -> float:
    """Mass per area (kg/m^2) of one layer of a hexagonal crystal: one formula unit per
    in-plane cell of area (sqrt(3)/2) a^2."""
    if not (formula_mass_u > 0 and a_angstrom > 0):
        raise InputError(
            f"formula mass and lattice constant must be > 0 (got {formula_mass_u!r} u, "
            f"{a_angstrom!r} Angstrom)"
        )
    area = math.sqrt(3.0) / 2.0 * (a_angstrom * 1e-10) ** 2
    return formula_mass_u * ATOMIC_MASS_KG / area


def bulk_frequency_cm1(force_constant_n_m3: float, mass_per_area_kg_m2: float) -> float:
    """w_bulk = sqrt(4 K / mu), in cm^-1."""
    if not (force_constant_n_m3 > 0 and mass_per_area_kg_m2 > 0):
        raise InputError("the force constant and the mass per area must be > 0")
    omega = math.sqrt(4.0 * force_constant_n_m3 / mass_per_area_kg_m2)
    return omega / (2.0 * math.pi * SPEED_OF_LIGHT_CM_S)


def force_constant_n_m3(bulk_cm1: float, mass_per_area_kg_m2: float) -> float:
    """The force constant per area K = mu w_bulk^2 / 4 (N/m^3) from w_bulk in cm^-1."""
    if not (bulk_cm1 > 0 and mass_per_area_kg_m2 > 0):
        raise InputError("the bulk frequency and the mass per area must be > 0")
    omega = 2.0 * math.pi * SPEED_OF_LIGHT_CM_S * bulk_cm1
    return mass_per_area_kg_m2 * omega**2 / 4.0


def _layers_array(layers) -> np.ndarray:
    n = np.asarray(layers)
    if n.size == 0 or not np.all(np.isfinite(n)) or np.any(n < 1) or np.any(n != np.round(n)):
        raise InputError(f"layer numbers must be integers >= 1 (got {layers!r})")
    return n.astype(float)


def highest_shear_cm1(layers, bulk_cm1: float) -> np.ndarray:
    """w_bulk cos(pi / 2N) for each N (0 for N = 1: a single layer has no shear mode)."""
    n = _layers_array(layers)
    out = bulk_cm1 * np.cos(np.pi / (2.0 * n))
    return np.where(n == 1, 0.0, out)


def lowest_breathing_cm1(layers, bulk_cm1: float) -> np.ndarray:
    """w_bulk sin(pi / 2N) for each N (0 for N = 1: a single layer has no breathing mode)."""
    n = _layers_array(layers)
    out = bulk_cm1 * np.sin(np.pi / (2.0 * n))
    return np.where(n == 1, 0.0, out)


def dynamical_matrix(layers: int, bulk_cm1: float) -> np.ndarray:
    """The chain's dynamical matrix in (cm^-1)^2: (w_bulk^2 / 4) tridiag(-1; 1,2,...,2,1; -1)."""
    n = int(_layers_array([layers])[0])
    d = np.full(n, 2.0)
    d[0] = d[-1] = 1.0
    if n == 1:
        d[0] = 0.0
    m = np.diag(d) - np.diag(np.ones(n - 1), 1) - np.diag(np.ones(n - 1), -1)
    return (bulk_cm1**2 / 4.0) * m


def chain_branches_cm1(layers: int, bulk_cm1: float) -> np.ndarray:
    """All N - 1 non-zero branch frequencies of an N-layer chain (ascending), from the
    eigenvalues of :func:`dynamical_matrix` (numpy.linalg.eigvalsh)."""
    ev = np.linalg.eigvalsh(dynamical_matrix(layers, bulk_cm1))
    w = np.sqrt(np.clip(ev, 0.0, None))
    return np.sort(w)[1:]


@dataclass(frozen=True)
class ChainFit:
    """Bulk frequency of one branch fitted to flakes of known N."""

    branch: str  # "shear" or "breathing"
    bulk_cm1: float
    bulk_err_cm1: float
    n_flakes: int
    rms_residual_cm1: float


def fit_bulk_frequency(
    branch: str,
    layers: Sequence[int],
    center_cm1: Sequence[float],
    center_err_cm1: Sequence[float],
) -> ChainFit:
    """Weighted least-squares w_bulk from (N, w) pairs of flakes of known N (N >= 2).

    The model is w = w_bulk f(N), f = cos(pi/2N) (shear) or sin(pi/2N) (breathing). The error
    of w_bulk is the weighted formal error, inflated by the reduced chi-square when the scatter
    is larger than the stated errors.
    """
    if branch not in ("shear", "breathing"):
        raise InputError(f"branch {branch!r} unknown; accepted: 'shear', 'breathing'")
    n = _layers_array(layers)
    w = np.asarray(center_cm1, dtype=float)
    e = np.asarray(center_err_cm1, dtype=float)
    if not (n.shape == w.shape == e.shape) or n.ndim != 1:
        raise InputError("layers, centres and errors must be lists of one length")
    if np.any(n < 2):
        raise InputError("a chain fit needs flakes of 2 layers or more (a monolayer has no mode)")
    if not (np.all(np.isfinite(w)) and np.all(w > 0) and np.all(np.isfinite(e)) and np.all(e > 0)):
        raise InputError("centres must be > 0 and their errors finite and > 0 (cm^-1)")
    f = highest_shear_cm1(n, 1.0) if branch == "shear" else lowest_breathing_cm1(n, 1.0)
    wt = 1.0 / e**2
    bulk = float(np.sum(wt * f * w) / np.sum(wt * f * f))
    err = float(1.0 / math.sqrt(np.sum(wt * f * f)))
    resid = w - bulk * f
    if n.size > 1:
        chi2 = float(np.sum(wt * resid**2) / (n.size - 1))
        err *= math.sqrt(max(chi2, 1.0))
    return ChainFit(branch, bulk, err, int(n.size), float(np.sqrt(np.mean(resid**2))))
