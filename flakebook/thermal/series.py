"""Thermometry series: a Raman mode's centre against stage temperature or laser power.

:func:`fit_series` fits omega(x) = omega_0 + chi x by weighted least squares on the centre errors
and returns the slope (chi_T in cm^-1/K for a temperature series, chi_P in cm^-1/mW of incident
power at the sample for a power series) with its error. When the reduced chi-square exceeds 1 the
covariance is scaled by it (the scatter is larger than the stated errors) and a warning says so.
It warns of curvature (a quadratic term significant at 3 sigma), of a shift that does not come
back when the power (or temperature) steps back down (points taken at the same x on the way up
and on the way down differ by more than 3 combined sigma: damage, doping or hysteresis), and of
fewer than 5 points; fewer than 3 are refused.

:func:`combine_series` pairs a temperature and a power fit into :class:`Coefficients`, with their
covariance (zero for independent series; a correlation may be given when they share points), and
warns when the power series heats the flake beyond the temperature range that calibrated chi_T.

The temperature series is never calibrated against the Si line: the stage temperature is taken
as the sample's, and chi_T comes from the fitted mode centres as they are. A drift of the
spectrometer during the series therefore enters chi_T; correct it upstream, in the spectra.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from flakebook.errors import InputError

KINDS = {
    "temperature": ("stage temperature", "K"),
    "power": ("power at the sample", "mW"),
    "supported-power": ("power at the sample, beam on the supported part", "mW"),
}


@dataclass(frozen=True)
class SeriesFit:
    """A straight-line fit of mode centre (cm^-1) against temperature (K) or power (mW).

    ``slope`` is chi (cm^-1/K or cm^-1/mW), ``covariance`` that of (intercept, slope), already
    scaled by the reduced chi-square when it exceeds 1 (``scaled``).
    """

    kind: str
    slope: float
    slope_err: float
    intercept: float
    intercept_err: float
    covariance: np.ndarray
    reduced_chi2: float
    scaled: bool
    n_points: int
    x_min: float
    x_max: float
    curvature: float
    curvature_err: float
    warnings: tuple[str, ...]


def _wls(x: np.ndarray, y: np.ndarray, s: np.ndarray, degree: int):
    a = np.vander(x, degree + 1, increasing=True)
    aw = a / s[:, None]
    yw = y / s
    coef, *_ = np.linalg.lstsq(aw, yw, rcond=None)
    cov = np.linalg.inv(aw.T @ aw)
    chi2 = float(np.sum(((a @ coef - y) / s) ** 2))
    return coef, cov, chi2


def _as_array(name: str, v, n: int | None = None) -> np.ndarray:
    arr = np.array(v, dtype=float).ravel()
    if not np.all(np.isfinite(arr)):
        raise InputError(f"{name} holds a value that is not a finite number; finite numbers only")
    if n is not None and arr.size != n:
        raise InputError(
            f"{name} has {arr.size} values but the series has {n} points; one value per point"
        )
    return arr


def fit_series(
    x: np.ndarray,
    center_cm1: np.ndarray,
    center_err_cm1: np.ndarray,
    order: np.ndarray | None = None,
    kind: str = "power",
) -> SeriesFit:
    """Fit a thermometry series by weighted least squares.

    ``x``: stage temperature (K, ``kind="temperature"``) or power at the sample (mW,
    ``kind="power"``); ``center_cm1`` and ``center_err_cm1``: the fitted mode centre and its
    standard error; ``order``: the order in which the points were taken (default: as given),
    used to find the points taken on the way back down.
    """
    if kind not in KINDS:
        raise InputError(f"series kind {kind!r} is not known; 'temperature' or 'power'")
    label, unit = KINDS[kind]
    xs = _as_array(label, x)
    n = xs.size
    if n < 3:
        raise InputError(
            f"a {kind} series of {n} point(s) cannot give a slope with an error; at least 3 "
            "points are accepted (5 or more advised)"
        )
    y = _as_array("mode centre", center_cm1, n)
    s = _as_array("centre error", center_err_cm1, n)
    if np.any(s <= 0):
        raise InputError("a centre error is zero or negative; positive errors in cm^-1 only")
    ordr = np.arange(n) if order is None else _as_array("order", order, n)
    if np.unique(xs).size < 2:
        raise InputError(
            f"every point of the {kind} series is at the same {label}; at least two different "
            f"values in {unit} are needed"
        )
    warnings: list[str] = []
    if n < 5:
        warnings.append(
            f"the {kind} series has only {n} points; its error estimate is rough (5 or more "
            "advised)"
        )
    xc = xs.mean()
    coef, cov, chi2 = _wls(xs - xc, y, s, 1)
    dof = n - 2
    red = chi2 / dof if dof > 0 else float("nan")
    scaled = bool(dof > 0 and red > 1)
    if scaled:
        cov = cov * red  # the slope error never below what the scatter says (Birge ratio)
        p_value = float(special.chdtrc(dof, chi2))
        if p_value < 0.05:  # said only where the scatter is beyond chance
            warnings.append(
                f"the {kind} series scatters more than its centre errors (reduced chi-square "
                f"{red:.2f}, p = {p_value:.2g}); the slope error is scaled by sqrt({red:.2f})"
            )
    slope = float(coef[1])
    slope_var = float(cov[1, 1])
    # back to the intercept at x = 0
    intercept = float(coef[0] - slope * xc)
    var_b = float(cov[0, 0] + xc**2 * cov[1, 1] - 2 * xc * cov[0, 1])
    cov_bs = float(cov[0, 1] - xc * cov[1, 1])
    cov_out = np.array([[var_b, cov_bs], [cov_bs, slope_var]])
    curv, curv_err = float("nan"), float("nan")
    if np.unique(xs).size >= 3 and n >= 4:
        c2, cov2, chi2q = _wls(xs - xc, y, s, 2)
        scale = max(chi2q / (n - 3), 1.0) if n > 3 else 1.0
        curv, curv_err = float(c2[2]), float(np.sqrt(cov2[2, 2] * scale))
        if abs(curv) > 3 * curv_err:
            warnings.append(
                f"the {kind} series is curved: a quadratic term of {curv:.3g} cm^-1/{unit}^2 is "
                f"{abs(curv) / curv_err:.1f} sigma from zero; a straight-line slope depends on "
                "the range"
            )
    warnings.extend(_hysteresis(xs, y, s, ordr, kind, unit))
    return SeriesFit(
        kind=kind,
        slope=slope,
        slope_err=float(np.sqrt(slope_var)),
        intercept=intercept,
        intercept_err=float(np.sqrt(var_b)),
        covariance=cov_out,
        reduced_chi2=float(red),
        scaled=scaled,
        n_points=n,
        x_min=float(xs.min()),
        x_max=float(xs.max()),
        curvature=curv,
        curvature_err=curv_err,
        warnings=tuple(warnings),
    )


def _hysteresis(x, y, s, order, kind: str, unit: str) -> list[str]:
    """Points taken after the maximum x (on the way down) against those at the same x before."""
    idx = np.argsort(order, kind="stable")
    xo, yo, so = x[idx], y[idx], s[idx]
    top = int(np.argmax(xo))
    span = float(np.ptp(x))
    tol = 1e-3 * span
    worst = None
    for j in range(top + 1, xo.size):
        ups = [i for i in range(top + 1) if abs(xo[i] - xo[j]) <= tol]
        for i in ups:
            z = abs(yo[j] - yo[i]) / np.hypot(so[i], so[j])
            if z > 3 and (worst is None or z > worst[0]):
                worst = (z, xo[j], yo[j] - yo[i])
    if worst is None:
        return []
    z, xv, dy = worst
    what = "temperature" if kind == "temperature" else "power"
    return [
        f"the mode does not come back when the {what} steps down: at {xv:.4g} {unit} it differs "
        f"by {dy:+.3g} cm^-1 ({z:.1f} combined sigma) between the way up and the way down "
        "(damage, doping or hysteresis); check the flake before using this series"
    ]


@dataclass(frozen=True)
class Coefficients:
    """chi_T (cm^-1/K) and chi_P (cm^-1/mW incident at the sample) with their covariance.

    ``covariance`` is the 2x2 matrix of (chi_T, chi_P); ``correlation`` its off-diagonal
    correlation coefficient.
    """

    chi_t_cm1_per_k: float
    chi_t_err_cm1_per_k: float
    chi_p_cm1_per_mw: float
    chi_p_err_cm1_per_mw: float
    correlation: float
    covariance: np.ndarray
    max_power_mw: float | None
    temperature_span_k: float | None
    warnings: tuple[str, ...]

    @property
    def max_temperature_rise_k(self) -> float | None:
        """P_max chi_P / chi_T: the Raman temperature rise at the highest power."""
        if self.max_power_mw is None:
            return None
        return self.max_power_mw * self.chi_p_cm1_per_mw / self.chi_t_cm1_per_k


def combine_series(
    temperature: SeriesFit, power: SeriesFit, correlation: float = 0.0
) -> Coefficients:
    """chi_T and chi_P from a temperature and a power fit (independent unless ``correlation``).

    Warns when the highest power heats the flake (P_max chi_P / chi_T) by more than the span
    of the temperature series, where chi_T was not calibrated.
    """
    if temperature.kind != "temperature" or power.kind != "power":
        raise InputError(
            "combine_series takes a temperature fit then a power fit; got "
            f"{temperature.kind!r} and {power.kind!r}"
        )
    coeffs = coefficients(
        temperature.slope,
        temperature.slope_err,
        power.slope,
        power.slope_err,
        correlation,
        max_power_mw=power.x_max,
        temperature_span_k=temperature.x_max - temperature.x_min,
    )
    warns = tuple(f"temperature series: {w}" for w in temperature.warnings)
    warns += tuple(f"power series: {w}" for w in power.warnings)
    return Coefficients(**{**coeffs.__dict__, "warnings": warns + coeffs.warnings})


def coefficients(
    chi_t_cm1_per_k: float,
    chi_t_err_cm1_per_k: float,
    chi_p_cm1_per_mw: float,
    chi_p_err_cm1_per_mw: float,
    correlation: float = 0.0,
    *,
    max_power_mw: float | None = None,
    temperature_span_k: float | None = None,
) -> Coefficients:
    """:class:`Coefficients` from given values (e.g. typed in), with the same checks."""
    if not -1 < correlation < 1:
        raise InputError(
            f"chi correlation {correlation!r} is outside (-1, 1); a correlation coefficient "
            "strictly between -1 and 1 is accepted"
        )
    for name, v in (("chi_T error", chi_t_err_cm1_per_k), ("chi_P error", chi_p_err_cm1_per_mw)):
        if not (np.isfinite(v) and v >= 0):
            raise InputError(f"{name} {v!r} is not usable; a standard deviation >= 0 is accepted")
    cov_tp = correlation * chi_t_err_cm1_per_k * chi_p_err_cm1_per_mw
    cov = np.array(
        [[chi_t_err_cm1_per_k**2, cov_tp], [cov_tp, chi_p_err_cm1_per_mw**2]], dtype=float
    )
    warnings: list[str] = []
    if max_power_mw is not None and temperature_span_k is not None and chi_t_cm1_per_k != 0:
        rise = max_power_mw * chi_p_cm1_per_mw / chi_t_cm1_per_k
        if rise > temperature_span_k:
            warnings.append(
                f"the highest power ({max_power_mw:.3g} mW) heats the flake by about {rise:.0f} "
                f"K, beyond the {temperature_span_k:.0f} K span of the temperature series that "
                "calibrated chi_T; chi_T is extrapolated there"
            )
    return Coefficients(
        chi_t_cm1_per_k=float(chi_t_cm1_per_k),
        chi_t_err_cm1_per_k=float(chi_t_err_cm1_per_k),
        chi_p_cm1_per_mw=float(chi_p_cm1_per_mw),
        chi_p_err_cm1_per_mw=float(chi_p_err_cm1_per_mw),
        correlation=float(correlation),
        covariance=cov,
        max_power_mw=max_power_mw,
        temperature_span_k=temperature_span_k,
        warnings=tuple(warnings),
    )
