"""Thermal conductivity from the Raman coefficients: the heat model inverted.

The measured thermal resistance per absorbed watt is R_meas = chi_P / (A chi_T) (chi_P per W of
incident power at the sample, A the flake's absorptance at the laser); :func:`invert_kappa` finds
kappa such that the model's R_m = (T_m - T_a) / P_abs equals it. For the suspended disk with its
edge at the sink and a centred beam, R_m = G / (2 pi kappa t) with G the geometry factor
(closed form for R/W >= 4, the exact quadrature below), so kappa = G / (2 pi t R_meas). With a
supported annulus, a kappa(T) or an off-centre beam the numerical solver of
:mod:`flakebook.thermal.model` is inverted by root finding.

With kappa(T) = kappa_0 (T_0/T)^alpha the measured chi_P is the slope of a straight line through
the series' points, so the model does the same: it computes T_m at each power of the series
(``HeatModel.powers_mw``, incident) and fits a line through them. Without powers the low-power
limit is used, in which alpha has no effect (a warning says so).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import interpolate, optimize

from flakebook.errors import InputError
from flakebook.thermal import model as _model

METHODS = ("auto", "closed-form", "quadrature", "numerical")


@dataclass(frozen=True)
class HeatModel:
    """Options of the heat model (all optional; the default is the suspended disk, edge at sink).

    ``weighting``: "intensity" or "confocal". ``interface_conductance_w_m2k``: the flake goes on
    over the supported region (annulus out to ``supported_outer_radius_um``) with this interface
    conductance. ``kappa_alpha``: kappa(T) = kappa_0 (T_0/T)^alpha with T_0
    ``reference_temperature_k`` (default the ambient); kappa_0 is what is reported.
    ``beam_offset_um``: the beam's distance from the hole centre. ``powers_mw``: the incident
    powers of the power series (for kappa(T)). ``method``: "auto", "closed-form", "quadrature" or
    "numerical".
    """

    weighting: str = "intensity"
    interface_conductance_w_m2k: float | None = None
    supported_outer_radius_um: float | None = None
    kappa_alpha: float = 0.0
    reference_temperature_k: float | None = None
    ambient_temperature_k: float = 295.0
    beam_offset_um: float = 0.0
    powers_mw: tuple[float, ...] | None = None
    method: str = "auto"

    @property
    def is_simple(self) -> bool:
        """True when R_m = G / (2 pi kappa t): centred, edge at the sink, constant kappa."""
        return (
            self.interface_conductance_w_m2k is None
            and self.beam_offset_um == 0
            and (self.kappa_alpha == 0 or not self.powers_mw)
        )

    @property
    def reference_k(self) -> float:
        """T_0 of kappa(T)."""
        if self.reference_temperature_k is None:
            return self.ambient_temperature_k
        return self.reference_temperature_k


@dataclass(frozen=True)
class KappaInversion:
    """kappa (W/m/K, kappa_0 at T_0 for kappa(T)) and the quantities it came from."""

    kappa_w_mk: float
    thermal_resistance_k_per_w: float
    temperature_rise_k_per_mw_incident: float
    geometry_factor: float
    method: str
    warnings: tuple[str, ...]


def check_inputs(
    chi_t_cm1_per_k: float,
    chi_p_cm1_per_mw: float,
    absorptance: float,
    thickness_nm: float,
    hole_radius_um: float,
    beam_radius_um: float,
) -> None:
    """Refuse inputs no heat model can use, with a message saying what is accepted."""
    for name, v in (("chi_T", chi_t_cm1_per_k), ("chi_P", chi_p_cm1_per_mw)):
        if not np.isfinite(v) or v == 0:
            raise InputError(f"{name} {v!r} is not usable; a non-zero finite coefficient is needed")
    if np.sign(chi_t_cm1_per_k) != np.sign(chi_p_cm1_per_mw):
        raise InputError(
            f"chi_T ({chi_t_cm1_per_k:.4g} cm^-1/K) and chi_P ({chi_p_cm1_per_mw:.4g} cm^-1/mW) "
            "have different signs: heating must shift the mode the same way as the stage does "
            "(for a mode that softens, both negative); check the signs and the series"
        )
    if not (np.isfinite(absorptance) and 0 < absorptance < 1):
        raise InputError(
            f"absorptance {absorptance!r} is outside (0, 1); the fraction of the incident power "
            "absorbed in the flake, strictly between 0 and 1, is accepted"
        )
    if not (np.isfinite(thickness_nm) and thickness_nm > 0):
        raise InputError(
            f"thickness {thickness_nm!r} nm is not usable; a positive thickness in nm is accepted"
        )
    _model._check_radii(hole_radius_um, beam_radius_um)


# exact G for small R/W (below 4 the closed form is off by more than 1e-9), tabulated once
_TABLE: dict[str, interpolate.CubicSpline] = {}
_TABLE_MAX = 4.0


def _small_ratio_table(weighting: str) -> interpolate.CubicSpline:
    if weighting not in _TABLE:
        lr = np.linspace(math.log(1.0005), math.log(_TABLE_MAX + 0.5), 120)
        g = [_model.geometry_factor_quadrature(math.exp(x), 1.0, weighting) for x in lr]
        _TABLE[weighting] = interpolate.CubicSpline(lr, g)
    return _TABLE[weighting]


def geometry_factor(
    hole_radius_um: float | np.ndarray,
    beam_radius_um: float | np.ndarray,
    weighting: str = "intensity",
) -> float | np.ndarray:
    """G = 2 pi kappa t R_m of the centred disk with its edge at the sink, exact for any R > W.

    The closed form for R/W >= 4 (exact there to better than 1e-9) and the tabulated
    quadrature below (to about 1e-7). Vectorised.
    """
    r = np.asarray(hole_radius_um, float)
    w = np.asarray(beam_radius_um, float)
    ratio = r / w
    g = np.asarray(_model.geometry_factor_closed_form(r, w, weighting), float)
    small = ratio < _TABLE_MAX
    if np.any(small):
        spline = _small_ratio_table(weighting)
        g = np.where(small, spline(np.log(np.where(small, ratio, 2.0))), g)
    return float(g) if g.ndim == 0 else g


def kappa_simple(
    chi_t_cm1_per_k: np.ndarray | float,
    chi_p_cm1_per_mw: np.ndarray | float,
    absorptance: np.ndarray | float,
    thickness_nm: np.ndarray | float,
    hole_radius_um: np.ndarray | float,
    beam_radius_um: np.ndarray | float,
    weighting: str = "intensity",
) -> np.ndarray:
    """Vectorised kappa (W/m/K) of the centred disk with its edge at the sink; no checks."""
    r_meas = np.asarray(chi_p_cm1_per_mw) * 1e3 / (np.asarray(absorptance) * chi_t_cm1_per_k)
    g = geometry_factor(hole_radius_um, beam_radius_um, weighting)
    return g / (2 * np.pi * np.asarray(thickness_nm) * 1e-9 * r_meas)


def model_resistance(
    kappa_w_mk: float,
    thickness_nm: float,
    hole_radius_um: float,
    beam_radius_um: float,
    absorptance: float,
    model: HeatModel = HeatModel(),  # noqa: B008 (frozen)
) -> float:
    """The model's R_m (K per absorbed W) as the measurement would see it (numerical solver)."""
    kwargs = dict(
        weighting=model.weighting,
        interface_conductance_w_m2k=model.interface_conductance_w_m2k,
        supported_outer_radius_um=model.supported_outer_radius_um,
        kappa_alpha=model.kappa_alpha,
        reference_temperature_k=model.reference_temperature_k,
        ambient_temperature_k=model.ambient_temperature_k,
        beam_offset_um=model.beam_offset_um,
    )
    if model.kappa_alpha == 0 or not model.powers_mw:
        kwargs["kappa_alpha"] = 0.0
        kappa_a = kappa_w_mk * (model.reference_k / model.ambient_temperature_k) ** (
            model.kappa_alpha
        )
        sol = _model.solve_membrane(
            kappa_a, thickness_nm, hole_radius_um, beam_radius_um, 1e-6, **kwargs
        )
        return sol.temperature_rise_k / 1e-6
    p_abs = np.asarray(model.powers_mw, float) * 1e-3 * absorptance
    rises = [
        0.0
        if p == 0
        else _model.solve_membrane(
            kappa_w_mk, thickness_nm, hole_radius_um, beam_radius_um, p, **kwargs
        ).temperature_rise_k
        for p in p_abs
    ]
    return float(np.polyfit(p_abs, rises, 1)[0])


