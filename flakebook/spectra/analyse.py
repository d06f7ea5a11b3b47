"""One spectrum from file to layer evidence: the chain the command line, the window and the demo
share.

:func:`analyse_spectrum` takes a :class:`~flakebook.spectra.io.Spectrum` and runs, in order:

1. the axis: a Raman spectrum onto the Raman shift (cm^-1, from nm, eV or absolute wavenumbers
   with the laser line; flakebook.spectra.units), a PL spectrum onto photon energy (eV, with the
   Jacobian that keeps the integrated intensity);
2. cosmic-ray spikes replaced (processing.remove_spikes);
3. for Raman, the wavenumber calibration on the Si line at 520.7 cm^-1 when the spectrum covers
   it (processing.calibrate; ``auto_calibrate=False`` leaves the axis as measured);
4. the baseline (processing.estimate_baseline, default ``imodpoly``) subtracted;
5. the peak fit (peaks.fit_peaks, the chosen line shape, a linear baseline left in each region)
   of the lines the material's modes say to look for (:func:`peak_specs`): the modes of the rule
   table (its tabulated centres give the expected centre and how far it may move) and, where a
   table names a mode without a centre, the expected centre of :data:`MODE_CENTRES`. Shear and
   breathing modes take their window from the linear chain of the rule table over N = 2..15 and
   their start from the strongest line detected in that window (the two windows overlap, so a
   line found is given to one mode only);
6. the fitted lines mapped onto layer_evidence.Feature / PLFeature and the Raman or PL evidence
   of the rule table (layer_evidence.raman_evidence / pl_evidence).

Modes outside the measured range are not looked for (their absence is no evidence); a mode
looked for and not found (signal-to-noise below 3) is evidence of absence. Pure numpy/scipy.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from flakebook.errors import InputError
from flakebook.evidence import Evidence, combine_report
from flakebook.spectra.io import Spectrum
from flakebook.spectra.layer_evidence import (
    DEFAULT_CALIBRATION_ERR_CM1,
    DEFAULT_FILTER_EDGE_CM1,
    Feature,
    PLFeature,
    pl_evidence,
    raman_evidence,
    raman_offset_grid,
)
from flakebook.spectra.peaks import (
    PEAK_MODELS,
    PeakFit,
    PeakSpec,
    fit_peaks,
    shot_noise_variance,
)
from flakebook.spectra.processing import (
    BASELINE_METHODS,
    SI_LINE_CM1,
    calibrate,
    estimate_baseline,
    remove_spikes,
)
from flakebook.spectra.rules import RuleTable, load_rule_table

KINDS = ("raman", "pl")
POLARIZATIONS = ("parallel", "crossed")
X_UNITS = ("cm1", "nm", "ev", "wavenumber-cm1")

#: Expected first-order Raman modes at 532 nm excitation that a rule table names without an
#: absolute centre (or does not name but a user wants to see): mode -> (centre_cm1, window_cm1,
#: fwhm_cm1). Values from memory (monolayer to bulk of Tonndorf et al., Opt. Express 21, 4908
#: (2013) and Lee et al., ACS Nano 4, 2695 (2010) for MoS2), not confirmed against the papers.
#: WS2's E2g is left out: the 2LA(M) band lies on it at 532 nm and would be taken for it.
MODE_CENTRES: dict[str, dict[str, tuple[float, float, float]]] = {
    "MoS2": {"E2g": (384.0, 4.0, 4.0), "A1g": (405.5, 5.0, 5.0)},
    "MoSe2": {"E2g": (287.0, 3.0, 4.0), "B2g": (353.0, 4.0, 4.0)},
    "WS2": {},
    "WSe2": {"A1g+E2g": (250.0, 4.0, 5.0), "B2g": (308.5, 4.0, 4.0)},
}
#: Extra room (cm^-1) beyond a position rule's tabulated range for the spectrometer's offset.
POSITION_MARGIN_CM1 = 3.0
#: Expected widths (cm^-1) of the interlayer modes; common practice, no source.
LOW_FREQUENCY_FWHM_CM1 = 1.5
#: PL A exciton: expected width and extra room (eV); common practice, no source.
PL_FWHM_EV = 0.05
PL_MARGIN_EV = 0.06
#: Shortest span (cm^-1) of Si-line spectrum around 520.7 cm^-1 needed to calibrate on it.
SI_SPAN_CM1 = 15.0
#: Residual uncertainty of the Si line as a reference (laser heating, stress); common practice,
#: no source.
SI_REFERENCE_ERR_CM1 = 0.25


@dataclass(frozen=True)
class SpectrumAnalysis:
    """What :func:`analyse_spectrum` found.

    ``x`` is the fitted axis (``x_unit`` cm1 for Raman, ev for PL), ascending; ``y`` the
    spectrum on it after spikes were replaced (and the calibration applied), ``baseline`` the
    estimated baseline, ``corrected = y - baseline``. ``fit`` the peak fit (None when no mode of
    the material lies in the measured range); its regions hold the model and residual per
    fitted range. ``features`` / ``pl`` what was handed to the layer evidence, ``evidence`` the
    evidence items, ``settings`` the options used (JSON-able), ``calibration`` the Si-line shift
    (None when not calibrated).
    """

    kind: str
    material: str
    laser_nm: float | None
    x: np.ndarray
    x_unit: str
    y: np.ndarray
    baseline: np.ndarray
    corrected: np.ndarray
    fit: PeakFit | None
    features: tuple[Feature, ...]
    pl: PLFeature | None
    evidence: tuple[Evidence, ...]
    settings: dict
    calibration: dict | None
    n_spikes: int
    warnings: tuple[str, ...] = field(default=())

    def peaks(self) -> list[dict]:
        """The fitted lines as the JSON of ``flakebook spectrum`` (docs/interface.md)."""
        return peak_rows(self.fit, self.kind)

    def report(self, max_layers: int | None = None):
        """The combined report of this spectrum's evidence alone (None without evidence)."""
        if not self.evidence:
            return None
        return combine_report(self.evidence, max_layers=max_layers)


