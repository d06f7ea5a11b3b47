"""Spectral units: Raman shift, absolute wavenumber, wavelength (air or vacuum) and photon energy.

- Raman shift in cm^-1 from vacuum wavelengths: shift = 1e7/laser_nm - 1e7/lambda_nm, or from
  absolute vacuum wavenumbers: shift = 1e7/laser_nm - wavenumber_cm1.
- Photon energy E[eV] = HC_EV_NM / lambda_vac[nm], with hc/e from the exact SI values of h, c and
  e (CODATA 2018: 1239.841984 eV nm). Intensities per unit wavelength become intensities per
  unit energy with the Jacobian |d lambda / d E| = lambda^2 / hc, I_E = I_lambda lambda^2 / hc,
  so that the integrated intensity is the same on both axes.
- Wavelengths measured in air are turned into vacuum wavelengths with the refractive index of
  standard air (dry air, 15 degC, 101325 Pa, 450 ppm CO2) from P. E. Ciddor, Appl. Opt. 35, 1566
  (1996): n - 1 = 0.05792105 / (238.0185 - s^2) + 0.00167917 / (57.362 - s^2), s the vacuum
  wavenumber in um^-1. Spectrometers usually report wavelengths in air; laser lines are quoted
  either way, so each wavelength says which (``medium="air"`` or ``"vacuum"``).
"""

from __future__ import annotations

import numpy as np

from flakebook.errors import InputError

__all__ = [
    "HC_EV_NM",
    "MEDIA",
    "air_index",
    "air_to_vacuum_nm",
    "vacuum_to_air_nm",
    "shift_from_wavelength",
    "wavelength_from_shift",
    "shift_from_wavenumber",
    "ev_from_nm",
    "nm_from_ev",
    "nm_to_ev_spectrum",
    "ev_to_nm_spectrum",
    "to_raman_shift",
]

_H = 6.62607015e-34  # J s, exact (SI 2019)
_C = 299792458.0  # m/s, exact
_E = 1.602176634e-19  # C, exact
HC_EV_NM = _H * _C / _E * 1e9  # 1239.8419843... eV nm
MEDIA = ("air", "vacuum")


def _medium(medium: str) -> str:
    if medium not in MEDIA:
        raise InputError(f"medium {medium!r} is not known; accepted: air, vacuum")
    return medium


def _positive(values, name: str) -> np.ndarray:
    a = np.asarray(values, dtype=float)
    if not np.all(np.isfinite(a)) or np.any(a <= 0):
        raise InputError(f"{name}: values must be finite and positive; got {np.ravel(a)[:3]}...")
    return a


def air_index(vacuum_nm) -> np.ndarray:
    """Refractive index of standard air at vacuum wavelengths ``vacuum_nm`` (Ciddor 1996)."""
    s2 = (1e3 / _positive(vacuum_nm, "vacuum_nm")) ** 2
    return 1.0 + 0.05792105 / (238.0185 - s2) + 0.00167917 / (57.362 - s2)


def vacuum_to_air_nm(vacuum_nm) -> np.ndarray:
    """Wavelength in standard air of light with vacuum wavelength ``vacuum_nm``."""
    lam = _positive(vacuum_nm, "vacuum_nm")
    return lam / air_index(lam)


def air_to_vacuum_nm(air_nm) -> np.ndarray:
    """Vacuum wavelength of light whose wavelength in standard air is ``air_nm``.

    Solved by fixed-point iteration of lambda_vac = n(lambda_vac) lambda_air (converges to
    1e-12 nm in four steps, since dn/dlambda is tiny).
    """
    lam_air = _positive(air_nm, "air_nm")
    lam = lam_air * 1.00028
    for _ in range(6):
        lam = lam_air * air_index(lam)
    return lam


def _vacuum(wavelength_nm, medium: str) -> np.ndarray:
    lam = _positive(wavelength_nm, "wavelength_nm")
    return air_to_vacuum_nm(lam) if _medium(medium) == "air" else lam


def shift_from_wavelength(
    wavelength_nm, laser_nm: float, *, medium: str = "vacuum", laser_medium: str | None = None
) -> np.ndarray:
    """Raman shift in cm^-1 of scattered light at ``wavelength_nm`` excited at ``laser_nm``.

    ``medium`` says whether the wavelengths are in air or vacuum; ``laser_medium`` the same for
    the laser line (default: the same as ``medium``). Stokes lines have positive shifts.
    """
    lam = _vacuum(wavelength_nm, medium)
    laser = _vacuum(laser_nm, laser_medium or medium)
    return 1e7 / laser - 1e7 / lam