def invert_kappa(
    chi_t_cm1_per_k: float,
    chi_p_cm1_per_mw: float,
    absorptance: float,
    thickness_nm: float,
    hole_radius_um: float,
    beam_radius_um: float,
    model: HeatModel = HeatModel(),  # noqa: B008 (frozen)
) -> KappaInversion:
    """kappa such that the model's R_m equals chi_P / (A chi_T).

    ``chi_t_cm1_per_k`` (cm^-1/K), ``chi_p_cm1_per_mw`` (cm^-1 per mW incident at the sample),
    ``absorptance`` (0..1), ``thickness_nm``, ``hole_radius_um``, ``beam_radius_um`` (1/e^2).
    Raises InputError for coefficients of different signs, W >= R, A outside (0, 1) and
    non-positive sizes.
    """
    check_inputs(
        chi_t_cm1_per_k,
        chi_p_cm1_per_mw,
        absorptance,
        thickness_nm,
        hole_radius_um,
        beam_radius_um,
    )
    if model.method not in METHODS:
        raise InputError(f"model method {model.method!r} is not known; accepted: {METHODS}")
    if model.powers_mw is not None and (
        len(model.powers_mw) < 2 or np.ptp(np.asarray(model.powers_mw, float)) <= 0
    ):
        raise InputError(
            f"the series' powers need at least two different values in mW; got {model.powers_mw!r}"
        )
    r_meas = chi_p_cm1_per_mw * 1e3 / (absorptance * chi_t_cm1_per_k)
    rise_per_mw = chi_p_cm1_per_mw / chi_t_cm1_per_k
    t = thickness_nm * 1e-9
    warnings: list[str] = []
    if model.kappa_alpha != 0 and not model.powers_mw:
        warnings.append(
            "kappa(T) without the series' powers: the low-power limit is used, where alpha has "
            "no effect; give the powers to use it"
        )
    method = model.method
    if method == "auto":
        method = "closed-form" if model.is_simple else "numerical"
    if method in ("closed-form", "quadrature") and not model.is_simple:
        raise InputError(
            f"method {method!r} covers only the centred disk with its edge at the sink and a "
            "constant kappa; use 'numerical' or 'auto'"
        )
    if method == "closed-form":
        g = float(geometry_factor(hole_radius_um, beam_radius_um, model.weighting))
        kappa = g / (2 * math.pi * t * r_meas)
        label = "closed form ln(R/W) + gamma/2 (exact quadrature below R/W = 4)"
        if model.weighting == "confocal":
            label = "closed form ln(R/W) + gamma/2 + ln(4/3)/2 (confocal weighting)"
    elif method == "quadrature":
        g = _model.geometry_factor_quadrature(hole_radius_um, beam_radius_um, model.weighting)
        kappa = g / (2 * math.pi * t * r_meas)
        label = "quadrature of the exact disk profile"
    else:
        g0 = float(geometry_factor(hole_radius_um, beam_radius_um, model.weighting))
        k0 = g0 / (2 * math.pi * t * r_meas)

        def resid(log_k: float) -> float:
            rm = model_resistance(
                math.exp(log_k), thickness_nm, hole_radius_um, beam_radius_um, absorptance, model
            )
            return math.log(rm / r_meas)

        lo, hi = math.log(k0) - 1.0, math.log(k0) + 1.0
        for _ in range(20):
            try:
                flo = resid(lo)
            except InputError:  # thermal runaway at too small a kappa
                lo += 0.25
                continue
            if flo > 0:
                break
            lo -= 1.0
        for _ in range(20):
            if resid(hi) < 0:
                break
            hi += 1.0
        kappa = math.exp(optimize.brentq(resid, lo, hi, xtol=1e-10))
        g = 2 * math.pi * kappa * t * r_meas
        label = "finite-volume radial solver"
        if model.interface_conductance_w_m2k is not None:
            label += " with supported annulus"
        if model.kappa_alpha and model.powers_mw:
            label += f", kappa(T) alpha {model.kappa_alpha:g}"
        if model.beam_offset_um:
            label += f", beam {model.beam_offset_um:g} um off centre"
    return KappaInversion(
        kappa_w_mk=float(kappa),
        thermal_resistance_k_per_w=float(r_meas),
        temperature_rise_k_per_mw_incident=float(rise_per_mw),
        geometry_factor=float(g),
        method=label,
        warnings=tuple(warnings),
    )