def peak_rows(fit: PeakFit | None, kind: str) -> list[dict]:
    """JSON rows of a peak fit: centre, error, width, height and area (None where not found)."""
    if fit is None:
        return []

    def num(v):
        return None if v is None or not math.isfinite(v) else float(v)

    out = []
    for p in fit.peaks:
        row = {
            "mode": p.mode if p.component == 0 else f"{p.mode}({p.component})",
            "found": bool(p.found),
            "center_cm1": num(p.center) if kind == "raman" else None,
            "center_err_cm1": num(p.center_err) if kind == "raman" else None,
            "center_ev": num(p.center) if kind == "pl" else None,
            "center_err_ev": num(p.center_err) if kind == "pl" else None,
            "fwhm_cm1": num(p.fwhm) if kind == "raman" else None,
            "fwhm_ev": num(p.fwhm) if kind == "pl" else None,
            "height": num(p.height),
            "area": num(p.area),
            "snr": num(p.snr),
        }
        out.append(row)
    return out


def _check_choice(name: str, value, choices) -> None:
    if value not in choices:
        raise InputError(f"{name} {value!r} is not known; accepted: {', '.join(choices)}")


def _noise(y: np.ndarray) -> float:
    d = np.diff(y)
    mad = float(np.median(np.abs(d - np.median(d))))
    return max(1.4826 * mad / math.sqrt(2.0), 1e-12)


def raman_axis(x, x_unit: str, laser_nm: float | None) -> np.ndarray:
    """The Raman shift (cm^-1) of an axis in ``x_unit`` (wavelengths in air, as spectrometers
    report them; absolute wavenumbers in vacuum)."""
    from flakebook.spectra.units import to_raman_shift

    if x_unit == "cm1":
        return np.asarray(x, dtype=float)
    if laser_nm is None:
        raise InputError(
            f"a Raman spectrum on a {x_unit} axis needs the laser line to become a Raman shift; "
            "accepted: --laser-nm 532 (or a 'Laser wavelength' header line)"
        )
    return np.asarray(to_raman_shift(x, x_unit, laser_nm=laser_nm), dtype=float)


