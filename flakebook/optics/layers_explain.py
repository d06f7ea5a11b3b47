"""What would settle an ambiguous layer number, and model contrast curves with their band.

Helpers of :mod:`flakebook.optics.layers`: ``decider`` text (another channel, a narrow bandpass
filter at a named wavelength, a calibrated oxide, other evidence) and
:func:`model_contrast_curve` (the contrast-versus-N curve with a band for the oxide uncertainty
and the n,k uncertainty of :mod:`flakebook.optics.nkmodel`).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from flakebook.errors import InputError
from flakebook.optics.materials import Material
from flakebook.optics.microscope import Microscope, channel_contrast, cone_reflectance
from flakebook.optics.substrate import Hole, Substrate


def oxide_sensitivity(material, substrate, microscope, geometry, hole, layers, t0) -> np.ndarray:
    """Change of the model contrast (len(layers), channels) for a 3 nm thicker oxide."""
    lo = channel_contrast(material, layers, substrate, microscope, geometry, hole).contrast
    hi = channel_contrast(
        material, layers, substrate.with_oxide(t0 + 3.0), microscope, geometry, hole
    ).contrast
    return hi - lo


def layer_name(n: int, max_layers: int) -> str:
    return f">{max_layers}L" if n > max_layers else f"{n}L"


@functools.lru_cache(maxsize=32)
def _scans(material, substrate, microscope, geometry, hole, oxide_err_nm, max_layers):
    """Model contrast of N = 1..max_layers + 1 at the nominal oxide and +-1 sigma: per camera
    channel (oxides, N, C) and over a 420-780 nm scan for a bandpass filter (oxides, N, L),
    or None where the data sets do not cover the scan."""
    t0 = substrate.oxide_nm
    oxides = (
        [None] if (t0 is None or oxide_err_nm <= 0) else [t0 - oxide_err_nm, t0, t0 + oxide_err_nm]
    )
    subs = [substrate if t is None else substrate.with_oxide(max(t, 0.0)) for t in oxides]
    lay = list(range(1, max_layers + 2))
    tables = np.array(
        [channel_contrast(material, lay, sub, microscope, geometry, hole).contrast for sub in subs]
    )
    lam = np.arange(420.0, 781.0, 10.0)
    try:
        scan = []
        common = {"na": microscope.na_illumination, "n_angles": min(microscope.n_angles, 8)}
        for sub in subs:
            r_ref = cone_reflectance(None, (), sub, lam, **common)[0]
            r_fl = cone_reflectance(material, lay, sub, lam, geometry=geometry, hole=hole, **common)
            scan.append(1.0 - r_fl / r_ref[None, :])
        scan = np.array(scan)
    except InputError:
        scan = None  # data sets not covering the scan: no bandpass suggestion
    return tables, lam, scan


def decider(
    a: int,
    b: int,
    *,
    use: tuple[str, ...],
    sep_need: float,
    material: Material,
    substrate: Substrate,
    microscope: Microscope,
    geometry: str,
    hole: Hole | None,
    oxide_err_nm: float,
    max_layers: int,
    saturated: tuple[str, ...] = (),
) -> str:
    """Say what would settle between ``a`` layers (the most likely) and ``b`` (its rival);
    ``sep_need`` is the contrast difference that tells them apart (3 sigma). ``a`` or ``b``
    equal to max_layers + 1 stands for the "more" bin (modelled as max_layers + 1 layers)."""
    tables, lam, scan = _scans(
        material, substrate, microscope, geometry, hole, float(oxide_err_nm), int(max_layers)
    )
    tips: list[str] = []
    names = microscope.channel_names
    mid = tables.shape[0] // 2
    nominal = tables[mid][[a - 1, b - 1]]
    # 1. A channel of this camera that was not measured.
    for j, ch in enumerate(names):
        if ch in use:
            continue
        sep = float(np.min(np.abs(tables[:, a - 1, j] - tables[:, b - 1, j])))
        if sep > sep_need:
            how = (
                f"lower the exposure until the {ch} channel is not saturated"
                if ch in saturated
                else f"measure the {ch} channel too"
            )
            tips.append(
                f"{how} (model {nominal[0, j]:.3f} for {layer_name(a, max_layers)}, "
                f"{nominal[1, j]:.3f} for {layer_name(b, max_layers)})"
            )
    # 2. The oxide: if the candidates differ at the nominal oxide but the oxide spread mixes them.
    if oxide_err_nm > 2.0:
        j_use = [names.index(c) for c in use]
        if np.max(np.abs(nominal[0, j_use] - nominal[1, j_use])) > sep_need:
            tips.append(
                f"calibrate the oxide thickness (to about 1 nm instead of {oxide_err_nm:g} nm, "
                "with flakes of known N or a reflectance spectrum)"
            )
    # 3. A narrow bandpass filter at the wavelength that separates them best, whatever the oxide.
    if scan is not None:
        sep = np.min(np.abs(scan[:, a - 1] - scan[:, b - 1]), axis=0)
        k = int(np.argmax(sep))
        if sep[k] > sep_need:
            tips.append(
                f"measure through a narrow bandpass filter at {lam[k]:.0f} nm "
                f"(model {scan[mid, a - 1, k]:.3f} for {layer_name(a, max_layers)}, "
                f"{scan[mid, b - 1, k]:.3f} for {layer_name(b, max_layers)})"
            )
    tips.append("add other evidence (the Raman shear and breathing modes, or PL)")
    return (
        f"to decide between {layer_name(a, max_layers)} and {layer_name(b, max_layers)}: "
        + "; or ".join(tips)
    )


def separation_needed(meas_err: np.ndarray, model_err: float) -> float:
    return round(3.0 * math.sqrt(float(np.mean(np.asarray(meas_err) ** 2)) + model_err**2), 4)


def separation_needed_rows(meas_errs: np.ndarray, model_err: float) -> list[float]:
    """:func:`separation_needed` of every row of ``meas_errs`` [rows, channels] (the same
    values; the mean square of all rows at once)."""
    mean_sq = np.mean(np.asarray(meas_errs) ** 2, axis=1)
    return [round(3.0 * math.sqrt(float(v) + model_err**2), 4) for v in mean_sq]


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
    n,k uncertainty (:mod:`flakebook.optics.nkmodel`; for plots next to measured contrast)."""
    from flakebook.optics.layers import _oxide_grid
    from flakebook.optics.nkmodel import nk_uncertainty

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
    unc = nk_uncertainty(material) if nk_ensemble else None
    if unc is None:
        draws = [material]
    else:
        z = np.random.default_rng(0).standard_normal((16, unc.n_directions))
        chol = np.linalg.cholesky(unc.cov + 1e-15 * np.eye(unc.n_directions))
        draws = [unc.perturbed(material, unc.mean + chol @ zi) for zi in z]
    vals, wts = [], []
    for t, w in zip(ox, ow):
        sub = substrate if t is None else substrate.with_oxide(t)
        for v in draws:
            vals.append(channel_contrast(v, lay, sub, microscope, geometry, hole).contrast)
            wts.append(w / len(draws))
    vals = np.array(vals)
    wts = np.array(wts)[:, None, None] * np.ones(vals.shape)
    return ContrastCurve(
        layers=lay,
        channels=microscope.channel_names,
        contrast=nominal,
        low=_weighted_quantile(vals, wts, 0.16),
        high=_weighted_quantile(vals, wts, 0.84),
    )
