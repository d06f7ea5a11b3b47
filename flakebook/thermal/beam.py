"""The laser's 1/e^2 intensity radius W at the sample, measured or estimated.

* :func:`fit_knife_edge`: a knife-edge (edge) scan, the power passing an edge moved across the
  beam, fitted with P(x) = B + P0/2 erfc(sqrt(2)(x - x0)/W) (an edge moving either way);
* :func:`fit_beam_image`: an image of the focused spot fitted with an elliptical 2D Gaussian
  B + A exp(-2 (x-x0)^2/Wx^2 - 2 (y-y0)^2/Wy^2); W = sqrt(Wx Wy), the radius of the round beam
  of the same peak-to-power ratio;
* :func:`diffraction_beam_radius`: an estimate from the laser line and the objective's NA, always
  with a warning (a real focus is larger: aberrations, a partly filled aperture, defocus).

Every result is a :class:`BeamRadius` with its standard error and the method used.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize, special

from flakebook.errors import InputError

# W / (lambda / NA) of the diffraction estimates
DIFFRACTION_MODELS = {
    # a Gaussian beam whose far-field 1/e^2 half-angle fills the aperture (paraxial):
    # W0 = lambda / (pi NA)
    "gaussian": 1 / math.pi,
    # the radius where the Airy pattern of a uniformly filled aperture falls to 1/e^2 of its
    # peak: (2 J1(v)/v)^2 = e^-2 at v = 2 pi NA r / lambda = 2.5838
    "airy": 2.583838989864877 / (2 * math.pi),
    # the Airy pattern's first dark ring 0.61 lambda / NA taken as W (an upper estimate)
    "airy-first-zero": 0.6098,
}


@dataclass(frozen=True)
class BeamRadius:
    """The beam's 1/e^2 intensity radius (um) with its standard error and how it was found."""

    radius_um: float
    radius_err_um: float
    method: str
    center_um: tuple[float, ...] = ()
    warnings: tuple[str, ...] = ()


def _knife(x, b, p0, x0, w):
    return b + 0.5 * p0 * special.erfc(math.sqrt(2) * (x - x0) / w)


