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

import math
from dataclasses import dataclass, field, replace

import numpy as np

from flakebook import evidence
from flakebook.errors import InputError
from flakebook.optics.materials import Material
from flakebook.optics.microscope import Microscope, channel_contrast, cone_reflectance
from flakebook.optics.substrate import Hole, Substrate

N_MORE_MAX = 100  # the "more" bin averages N_max+1..N_MORE_MAX
DEFAULT_MODEL_ERR = 0.01
DEFAULT_MODEL_REL_ERR = 0.03


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
        vals.append(v)
        errs.append(e)
    return tuple(use), np.array(vals), np.array(errs)


def _model_stack(material, substrate, microscope, geometry, hole, oxide_nodes, na_nodes):
    """Model contrast of N = 1..N_MORE_MAX at every (oxide, NA) node: (K_ox, K_na, N, C_all)."""
    layers = np.arange(1, N_MORE_MAX + 1)
    out = []
    for t in oxide_nodes:
        sub = substrate if t is None else substrate.with_oxide(t)
        row = []
        for na in na_nodes:
            mic = replace(microscope, na_illumination=float(na))
            row.append(channel_contrast(material, layers, sub, mic, geometry, hole).contrast)
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
    model_err: float = DEFAULT_MODEL_ERR,
    model_rel_err: float = DEFAULT_MODEL_REL_ERR,
    geometry: str = "supported",
    hole: Hole | None = None,
    saturated: tuple[str, ...] = (),
    n_oxide_nodes: int = 9,
    explain: bool = True,
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
    saturated:
        Channels to leave out (saturated pixels); each gives a warning.
    explain:
        Work out ``decider`` text when the result is ambiguous.
    """
    if not isinstance(max_layers, int | np.integer) or not 1 <= int(max_layers) < N_MORE_MAX:
        raise InputError(f"--max-layers {max_layers!r}: accepted a whole number from 1 to 99")
    max_layers = int(max_layers)
    for name, v in (
        ("--oxide-err-nm", oxide_err_nm),
        ("na_err", na_err),
        ("contrast_scale_err", contrast_scale_err),
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
    ox_nodes, ox_w = (
        _gh_nodes(t0, oxide_err_nm, n_oxide_nodes, lower=0.0)
        if oxide_err_nm > 0
        else (np.array([None]), np.array([1.0]))
    )
    na0 = microscope.na_illumination
    na_nodes, na_w = _gh_nodes(na0, na_err, 5, lower=0.0) if na_err > 0 else ([na0], [1.0])
    na_nodes = np.minimum(np.asarray(na_nodes, float), 0.95)
    model_all = _model_stack(material, substrate, microscope, geometry, hole, ox_nodes, na_nodes)
    model = model_all[..., idx]  # (Kox, Kna, N, C)

    var = err**2 + model_err**2 + (model_rel_err * contrast_scale * model) ** 2
    ll = _gauss_loglike(meas, model, var, contrast_scale, contrast_scale_err)  # (Kox, Kna, N)
    wts = np.asarray(ox_w)[:, None, None] * np.asarray(na_w)[None, :, None]
    peak = ll.max()
    like_n = np.sum(wts * np.exp(ll - peak), axis=(0, 1))  # (N,)
    like = np.concatenate([like_n[:max_layers], [like_n[max_layers:].mean()]])
    with np.errstate(divide="ignore"):
        log_like = np.log(like) + peak
    if not np.any(like > 0):
        raise InputError("no layer number is compatible with the measured contrast")
    scaled = like / like.max()

    # Nominal model and residuals.
    k_ox = int(np.argmin(np.abs(np.arange(len(ox_nodes)) - (len(ox_nodes) - 1) / 2)))
    k_na = int(np.argmin(np.abs(np.asarray(na_nodes) - na0)))
    nominal = (
        _model_stack(material, substrate, microscope, geometry, hole, [None], [na0])[0, 0][
            :max_layers
        ][:, idx]
        if oxide_err_nm > 0 or na_err > 0
        else model[k_ox, k_na, :max_layers]
    )
    tot_err = np.sqrt(
        err**2
        + model_err**2
        + (model_rel_err * contrast_scale * nominal) ** 2
        + (contrast_scale_err * nominal) ** 2
    )
    model_c = contrast_scale * nominal
    resid = (meas[None, :] - model_c) / tot_err
    best_chi2 = float(np.min(np.sum(resid**2, axis=1)))
    if len(use) >= 1 and best_chi2 > 9.0 * len(use) + 16.0:
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
            model_all=model_all,
            max_layers=max_layers,
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
            "method": "thin-film transfer-matrix contrast, joint Gaussian likelihood over "
            "channels with oxide, NA and contrast scale marginalised",
            "material": material.name,
            "data_sets": material.data_set_text,
            "reference": material.reference,
            "substrate": substrate.spec,
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
    max_layers,
) -> str:
    """Say what would settle between the most likely N and its rivals."""
    cands = [post.layers, *post.ambiguous_with][:3]
    cands_n = [min(n, max_layers + 1) for n in cands]
    a, b = cands_n[0], cands_n[1]
    sep_need = 3.0 * math.sqrt(float(np.mean(meas_err**2)) + model_err**2)
    tips: list[str] = []
    label = f"{_name(a, max_layers)} or {_name(b, max_layers)}"
    names = microscope.channel_names
    # 1. A channel of this camera that was not measured.
    nominal = model_all[model_all.shape[0] // 2, 0]  # (N, C_all) at the central oxide node
    for j, ch in enumerate(names):
        if ch in use:
            continue
        # Robust separation over the oxide nodes.
        sep = np.min(np.abs(model_all[:, 0, a - 1, j] - model_all[:, 0, b - 1, j]))
        if sep > sep_need:
            tips.append(
                f"measure the {ch} channel too (model {nominal[a - 1, j]:.3f} for "
                f"{_name(a, max_layers)}, {nominal[b - 1, j]:.3f} for {_name(b, max_layers)})"
            )
    # 2. The oxide: if the candidates differ at every fixed oxide but the oxide spread mixes them.
    if oxide_err_nm > 2.0:
        j_use = [names.index(c) for c in use]
        fixed = np.abs(nominal[a - 1, j_use] - nominal[b - 1, j_use])
        if np.max(fixed) > sep_need:
            tips.append(
                f"a calibrated oxide thickness (to about 1 nm instead of {oxide_err_nm:g} nm, from "
                "the calibration with flakes of known N or a reflectance spectrum)"
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
                f"contrast through a narrow bandpass filter at {lam[k]:.0f} nm "
                f"(model {vals[0, k]:.3f} for {_name(a, max_layers)}, "
                f"{vals[1, k]:.3f} for {_name(b, max_layers)})"
            )
    except InputError:
        pass  # data sets not covering the scan: skip this suggestion
    tips.append("or other evidence: the Raman shear and breathing modes, or PL")
    return f"{label}: would be decided by " + "; ".join(tips)
