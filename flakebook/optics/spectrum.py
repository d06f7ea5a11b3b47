"""Layer evidence from a white-light reflectance-contrast spectrum, with a fit of the oxide.

A spectrometer on the microscope measures dR/R = (R_flake - R_ref)/R_ref versus wavelength (which
is -C in flakebook's convention). For every N the thin-film model is compared with the spectrum on
a grid of oxide thicknesses (Gaussian prior around the nominal value); the likelihood of N
marginalises the oxide, and the oxide's posterior mean and spread are reported for the most likely
N (a calibrated oxide for the contrast likelihood). The model is computed on oxide nodes <= 3 nm
apart and interpolated with a cubic spline (it is smooth in the oxide) to a fine grid.

Model errors (n,k data) are correlated across neighbouring wavelengths: the log-likelihood is
tempered by n_eff / n, with n_eff the number of independent ~20 nm stretches in the spectrum, so
that hundreds of points do not pretend to be hundreds of independent checks. Common practice, no
source.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.special import logsumexp

from flakebook import __version__
from flakebook.errors import InputError
from flakebook.optics.materials import Material
from flakebook.optics.microscope import cone_reflectance
from flakebook.optics.substrate import Hole, Substrate

CORRELATION_NM = 20.0
MAX_POINTS = 300


@dataclass(frozen=True)
class SpectrumLikelihood:
    """Likelihood over N = 1..max_layers and "more" (scaled to max 1), the oxide fit for the
    most likely N (posterior mean and standard deviation, nm), the best-fit oxide for every N,
    and the model dR/R of the most likely N at the (binned) wavelengths used."""

    likelihood: np.ndarray
    log_likelihood: np.ndarray
    max_layers: int
    oxide_nm: float
    oxide_err_nm: float
    best_oxide_nm: np.ndarray
    wavelength_nm: np.ndarray
    model_drr: np.ndarray
    noise: float
    warnings: tuple[str, ...]
    provenance: dict = field(compare=False)


def read_reflectance_contrast(path: str | Path):
    """Read a dR/R spectrum: two or three numeric columns (wavelength_nm, dr_r[, dr_r_err]),
    comma, tab or space separated, an optional header line. Returns arrays (wavelength_nm,
    dr_r, dr_r_err or None). Raises InputError naming the file when it cannot be used."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{p}: cannot read the spectrum ({exc})") from None
    rows = []
    for i, line in enumerate(text.splitlines(), start=1):
        line = line.strip()
        if not line or line.startswith("#"):
            continue
        parts = [x for x in re.split(r"[,;\t ]+", line) if x]
        try:
            rows.append([float(x) for x in parts])
        except ValueError:
            if rows:
                raise InputError(f"{p} line {i}: {line[:40]!r} is not numbers") from None
            continue  # a header line
    if len(rows) < 5:
        raise InputError(f"{p}: a dR/R spectrum needs at least 5 rows of wavelength_nm,dr_r")
    widths = {len(r) for r in rows}
    if len(widths) != 1 or widths.pop() not in (2, 3):
        raise InputError(f"{p}: every row needs 2 or 3 numbers (wavelength_nm, dr_r[, dr_r_err])")
    data = np.array(rows)
    return _validate(data[:, 0], data[:, 1], data[:, 2] if data.shape[1] == 3 else None, str(p))


def _validate(lam, drr, err, name="spectrum"):
    lam = np.asarray(lam, float)
    drr = np.asarray(drr, float)
    if lam.shape != drr.shape or lam.ndim != 1 or lam.size < 5:
        raise InputError(f"{name}: wavelength and dR/R must be 1-d of the same length (>= 5)")
    if not (np.all(np.isfinite(lam)) and np.all(np.isfinite(drr))):
        raise InputError(f"{name}: wavelength and dR/R must be finite numbers")
    if lam.min() < 150 or lam.max() > 3000:
        raise InputError(
            f"{name}: wavelengths {lam.min():g}-{lam.max():g} do not look like nm (eV or cm^-1?); "
            "accepted: wavelength in nm, 150-3000"
        )
    if np.any(np.abs(drr) > 20):
        raise InputError(f"{name}: |dR/R| above 20 is not a reflectance contrast (percent?)")
    order = np.argsort(lam)
    lam, drr = lam[order], drr[order]
    if err is not None:
        err = np.asarray(err, float)[order]
        if not np.all(np.isfinite(err)) or np.any(err < 0):
            raise InputError(f"{name}: dR/R errors must be finite and >= 0")
    return lam, drr, err