def wavelength_from_shift(
    shift_cm1, laser_nm: float, *, medium: str = "vacuum", laser_medium: str | None = None
) -> np.ndarray:
    """Wavelength in nm (in ``medium``) of a Raman line at ``shift_cm1`` for laser ``laser_nm``."""
    laser = _vacuum(laser_nm, laser_medium or medium)
    nu = 1e7 / laser - np.asarray(shift_cm1, dtype=float)
    lam = 1e7 / _positive(nu, "absolute wavenumber")
    return vacuum_to_air_nm(lam) if _medium(medium) == "air" else lam


def shift_from_wavenumber(
    wavenumber_cm1, laser_nm: float, *, laser_medium: str = "vacuum"
) -> np.ndarray:
    """Raman shift in cm^-1 from absolute (vacuum) wavenumbers in cm^-1."""
    return 1e7 / _vacuum(laser_nm, laser_medium) - np.asarray(wavenumber_cm1, dtype=float)


def ev_from_nm(wavelength_nm, *, medium: str = "vacuum") -> np.ndarray:
    """Photon energy in eV of light at ``wavelength_nm`` (in air or vacuum)."""
    return HC_EV_NM / _vacuum(wavelength_nm, medium)


def nm_from_ev(energy_ev, *, medium: str = "vacuum") -> np.ndarray:
    """Wavelength in nm (in ``medium``) of photons of ``energy_ev``."""
    lam = HC_EV_NM / _positive(energy_ev, "energy_ev")
    return vacuum_to_air_nm(lam) if _medium(medium) == "air" else lam


def nm_to_ev_spectrum(
    wavelength_nm, intensity, *, medium: str = "vacuum"
) -> tuple[np.ndarray, np.ndarray]:
    """A spectrum per unit wavelength as a spectrum per unit energy, energies ascending.

    Returns ``(energy_ev, intensity_per_ev)`` with I_E = I_lambda * lambda^2 / hc (lambda the
    vacuum wavelength), so that the integral over energy equals the integral over wavelength.
    ``intensity`` may be 2-D (spectra along the first axis). For air wavelengths the Jacobian
    also carries d lambda_vac / d lambda_air (1 to within 1e-7 over the visible).
    """
    lam_in = _positive(wavelength_nm, "wavelength_nm")
    lam = _vacuum(lam_in, medium)
    y = np.asarray(intensity, dtype=float)
    d_vac_d_in = np.gradient(lam, lam_in) if lam.size > 1 and medium == "air" else 1.0
    energy = HC_EV_NM / lam
    y_e = y * lam**2 / HC_EV_NM / d_vac_d_in
    order = np.argsort(energy)
    return energy[order], y_e[..., order]


def ev_to_nm_spectrum(
    energy_ev, intensity, *, medium: str = "vacuum"
) -> tuple[np.ndarray, np.ndarray]:
    """A spectrum per unit energy as a spectrum per unit (vacuum or air) wavelength, ascending."""
    e = _positive(energy_ev, "energy_ev")
    lam_vac = HC_EV_NM / e
    lam = vacuum_to_air_nm(lam_vac) if _medium(medium) == "air" else lam_vac
    d_vac_d_out = np.gradient(lam_vac, lam) if lam.size > 1 and medium == "air" else 1.0
    y = np.asarray(intensity, dtype=float) * HC_EV_NM / lam_vac**2 * d_vac_d_out
    order = np.argsort(lam)
    return lam[order], y[..., order]


def to_raman_shift(
    x,
    x_unit: str,
    *,
    laser_nm: float | None = None,
    medium: str = "air",
    laser_medium: str | None = None,
) -> np.ndarray:
    """Raman shift axis (cm^-1) from an axis in ``x_unit`` (cm1, nm, wavenumber-cm1, ev).

    ``cm1`` is returned unchanged. ``nm`` (wavelengths in ``medium``, default air as most
    spectrometers report), absolute ``wavenumber-cm1`` (vacuum) and ``ev`` need ``laser_nm``.
    The result is not reordered: a wavelength axis ascending gives shifts ascending.
    """
    x = np.asarray(x, dtype=float)
    if x_unit == "cm1":
        return x.copy()
    if x_unit not in ("nm", "wavenumber-cm1", "ev"):
        raise InputError(f"x unit {x_unit!r} is not known; accepted: cm1, nm, wavenumber-cm1, ev")
    if laser_nm is None:
        raise InputError(
            f"an x axis in {x_unit} needs the laser line to give a Raman shift; accepted: "
            "--laser-nm with the excitation wavelength"
        )
    lm = laser_medium or medium
    if x_unit == "nm":
        return shift_from_wavelength(x, laser_nm, medium=medium, laser_medium=lm)
    if x_unit == "wavenumber-cm1":
        return shift_from_wavenumber(x, laser_nm, laser_medium=lm)
    return 1e7 / _vacuum(laser_nm, lm) - _positive(x, "energy_ev") / HC_EV_NM * 1e7