def fit_knife_edge(
    position_um: np.ndarray,
    power: np.ndarray,
    power_err: np.ndarray | float | None = None,
) -> BeamRadius:
    """W from an edge scan: the edge position (um) and the power passing it (any unit).

    With ``power_err`` the fit weights by it and the error is absolute (scaled up when the
    reduced chi-square exceeds 1); without it the error comes from the residual scatter.
    """
    x = np.array(position_um, float).ravel()
    p = np.array(power, float).ravel()
    if x.size != p.size or x.size < 6:
        raise InputError(
            f"an edge scan needs matching positions and powers, at least 6 points; got "
            f"{x.size} positions and {p.size} powers"
        )
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(p))):
        raise InputError("the edge scan holds a value that is not a finite number")
    order = np.argsort(x)
    x, p = x[order], p[order]
    sigma = None
    if power_err is not None:
        sigma = np.broadcast_to(np.asarray(power_err, float), p.shape)[order]
        if np.any(sigma <= 0):
            raise InputError("an edge-scan power error is zero or negative; positive errors only")
    lo, hi = float(p.min()), float(p.max())
    if hi - lo <= 0:
        raise InputError("the edge scan's power does not change: the edge never crossed the beam")
    falling = p[: max(1, p.size // 4)].mean() > p[-max(1, p.size // 4) :].mean()
    half = 0.5 * (lo + hi)
    x0 = float(x[np.argmin(np.abs(p - half))])
    frac = (p - lo) / (hi - lo)
    inside = (frac > 0.16) & (frac < 0.84)
    w0 = float(np.ptp(x[inside])) if np.count_nonzero(inside) >= 2 else float(np.ptp(x)) / 4
    w0 = max(w0, float(np.min(np.diff(x))) if x.size > 1 else 1.0, 1e-6)
    if falling:
        guess = [lo, hi - lo, x0, w0]
    else:
        guess = [hi, -(hi - lo), x0, w0]
    try:
        popt, pcov = optimize.curve_fit(
            _knife, x, p, p0=guess, sigma=sigma, absolute_sigma=sigma is not None, maxfev=20000
        )
    except (RuntimeError, optimize.OptimizeWarning) as exc:
        raise InputError(
            f"the edge scan could not be fitted with an error function ({exc})"
        ) from None
    warnings = []
    if sigma is not None:
        red = float(np.sum(((p - _knife(x, *popt)) / sigma) ** 2) / max(x.size - 4, 1))
        if red > 1:
            pcov = pcov * red
            warnings.append(
                f"the edge scan scatters more than its errors (reduced chi-square {red:.2f}); "
                "the radius error is scaled up"
            )
    w = abs(float(popt[3]))
    w_err = float(np.sqrt(pcov[3, 3]))
    span = float(np.ptp(x))
    if abs(popt[2] - x.min()) < w or abs(x.max() - popt[2]) < w:
        warnings.append("the edge scan does not extend a beam radius beyond the edge on both sides")
    if np.min(np.diff(x)) > w:
        warnings.append("the edge-scan step is larger than the beam radius; use finer steps")
    if not np.isfinite(w_err) or w > span:
        raise InputError("the edge scan does not constrain the beam radius; scan across the spot")
    return BeamRadius(
        radius_um=w,
        radius_err_um=w_err,
        method="knife-edge scan fitted with P0/2 erfc(sqrt(2)(x - x0)/W)",
        center_um=(float(popt[2]),),
        warnings=tuple(warnings),
    )


def _gauss2d(xy, b, a, x0, y0, wx, wy):
    x, y = xy
    return b + a * np.exp(-2 * (x - x0) ** 2 / wx**2 - 2 * (y - y0) ** 2 / wy**2)


def fit_beam_image(image: np.ndarray, um_per_px: float) -> BeamRadius:
    """W from an image of the focused spot (2D array, row-major) and its scale (um per pixel).

    Pixel (x, y) has its origin at the top-left pixel's centre, x along columns. The fit gives
    Wx and Wy; W = sqrt(Wx Wy) with its error propagated; an ellipticity above 1.2 is warned of.
    """
    img = np.array(image, float)
    if img.ndim != 2 or min(img.shape) < 5:
        raise InputError(
            f"a beam image must be a 2D array of at least 5 x 5 pixels; got shape {img.shape}"
        )
    if not (np.isfinite(um_per_px) and um_per_px > 0):
        raise InputError(f"scale {um_per_px!r} um/px is not usable; a positive scale is accepted")
    if not np.all(np.isfinite(img)):
        raise InputError("the beam image holds pixels that are not finite numbers")
    rows, cols = img.shape
    y, x = np.mgrid[0:rows, 0:cols].astype(float)
    b0 = float(np.percentile(img, 10))
    a0 = float(img.max() - b0)
    if a0 <= 0:
        raise InputError("the beam image is flat: no spot to fit")
    wts = np.clip(img - b0, 0, None)
    x0, y0 = float((wts * x).sum() / wts.sum()), float((wts * y).sum() / wts.sum())
    sx = math.sqrt(max((wts * (x - x0) ** 2).sum() / wts.sum(), 0.25))
    sy = math.sqrt(max((wts * (y - y0) ** 2).sum() / wts.sum(), 0.25))
    try:
        popt, pcov = optimize.curve_fit(
            _gauss2d,
            (x.ravel(), y.ravel()),
            img.ravel(),
            p0=[b0, a0, x0, y0, 2 * sx, 2 * sy],
            maxfev=20000,
        )
    except RuntimeError as exc:
        raise InputError(f"the beam image could not be fitted with a 2D Gaussian ({exc})") from None
    wx, wy = abs(popt[4]), abs(popt[5])
    cov = pcov[4:6, 4:6]
    # W = sqrt(wx wy): dW/dwx = W/(2 wx), dW/dwy = W/(2 wy)
    w = math.sqrt(wx * wy)
    jac = np.array([w / (2 * wx), w / (2 * wy)])
    w_err = float(math.sqrt(max(jac @ cov @ jac, 0.0)))
    warnings = []
    ell = max(wx, wy) / min(wx, wy)
    if ell > 1.2:
        warnings.append(
            f"the spot is elliptical (Wx/Wy = {wx / wy:.2f}); the round-beam model uses the "
            "geometric mean"
        )
    if w < 1.5:
        warnings.append("the spot is less than 1.5 pixels in radius: pixelation limits the fit")
    return BeamRadius(
        radius_um=w * um_per_px,
        radius_err_um=w_err * um_per_px,
        method="2D Gaussian fit of the spot image, W = sqrt(Wx Wy)",
        center_um=(float(popt[2]) * um_per_px, float(popt[3]) * um_per_px),
        warnings=tuple(warnings),
    )


def diffraction_beam_radius(
    laser_nm: float, na: float, model: str = "airy", relative_err: float = 0.2
) -> BeamRadius:
    """An estimate of W from the laser line (nm) and the objective's NA, with a warning.

    ``model``: "airy" W = 0.411 lambda/NA, the 1/e^2 radius of the Airy pattern of a uniformly
    filled aperture (paraxial); "gaussian" W = lambda/(pi NA), a Gaussian beam whose far-field
    1/e^2 half-angle equals the aperture angle; "airy-first-zero" W = 0.61 lambda/NA, the first
    dark ring taken as W (an upper estimate). ``relative_err`` sets the stated error.
    """
    if model not in DIFFRACTION_MODELS:
        raise InputError(
            f"diffraction model {model!r} is not known; accepted: {tuple(DIFFRACTION_MODELS)}"
        )
    if not (np.isfinite(laser_nm) and laser_nm > 0):
        raise InputError(f"laser line {laser_nm!r} nm is not usable; a positive wavelength in nm")
    if not (np.isfinite(na) and 0 < na < 1.6):
        raise InputError(
            f"numerical aperture {na!r} is not usable; a value in (0, 1.6) is accepted"
        )
    c = DIFFRACTION_MODELS[model]
    w = c * laser_nm * 1e-3 / na
    formula = {
        "airy": "W = 0.411 lambda/NA (1/e^2 radius of the Airy pattern, filled aperture)",
        "gaussian": "W = lambda/(pi NA) (Gaussian focus filling the aperture angle)",
        "airy-first-zero": "W = 0.61 lambda/NA (Airy first dark ring taken as W)",
    }[model]
    return BeamRadius(
        radius_um=w,
        radius_err_um=relative_err * w,
        method=f"diffraction estimate: {formula}",
        warnings=(
            f"the beam radius is a diffraction estimate ({formula}), not a measurement; a real "
            "focus is larger (aberrations, a partly filled aperture, defocus): measure it with "
            "an edge scan or a spot image",
        ),
    )