def pl_axis(x, y, x_unit: str, laser_nm: float | None) -> tuple[np.ndarray, np.ndarray]:
    """A PL spectrum on photon energy (eV, ascending), intensities per eV (the Jacobian)."""
    from flakebook.spectra.units import nm_to_ev_spectrum

    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x_unit == "ev":
        return x, y
    if x_unit == "nm":
        return nm_to_ev_spectrum(x, y, medium="air")
    if x_unit in ("cm1", "wavenumber-cm1"):
        if x_unit == "cm1":
            if laser_nm is None:
                raise InputError(
                    "a PL spectrum on a Raman-shift axis needs the laser line; accepted: "
                    "--laser-nm 532, or the axis in nm or eV (--x-unit nm|ev)"
                )
            wn = 1e7 / laser_nm - x
        else:
            wn = x
        if np.any(wn <= 0):
            raise InputError(
                "the PL axis gives photon energies <= 0; check --x-unit and --laser-nm"
            )
        return nm_to_ev_spectrum(1e7 / wn, y, medium="vacuum")
    raise InputError(f"x unit {x_unit!r} is not known; accepted: {', '.join(X_UNITS)}")


def _position_spec(rule, mode: str) -> PeakSpec | None:
    n = np.arange(1, 16)
    c = rule.center(n)
    c = c[np.isfinite(c)]
    if c.size == 0:
        return None
    lo, hi = float(c.min()), float(c.max())
    return PeakSpec(mode, (lo + hi) / 2, (hi - lo) / 2 + POSITION_MARGIN_CM1, 4.0)


def peak_specs(
    table: RuleTable,
    x_cm1: np.ndarray,
    corrected: np.ndarray | None = None,
    *,
    polarization: str = "parallel",
) -> list[PeakSpec]:
    """The Raman lines to look for in a spectrum covering ``x_cm1`` (see the module docstring).

    ``corrected`` (the baseline-corrected spectrum) places the start of the shear and breathing
    lines on the strongest line detected in their windows."""
    lo, hi = float(np.min(x_cm1)), float(np.max(x_cm1))
    specs: dict[str, PeakSpec] = {}
    for rule in table.rules_of("position"):
        s = _position_spec(rule, rule.modes[0])
        if s is not None:
            specs[s.mode] = s
    extra = MODE_CENTRES.get(table.material, {})
    for rule in table.rules:
        if rule.kind not in ("separation", "presence"):
            continue
        for mode in rule.modes:
            if mode not in specs and mode in extra:
                c, w, f = extra[mode]
                specs[mode] = PeakSpec(mode, c, w, f)
    for mode, (c, w, f) in extra.items():
        specs.setdefault(mode, PeakSpec(mode, c, w, f))
    out = [
        s
        for s in specs.values()
        if s.center_cm1 - s.window_cm1 >= lo and s.center_cm1 + s.window_cm1 <= hi
    ]
    out += _low_frequency_specs(table, x_cm1, corrected, polarization)
    return sorted(out, key=lambda s: s.center_cm1)


def _low_frequency_specs(table, x, corrected, polarization) -> list[PeakSpec]:
    from scipy.signal import find_peaks

    edge = max(DEFAULT_FILTER_EDGE_CM1, float(np.min(x)))
    n = np.arange(2, 16)
    windows = {}
    for kind in ("shear", "breathing"):
        if kind == "breathing" and polarization == "crossed":
            continue
        for rule in table.rules_of(kind):
            c = rule.center(n)
            c = c[c >= edge]
            if c.size == 0 or float(np.max(x)) < float(c.max()) + 2.0:
                continue
            windows[kind] = (float(c.min()) - 1.0, float(c.max()) + 1.0)
    if not windows:
        return []
    peaks_at: list[tuple[float, float]] = []
    if corrected is not None:
        noise = _noise(np.asarray(corrected, float))
        idx, props = find_peaks(corrected, prominence=3.0 * noise)
        peaks_at = [(float(x[i]), float(p)) for i, p in zip(idx, props["prominences"], strict=True)]
    taken: set[float] = set()
    out = []
    # the shear window is the narrower one: its line is chosen first
    for kind in sorted(windows, key=lambda k: windows[k][1] - windows[k][0]):
        a, b = windows[kind]
        inside = [(h, c) for c, h in peaks_at if a <= c <= b and c not in taken]
        if inside:
            h, c = max(inside)
            taken.add(c)
            half = max(2.0, 2.0 * LOW_FREQUENCY_FWHM_CM1)
        else:
            c, half = (a + b) / 2, (b - a) / 2
        out.append(PeakSpec(kind, c, half, LOW_FREQUENCY_FWHM_CM1, fwhm_max_cm1=8.0))
    return out


