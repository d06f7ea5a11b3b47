"""Layer-number likelihood from measured optical contrast.

One joint likelihood over N = 1..N_max and a "more" bin (the likelihood averaged over
N_max+1..100), from all channels together. The measured contrast in channel c is modelled as

    C_c = s * M_c(N; t_ox, NA) + e_c,

with M the thin-film model (flakebook.optics.microscope), s the contrast scale (stray light and
flare compress contrast; 1 for an ideal camera), and e_c Gaussian noise with the measured error
of the region's contrast (see :func:`contrast_err_from_pixels` for spatially correlated pixel
noise) plus a model error (absolute and relative to the contrast) for the uncertainty of published
n,k data. The shared systematic parameters are marginalised jointly for all channels, never per
channel: the oxide thickness and the illumination NA by Gauss-Hermite quadrature over their
Gaussian uncertainties, the contrast scale analytically (it adds the rank-one covariance
sigma_s^2 M M^T, so channels move together).

When the result is ambiguous, ``decider`` says what would settle it: another camera channel, a
narrow bandpass filter at a named wavelength, a calibrated oxide, or another kind of evidence.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field, replace

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.special import logsumexp
from scipy.stats import chi2 as chi2_dist

from flakebook import __version__, evidence
from flakebook.errors import InputError, check_cancel
from flakebook.optics.materials import Material
from flakebook.optics.microscope import Microscope, channel_contrast, cone_reflectance
from flakebook.optics.substrate import Hole, Substrate

N_MORE_MAX = 100  # the "more" bin averages N_max+1..N_MORE_MAX
DEFAULT_MODEL_ERR = 0.01
DEFAULT_MODEL_REL_ERR = 0.05
DEFAULT_THICKNESS_SCALE_ERR = 0.0
_VAR_FLOOR = 1e-8  # (1e-4)^2: keeps an exact measurement with no model error finite


@dataclass(frozen=True)
class LayerLikelihood:
    """Likelihood over N = 1..max_layers plus "more" (last entry), scaled to a maximum of 1.

    ``model_contrast`` and ``residuals`` have shape (max_layers, len(channels)): the model
    contrast (times the contrast scale) at the nominal oxide and NA, and the normalised residual
    (measured - model) / total error. ``decider`` says what would settle an ambiguity (empty when
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

    def posterior(self) -> evidence.Posterior:
        """The posterior with a flat prior (flakebook.evidence.combine)."""
        return evidence.combine([self.likelihood])

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
    side) and where the likelihood is evaluated (fine, <= 0.25 nm apart): model contrast is a
    smooth function of the oxide thickness (fringes ~100-200 nm apart), so a cubic spline
    through the coarse nodes is exact to far below the model error, while the likelihood in
    oxide can be narrower than 1 nm for thick flakes."""
    h = min(3.0, sigma)
    n_half = int(np.ceil(3.0 * sigma / h)) + 1
    coarse = center + h * np.arange(-n_half, n_half + 1)
    coarse = coarse[coarse >= 0]
    fine, w = _oxide_grid(center, sigma, spacing_nm=min(0.25, sigma / 8.0), max_nodes=1201)
    return coarse, np.stack([fine, w])


def _model_layers(max_layers: int) -> tuple[np.ndarray, np.ndarray]:
    """Layer numbers the model is evaluated at, and each one's weight in the "more" bin.

    Every N up to max(30, max_layers + 15), then every 5th up to 100; the "more" bin is the
    average over N_max+1..100, each sampled N standing for the integers up to the next one.
    """
    top = min(max(30, max_layers + 15), N_MORE_MAX)
    layers = np.concatenate([np.arange(1, top + 1), np.arange(top + 5, N_MORE_MAX + 1, 5)])
    nxt = np.append(layers[1:], N_MORE_MAX + 1)
    w = np.where(layers > max_layers, nxt - layers, 0).astype(float)
    return layers, w / w.sum()


def _gauss_loglike(meas, model, var_diag, s0, sigma_s):
    """log N(meas | s0*model, diag(var) + sigma_s^2 model model^T), over leading axes of model."""
    d = meas - s0 * model  # (..., C)
    u = sigma_s * model
    dinv = 1.0 / var_diag
    a = np.sum(d * d * dinv, axis=-1)
    b = np.sum(u * d * dinv, axis=-1)
    g = 1.0 + np.sum(u * u * dinv, axis=-1)
    chi2 = a - b * b / g
    logdet = np.sum(np.log(var_diag), axis=-1) + np.log(g)
    k = meas.shape[-1]
    return -0.5 * (chi2 + logdet + k * math.log(2.0 * math.pi))


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
                f"contrast {v:g} in channel {c} is impossible: C = 1 - I_flake/I_reference "
                "cannot exceed 1 (is the dark offset subtracted, or the contrast in percent?); "
                "accepted: C <= 1"
            )
        vals.append(v)
        errs.append(e)
    return tuple(use), np.array(vals), np.array(errs)


def _model_stack(
    material,
    substrate,
    microscope,
    geometry,
    hole,
    oxide_nodes,
    na_nodes,
    scale_nodes=(1.0,),
    variants=None,
    layers=None,
    progress=None,
    cancel=None,
):
    """Cached :func:`_model_stack_uncached` (all inputs are immutable; result read-only).

    With ``progress`` or ``cancel``, the tables are first filled one by one, reporting progress
    and honouring the cancel event (flakebook.errors.Cancelled)."""
    key_layers = None if layers is None else tuple(int(n) for n in layers)
    if progress is not None or cancel is not None:
        vs = [material] if variants is None else list(variants)
        lay = np.arange(1, N_MORE_MAX + 1) if layers is None else np.asarray(layers)
        jobs = [
            (t, na, v, f) for t in oxide_nodes for na in na_nodes for v in vs for f in scale_nodes
        ]
        for k, (t, na, v, f) in enumerate(jobs):
            check_cancel(cancel)
            sub = substrate if t is None else substrate.with_oxide(t)
            mat = v if f == 1.0 else replace(v, layer_spacing_nm=v.layer_spacing_nm * float(f))
            mic = replace(microscope, na_illumination=float(na))
            channel_contrast(mat, lay, sub, mic, geometry, hole)
            if progress is not None:
                progress((k + 1) / len(jobs), "contrast model tables")
    return _model_stack_cached(
        material,
        substrate,
        microscope,
        geometry,
        hole,
        tuple(None if t is None else float(t) for t in oxide_nodes),
        tuple(float(x) for x in na_nodes),
        tuple(float(x) for x in scale_nodes),
        None if variants is None else tuple(variants),
        key_layers,
    )


@functools.lru_cache(maxsize=64)
def _model_stack_cached(*args):
    out = _model_stack_uncached(*args[:9], None if args[9] is None else np.array(args[9]))
    out.setflags(write=False)
    return out


def _model_stack_uncached(
    material,
    substrate,
    microscope,
    geometry,
    hole,
    oxide_nodes,
    na_nodes,
    scale_nodes=(1.0,),
    variants=None,
    layers=None,
):
    """Model contrast of N = 1..N_MORE_MAX at every (oxide, NA, n,k variant, thickness-scale)
    node: shape (K_ox, K_na * K_v * K_f, N, C_all)."""
    variants = [material] if variants is None else variants
    layers = np.arange(1, N_MORE_MAX + 1) if layers is None else layers
    out = []
    for t in oxide_nodes:
        sub = substrate if t is None else substrate.with_oxide(t)
        row = []
        for na in na_nodes:
            mic = replace(microscope, na_illumination=float(na))
            for variant in variants:
                for f in scale_nodes:
                    mat = (
                        variant
                        if f == 1.0
                        else replace(variant, layer_spacing_nm=variant.layer_spacing_nm * float(f))
                    )
                    row.append(channel_contrast(mat, layers, sub, mic, geometry, hole).contrast)
        out.append(row)
    return np.array(out)


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
    explain: bool = True,
    progress=None,
    cancel=None,
) -> LayerLikelihood:
    """Likelihood of N = 1..max_layers and "more" from measured channel contrast.

    Parameters
    ----------
    contrast, contrast_err:
        Measured contrast per channel name (C = 1 - I_flake / I_reference after the dark offset
        is subtracted) and its standard error (0 or missing: exact apart from the model error).
    material, substrate, microscope, geometry, hole:
        The sample and microscope (``flakebook.optics.microscope.channel_contrast``).
    oxide_err_nm, na_err, contrast_scale, contrast_scale_err:
        Shared systematic parameters and their standard deviations, marginalised jointly.
    model_err, model_rel_err:
        Model error per channel: absolute, and relative to the model contrast.
    thickness_scale_err:
        Relative uncertainty of the flake's optical thickness, marginalised (Gauss-Hermite).
    nk_ensemble:
        Marginalise over the material's published bulk data sets (``Material.variants``) with
        equal weights: published n,k of the same crystal disagree by more than their stated
        errors, and that spread is the model's n,k uncertainty.
    saturated:
        Channels to leave out (saturated pixels); each gives a warning.
    explain:
        Work out ``decider`` text when the result is ambiguous.
    progress, cancel:
        ``progress(fraction, text)`` and a ``threading.Event``; the first call for a sample and
        microscope builds the model tables (a second or two), later calls reuse them.
    """
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
    use, meas, err = _check_inputs(contrast, contrast_err, microscope, saturated)
    warnings = [f"channel {c} left out: saturated" for c in saturated if c in contrast]
    idx = [microscope.channel_names.index(c) for c in use]

    t0 = substrate.oxide_nm
    if oxide_err_nm > 0 and t0 is None:
        raise InputError(
            f"--oxide-err-nm given but substrate {substrate.spec} has no SiO2 film to vary"
        )
    if oxide_err_nm > 0:
        ox_nodes, fine = _oxide_model_nodes(t0, oxide_err_nm)
        ox_fine, ox_w = fine
    else:
        ox_nodes, ox_fine, ox_w = np.array([None]), None, np.array([1.0])
    na0 = microscope.na_illumination
    na_nodes, na_w = _gh_nodes(na0, na_err, 5, lower=0.0) if na_err > 0 else ([na0], [1.0])
    na_cap = 0.95 if microscope.na_objective is None else microscope.na_objective
    na_nodes = np.minimum(np.asarray(na_nodes, float), na_cap)
    f_nodes, f_w = (
        _gh_nodes(1.0, thickness_scale_err, 3, lower=0.3)
        if thickness_scale_err > 0
        else (np.array([1.0]), np.array([1.0]))
    )
    variants = material.variants() if nk_ensemble else [material]
    layers, more_w = _model_layers(max_layers)
    model_all = _model_stack(
        material,
        substrate,
        microscope,
        geometry,
        hole,
        ox_nodes,
        na_nodes,
        f_nodes,
        variants,
        layers,
        progress,
        cancel,
    )
    if ox_fine is not None:
        model_all = CubicSpline(ox_nodes.astype(float), model_all, axis=0)(ox_fine)
    model = model_all[..., idx]  # (Kox, Kna*Kf, N, C)

    var = err**2 + model_err**2 + (model_rel_err * contrast_scale * model) ** 2 + _VAR_FLOOR
    ll = _gauss_loglike(meas, model, var, contrast_scale, contrast_scale_err)  # (Kox, Kna, N)
    wts = (
        np.asarray(ox_w)[:, None, None]
        * np.einsum(
            "i,j,k->ijk", np.asarray(na_w), np.full(len(variants), 1.0 / len(variants)), f_w
        ).reshape(-1)[None, :, None]
    )
    with np.errstate(divide="ignore"):
        log_n = logsumexp(ll + np.log(wts), axis=(0, 1))  # (N,)
        log_more = logsumexp(log_n + np.log(more_w))
    log_like = np.concatenate([log_n[:max_layers], [log_more]])
    if not np.any(np.isfinite(log_like)):
        raise InputError("no layer number is compatible with the measured contrast")
    like = np.exp(log_like - log_like.max())
    scaled = like

    # Nominal model and residuals.
    nominal = (
        _model_stack(
            material, substrate, microscope, geometry, hole, [None], [na0], [1.0], None, layers
        )[0, 0][:max_layers][:, idx]
        if oxide_err_nm > 0 or na_err > 0 or thickness_scale_err > 0
        else model[0, 0, :max_layers]
    )
    tot_err = np.sqrt(
        err**2
        + model_err**2
        + (model_rel_err * contrast_scale * nominal) ** 2
        + (contrast_scale_err * nominal) ** 2
        + _VAR_FLOOR
    )
    model_c = contrast_scale * nominal
    resid = (meas[None, :] - model_c) / tot_err
    # Goodness of fit over every systematic node (any oxide, n,k set, NA), not the nominal only.
    node_var = var + (contrast_scale_err * model) ** 2
    node_chi2 = np.sum((meas - contrast_scale * model) ** 2 / node_var, axis=-1)
    best_chi2 = float(np.min(node_chi2[..., :max_layers]))
    if best_chi2 > float(chi2_dist.isf(1e-3, len(use))):
        warnings.append(
            f"no layer number explains the measured contrast within its errors "
            f"(best chi-square {best_chi2:.1f} over {len(use)} channel(s)): check the substrate, "
            "material, dark offset and reference region"
        )

    decider = ""
    post = evidence.combine([scaled])
    if explain and post.ambiguous_with:
        decider = _decider(
            post,
            use=use,
            meas_err=err,
            model_err=model_err,
            material=material,
            substrate=substrate,
            microscope=microscope,
            geometry=geometry,
            hole=hole,
            oxide_err_nm=oxide_err_nm,
            model_all=_model_stack(
                material,
                substrate,
                microscope,
                geometry,
                hole,
                ox_nodes,
                [na0],
                [1.0],
                None,
                layers,
            ),
            nominal=_model_stack(
                material, substrate, microscope, geometry, hole, [None], [na0], [1.0], None, layers
            )[0, 0],
            max_layers=max_layers,
            saturated=tuple(saturated),
        )
    scaled = scaled.copy()
    scaled.setflags(write=False)
    return LayerLikelihood(
        likelihood=scaled,
        log_likelihood=log_like,
        max_layers=max_layers,
        channels=use,
        contrast=meas,
        contrast_err=err,
        model_contrast=model_c,
        residuals=resid,
        decider=decider,
        warnings=tuple(warnings),
        provenance={
            "flakebook_version": __version__,
            "method": "thin-film transfer-matrix contrast, joint Gaussian likelihood over "
            "channels with oxide, NA and contrast scale marginalised",
            "material": material.name,
            "data_sets": material.data_set_text,
            "reference": material.reference,
            "substrate": substrate.spec,
            "substrate_data_sets": [f.material.data_set_text for f in substrate.films]
            + [substrate.base.data_set_text],
            "geometry": geometry,
            "hole": None if hole is None else {"bottom": hole.bottom, "depth_nm": hole.depth_nm},
            "na_illumination": microscope.na_illumination,
            "na_err": na_err,
            "illumination": microscope.illumination.label,
            "channels": list(microscope.channel_names),
            "oxide_err_nm": oxide_err_nm,
            "contrast_scale": contrast_scale,
            "contrast_scale_err": contrast_scale_err,
            "model_err": model_err,
            "model_rel_err": model_rel_err,
            "thickness_scale_err": thickness_scale_err,
            "nk_data_sets": [v.data_set_text for v in variants],
        },
    )


def _name(n: int, max_layers: int) -> str:
    return f">{max_layers}L" if n > max_layers else f"{n}L"


def _decider(
    post,
    *,
    use,
    meas_err,
    model_err,
    material,
    substrate,
    microscope,
    geometry,
    hole,
    oxide_err_nm,
    model_all,
    nominal,
    max_layers,
    saturated=(),
) -> str:
    """Say what would settle between the most likely N and its rivals."""
    cands = [post.layers, *post.ambiguous_with][:3]
    cands_n = [min(n, max_layers + 1) for n in cands]
    a, b = cands_n[0], cands_n[1]
    sep_need = 3.0 * math.sqrt(float(np.mean(meas_err**2)) + model_err**2)
    tips: list[str] = []
    names = microscope.channel_names
    # 1. A channel of this camera that was not measured.
    for j, ch in enumerate(names):
        if ch in use:
            continue
        # Robust separation over the oxide nodes.
        sep = np.min(np.abs(model_all[:, 0, a - 1, j] - model_all[:, 0, b - 1, j]))
        if sep > sep_need:
            how = (
                f"lower the exposure until the {ch} channel is not saturated"
                if ch in saturated
                else f"measure the {ch} channel too"
            )
            tips.append(
                f"{how} (model {nominal[a - 1, j]:.3f} for "
                f"{_name(a, max_layers)}, {nominal[b - 1, j]:.3f} for {_name(b, max_layers)})"
            )
    # 2. The oxide: if the candidates differ at every fixed oxide but the oxide spread mixes them.
    if oxide_err_nm > 2.0:
        j_use = [names.index(c) for c in use]
        fixed = np.abs(nominal[a - 1, j_use] - nominal[b - 1, j_use])
        if np.max(fixed) > sep_need:
            tips.append(
                f"calibrate the oxide thickness (to about 1 nm instead of {oxide_err_nm:g} nm, "
                "with flakes of known N or a reflectance spectrum)"
            )
    # 3. A narrow bandpass filter at the wavelength that separates them best, whatever the oxide.
    try:
        lam = np.arange(420.0, 781.0, 10.0)
        t0 = substrate.oxide_nm
        oxides = (
            [None]
            if (t0 is None or oxide_err_nm <= 0)
            else [
                t0 - oxide_err_nm,
                t0,
                t0 + oxide_err_nm,
            ]
        )
        seps = []
        vals = None
        for t in oxides:
            sub = substrate if t is None else substrate.with_oxide(max(t, 0.0))
            common = {"na": microscope.na_illumination, "n_angles": min(microscope.n_angles, 8)}
            r_ref = cone_reflectance(None, (), sub, lam, **common)[0]
            r_fl = cone_reflectance(
                material, [a, b], sub, lam, geometry=geometry, hole=hole, **common
            )
            c = 1.0 - r_fl / r_ref[None, :]
            seps.append(np.abs(c[0] - c[1]))
            if t is None or t == t0:
                vals = c
        sep = np.min(seps, axis=0)
        k = int(np.argmax(sep))
        if sep[k] > sep_need and vals is not None:
            tips.append(
                f"measure through a narrow bandpass filter at {lam[k]:.0f} nm "
                f"(model {vals[0, k]:.3f} for {_name(a, max_layers)}, "
                f"{vals[1, k]:.3f} for {_name(b, max_layers)})"
            )
    except InputError:
        pass  # data sets not covering the scan: skip this suggestion
    tips.append("add other evidence (the Raman shear and breathing modes, or PL)")
    return f"to decide between {_name(a, max_layers)} and {_name(b, max_layers)}: " + "; or ".join(
        tips
    )


@dataclass(frozen=True)
class ContrastCurve:
    """Model contrast versus N per channel with its 16-84% band from the systematics.

    ``contrast`` is the nominal model (shape (len(layers), len(channels))); ``low`` and ``high``
    are the weighted 16th and 84th percentiles over the oxide uncertainty and the published n,k
    sets (see :func:`layer_likelihood`).
    """

    layers: np.ndarray
    channels: tuple[str, ...]
    contrast: np.ndarray
    low: np.ndarray
    high: np.ndarray


def _weighted_quantile(values: np.ndarray, weights: np.ndarray, q: float) -> np.ndarray:
    """Weighted quantile along axis 0."""
    if values.shape[0] == 1:
        return values[0].copy()
    order = np.argsort(values, axis=0)
    v = np.take_along_axis(values, order, axis=0)
    w = np.take_along_axis(weights, order, axis=0)
    cw = np.cumsum(w, axis=0) - 0.5 * w
    cw /= np.sum(w, axis=0, keepdims=True)
    out = np.empty(values.shape[1:])
    for idx in np.ndindex(*values.shape[1:]):
        sel = (slice(None), *idx)
        out[idx] = np.interp(q, cw[sel], v[sel])
    return out


def model_contrast_curve(
    material: Material,
    layers,
    substrate: Substrate,
    microscope: Microscope,
    *,
    oxide_err_nm: float = 0.0,
    nk_ensemble: bool = True,
    geometry: str = "supported",
    hole: Hole | None = None,
) -> ContrastCurve:
    """The contrast-versus-N curve of every channel with a band for the oxide uncertainty and the
    spread of published n,k data (for plots next to measured contrast)."""
    lay = np.atleast_1d(np.asarray(layers, int))
    nominal = channel_contrast(material, lay, substrate, microscope, geometry, hole).contrast
    t0 = substrate.oxide_nm
    if oxide_err_nm > 0 and t0 is None:
        raise InputError(f"substrate {substrate.spec} has no SiO2 film to vary")
    ox, ow = (
        _oxide_grid(t0, oxide_err_nm, spacing_nm=3.0)
        if oxide_err_nm > 0
        else ([None], np.array([1.0]))
    )
    variants = material.variants() if nk_ensemble else [material]
    vals, wts = [], []
    for t, w in zip(ox, ow):
        sub = substrate if t is None else substrate.with_oxide(t)
        for v in variants:
            vals.append(channel_contrast(v, lay, sub, microscope, geometry, hole).contrast)
            wts.append(w / len(variants))
    vals = np.array(vals)
    wts = np.array(wts)[:, None, None] * np.ones(vals.shape)
    return ContrastCurve(
        layers=lay,
        channels=microscope.channel_names,
        contrast=nominal,
        low=_weighted_quantile(vals, wts, 0.16),
        high=_weighted_quantile(vals, wts, 0.84),
    )