@dataclass(frozen=True)
class KappaWithConductance:
    """kappa of the membrane and the interface conductance g fitted to the supported series."""

    kappa_w_mk: float
    interface_conductance_w_m2k: float
    suspended: KappaInversion
    iterations: int


def invert_kappa_and_conductance(
    chi_t_cm1_per_k: float,
    chi_p_cm1_per_mw: float,
    absorptance: float,
    chi_p_supported_cm1_per_mw: float,
    absorptance_supported: float,
    thickness_nm: float,
    hole_radius_um: float,
    beam_radius_um: float,
    model: HeatModel = HeatModel(),  # noqa: B008 (frozen)
) -> KappaWithConductance:
    """kappa and g together from a power series on the membrane and one on the supported part.

    The supported series gives R_sup = chi_P,sup / (A_sup chi_T), which the supported-flake model
    (:func:`flakebook.thermal.model.supported_geometry_factor`, the substrate itself at the
    ambient: its spreading resistance neglected) turns into g for a given kappa; the membrane's
    series then gives kappa with that g on the supported annulus. The two are iterated to a
    fixed point (the membrane's kappa depends only weakly on g). chi_T is shared.
    """
    check_inputs(
        chi_t_cm1_per_k,
        chi_p_supported_cm1_per_mw,
        absorptance_supported,
        thickness_nm,
        hole_radius_um,
        beam_radius_um,
    )
    r_sup = chi_p_supported_cm1_per_mw * 1e3 / (absorptance_supported * chi_t_cm1_per_k)
    kappa = invert_kappa(
        chi_t_cm1_per_k,
        chi_p_cm1_per_mw,
        absorptance,
        thickness_nm,
        hole_radius_um,
        beam_radius_um,
        HeatModel(weighting=model.weighting),
    ).kappa_w_mk
    g = float("nan")
    for it in range(1, 51):
        g = _model.interface_conductance_from_supported(
            r_sup, kappa, thickness_nm, beam_radius_um, model.weighting
        )
        res = invert_kappa(
            chi_t_cm1_per_k,
            chi_p_cm1_per_mw,
            absorptance,
            thickness_nm,
            hole_radius_um,
            beam_radius_um,
            HeatModel(**{**model.__dict__, "interface_conductance_w_m2k": g, "method": "auto"}),
        )
        done = abs(res.kappa_w_mk / kappa - 1) < 1e-9
        kappa = res.kappa_w_mk
        if done:
            return KappaWithConductance(kappa, g, res, it)
    raise InputError(
        "kappa and the interface conductance did not settle together; check the supported "
        "series (its thermal resistance may be too high for this membrane)"
    )
