"""Layer-number likelihood from measured optical contrast.

One joint likelihood over N = 1..N_max and a "more" bin (the likelihood averaged over
N_max+1..100), from all channels together. The measured contrast in channel c is modelled as

    C_c = s * M_c(N; t_ox, NA, a) + e_c,

with M the thin-film model (flakebook.optics.microscope), s the contrast scale (stray light and
flare compress contrast; 1 for an ideal camera), a the coefficients of the n,k uncertainty
(flakebook.optics.nkmodel: the spread of published n,k around the layer-resolved centre), and
e_c Gaussian noise with the measured error plus a small model error for what the n,k
uncertainty does not cover (camera sensitivities, lamp spectrum). The shared systematic
parameters are marginalised jointly for all channels, never per channel: the oxide thickness on
a grid (a shared :class:`flakebook.evidence.ParameterGrid` when given, so that other oxide-
dependent evidence marginalises it once with this), the NA by Gauss-Hermite quadrature, and the
n,k coefficients and the contrast scale analytically: the model is linear in a to second order
(central differences at +-1 sigma), so both add low-rank covariance shared by the channels.

When the result is ambiguous, ``decider`` says what would settle it: another camera channel, a
narrow bandpass filter at a named wavelength, a calibrated oxide, or another kind of evidence.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field, replace

import numpy as np

from flakebook import __version__, evidence
from flakebook.errors import InputError, check_cancel
from flakebook.optics import _disk_cache
from flakebook.optics._layer_rows import _CHI2_999, _chi2_upper_1e3, flat_posteriors  # noqa: F401
from flakebook.optics.layers_explain import (
    ContrastCurve,
    decider,
    model_contrast_curve,
    oxide_sensitivity,
    separation_needed_rows,
)
from flakebook.optics.materials import Material
from flakebook.optics.microscope import Microscope, channel_contrast
from flakebook.optics.nkmodel import NkUncertainty, nk_uncertainty
from flakebook.optics.substrate import Hole, Substrate

__all__ = [
    "ContrastCurve",
    "LayerLikelihood",
    "contrast_err_from_pixels",
    "layer_likelihood",
    "layer_likelihoods",
    "model_contrast_curve",
]

N_MORE_MAX = 100  # the "more" bin averages N_max+1..N_MORE_MAX
DEFAULT_MODEL_ERR = 0.005
DEFAULT_MODEL_REL_ERR = 0.02
DEFAULT_THICKNESS_SCALE_ERR = 0.0
_VAR_FLOOR = 1e-8  # (1e-4)^2: keeps an exact measurement with no model error finite


@dataclass(frozen=True)
class LayerLikelihood:
    """Likelihood over N = 1..max_layers plus "more" (last entry), scaled to a maximum of 1.

    ``model_contrast`` and ``residuals`` have shape (max_layers, len(channels)): the model
    contrast (times the contrast scale) at the nominal oxide and NA, and the normalised residual
    (measured - model) / total error. ``grid`` (when an oxide grid was given) holds
    log L(N | oxide node) on that grid, every other nuisance marginalised. ``decider`` says what would settle an ambiguity (empty when
    there is none).
    """

    likelihood: np.ndarray
    log_likelihood: np.ndarray
    max_layers: int
    channels: tuple[str, ...]
    contrast: np.ndarray
    contrast_err: np.ndarray
    model_contrast: np.ndarray
    residuals: np.ndarray
    decider: str
    warnings: tuple[str, ...]
    provenance: dict = field(compare=False)
    grid: evidence.GridLikelihood | None = field(default=None, compare=False)
    _posterior: evidence.Posterior | None = field(default=None, compare=False, repr=False)

    def posterior(self) -> evidence.Posterior:
        """The posterior with a flat prior (flakebook.evidence.combine)."""
        if self._posterior is not None:
            return self._posterior
        return evidence.combine([self])

    def to_dict(self) -> dict:
        post = self.posterior()
        return {
            "layers": post.layers,
            "probability": post.probability,
            "ambiguous_with": list(post.ambiguous_with),
            "likelihood": self.likelihood.tolist(),
            "posterior": post.posterior.tolist(),
            "channels": list(self.channels),
            "residuals": {c: self.residuals[:, j].tolist() for j, c in enumerate(self.channels)},
            "decider": self.decider,
            "warnings": list(self.warnings),
            "provenance": self.provenance,
        }


def contrast_err_from_pixels(
    pixel_std: float, n_pixels: int, correlation_length_px: float = 0.0
) -> float:
    """Standard error of a region's mean contrast from its pixel scatter.

    Pixel noise is spatially correlated (demosaicing, optics blur, compression). For a Gaussian
    correlation of length l px, the mean over n pixels has the variance of n_eff = n / (2 pi l^2)
    independent ones (never more than n). Common practice, no source.
    """
    if not (pixel_std >= 0 and n_pixels >= 1 and correlation_length_px >= 0):
        raise InputError("pixel_std >= 0, n_pixels >= 1 and correlation_length_px >= 0 required")
    cell = max(1.0, 2.0 * math.pi * correlation_length_px**2)
    n_eff = max(1.0, n_pixels / cell)
    return float(pixel_std / math.sqrt(n_eff))


def _gh_nodes(center: float, sigma: float, n: int, lower: float | None = None):
    if sigma <= 0:
        return np.array([center]), np.array([1.0])
    x, w = np.polynomial.hermite.hermgauss(n)
    t = center + math.sqrt(2.0) * sigma * x
    if lower is not None:
        t = np.maximum(t, lower)
    return t, w / w.sum()


def _oxide_grid(center: float, sigma: float, spacing_nm: float = 2.0, max_nodes: int = 121):
    """Uniform grid over +-3 sigma (an odd number of nodes, the centre included) with Gaussian
    weights. Contrast of thick flakes swings by several hundredths per nm of oxide, so the
    likelihood in oxide thickness is sharp and a few Gauss-Hermite nodes would miss its peak."""
    if sigma <= 0:
        return np.array([center]), np.array([1.0])
    half = int(np.clip(np.ceil(3.0 * sigma / spacing_nm), 3, (max_nodes - 1) // 2))
    t = center + np.linspace(-3.0 * sigma, 3.0 * sigma, 2 * half + 1)
    w = np.exp(-0.5 * ((t - center) / sigma) ** 2)
    keep = t >= 0
    return t[keep], w[keep] / w[keep].sum()


def _oxide_model_nodes(center: float, sigma: float) -> tuple[np.ndarray, np.ndarray]:
    """Where the model is computed (coarse, <= 3 nm apart, one node beyond +-3 sigma on each
    side) and where the likelihood is evaluated (fine, <= 0.75 nm and sigma/4 apart): model contrast is a
    smooth function of the oxide thickness (fringes ~100-200 nm apart), so a cubic spline
    through the coarse nodes is exact to far below the model error, while the likelihood in
    oxide can be narrower than 1 nm for thick flakes."""
    h = min(3.0, sigma)
    n_half = int(np.ceil(3.0 * sigma / h)) + 1
    coarse = center + h * np.arange(-n_half, n_half + 1)
    coarse = coarse[coarse >= 0]
    fine, w = _oxide_grid(center, sigma, spacing_nm=min(0.75, sigma / 4.0), max_nodes=1201)
    return coarse, np.stack([fine, w])


def _coarse_nodes(lo: float, hi: float) -> np.ndarray:
    """Model nodes <= 3 nm apart covering [lo, hi] with one node beyond each end."""
    n = max(int(np.ceil((hi - lo) / 3.0)), 1)
    h = (hi - lo) / n if hi > lo else 3.0
    out = lo + h * np.arange(-1, n + 2)
    return out[out >= 0]


def _model_layers(max_layers: int) -> tuple[np.ndarray, np.ndarray]:
    """Layer numbers the model is evaluated at, and each one's weight in the "more" bin.

    Every N up to max(20, max_layers + 5), then every 5th up to 100; the "more" bin is the
    average over N_max+1..100, each sampled N standing for the integers up to the next one.
    """
    top = min(max(20, max_layers + 5), N_MORE_MAX)
    layers = np.concatenate([np.arange(1, top + 1), np.arange(top + 5, N_MORE_MAX + 1, 5)])
    nxt = np.append(layers[1:], N_MORE_MAX + 1)
    w = np.where(layers > max_layers, nxt - layers, 0).astype(float)
    return layers, w / w.sum()


def _check_inputs(contrast, contrast_err, microscope, saturated):
    if not isinstance(contrast, dict) or not contrast:
        raise InputError(
            "measured contrast must name its channels, e.g. {'g': 0.31}; accepted channels: "
            + ", ".join(microscope.channel_names)
        )
    names = microscope.channel_names
    bad = [c for c in contrast if c not in names]
    if bad:
        raise InputError(
            f"contrast given for channel(s) {', '.join(map(str, bad))} that this microscope lacks; "
            f"accepted: {', '.join(names)}"
        )
    err = dict(contrast_err or {})
    bad = [c for c in err if c not in contrast]
    if bad:
        raise InputError(f"contrast error given for {', '.join(bad)} without a contrast value")
    use = [c for c in names if c in contrast and c not in set(saturated or ())]
    if not use:
        raise InputError("every channel with a contrast value is saturated: nothing to compare")
    vals, errs = [], []
    for c in use:
        v, e = contrast[c], err.get(c, 0.0)
        try:
            v, e = float(v), float(e)
        except (TypeError, ValueError):
            raise InputError(f"contrast of channel {c}: {contrast[c]!r} is not a number") from None
        if not math.isfinite(v) or abs(v) > 50:
            raise InputError(f"contrast {v!r} in channel {c} is not plausible; accepted: |C| < 50")
        if not math.isfinite(e) or e < 0:
            raise InputError(f"contrast error {e!r} in channel {c}: accepted a number >= 0")
        if v > 1.0 + max(5.0 * e, 0.25):
            raise InputError(
                f"contrast {v:g} in channel {c} is impossible: C = (R_reference - "
                "R_flake)/R_reference cannot exceed 1 (is the dark offset subtracted, or the contrast in percent?); "
                "accepted: C <= 1"
            )
        vals.append(v)
        errs.append(e)
    return tuple(use), np.array(vals), np.array(errs)


@functools.lru_cache(maxsize=256)
def _table(material, substrate, microscope, geometry, hole, t, na, f, layers) -> np.ndarray:
    sub = substrate if t is None else substrate.with_oxide(t)
    mic = replace(microscope, na_illumination=float(na))
    mat = (
        material if f == 1.0 else replace(material, layer_spacing_nm=material.layer_spacing_nm * f)
    )
    # Kept on disk between runs under a key of everything that enters (optics/_disk_cache.py).
    key = _disk_cache.table_key("contrast-table", mat, layers, sub, mic, geometry, hole)
    got = _disk_cache.load(key)
    if got is not None:
        return got
    out = channel_contrast(mat, layers, sub, mic, geometry, hole).contrast
    _disk_cache.store(key, out)
    return out


def _model_tables(
    materials,
    substrate,
    microscope,
    geometry,
    hole,
    oxide_nodes,
    na_nodes,
    f_nodes,
    layers,
    progress=None,
    cancel=None,
) -> np.ndarray:
    """Model contrast, shape (len(materials), K_ox, K_na * K_f, N, C_all); cached per node."""
    lay = tuple(int(n) for n in layers)
    jobs = [
        (m, t, na, f) for m in materials for t in oxide_nodes for na in na_nodes for f in f_nodes
    ]
    out = []
    for k, (m, t, na, f) in enumerate(jobs):
        check_cancel(cancel)
        out.append(
            _table(
                m,
                substrate,
                microscope,
                geometry,
                hole,
                None if t is None else float(t),
                float(na),
                float(f),
                lay,
            )
        )
        if progress is not None:
            progress((k + 1) / len(jobs), "contrast model tables")
    arr = np.array(out)
    return arr.reshape(
        len(materials), len(oxide_nodes), len(na_nodes) * len(f_nodes), *arr.shape[1:]
    )


def _moments(material, unc: NkUncertainty | None, tables_args: dict):
    """Mean model and low-rank covariance factor of the n,k uncertainty.

    Returns mean (K_ox, K_v, N, C_all) and factor U (K_ox, K_v, N, C_all, R) with
    cov = U U^T: the model to second order in the coefficients (central differences at
    +-1 sigma along each column of chol(cov_a)), mean = M(mu) + sum_k h_k / 2,
    cov = sum_k g_k g_k^T + h_k h_k^T / 2."""
    if unc is None:
        t = _model_tables([material], **tables_args)
        return t[0], np.zeros((*t.shape[1:], 0))
    pts, _ = unc.nodes()
    mats = [unc.perturbed(material, a) for a in pts]
    t = _model_tables(mats, **tables_args)
    m0, plus, minus = t[0], t[1::2], t[2::2]
    g = 0.5 * (plus - minus)
    h = plus + minus - 2.0 * m0
    mean = m0 + 0.5 * np.sum(h, axis=0)
    u = np.concatenate([g, h / math.sqrt(2.0)], axis=0)
    return mean, np.moveaxis(u, 0, -1)


def _mvn_loglike(d: np.ndarray, cov: np.ndarray, extra_diag=None) -> tuple[np.ndarray, np.ndarray]:
    """log N(d | 0, cov + diag(extra_diag)) and chi-square over leading axes (C small).

    ``cov`` (..., C, C) and ``extra_diag`` (..., C) broadcast against ``d`` (..., C); the sum is
    never formed as one array (a Cholesky factorisation written out per element)."""
    c = d.shape[-1]
    lmat = [[None] * c for _ in range(c)]
    logdet = 0.0
    for i in range(c):
        for j in range(i + 1):
            s = cov[..., i, j]
            if i == j and extra_diag is not None:
                s = s + extra_diag[..., i]
            for k in range(j):
                s = s - lmat[i][k] * lmat[j][k]
            if i == j:
                lmat[i][i] = np.sqrt(np.maximum(s, 1e-300))
                logdet = logdet + 2.0 * np.log(lmat[i][i])
            else:
                lmat[i][j] = s / lmat[j][j]
    y = []
    chi2 = 0.0
    for i in range(c):
        v = d[..., i]
        for k in range(i):
            v = v - lmat[i][k] * y[k]
        v = v / lmat[i][i]
        y.append(v)
        chi2 = chi2 + v * v
    return -0.5 * (chi2 + logdet + c * math.log(2.0 * math.pi)), chi2


def _calibration_options(calibration, substrate, oxide_err_nm, contrast_scale, contrast_scale_err):
    from flakebook.optics.calibration import LayerCalibration

    if not isinstance(calibration, LayerCalibration):
        raise InputError("calibration= takes a LayerCalibration (flakebook.optics.calibration)")
    if substrate.oxide_nm is None:
        raise InputError(f"a calibration sets the oxide, but substrate {substrate.spec} has none")
    clash = []
    if oxide_err_nm not in (0.0, calibration.oxide_err_nm):
        clash.append("the oxide error")
    if contrast_scale != 1.0 and contrast_scale != calibration.contrast_scale:
        clash.append("the contrast scale")
    if contrast_scale_err not in (0.0, calibration.contrast_scale_err):
        clash.append("the contrast-scale error")
    if clash:
        raise InputError(
            f"{' and '.join(clash)} given beside a calibration that sets them; accepted: leave "
            "them out (the calibration's values are used)"
        )
    return (
        substrate.with_oxide(calibration.oxide_nm),
        calibration.oxide_err_nm,
        calibration.contrast_scale,
        calibration.contrast_scale_err,
    )


def layer_likelihood(
    contrast: dict[str, float],
    contrast_err: dict[str, float] | None = None,
    *,
    material: Material,
    substrate: Substrate,
    microscope: Microscope,
    max_layers: int = 15,
    oxide_err_nm: float = 0.0,
    na_err: float = 0.0,
    contrast_scale: float = 1.0,
    contrast_scale_err: float = 0.0,
    thickness_scale_err: float = DEFAULT_THICKNESS_SCALE_ERR,
    model_err: float = DEFAULT_MODEL_ERR,
    model_rel_err: float = DEFAULT_MODEL_REL_ERR,
    geometry: str = "supported",
    hole: Hole | None = None,
    saturated: tuple[str, ...] = (),
    nk_ensemble: bool = True,
    oxide_grid: evidence.ParameterGrid | None = None,
    calibration=None,
    explain: bool = True,
    progress=None,
    cancel=None,
) -> LayerLikelihood:
    """Likelihood of N = 1..max_layers and "more" from measured channel contrast.

    Parameters
    ----------
    contrast, contrast_err:
        Measured contrast per channel name (C = (R_reference - R_flake)/R_reference, from
        intensities after the dark offset is subtracted) and its standard error (0 or missing: exact apart from the model error).
    material, substrate, microscope, geometry, hole:
        The sample and microscope (``flakebook.optics.microscope.channel_contrast``).
    oxide_err_nm, na_err, contrast_scale, contrast_scale_err:
        Shared systematic parameters and their standard deviations, marginalised jointly.
    oxide_grid:
        A shared :class:`flakebook.evidence.ParameterGrid` of ``oxide_nm``: the oxide prior is
        its nodes and weights (instead of oxide_err_nm), and the result's ``grid`` holds
        log L(N | node) for :func:`flakebook.evidence.combine`.
    calibration:
        A :class:`flakebook.optics.calibration.LayerCalibration`: its oxide, oxide error,
        contrast scale and narrowed n,k uncertainty replace the defaults (options given beside it
        that contradict it are refused).
    model_err, model_rel_err:
        Model error per channel beyond the n,k uncertainty: absolute, and relative to the model.
    thickness_scale_err:
        Relative uncertainty of the flake's optical thickness, marginalised (Gauss-Hermite).
    nk_ensemble:
        Marginalise over the material's n,k uncertainty (flakebook.optics.nkmodel); False uses
        the centre data alone.
    saturated:
        Channels to leave out (saturated pixels); each gives a warning.
    explain:
        Work out ``decider`` text when the result is ambiguous.
    progress, cancel:
        ``progress(fraction, text)`` and a ``threading.Event``; the first call for a sample and
        microscope builds the model tables (a second or two), later calls reuse them.
    """
    return layer_likelihoods(
        [contrast],
        [contrast_err],
        material=material,
        substrate=substrate,
        microscope=microscope,
        max_layers=max_layers,
        oxide_err_nm=oxide_err_nm,
        na_err=na_err,
        contrast_scale=contrast_scale,
        contrast_scale_err=contrast_scale_err,
        thickness_scale_err=thickness_scale_err,
        model_err=model_err,
        model_rel_err=model_rel_err,
        geometry=geometry,
        hole=hole,
        saturated=saturated,
        nk_ensemble=nk_ensemble,
        oxide_grid=oxide_grid,
        calibration=calibration,
        explain=explain,
        progress=progress,
        cancel=cancel,
    )[0]


def layer_likelihoods(
    contrasts,
    contrast_errs=None,
    *,
    material: Material,
    substrate: Substrate,
    microscope: Microscope,
    max_layers: int = 15,
    oxide_err_nm: float = 0.0,
    na_err: float = 0.0,
    contrast_scale: float = 1.0,
    contrast_scale_err: float = 0.0,
    thickness_scale_err: float = DEFAULT_THICKNESS_SCALE_ERR,
    model_err: float = DEFAULT_MODEL_ERR,
    model_rel_err: float = DEFAULT_MODEL_REL_ERR,
    geometry: str = "supported",
    hole: Hole | None = None,
    saturated: tuple[str, ...] = (),
    nk_ensemble: bool = True,
    oxide_grid: evidence.ParameterGrid | None = None,
    calibration=None,
    explain: bool = True,
    progress=None,
    cancel=None,
) -> list[LayerLikelihood]:
    """:func:`layer_likelihood` of many measurements at once (same options), vectorised over
    the measurements: ``contrasts`` a sequence of per-channel dicts, ``contrast_errs`` a
    sequence of dicts or None. Returns one LayerLikelihood per measurement, in order."""
    if not isinstance(max_layers, int | np.integer) or not 1 <= int(max_layers) < N_MORE_MAX:
        raise InputError(f"--max-layers {max_layers!r}: accepted a whole number from 1 to 99")
    max_layers = int(max_layers)
    for name, v in (
        ("--oxide-err-nm", oxide_err_nm),
        ("na_err", na_err),
        ("contrast_scale_err", contrast_scale_err),
        ("thickness_scale_err", thickness_scale_err),
        ("model_err", model_err),
        ("model_rel_err", model_rel_err),
    ):
        if not (math.isfinite(v) and v >= 0):
            raise InputError(f"{name} {v!r}: accepted a number >= 0")
    if not (math.isfinite(contrast_scale) and contrast_scale > 0):
        raise InputError(f"contrast scale {contrast_scale!r}: accepted a positive number")
    contrasts = list(contrasts)
    errs_in = [None] * len(contrasts) if contrast_errs is None else list(contrast_errs)
    if len(errs_in) != len(contrasts):
        raise InputError("one contrast-error entry per measurement is needed (or none at all)")
    unc = nk_uncertainty(material) if nk_ensemble else None
    if calibration is not None:
        substrate, oxide_err_nm, contrast_scale, contrast_scale_err = _calibration_options(
            calibration, substrate, oxide_err_nm, contrast_scale, contrast_scale_err
        )
        if nk_ensemble:
            unc = calibration.nk_model(material)
    t0 = substrate.oxide_nm
    if oxide_grid is not None:
        if not isinstance(oxide_grid, evidence.ParameterGrid) or oxide_grid.parameter != "oxide_nm":
            raise InputError(
                "oxide_grid must be a ParameterGrid of 'oxide_nm' (evidence.parameter_grid)"
            )
        if t0 is None:
            raise InputError(f"an oxide grid was given but substrate {substrate.spec} has no SiO2")
        nodes = np.asarray(oxide_grid.nodes, float)
        sd = float(
            np.sqrt(np.sum(oxide_grid.weights * (nodes - np.sum(oxide_grid.weights * nodes)) ** 2))
        )
        if oxide_err_nm > 0 and abs(sd - oxide_err_nm) > 0.1 * oxide_err_nm + 0.05:
            raise InputError(
                f"--oxide-err-nm {oxide_err_nm:g} contradicts the shared oxide grid (spread "
                f"{sd:.2g} nm); accepted: the grid alone, or an error that matches it"
            )
        oxide_err_nm = sd
        ox_nodes = (
            _coarse_nodes(float(nodes.min()), float(nodes.max())) if nodes.size > 1 else nodes
        )
        ox_fine, ox_w = nodes, np.asarray(oxide_grid.weights, float)
    elif oxide_err_nm > 0:
        if t0 is None:
            raise InputError(
                f"--oxide-err-nm given but substrate {substrate.spec} has no SiO2 film to vary"
            )
        ox_nodes, (ox_fine, ox_w) = _oxide_model_nodes(t0, oxide_err_nm)
    else:
        ox_nodes, ox_fine, ox_w = np.array([t0]), None, np.array([1.0])
    na0 = microscope.na_illumination
    na_nodes, na_w = _gh_nodes(na0, na_err, 5, lower=0.0) if na_err > 0 else ([na0], [1.0])
    na_cap = 0.95 if microscope.na_objective is None else microscope.na_objective
    na_nodes = np.minimum(np.asarray(na_nodes, float), na_cap)
    f_nodes, f_w = (
        _gh_nodes(1.0, thickness_scale_err, 3, lower=0.3)
        if thickness_scale_err > 0
        else (np.array([1.0]), np.array([1.0]))
    )
    layers, more_w = _model_layers(max_layers)
    targs = dict(
        substrate=substrate,
        microscope=microscope,
        geometry=geometry,
        hole=hole,
        oxide_nodes=list(ox_nodes),
        na_nodes=list(na_nodes),
        f_nodes=list(f_nodes),
        layers=layers,
        progress=progress,
        cancel=cancel,
    )
    mean_all, u_all = _moments(material, unc, targs)
    if ox_fine is not None and len(ox_nodes) > 1:
        from scipy.interpolate import CubicSpline

        spline_x = np.asarray(ox_nodes, float)
        mean_all = CubicSpline(spline_x, mean_all, axis=0)(ox_fine)
        u_all = (
            CubicSpline(spline_x, u_all, axis=0)(ox_fine)
            if u_all.shape[-1]
            else np.zeros((len(ox_fine), *u_all.shape[1:]))
        )
    v_w = np.einsum("i,j->ij", np.asarray(na_w, float), np.asarray(f_w, float)).reshape(-1)
    ctx = dict(
        material=material,
        substrate=substrate,
        microscope=microscope,
        geometry=geometry,
        hole=hole,
        oxide_err_nm=oxide_err_nm,
        max_layers=max_layers,
        layers=layers,
        more_w=more_w,
        log_wv=np.log(v_w),
        log_wox=np.log(np.asarray(ox_w, float)),
        contrast_scale=contrast_scale,
        contrast_scale_err=contrast_scale_err,
        model_err=model_err,
        model_rel_err=model_rel_err,
        explain=explain,
        saturated=tuple(saturated),
        oxide_grid=oxide_grid,
        grid_nodes=ox_fine if ox_fine is not None else ox_nodes,
        unc=unc,
        na_err=na_err,
        thickness_scale_err=thickness_scale_err,
    )
    # Rows grouped by the channels they measured; each group is computed at once.
    checked = [_check_inputs(c, e, microscope, saturated) for c, e in zip(contrasts, errs_in)]
    out: list[LayerLikelihood | None] = [None] * len(contrasts)
    groups: dict[tuple[str, ...], list[int]] = {}
    for i, (use, _, _) in enumerate(checked):
        groups.setdefault(use, []).append(i)
    for use, rows in groups.items():
        idx = [microscope.channel_names.index(c) for c in use]
        meas = np.array([checked[i][1] for i in rows])
        err = np.array([checked[i][2] for i in rows])
        res = _rows(meas, err, use, mean_all[..., idx], u_all[..., idx, :], ctx, cancel)
        for i, r in zip(rows, res):
            sat = [f"channel {c} left out: saturated" for c in saturated if c in contrasts[i]]
            out[i] = replace(r, warnings=tuple(sat) + r.warnings) if sat else r
    return out


def _lse(x: np.ndarray, axis: int) -> np.ndarray:
    """log-sum-exp along one axis (a single entry is returned as it is)."""
    if x.shape[axis] == 1:
        return x[(slice(None),) * axis + (0,)]
    top = np.max(x, axis=axis, keepdims=True)
    top = np.where(np.isfinite(top), top, 0.0)
    with np.errstate(divide="ignore"):
        return np.log(np.sum(np.exp(x - top), axis=axis)) + np.squeeze(top, axis=axis)


_CHUNK = 400_000  # (rows x nodes x layers) per vectorised block


def _rows(meas, err, use, mean, u, ctx, cancel) -> list[LayerLikelihood]:
    """Likelihoods of measurement rows ``meas`` (R, C) with errors ``err`` on one channel set."""
    s0, ss = ctx["contrast_scale"], ctx["contrast_scale_err"]
    max_layers, more_w = ctx["max_layers"], ctx["more_w"]
    n_c = len(use)
    # Row-independent part of the covariance: n,k (scaled), contrast scale, model error.
    base = s0**2 * np.einsum("...ir,...jr->...ij", u, u) + ss**2 * np.einsum(
        "...i,...j->...ij", mean, mean
    )
    diag_base = ctx["model_err"] ** 2 + (ctx["model_rel_err"] * s0 * mean) ** 2 + _VAR_FLOOR
    base = base + diag_base[..., None] * np.eye(n_c)
    per_row = int(np.prod(mean.shape[:-1]))
    step = max(1, _CHUNK // max(per_row, 1))
    log_wv, log_wox = ctx["log_wv"], ctx["log_wox"]
    beyond = more_w > 0
    log_more_w = np.log(more_w[beyond])
    model_s = s0 * mean[None]
    grid_rows, like_rows, chi_rows = [], [], []
    for a in range(0, meas.shape[0], step):
        check_cancel(cancel)
        m, e = meas[a : a + step], err[a : a + step]
        d = m[:, None, None, None, :] - model_s
        ll, chi2 = _mvn_loglike(d, base[None], (e**2)[:, None, None, None, :])  # (r, Kox, Kv, N)
        chi_rows.append(np.min(chi2[..., :max_layers], axis=(1, 2, 3)))
        with np.errstate(divide="ignore"):
            ll_node = _lse(ll + log_wv[None, None, :, None], axis=2)  # (r, Kox, N)
            node_more = _lse(ll_node[..., beyond] + log_more_w[None, None, :], axis=2)
            g = np.concatenate([ll_node[..., :max_layers], node_more[..., None]], axis=2)
            like_rows.append(_lse(g + log_wox[None, :, None], axis=1))  # (r, max_layers + 1)
        grid_rows.append(g)
    best_chi2 = np.concatenate(chi_rows)
    grid_ll = np.concatenate(grid_rows)
    log_like = np.concatenate(like_rows)
    # Nominal model (the oxide node nearest the nominal value) and residuals.
    nodes = np.asarray(ctx["grid_nodes"], dtype=float) if ctx["grid_nodes"][0] is not None else None
    t0 = ctx["substrate"].oxide_nm
    k0 = 0 if nodes is None or t0 is None else int(np.argmin(np.abs(nodes - t0)))
    model_c = s0 * mean[k0, 0, :max_layers]
    var0 = np.diagonal(base[k0, 0, :max_layers], axis1=-2, axis2=-1)  # (N, C)
    thresh = _chi2_upper_1e3(n_c)  # chi2 quantile with upper tail 1e-3
    sens = None
    if ctx["oxide_err_nm"] == 0 and ctx["oxide_grid"] is None and t0 is not None:
        sens = oxide_sensitivity(
            ctx["material"],
            ctx["substrate"],
            ctx["microscope"],
            ctx["geometry"],
            ctx["hole"],
            list(range(1, max_layers + 1)),
            t0,
        )[:, [ctx["microscope"].channel_names.index(c) for c in use]]
    prov = _provenance(ctx)
    # Everything per row that is arithmetic, for all rows at once.
    if not np.all(np.any(np.isfinite(log_like), axis=1)):
        raise InputError("no layer number is compatible with the measured contrast")
    likes = np.exp(log_like - np.max(log_like, axis=1, keepdims=True))
    posts = likes / likes.sum(axis=1, keepdims=True)
    tots = np.sqrt(var0[None] + (err**2)[:, None, :])  # (R, N, C)
    resids = (meas[:, None, :] - model_c[None]) / tots
    results = []
    flat = flat_posteriors(posts)
    seps = None
    said: dict[tuple, str] = {}
    for r in range(meas.shape[0]):
        if r % 1000 == 0:
            check_cancel(cancel)
        lr, like = log_like[r], likes[r]
        like.setflags(write=False)
        grid = None
        if ctx["oxide_grid"] is not None:
            grid = evidence.GridLikelihood(ctx["oxide_grid"], grid_ll[r], method=prov["method"])
        post = flat[r]
        warnings = []
        if best_chi2[r] > thresh:
            warnings.append(
                f"no layer number explains the measured contrast within its errors "
                f"(best chi-square {best_chi2[r]:.1f} over {n_c} channel(s)): check the "
                "substrate, material, dark offset and reference region"
            )
        if sens is not None and not post.is_more:
            n = post.layers - 1
            # Against the measurement and model error alone: the n,k uncertainty is shared by
            # the flakes of a chip and narrowed by calibration, the oxide error is not.
            z = np.abs(sens[n]) / np.sqrt(diag_base[k0, 0, n] + err[r] ** 2)
            worst = int(np.argmax(z))
            if z[worst] > 3.0:
                warnings.append(
                    f"the oxide thickness is taken as exactly {t0:g} nm, but here a 3 nm change "
                    f"moves the {use[worst]} contrast of {post.layers}L by {sens[n, worst]:+.3f}, "
                    "more than the errors allow: give the oxide's uncertainty (--oxide-err-nm) or "
                    "calibrate it, or the layer number may be confidently wrong"
                )
        text = ""
        if ctx["explain"] and post.ambiguous_with:
            cands = [min(n, max_layers + 1) for n in [post.layers, *post.ambiguous_with]]
            if seps is None:  # of every row at once, when first needed
                seps = separation_needed_rows(err, ctx["model_err"])
            key = (cands[0], cands[1], seps[r])
            if key in said:
                text = said[key]
            else:
                text = said[key] = decider(
                    key[0],
                    key[1],
                    use=use,
                    sep_need=key[2],
                    material=ctx["material"],
                    substrate=ctx["substrate"],
                    microscope=ctx["microscope"],
                    geometry=ctx["geometry"],
                    hole=ctx["hole"],
                    oxide_err_nm=float(ctx["oxide_err_nm"]),
                    max_layers=max_layers,
                    saturated=ctx["saturated"],
                )
        results.append(
            LayerLikelihood(
                likelihood=like,
                log_likelihood=lr,
                max_layers=max_layers,
                channels=use,
                contrast=meas[r],
                contrast_err=err[r],
                model_contrast=model_c,
                residuals=resids[r],
                decider=text,
                warnings=tuple(warnings),
                provenance=prov,
                grid=grid,
                _posterior=post,
            )
        )
    return results


def _provenance(ctx) -> dict:
    material, substrate, microscope = ctx["material"], ctx["substrate"], ctx["microscope"]
    unc, hole = ctx["unc"], ctx["hole"]
    return {
        "flakebook_version": __version__,
        "method": "thin-film transfer-matrix contrast, joint Gaussian likelihood over channels "
        "with the oxide, NA, contrast scale and n,k uncertainty marginalised",
        "material": material.name,
        "data_sets": material.data_set_text,
        "reference": material.reference,
        "nk_model": "centre data only (no n,k uncertainty)" if unc is None else unc.description(),
        "nk_uncertainty": None if unc is None else unc.to_dict(),
        "substrate": substrate.spec,
        "substrate_data_sets": [f.material.data_set_text for f in substrate.films]
        + [substrate.base.data_set_text],
        "geometry": ctx["geometry"],
        "hole": None if hole is None else {"bottom": hole.bottom, "depth_nm": hole.depth_nm},
        "na_illumination": microscope.na_illumination,
        "na_err": ctx["na_err"],
        "illumination": microscope.illumination.label,
        "channels": list(microscope.channel_names),
        "oxide_err_nm": ctx["oxide_err_nm"],
        "oxide_grid": ctx["oxide_grid"] is not None,
        "contrast_scale": ctx["contrast_scale"],
        "contrast_scale_err": ctx["contrast_scale_err"],
        "model_err": ctx["model_err"],
        "model_rel_err": ctx["model_rel_err"],
        "thickness_scale_err": ctx["thickness_scale_err"],
    }
