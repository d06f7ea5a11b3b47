"""The Si Raman line under a flake against the bare substrate, from two measured spectra.

The thin-film model (flakebook.optics.absorptance.si_raman_attenuation) predicts how much of the
substrate's first-order Si line at 520.7 cm^-1 survives under a flake of N layers: the excitation
and the scattered light both pass the flake and the oxide's interference changes. Measured, the
ratio is the Si line's integrated intensity in a spectrum on the flake over that in a spectrum on
bare substrate next to it, each divided by its dose (laser power at the sample x integration time)
where both doses are recorded.

:func:`si_line` fits the line (a Lorentzian on a linear baseline between 490 and 550 cm^-1, lmfit
through flakebook.spectra.peaks, weighted by the shot noise for raw counts, spikes removed first)
and :func:`si_ratio` forms the ratio with its error. Besides the two fits' errors, the ratio has a
relative error of ``SPOT_REL_ERR`` for what differs between two spots measured one after the other
(focus, power drift, the spot's position on the chip): 3% (common practice, no source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from flakebook.errors import InputError

SI_LINE_CM1 = 520.7
#: The window fitted around the line (cm^-1).
SI_WINDOW_CM1 = (490.0, 550.0)
#: Relative error of a ratio of two spots (focus, power drift); common practice, no source.
SPOT_REL_ERR = 0.03
#: A Si line weaker than this signal-to-noise (height / noise s.d.) is not used.
MIN_SNR = 10.0


@dataclass(frozen=True)
class SiLine:
    """The fitted Si line of one spectrum: integrated intensity (counts x cm^-1, or the
    spectrum's unit x cm^-1) with its 1-sigma error, centre and FWHM in cm^-1, signal-to-noise."""

    area: float
    area_err: float
    center_cm1: float
    fwhm_cm1: float
    snr: float


@dataclass(frozen=True)
class SiRatio:
    """I_Si(flake) / I_Si(bare substrate) with its 1-sigma error, the two lines, and how the
    doses were taken."""

    ratio: float
    ratio_err: float
    flake_line: SiLine
    bare_line: SiLine
    dose_note: str
    warnings: tuple[str, ...]


def si_line(x_cm1, y, *, what: str = "the spectrum") -> SiLine:
    """Fit the Si line of one Raman spectrum on a Raman-shift axis (cm^-1)."""
    from flakebook.spectra.peaks import PeakSpec, fit_peaks, shot_noise_variance
    from flakebook.spectra.processing import is_counts, remove_spikes

    x = np.asarray(x_cm1, dtype=float)
    y = np.asarray(y, dtype=float)
    if (
        x.ndim != 1
        or x.shape != y.shape
        or not np.all(np.isfinite(x))
        or not np.all(np.isfinite(y))
    ):
        raise InputError(f"{what}: accepted: one spectrum of finite numbers, x and y of one length")
    order = np.argsort(x)
    x, y = x[order], y[order]
    lo, hi = SI_WINDOW_CM1
    inside = (x >= lo) & (x <= hi)
    if (
        inside.sum() < 15
        or x[inside].min() > SI_LINE_CM1 - 10
        or x[inside].max() < SI_LINE_CM1 + 10
    ):
        raise InputError(
            f"{what} does not cover the Si line ({lo:g}-{hi:g} cm^-1 are needed around "
            f"{SI_LINE_CM1} cm^-1, with at least 15 points)"
        )
    xs, ys = x[inside], y[inside]
    counts = is_counts(ys)
    cleaned = remove_spikes(np.sqrt(ys + 3.0 / 8.0) if counts else ys).y
    if counts:
        cleaned = np.maximum(cleaned, 0.0) ** 2 - 3.0 / 8.0  # back from the Anscombe transform
    spec = PeakSpec("Si", SI_LINE_CM1, 6.0, 3.5, fwhm_max_cm1=15.0)
    fit = fit_peaks(xs, cleaned, [spec], variance=shot_noise_variance(ys) if counts else None)
    line = fit.peak("Si")
    if not line.found or not line.snr >= MIN_SNR:
        raise InputError(
            f"{what}: the Si line is too weak to measure (signal-to-noise {line.snr:.3g}; accepted: "
            f"at least {MIN_SNR:g}): a longer integration, or a spectrum on thinner material"
        )
    if not (line.area > 0 and math.isfinite(line.area_err)):
        raise InputError(f"{what}: the Si line's fit gave no usable intensity")
    return SiLine(float(line.area), float(line.area_err), float(line.center), float(line.fwhm),
                  float(line.snr))  # fmt: skip


def _dose(power_mw, integration_s) -> float | None:
    if power_mw is None or integration_s is None:
        return None
    if not (power_mw > 0 and integration_s > 0):
        raise InputError(
            f"a spectrum's dose needs a power > 0 mW and an integration time > 0 s (got "
            f"{power_mw!r} mW, {integration_s!r} s)"
        )
    return float(power_mw) * float(integration_s)


def si_ratio(
    flake: tuple,
    bare: tuple,
    *,
    flake_dose: tuple[float | None, float | None] = (None, None),
    bare_dose: tuple[float | None, float | None] = (None, None),
) -> SiRatio:
    """The Si-line ratio of a spectrum on the flake (``flake``: (x_cm1, y)) and one on the bare
    substrate (``bare``). ``*_dose``: (power at the sample in mW, integration time in s) of each;
    where either is missing on either spectrum the doses are taken as equal, with a warning."""
    fl = si_line(*flake, what="the spectrum on the flake")
    ba = si_line(*bare, what="the bare-substrate spectrum")
    df, db = _dose(*flake_dose), _dose(*bare_dose)
    warnings = []
    if df is None or db is None:
        scale = 1.0
        note = "doses not recorded on both spectra: taken as equal"
        warnings.append(
            "the laser power and integration time are not recorded on both spectra: the ratio "
            "assumes both were taken with the same dose"
        )
    else:
        scale = db / df
        note = f"normalised by dose (flake {df:.4g} mW s, bare {db:.4g} mW s)"
    ratio = fl.area / ba.area * scale
    rel = math.sqrt((fl.area_err / fl.area) ** 2 + (ba.area_err / ba.area) ** 2 + SPOT_REL_ERR**2)
    if abs(fl.center_cm1 - ba.center_cm1) > 1.5:
        warnings.append(
            f"the Si line sits at {fl.center_cm1:.2f} cm^-1 on the flake and {ba.center_cm1:.2f} "
            "on bare substrate: laser heating or a different calibration; the intensities may "
            "not compare"
        )
    if ratio > 1.2:
        warnings.append(
            f"the Si line is {ratio:.2f} times stronger under the flake than on bare substrate: "
            "check that the reference spectrum is of the bare substrate of this chip"
        )
    return SiRatio(float(ratio), float(ratio * rel), fl, ba, note, tuple(warnings))