def _bin(lam, drr, err):
    """Average down to at most MAX_POINTS points (noise shrinks accordingly)."""
    if lam.size <= MAX_POINTS:
        return lam, drr, err, np.ones(lam.size)
    edges = np.linspace(lam[0], lam[-1] + 1e-9, MAX_POINTS + 1)
    which = np.clip(np.digitize(lam, edges) - 1, 0, MAX_POINTS - 1)
    counts = np.bincount(which, minlength=MAX_POINTS).astype(float)
    keep = counts > 0
    lam_b = (np.bincount(which, lam, MAX_POINTS) / np.maximum(counts, 1))[keep]
    drr_b = (np.bincount(which, drr, MAX_POINTS) / np.maximum(counts, 1))[keep]
    err_b = None
    if err is not None:
        err_b = np.sqrt(np.bincount(which, err**2, MAX_POINTS))[keep] / counts[keep]
    return lam_b, drr_b, err_b, counts[keep]


def reflectance_contrast_likelihood(
    wavelength_nm,
    dr_r,
    dr_r_err=None,
    *,
    material: Material,
    substrate: Substrate,
    na_illumination: float = 0.0,
    max_layers: int = 15,
    oxide_err_nm: float = 10.0,
    model_err: float = 0.01,
    geometry: str = "supported",
    hole: Hole | None = None,
    nk_ensemble: bool = True,
) -> SpectrumLikelihood:
    """Likelihood of N from a measured dR/R spectrum, the oxide marginalised and fitted.

    ``dr_r_err`` None: the noise is estimated from the spectrum itself (scatter of second
    differences). Wavelengths outside the material's data range are left out with a warning.
    ``nk_ensemble``: average over the material's published bulk n,k sets (as the contrast
    likelihood does).
    """
    lam, drr, err = _validate(wavelength_nm, dr_r, dr_r_err)
    if not 1 <= int(max_layers) < 100:
        raise InputError(f"max_layers {max_layers!r}: accepted 1 to 99")
    t0 = substrate.oxide_nm
    if t0 is None:
        raise InputError(f"substrate {substrate.spec} has no SiO2 film to fit")
    warnings = []
    variants = material.variants() if nk_ensemble else [material]
    lo, hi = material.wavelength_range_nm()
    for v in variants:
        vlo, vhi = v.wavelength_range_nm()
        lo, hi = max(lo, vlo), min(hi, vhi)
    for f in substrate.films:
        flo, fhi = f.material.wavelength_range_nm()
        lo, hi = max(lo, flo), min(hi, fhi)
    blo, bhi = substrate.base.wavelength_range_nm()
    lo, hi = max(lo, blo), min(hi, bhi)
    inside = (lam >= lo) & (lam <= hi)
    if inside.sum() < 5:
        raise InputError(
            f"the spectrum ({lam.min():g}-{lam.max():g} nm) barely overlaps the optical data "
            f"({lo:g}-{hi:g} nm); accepted: a spectrum inside that range"
        )
    if not inside.all():
        warnings.append(f"points outside {lo:g}-{hi:g} nm (the optical data) left out")
    lam, drr = lam[inside], drr[inside]
    err = None if err is None else err[inside]
    lam, drr, err, counts = _bin(lam, drr, err)
    if err is None:
        d2 = np.diff(drr, 2)
        noise = float(1.4826 * np.median(np.abs(d2 - np.median(d2))) / math.sqrt(6.0))
        noise = max(noise, 1e-4)
        err = np.full(lam.size, noise)
        warnings.append(f"no dR/R errors given: noise estimated as {noise:.2g} from the scatter")
    else:
        noise = float(np.median(err))
    var = err**2 + model_err**2
    n_eff = max(1.0, (lam[-1] - lam[0]) / CORRELATION_NM)
    temper = min(1.0, n_eff / lam.size)

    from flakebook.optics.layers import _model_layers, _oxide_model_nodes

    layers, more_w = _model_layers(int(max_layers))
    # The model on coarse oxide nodes, a cubic spline to a fine grid for the likelihood (the
    # model is smooth in the oxide; the likelihood can be sharper than 1 nm).
    if oxide_err_nm > 0:
        nodes, (grid_t, grid_w) = _oxide_model_nodes(t0, oxide_err_nm)
    else:
        nodes = grid_t = np.array([t0])
        grid_w = np.array([1.0])
    common = {"na": na_illumination, "n_angles": 8}
    coarse = np.empty((len(variants), nodes.size, layers.size, lam.size))
    for k, t in enumerate(nodes):
        sub = substrate.with_oxide(t)
        r_ref = cone_reflectance(None, (), sub, lam, **common)[0]
        for v, mat in enumerate(variants):
            r_fl = cone_reflectance(mat, layers, sub, lam, geometry=geometry, hole=hole, **common)
            coarse[v, k] = r_fl / r_ref[None, :] - 1.0
    spline = CubicSpline(nodes, coarse, axis=1) if nodes.size > 1 else None
    ll_v = np.empty((len(variants), grid_t.size, layers.size))
    for start in range(0, grid_t.size, 32):
        block = grid_t[start : start + 32]
        model = coarse if spline is None else spline(block)
        ll_v[:, start : start + block.size] = (
            -0.5 * temper * np.sum((drr - model) ** 2 / var, axis=-1)
        )
    # Published n,k sets of the same crystal disagree: average over them (equal weights).
    ll = logsumexp(ll_v, axis=0) - math.log(len(variants))
    with np.errstate(divide="ignore"):
        log_n = logsumexp(ll + np.log(grid_w)[:, None], axis=0)
        log_more = logsumexp(log_n + np.log(more_w))
    max_layers = int(max_layers)
    log_like = np.concatenate([log_n[:max_layers], [log_more]])
    like = np.exp(log_like - log_like.max())
    best = int(np.argmax(log_like[:max_layers])) if np.argmax(log_like) < max_layers else None
    col = best if best is not None else int(np.argmax(log_n))
    post_t = ll[:, col] + np.log(grid_w)
    post_t = np.exp(post_t - post_t.max())
    post_t /= post_t.sum()
    t_mean = float(np.sum(post_t * grid_t))
    t_sd = float(math.sqrt(max(np.sum(post_t * (grid_t - t_mean) ** 2), 0.0)))
    t_sd = max(t_sd, 0.5 * (grid_t[1] - grid_t[0]) if grid_t.size > 1 else 0.0)
    k_best = int(np.argmax(ll[:, col]))
    sub = substrate.with_oxide(grid_t[k_best])
    r_ref = cone_reflectance(None, (), sub, lam, na=na_illumination, n_angles=8)[0]
    r_fl = cone_reflectance(
        material,
        [layers[col]],
        sub,
        lam,
        na=na_illumination,
        n_angles=8,
        geometry=geometry,
        hole=hole,
    )[0]
    model_best = r_fl / r_ref - 1.0
    chi2 = float(np.sum((drr - model_best) ** 2 / var))
    if chi2 / lam.size > 9.0:
        warnings.append(
            f"the best model leaves large residuals (chi-square per point {chi2 / lam.size:.1f}): "
            "check the material, the substrate and the reference spot"
        )
    like.setflags(write=False)
    return SpectrumLikelihood(
        likelihood=like,
        log_likelihood=log_like,
        max_layers=max_layers,
        oxide_nm=t_mean,
        oxide_err_nm=t_sd,
        best_oxide_nm=grid_t[np.argmax(ll, axis=0)][:max_layers],
        wavelength_nm=lam,
        model_drr=model_best,
        noise=noise,
        warnings=tuple(warnings),
        provenance={
            "flakebook_version": __version__,
            "method": "white-light reflectance contrast dR/R against the thin-film model, oxide "
            "marginalised on a fine grid (cubic spline through model nodes <= 3 nm apart), "
            "log-likelihood tempered for correlated model error",
            "material": material.name,
            "data_sets": material.data_set_text,
            "reference": material.reference,
            "substrate": substrate.spec,
            "na_illumination": na_illumination,
            "oxide_prior_nm": [t0, oxide_err_nm],
            "model_err": model_err,
            "tempering": temper,
            "nk_data_sets": [v.data_set_text for v in variants],
        },
    )