def _pl_spec(table: RuleTable, x_ev: np.ndarray) -> PeakSpec | None:
    rules = table.rules_of("pl_energy")
    if not rules:
        return None
    c = rules[0].center(np.arange(1, 16))
    c = c[np.isfinite(c)]
    lo, hi = float(c.min()), float(c.max())
    spec = PeakSpec("A", (lo + hi) / 2, (hi - lo) / 2 + PL_MARGIN_EV, PL_FWHM_EV)
    if (
        spec.center_cm1 - spec.window_cm1 < x_ev.min()
        or spec.center_cm1 + spec.window_cm1 > x_ev.max()
    ):
        return None
    return spec


def analyse_spectrum(
    spectrum: Spectrum,
    material: str,
    *,
    laser_nm: float | None = None,
    kind: str | None = None,
    baseline: str = "imodpoly",
    peak_model: str = "lorentzian",
    polarization: str = "parallel",
    auto_calibrate: bool = True,
    table: RuleTable | None = None,
    max_layers: int = 15,
    pl_reference: float | None = None,
    pl_reference_err_rel: float = 0.2,
) -> SpectrumAnalysis:
    """Process, fit and read the layer evidence of one spectrum (module docstring).

    ``laser_nm`` None takes the spectrum's ``metadata["laser_nm"]`` (532 nm when neither says);
    ``kind`` None takes the spectrum's. ``table`` a rule table (a user's calibrated one), else
    the published table of ``material`` at the laser line. ``pl_reference``: the A-exciton area
    of a reference monolayer measured the same way, for the PL intensity ratio (none by
    default). The input is not changed.
    """
    kind = kind or spectrum.kind
    _check_choice("spectrum kind", kind, KINDS)
    _check_choice("baseline", baseline, BASELINE_METHODS)
    _check_choice("peak model", peak_model, PEAK_MODELS)
    _check_choice("polarization", polarization, POLARIZATIONS)
    warnings: list[str] = []
    if laser_nm is None:
        laser_nm = spectrum.metadata.get("laser_nm")
    if laser_nm is None:
        laser_nm = 532.0
        warnings.append("no laser line given or in the file; 532 nm taken")
    laser_nm = float(laser_nm)
    if table is None:
        table = load_rule_table(material, laser_nm)
    elif table.material != material:
        raise InputError(
            f"the rule table is for {table.material}, the spectrum's material is {material}"
        )
    variance = shot_noise_variance(spectrum.y)  # raw counts: their own shot noise
    if kind == "raman":
        x = raman_axis(spectrum.x, spectrum.x_unit, laser_nm)
        y = np.asarray(spectrum.y, dtype=float)
        x_unit = "cm1"
    else:
        x, y = pl_axis(spectrum.x, spectrum.y, spectrum.x_unit, laser_nm)
        if variance is not None:  # the Jacobian scales the noise with the intensity
            _, jac = pl_axis(spectrum.x, np.ones(np.shape(spectrum.y)), spectrum.x_unit, laser_nm)
            variance = variance * np.asarray(jac, dtype=float) ** 2
        x_unit = "ev"
    order = np.argsort(x, kind="stable")
    x, y = np.array(x[order]), np.array(y[order])
    if variance is not None:
        variance = np.asarray(variance, dtype=float)[order]
    if x.size < 8:
        raise InputError(f"a spectrum of {x.size} points is too short to fit; accepted: 8 or more")
    spikes = remove_spikes(y)
    y = np.array(spikes.y, dtype=float)
    if spikes.n_spikes:
        warnings.append(
            f"{spikes.n_spikes} cosmic-ray {'spike' if spikes.n_spikes == 1 else 'spikes'} replaced"
        )
    cal = None
    calibration_err = DEFAULT_CALIBRATION_ERR_CM1
    if kind == "raman":
        covers_si = x.min() <= SI_LINE_CM1 - SI_SPAN_CM1 and x.max() >= SI_LINE_CM1 + SI_SPAN_CM1
        if auto_calibrate and covers_si:
            try:
                c = calibrate(x, y, auto_calibrate=True)
            except InputError as exc:
                warnings.append(f"not calibrated on the Si line: {exc}")
            else:
                x = np.array(c.x_corrected, dtype=float)
                cal = {
                    "shift_cm1": c.shift_cm1,
                    "measured_cm1": c.measured_cm1,
                    "measured_err_cm1": c.measured_err_cm1,
                    "reference_cm1": c.reference_cm1,
                    "method": c.method,
                }
                calibration_err = math.hypot(c.measured_err_cm1 or 0.0, SI_REFERENCE_ERR_CM1)
        elif auto_calibrate:
            warnings.append(
                "the spectrum does not cover the Si line (520.7 cm^-1): positions are as "
                f"measured (offset uncertainty {DEFAULT_CALIBRATION_ERR_CM1} cm^-1 assumed)"
            )
    base = estimate_baseline(x, y, method=baseline)
    corrected = np.array(base.corrected, dtype=float)
    fit = None
    features: tuple[Feature, ...] = ()
    pl = None
    evidence: tuple[Evidence, ...] = ()
    if kind == "raman":
        specs = peak_specs(table, x, corrected, polarization=polarization)
        if not specs:
            warnings.append(
                f"no Raman mode of {material} lies in the measured range "
                f"{x.min():.0f}-{x.max():.0f} cm^-1: no layer evidence"
            )
        else:
            fit = fit_peaks(
                x, corrected, specs, model=peak_model, baseline="linear", variance=variance
            )
            warnings.extend(fit.warnings)
            usable = []
            for p in fit.peaks:
                if p.component not in (0, 1):
                    continue
                if p.found and not (math.isfinite(p.center_err) and p.center_err > 0):
                    warnings.append(
                        f"{p.mode}: the fit gives no uncertainty for its centre (it sits at the "
                        "edge of its window); left out of the evidence"
                    )
                    continue
                usable.append(p)
            features = tuple(
                Feature(
                    mode=p.mode,
                    center_cm1=float(p.center) if p.found else None,
                    center_err_cm1=float(p.center_err) if p.found else None,
                    found=bool(p.found),
                    height=float(p.height) if p.found else None,
                    area=float(p.area) if p.found else None,
                    snr=float(p.snr),
                )
                for p in usable
            )
            grid = raman_offset_grid(calibration_err)
            evidence = raman_evidence(
                features,
                table,
                max_layers=max_layers,
                offset_grid=grid,
                polarization=polarization,
                filter_edge_cm1=max(DEFAULT_FILTER_EDGE_CM1, float(x.min())),
            )
    else:
        spec = _pl_spec(table, x)
        if spec is None:
            warnings.append(
                f"the PL spectrum ({x.min():.2f}-{x.max():.2f} eV) does not cover the A exciton "
                f"of {material}: no layer evidence"
            )
        else:
            fit = fit_peaks(
                x, corrected, [spec], model=peak_model, baseline="linear", variance=variance
            )
            warnings.extend(fit.warnings)
            p = fit.peaks[0]
            if p.found:
                ratio = None
                if pl_reference is not None and pl_reference > 0 and p.area > 0:
                    ratio = float(p.area) / float(pl_reference)
                pl = PLFeature(
                    found=True,
                    peak_ev=float(p.center),
                    peak_err_ev=max(float(p.center_err), 1e-4),
                    ratio_to_monolayer=ratio,
                    ratio_err_rel=pl_reference_err_rel if ratio is not None else None,
                )
            else:
                pl = PLFeature(found=False)
            evidence = pl_evidence(pl, table, max_layers=max_layers)
    settings = {
        "kind": kind,
        "material": material,
        "laser_nm": laser_nm,
        "baseline": baseline,
        "peak_model": peak_model,
        "polarization": polarization,
        "auto_calibrate": bool(auto_calibrate),
        "max_layers": int(max_layers),
        "calibration_err_cm1": calibration_err if kind == "raman" else None,
    }
    return SpectrumAnalysis(
        kind=kind,
        material=material,
        laser_nm=laser_nm,
        x=x,
        x_unit=x_unit,
        y=y,
        baseline=np.array(base.baseline, dtype=float),
        corrected=corrected,
        fit=fit,
        features=features,
        pl=pl,
        evidence=tuple(evidence),
        settings=settings,
        calibration=cal,
        n_spikes=int(spikes.n_spikes),
        warnings=tuple(warnings),
    )
