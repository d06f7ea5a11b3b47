"""The interface conductance g of the supported region from a power series taken with the beam
on the supported part of the same flake, with its uncertainty.

The suspended and the supported power series share chi_T; the supported series' resistance
R_sup = chi_P,sup / (A_sup chi_T) and the membrane's fix kappa and g together
(:func:`flakebook.thermal.inversion.invert_kappa_and_conductance`). Its uncertainty is carried
in ln g by linear propagation (central differences of one standard deviation) of chi_T,
chi_P,sup, A_sup and W, the inputs g depends on most; the membrane's own inputs move g only
through kappa. The Monte Carlo then draws g log-normal with this spread, independently of the
other inputs (its correlation with chi_T is not carried, which the result says).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from flakebook.errors import InputError
from flakebook.thermal.inversion import HeatModel, invert_kappa_and_conductance


@dataclass(frozen=True)
class FittedConductance:
    """g (W/m^2/K) from the supported series, its s.d., the s.d. of ln g and the note."""

    conductance_w_m2k: float
    conductance_err_w_m2k: float
    log_sd: float
    kappa_w_mk: float
    note: str


def conductance_from_series(
    chi_t_cm1_per_k: float,
    chi_p_cm1_per_mw: float,
    absorptance: float,
    chi_p_supported_cm1_per_mw: float,
    absorptance_supported: float,
    thickness_nm: float,
    hole_radius_um: float,
    beam_radius_um: float,
    *,
    chi_t_err_cm1_per_k: float = 0.0,
    chi_p_supported_err_cm1_per_mw: float = 0.0,
    absorptance_supported_err: float = 0.0,
    beam_radius_err_um: float = 0.0,
    weighting: str = "intensity",
) -> FittedConductance:
    """g and its spread from the two power series (see the module docstring)."""
    model = HeatModel(weighting=weighting)
    if not (math.isfinite(chi_p_supported_cm1_per_mw) and chi_p_supported_cm1_per_mw < 0):
        raise InputError(
            f"the supported-part power series gives chi_P {chi_p_supported_cm1_per_mw!r} "
            "cm^-1/mW; accepted: a negative coefficient (the mode softens as the flake heats)"
        )
    r_sup = chi_p_supported_cm1_per_mw / (absorptance_supported * chi_t_cm1_per_k)
    r_mem = chi_p_cm1_per_mw / (absorptance * chi_t_cm1_per_k)
    if r_sup >= r_mem:
        # the supported flake has the substrate below the beam as well as the same
        # surroundings as the membrane: its resistance per absorbed watt is the smaller
        raise InputError(
            f"the supported part's thermal resistance per absorbed watt ({r_sup:.3g} K/mW) is "
            f"not below the membrane's ({r_mem:.3g} K/mW); accepted: a supported-part series "
            "that heats less per absorbed power than the suspended one (check which series is "
            "which, and the absorptances)"
        )
    base = dict(
        chi_t_cm1_per_k=chi_t_cm1_per_k,
        chi_p_cm1_per_mw=chi_p_cm1_per_mw,
        absorptance=absorptance,
        chi_p_supported_cm1_per_mw=chi_p_supported_cm1_per_mw,
        absorptance_supported=absorptance_supported,
        thickness_nm=thickness_nm,
        hole_radius_um=hole_radius_um,
        beam_radius_um=beam_radius_um,
    )

    def ln_g(**change) -> float:
        res = invert_kappa_and_conductance(**{**base, **change}, model=model)
        return math.log(res.interface_conductance_w_m2k)

    central = invert_kappa_and_conductance(**base, model=model)
    g0 = central.interface_conductance_w_m2k
    var = 0.0
    for key, err in (
        ("chi_t_cm1_per_k", chi_t_err_cm1_per_k),
        ("chi_p_supported_cm1_per_mw", chi_p_supported_err_cm1_per_mw),
        ("absorptance_supported", absorptance_supported_err),
        ("beam_radius_um", beam_radius_err_um),
    ):
        if err > 0:
            x = base[key]
            try:
                d = 0.5 * (ln_g(**{key: x + err}) - ln_g(**{key: x - err}))
            except InputError as exc:
                raise InputError(
                    f"g from the supported-part series: one standard deviation of {key} makes "
                    f"the inversion fail ({exc}); accepted: smaller errors or a stated g"
                ) from None
            var += d * d
    s = math.sqrt(var)
    err = g0 * math.sqrt(math.expm1(s * s))
    note = (
        f"interface conductance g = {g0:.3g} ± {err:.2g} W/m^2/K from the supported-part power "
        "series (drawn log-normal; its correlation with chi_T is not carried)"
    )
    return FittedConductance(g0, err, s, central.kappa_w_mk, note)
