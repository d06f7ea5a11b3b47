"""Calibration of the contrast model on flakes of known layer number.

From flakes whose N is known (Raman, PL, AFM), fit the oxide thickness, the contrast scale s and
the coefficients a of the n,k uncertainty (flakebook.optics.nkmodel) by weighted least squares
of the measured contrast against the thin-film model C = s * M(N; t_ox, a), with Gaussian priors
(the oxide's nominal value and its error, s = 1 +- 0.2, a ~ N(0, I)). The uncertainties are the
Laplace approximation (the inverse of J^T J at the optimum, scaled by chi2/dof when that exceeds
1); the posterior of a narrows the n,k uncertainty that later layer likelihoods marginalise.
Every flake and channel gets its residual; a known flake more than 3 sigma off the calibrated
model is named in a warning (is its layer number right?).

The dark offset needs raw intensities (flakebook.optics.camera.calibrate fits it from counts);
from contrasts alone it stays None.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from flakebook import __version__
from flakebook.errors import InputError
from flakebook.optics.materials import Material
from flakebook.optics.microscope import Microscope, channel_contrast
from flakebook.optics.nkmodel import NkUncertainty, nk_uncertainty
from flakebook.optics.substrate import Hole, Substrate

CALIBRATION_FORMAT = "flakebook-layer-calibration"
CALIBRATION_VERSION = 1
SCALE_PRIOR_ERR = 0.2
DEFAULT_OXIDE_PRIOR_ERR_NM = 20.0
OUTLIER_SIGMA = 3.0


@dataclass(frozen=True)
class KnownFlake:
    """A flake of known layer number and its measured contrast (and errors) per channel."""

    layers: int
    contrast: dict[str, float]
    contrast_err: dict[str, float] = field(default_factory=dict)
    id: str | None = None


@dataclass(frozen=True)
class LayerCalibration:
    """The fitted oxide, contrast scale and n,k coefficients, with residuals and warnings.

    ``to_dict`` gives the JSON of the ``calibrate`` command (INTERFACE.md); ``from_dict`` reads
    it back. ``optical_model`` describes the fitted n,k model (keys ``material``,
    ``substrate_nominal``, ``light``, ``na_illumination``, ``illumination``, ``nk_centre``,
    ``nk_sources``, ``nk_directions``, ``nk_coefficient_mean``, ``nk_coefficient_cov``,
    ``nk_rms_1l``, ``nk_rms_bulk`` (1-sigma RMS of n and k after calibration), ``description``,
    ``chi2``, ``dof``, ``method``, ``flakebook_version``).
    """

    oxide_nm: float
    oxide_err_nm: float
    contrast_scale: float
    contrast_scale_err: float
    dark_offset: dict[str, float] | None
    optical_model: dict
    flakes_used: tuple[str, ...]
    residuals: tuple[dict, ...]
    warnings: tuple[str, ...]

    @property
    def material(self) -> str:
        return str(self.optical_model.get("material", ""))

    @property
    def nk_mean(self) -> np.ndarray:
        return np.asarray(self.optical_model.get("nk_coefficient_mean") or [], float)

    @property
    def nk_cov(self) -> np.ndarray:
        k = self.nk_mean.size
        return np.asarray(self.optical_model.get("nk_coefficient_cov") or [], float).reshape(k, k)

    def nk_model(self, material: Material) -> NkUncertainty | None:
        """The n,k uncertainty of ``material`` narrowed by this calibration."""
        if material.name != self.material:
            raise InputError(
                f"the calibration was made for {self.material}, not {material.name}; accepted: "
                f"--material {self.material} or a calibration of {material.name}"
            )
        base = nk_uncertainty(material)
        if base is None or self.nk_mean.size == 0:
            return base
        if base.n_directions != self.nk_mean.size:
            raise InputError(
                "the calibration's n,k model has a different number of directions than this "
                "flakebook's; accepted: a calibration made with this version"
            )
        return base.narrowed(self.nk_mean, self.nk_cov)

    def to_dict(self) -> dict:
        return {
            "format": CALIBRATION_FORMAT,
            "version": CALIBRATION_VERSION,
            "oxide_nm": self.oxide_nm,
            "oxide_err_nm": self.oxide_err_nm,
            "contrast_scale": self.contrast_scale,
            "contrast_scale_err": self.contrast_scale_err,
            "dark_offset": None if self.dark_offset is None else dict(self.dark_offset),
            "optical_model": dict(self.optical_model),
            "flakes_used": list(self.flakes_used),
            "residuals": [dict(r) for r in self.residuals],
            "warnings": list(self.warnings),
        }

    @classmethod
    def from_dict(cls, data: dict, *, source: str = "calibration") -> LayerCalibration:
        """Read :meth:`to_dict` output back; InputError naming ``source`` when it cannot."""
        if not isinstance(data, dict) or data.get("format", CALIBRATION_FORMAT) != (
            CALIBRATION_FORMAT
        ):
            raise InputError(f"{source}: not a flakebook layer calibration (from 'calibrate')")
        if int(data.get("version", 1)) > CALIBRATION_VERSION:
            raise InputError(
                f"{source}: calibration version {data.get('version')} is newer than this "
                f"flakebook reads (up to {CALIBRATION_VERSION})"
            )
        try:
            cal = cls(
                oxide_nm=float(data["oxide_nm"]),
                oxide_err_nm=float(data["oxide_err_nm"]),
                contrast_scale=float(data["contrast_scale"]),
                contrast_scale_err=float(data["contrast_scale_err"]),
                dark_offset=None
                if data.get("dark_offset") is None
                else {str(k): float(v) for k, v in data["dark_offset"].items()},
                optical_model=dict(data["optical_model"]),
                flakes_used=tuple(str(x) for x in data.get("flakes_used", [])),
                residuals=tuple(dict(r) for r in data.get("residuals", [])),
                warnings=tuple(str(w) for w in data.get("warnings", [])),
            )
            _ = cal.nk_cov  # shape check
        except (KeyError, TypeError, ValueError, AttributeError) as exc:
            raise InputError(
                f"{source}: the calibration is incomplete or malformed ({exc}); accepted: the "
                "JSON written by 'flakebook calibrate'"
            ) from None
        vals = (cal.oxide_nm, cal.oxide_err_nm, cal.contrast_scale, cal.contrast_scale_err)
        if not all(math.isfinite(v) for v in vals) or cal.oxide_nm < 0 or cal.oxide_err_nm < 0:
            raise InputError(f"{source}: oxide and contrast-scale values must be finite, >= 0")
        if cal.contrast_scale <= 0 or cal.contrast_scale_err < 0:
            raise InputError(f"{source}: the contrast scale must be positive")
        return cal


def _light(microscope: Microscope) -> str:
    w = microscope.wavelength_nm
    return f"wavelength_nm:{w:g}" if w is not None else f"channels:{microscope.channels.ident}"


def calibrate_layers(
    flakes: Sequence[KnownFlake],
    *,
    material: Material,
    substrate: Substrate,
    microscope: Microscope,
    oxide_err_nm: float = 0.0,
    geometry: str = "supported",
    hole: Hole | None = None,
    fit_nk: bool = True,
    model_err: float | None = None,
    model_rel_err: float | None = None,
) -> LayerCalibration:
    """Fit the oxide, the contrast scale and (``fit_nk``) the n,k coefficients to known flakes.

    ``substrate`` gives the nominal oxide and ``oxide_err_nm`` its prior error (0: a wide prior
    of 20 nm). Contrast as everywhere: C = (R_reference - R_flake)/R_reference per channel,
    reference the bare substrate. Raises InputError when the flakes cannot calibrate (none, no oxide, ...).
    """
    from scipy.optimize import least_squares

    from flakebook.optics import layers as lay_mod

    model_err = lay_mod.DEFAULT_MODEL_ERR if model_err is None else float(model_err)
    rel = lay_mod.DEFAULT_MODEL_REL_ERR if model_rel_err is None else float(model_rel_err)
    flakes = list(flakes)
    if not flakes:
        raise InputError("calibration needs at least one flake of known layer number")
    t0 = substrate.oxide_nm
    if t0 is None:
        raise InputError(f"substrate {substrate.spec} has no SiO2 film to calibrate")
    if not (math.isfinite(oxide_err_nm) and oxide_err_nm >= 0):
        raise InputError(f"--oxide-err-nm {oxide_err_nm!r}: accepted a number >= 0")
    prior_t = oxide_err_nm if oxide_err_nm > 0 else DEFAULT_OXIDE_PRIOR_ERR_NM
    names = microscope.channel_names
    rows = []  # (flake index, channel index, value, error)
    for i, f in enumerate(flakes):
        if not isinstance(f.layers, int | np.integer) or not 1 <= int(f.layers) <= 100:
            raise InputError(
                f"known flake {f.id or i + 1}: layers {f.layers!r}; accepted a whole number 1-100"
            )
        _, vals, errs = lay_mod._check_inputs(f.contrast, f.contrast_err, microscope, ())
        use = [c for c in names if c in f.contrast]
        for c, v, e in zip(use, vals, errs):
            rows.append((i, names.index(c), float(v), float(e)))
    fi = np.array([r[0] for r in rows])
    ci = np.array([r[1] for r in rows])
    meas = np.array([r[2] for r in rows])
    err = np.array([r[3] for r in rows])
    known = sorted({int(f.layers) for f in flakes})
    n_of = np.array([known.index(int(flakes[i].layers)) for i in fi])
    base = nk_uncertainty(material) if fit_nk else None
    k = 0 if base is None else base.n_directions

    def model(theta):
        t, a = theta[0], theta[2:]
        mat = material if k == 0 else base.perturbed(material, a)
        table = channel_contrast(
            mat, known, substrate.with_oxide(max(t, 0.0)), microscope, geometry, hole
        )
        return table.contrast[n_of, ci]

    def residuals(theta):
        m = model(theta)
        sd = np.sqrt(err**2 + model_err**2 + (rel * m) ** 2 + 1e-8)
        data = (meas - theta[1] * m) / sd
        prior = [(theta[0] - t0) / prior_t, (theta[1] - 1.0) / SCALE_PRIOR_ERR, *theta[2:]]
        return np.concatenate([data, prior])

    # The oxide likelihood has many local minima (fringes): start from a coarse scan.
    start = None
    for t in np.arange(max(t0 - 3.0 * prior_t, 0.0), t0 + 3.0 * prior_t + 1e-9, 2.0):
        th = np.concatenate([[t, 1.0], np.zeros(k)])
        cost = float(np.sum(residuals(th) ** 2))
        if start is None or cost < start[0]:
            start = (cost, th)
    fit = least_squares(residuals, start[1], method="trf", x_scale=np.r_[1.0, 0.05, np.ones(k)])
    jac = fit.jac
    chi2 = float(np.sum(fit.fun**2))
    dof = max(meas.size, 1)  # data plus one prior term per parameter, less the parameters
    try:
        cov = np.linalg.inv(jac.T @ jac)
    except np.linalg.LinAlgError:
        raise InputError("the known flakes do not constrain the calibration; add flakes") from None
    cov = cov * max(1.0, chi2 / dof)
    sd = np.sqrt(np.maximum(np.diag(cov), 0.0))
    theta = fit.x
    m = model(theta)
    res_err = np.sqrt(err**2 + model_err**2 + (rel * m) ** 2 + (sd[1] * m) ** 2)
    res = meas - theta[1] * m
    residual_rows, warnings = [], []
    for j in range(meas.size):
        f = flakes[fi[j]]
        ident = f.id if f.id is not None else str(fi[j] + 1)
        residual_rows.append(
            {
                "id": ident,
                "layers": int(f.layers),
                "channel": names[ci[j]],
                "residual": float(res[j]),
                "residual_err": float(res_err[j]),
            }
        )
        z = res[j] / res_err[j]
        if abs(z) > OUTLIER_SIGMA:
            warnings.append(
                f"known flake {ident} ({f.layers}L) does not fit: its {names[ci[j]]} contrast "
                f"{meas[j]:.3f} differs from the calibrated model {theta[1] * m[j]:.3f} by "
                f"{z:+.1f} sigma; check its layer number, region and reference"
            )
    if abs(theta[0] - t0) > 2.5 * prior_t:
        warnings.append(
            f"the fitted oxide {theta[0]:.1f} nm lies far from the nominal {t0:g} nm: check the "
            "substrate and the known layer numbers"
        )
    nk = None if base is None else base.narrowed(theta[2:], cov[2:, 2:])
    optical_model = {
        "material": material.name,
        "substrate_nominal": substrate.spec,
        "light": _light(microscope),
        "na_illumination": microscope.na_illumination,
        "illumination": microscope.illumination.label,
        "data_sets": material.data_set_text,
        "reference": material.reference,
        **({} if nk is None else nk.to_dict()),
        "nk_fitted": nk is not None,
        "chi2": chi2,
        "dof": int(dof),
        "model_err": model_err,
        "model_rel_err": rel,
        "method": "weighted least squares of contrast against the thin-film model with priors "
        f"(oxide {t0:g} +- {prior_t:g} nm, contrast scale 1 +- {SCALE_PRIOR_ERR:g}, n,k "
        "coefficients N(0, 1)); errors from the Jacobian (Laplace), scaled by sqrt(chi2/dof) "
        "when that exceeds 1",
        "flakebook_version": __version__,
    }
    return LayerCalibration(
        oxide_nm=float(theta[0]),
        oxide_err_nm=float(sd[0]),
        contrast_scale=float(theta[1]),
        contrast_scale_err=float(sd[1]),
        dark_offset=None,
        optical_model=optical_model,
        flakes_used=tuple(f.id if f.id is not None else str(i + 1) for i, f in enumerate(flakes)),
        residuals=tuple(residual_rows),
        warnings=tuple(warnings),
    )
