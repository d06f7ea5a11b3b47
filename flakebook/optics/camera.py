"""Camera realism: dark offset, contrast scale, saturation, and their calibration.

A camera channel records I = g (R + f) + d: a gain g (cancels in contrast, needs no fit), stray
light and flare f (they compress contrast), and a dark offset d (counts with no light). After the
dark offset is subtracted, the measured contrast is

    C = (I_ref - I_flake) / (I_ref - d) = s * C_model,   s = R_ref / (R_ref + f) <= 1,

one contrast scale s shared by the channels. The calibration fits the oxide thickness, the dark
offset of each channel and the contrast scale from the bare substrate and flakes of known layer
number (with an image taken with the light blocked, which reads the dark offset directly,
when there is one), and returns them with uncertainties
(:class:`CameraCalibration`, serialisable to a dict for the project file). The micrographs step
subtracts the stored dark offset once; later layer likelihoods use the stored oxide, its error and
the contrast scale (:meth:`CameraCalibration.likelihood_options`).
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
from flakebook.optics.substrate import Substrate

CALIBRATION_VERSION = 1


def saturation_mask(image, full_scale: float, *, threshold: float = 0.98) -> np.ndarray:
    """True where any channel of a pixel is at or above ``threshold`` x ``full_scale``.

    ``image``: (rows, cols) or (rows, cols, channels) array of raw counts; ``full_scale``: the
    largest value the camera records (e.g. 255, 4095, 65535). Saturated pixels carry no contrast
    information and must be left out of region means.
    """
    img = np.asarray(image)
    if img.ndim not in (2, 3):
        raise InputError(f"an image must be 2-d or 3-d (rows, cols[, channels]); got {img.shape}")
    if not (math.isfinite(full_scale) and full_scale > 0):
        raise InputError(f"full scale {full_scale!r}: accepted a positive number of counts")
    if not 0 < threshold <= 1:
        raise InputError(f"saturation threshold {threshold!r}: accepted 0 < threshold <= 1")
    hot = img >= threshold * full_scale
    return hot if img.ndim == 2 else np.any(hot, axis=-1)


@dataclass(frozen=True)
class CalibrationObservation:
    """One flake of known layer number and its bare-substrate reference, in raw counts
    (dark offset not subtracted): region means and their standard errors per channel."""

    layers: int
    flake: dict[str, float]
    reference: dict[str, float]
    flake_err: dict[str, float] = field(default_factory=dict)
    reference_err: dict[str, float] = field(default_factory=dict)


@dataclass(frozen=True)
class CameraCalibration:
    """Fitted oxide thickness, dark offset per channel and contrast scale, with 1-sigma errors."""

    oxide_nm: float
    oxide_err_nm: float
    dark_offset: dict[str, float]
    dark_offset_err: dict[str, float]
    contrast_scale: float
    contrast_scale_err: float
    channels: tuple[str, ...]
    chi2: float
    dof: int
    material: str
    substrate: str
    data_sets: str = ""
    flakebook_version: str = __version__
    method: str = (
        "weighted least squares of the dark-subtracted contrast against the thin-film model; "
        "errors from the Jacobian, scaled by sqrt(chi2/dof) when that exceeds 1"
    )

    def to_dict(self) -> dict:
        """A JSON-safe dict (for the project file)."""
        return {
            "version": CALIBRATION_VERSION,
            "oxide_nm": self.oxide_nm,
            "oxide_err_nm": self.oxide_err_nm,
            "dark_offset": dict(self.dark_offset),
            "dark_offset_err": dict(self.dark_offset_err),
            "contrast_scale": self.contrast_scale,
            "contrast_scale_err": self.contrast_scale_err,
            "channels": list(self.channels),
            "chi2": self.chi2,
            "dof": self.dof,
            "material": self.material,
            "substrate": self.substrate,
            "data_sets": self.data_sets,
            "flakebook_version": self.flakebook_version,
            "method": self.method,
        }

    @classmethod
    def from_dict(cls, data: dict) -> CameraCalibration:
        """The calibration from :meth:`to_dict` output; InputError when it cannot be used."""
        try:
            version = int(data.get("version", 0))
            if version > CALIBRATION_VERSION:
                raise InputError(
                    f"camera calibration version {version} is newer than this flakebook "
                    f"understands (up to {CALIBRATION_VERSION})"
                )
            return cls(
                oxide_nm=float(data["oxide_nm"]),
                oxide_err_nm=float(data["oxide_err_nm"]),
                dark_offset={str(k): float(v) for k, v in data["dark_offset"].items()},
                dark_offset_err={str(k): float(v) for k, v in data["dark_offset_err"].items()},
                contrast_scale=float(data["contrast_scale"]),
                contrast_scale_err=float(data["contrast_scale_err"]),
                channels=tuple(str(c) for c in data["channels"]),
                chi2=float(data["chi2"]),
                dof=int(data["dof"]),
                material=str(data["material"]),
                substrate=str(data["substrate"]),
                data_sets=str(data.get("data_sets", "")),
                flakebook_version=str(data.get("flakebook_version", "")),
                method=str(data.get("method", cls.method)),
            )
        except (KeyError, TypeError, ValueError, AttributeError) as exc:
            raise InputError(
                f"camera calibration record is incomplete or malformed ({exc})"
            ) from None

    def contrast(self, flake: dict[str, float], reference: dict[str, float]) -> dict[str, float]:
        """Dark-subtracted contrast (I_ref - I_flake) / (I_ref - d) per channel from raw counts."""
        out = {}
        for c, fl in flake.items():
            if c not in reference or c not in self.dark_offset:
                raise InputError(f"channel {c}: needs a reference value and a calibrated offset")
            den = reference[c] - self.dark_offset[c]
            if den <= 0:
                raise InputError(f"channel {c}: reference counts at or below the dark offset")
            out[c] = (reference[c] - fl) / den
        return out

    def likelihood_options(self, substrate: Substrate) -> dict:
        """Keyword arguments for ``layer_likelihood``: the calibrated substrate, its oxide error
        and the contrast scale with its error."""
        return {
            "substrate": substrate.with_oxide(self.oxide_nm),
            "oxide_err_nm": self.oxide_err_nm,
            "contrast_scale": self.contrast_scale,
            "contrast_scale_err": self.contrast_scale_err,
        }


def calibrate(
    observations: Sequence[CalibrationObservation],
    *,
    material: Material,
    substrate: Substrate,
    microscope: Microscope,
    oxide_prior_err_nm: float | None = 20.0,
    dark_frame: dict[str, float] | None = None,
    dark_frame_err: dict[str, float] | None = None,
) -> CameraCalibration:
    """Fit oxide thickness, dark offsets and the contrast scale (see the module docstring).

    ``oxide_prior_err_nm``: a Gaussian prior on the oxide around the substrate's nominal value
    (None: no prior). ``dark_frame``: measured counts with the light blocked, per channel (a
    prior on the dark offsets). The dark offsets and the contrast scale can only be told apart
    when the reference brightness varies between observations (different exposures or lamp
    settings) or an image with the light blocked is given; otherwise InputError says so.
    """
    from scipy.optimize import least_squares

    obs = list(observations)
    if not obs:
        raise InputError("calibration needs at least one flake of known layer number")
    t0 = substrate.oxide_nm
    if t0 is None:
        raise InputError(f"substrate {substrate.spec} has no SiO2 film to calibrate")
    channels = tuple(c for c in microscope.channel_names if all(c in o.flake for o in obs))
    if not channels:
        raise InputError(
            "no channel is present in every calibration observation; accepted channels: "
            + ", ".join(microscope.channel_names)
        )
    for o in obs:
        if not isinstance(o.layers, int | np.integer) or o.layers < 1:
            raise InputError(f"calibration flake layers {o.layers!r}: accepted whole numbers >= 1")
        for c in channels:
            if c not in o.reference:
                raise InputError(f"calibration observation lacks the reference value of {c}")
    dark_frame = dict(dark_frame or {})
    dark_frame_err = dict(dark_frame_err or {})
    layers = sorted({int(o.layers) for o in obs})
    idx = [microscope.channel_names.index(c) for c in channels]

    i_fl = np.array([[o.flake[c] for c in channels] for o in obs], float)
    i_ref = np.array([[o.reference[c] for c in channels] for o in obs], float)
    e_fl = np.array([[o.flake_err.get(c, 0.0) for c in channels] for o in obs], float)
    e_ref = np.array([[o.reference_err.get(c, 0.0) for c in channels] for o in obs], float)
    if not (np.all(np.isfinite(i_fl)) and np.all(np.isfinite(i_ref))):
        raise InputError("calibration counts must be finite numbers")
    floor = 1e-3 * np.maximum(np.abs(i_ref), 1.0)  # a counts floor keeps weights finite
    n_of = np.array([layers.index(int(o.layers)) for o in obs])

    def model(t):
        table = channel_contrast(material, layers, substrate.with_oxide(t), microscope)
        return table.contrast[:, idx][n_of]  # (obs, channels)

    def residuals(theta):
        t, s, d = theta[0], theta[1], theta[2:]
        m = model(t)
        res = (i_ref - i_fl) - s * m * (i_ref - d[None, :])
        sd = np.sqrt(e_fl**2 + (e_ref * (1.0 - s * m)) ** 2 + floor**2)
        out = [(res / sd).ravel()]
        if oxide_prior_err_nm:
            out.append(np.array([(t - t0) / oxide_prior_err_nm]))
        for j, c in enumerate(channels):
            if c in dark_frame:
                err = max(dark_frame_err.get(c, 0.0), 1e-3)
                out.append(np.array([(d[j] - dark_frame[c]) / err]))
        return np.concatenate(out)

    d0 = np.array([dark_frame.get(c, 0.0) for c in channels])
    theta0 = np.concatenate([[t0, 1.0], d0])
    # The oxide likelihood has many local minima (fringes): start from a coarse scan.
    best = None
    for t in np.arange(max(t0 - 40.0, 1.0), t0 + 40.1, 4.0):
        th = theta0.copy()
        th[0] = t
        cost = float(np.sum(residuals(th) ** 2))
        if best is None or cost < best[0]:
            best = (cost, th)
    fit = least_squares(residuals, best[1], x_scale="jac", diff_step=1e-4)
    jac = fit.jac
    jtj = jac.T @ jac
    n_data = i_fl.size
    dof = max(n_data + (1 if oxide_prior_err_nm else 0) + len(dark_frame) - len(theta0), 1)
    chi2 = float(np.sum(fit.fun**2))
    try:
        cond = np.linalg.cond(jtj)
        if not np.isfinite(cond) or cond > 1e12:
            raise np.linalg.LinAlgError
        cov = np.linalg.inv(jtj)
    except np.linalg.LinAlgError:
        raise InputError(
            "the calibration cannot separate the dark offset from the contrast scale with these "
            "observations; accepted: add an image with the light blocked (it reads the dark offset) "
            "or images of the same "
            "flakes at different exposures or lamp settings, or flakes of more layer numbers"
        ) from None
    cov = cov * max(1.0, chi2 / dof)
    err = np.sqrt(np.maximum(np.diag(cov), 0.0))
    t, s, d = fit.x[0], fit.x[1], fit.x[2:]
    corr = cov / np.outer(np.maximum(err, 1e-300), np.maximum(err, 1e-300))
    if err[1] > 0.2 or np.max(np.abs(corr[1, 2:])) > 0.995:
        raise InputError(
            "the calibration cannot separate the dark offset from the contrast scale with these "
            "observations (they trade off almost perfectly); accepted: add an image with the light "
            "blocked (it reads the dark offset) or images of the same flakes at different "
            "exposures or lamp settings"
        )
    if not (0 < s < 2):
        raise InputError(
            f"the fitted contrast scale {s:.3g} is not physical; check the layer numbers and the "
            "substrate of the calibration flakes"
        )
    return CameraCalibration(
        oxide_nm=float(t),
        oxide_err_nm=float(err[0]),
        dark_offset={c: float(d[j]) for j, c in enumerate(channels)},
        dark_offset_err={c: float(err[2 + j]) for j, c in enumerate(channels)},
        contrast_scale=float(s),
        contrast_scale_err=float(err[1]),
        channels=channels,
        chi2=chi2,
        dof=int(dof),
        material=material.name,
        substrate=substrate.spec,
        data_sets="; ".join(
            [material.data_set_text]
            + [f.material.data_set_text for f in substrate.films]
            + [substrate.base.data_set_text]
        ),
    )
