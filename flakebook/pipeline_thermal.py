"""Raman thermometry recorded in a project: series in, coefficients and kappa out.

One path for the window, the command line and the demo:

* :func:`import_series` reads a folder (or a CSV naming files) of spectra taken at several stage
  temperatures or laser powers, attaches them to a flake as a ``ThermometrySeries`` and calls
  :func:`analyse_series`;
* :func:`analyse_series` fits the thermometry mode (default the material's, centre from the
  Raman rule table) in every spectrum of the flake's latest temperature and power series, with
  no Si-line calibration inside a series, fits omega(T) and omega(P) and stores chi_T and chi_P
  with their covariance and warnings as a ``ThermometryResult`` of method :data:`SERIES_METHOD`
  (no kappa: the fitted centres are in its ``details``);
* :func:`kappa_inputs` gathers what the heat model needs for a flake (the coefficients, its
  hole's radius, the absorptance for that hole at the laser line with its spread, the beam
  radius, the layer posterior), :func:`run_kappa` computes kappa from them (no project: it can
  run in a worker thread) and :func:`store_kappa` records the result (method
  :data:`KAPPA_METHOD`) with its provenance. A new assignment of the flake, or a change of the
  series, makes it stale; the recomputers registered here bring it up to date.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Callable
from dataclasses import asdict, dataclass, replace
from pathlib import Path

import numpy as np

from flakebook.errors import InputError, check_cancel
from flakebook.store import (
    Assignment,
    BeamProfile,
    Flake,
    Hole,
    Image,
    Project,
    Sample,
    Spectrum,
    ThermometryResult,
    ThermometrySeries,
    register_recomputer,
)
from flakebook.thermal.seriesfiles import (  # noqa: F401 (SeriesFile, series_files re-exported)
    VALUE_COLUMN,
    SeriesFile,
    series_files,
)

SERIES_METHOD = "thermometry coefficients (weighted straight-line fits of the mode centre)"
KAPPA_METHOD = "Raman thermometry: heat model inverted, Monte Carlo interval"
#: The Raman mode each material's thermometry follows (common practice, no source: the A1g mode
#: is strong at 532 nm and shifts linearly with temperature in these crystals).
THERMOMETRY_MODES = {"MoSe2": "A1g", "MoS2": "A1g", "WS2": "A1g", "WSe2": "A1g"}
#: The power at the sample above which a series point is flagged (mW), unless the user sets one.
DEFAULT_MAX_POWER_MW = 1.0
LASER_SAFETY = (
    "Raman thermometry heats the sample with a laser. Follow your institution's laser-safety "
    "rules and local regulations."
)
HEAT_MODEL_SOURCE = (
    "Raman-shift method for suspended films (Balandin et al., Nano Lett. 8, 902 (2008)); "
    "Gaussian-beam disk with the beam-weighted temperature (Cai et al., Nano Lett. 10, 1645 (2010))"
)


# ---- the mode in each spectrum ---------------------------------------------------------------


def thermometry_mode(material: str) -> str:
    """The mode thermometry follows by default for ``material``."""
    return THERMOMETRY_MODES.get(material, "A1g")


def mode_spec(material: str, mode: str, layers: int | None, laser_nm: float | None):
    """The ``PeakSpec`` of ``mode``: its expected centre from the material's Raman rule table
    (at the flake's layer number, 1 when unknown)."""
    from flakebook.spectra.peaks import PeakSpec
    from flakebook.spectra.rules import load_rule_table

    table = load_rule_table(material, float(laser_nm or 532.0))
    rules = [r for r in table.rules if r.kind == "position" and r.modes and r.modes[0] == mode]
    if not rules:
        known = sorted({r.modes[0] for r in table.rules if r.kind == "position" and r.modes})
        raise InputError(
            f"{material}'s rule table has no position of the mode {mode!r}; accepted: "
            f"{', '.join(known)}"
        )
    centre = float(np.asarray(rules[0].center(int(layers or 1))).reshape(-1)[0])
    return PeakSpec(mode, centre, 10.0, 4.0)


def fit_mode(x: np.ndarray, y: np.ndarray, spec) -> dict:
    """The mode's centre, its error and width in one spectrum (spikes removed, no Si-line
    calibration: within a temperature series the Si line moves too)."""
    from flakebook.spectra.peaks import fit_peaks, shot_noise_variance
    from flakebook.spectra.processing import calibrate, remove_spikes

    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    order = np.argsort(x)
    x, y = x[order], y[order]
    x = calibrate(x, y, auto_calibrate=False).x_corrected
    variance = shot_noise_variance(y)  # raw counts: weighted by their own shot noise
    y = remove_spikes(y).y
    fit = fit_peaks(x, y, [spec], variance=variance)
    peak = fit.peaks[0]
    if not peak.found or not math.isfinite(peak.center_err) or peak.center_err <= 0:
        raise InputError(
            f"the {spec.mode} mode was not found near {spec.center_cm1:.1f} cm^-1 (signal-to-"
            f"noise {peak.snr:.1f}); accepted: spectra where the mode stands out of the noise"
        )
    return {
        "center_cm1": float(peak.center),
        "center_err_cm1": float(peak.center_err),
        "fwhm_cm1": float(peak.fwhm),
        "snr": float(peak.snr),
    }


def _shift_axis(rec: Spectrum) -> np.ndarray:
    if rec.x_unit == "cm-1":
        return np.asarray(rec.x, dtype=float)
    from flakebook.spectra.units import to_raman_shift

    if rec.x_unit != "nm" or rec.laser_nm is None:
        raise InputError(
            f"spectrum {rec.id} is in {rec.x_unit} without a laser line; accepted: Raman shift "
            "in cm^-1, or nm with the laser line"
        )
    return np.asarray(to_raman_shift(rec.x, "nm", laser_nm=rec.laser_nm), dtype=float)


# ---- the coefficients -------------------------------------------------------------------------


def _layers_of(project: Project, flake: Flake) -> int | None:
    asg = project.latest_assignment(flake)
    return None if asg is None else asg.layers


def latest_series(project: Project, flake) -> dict[str, ThermometrySeries]:
    """The flake's latest series of each kind."""
    series, _ = project.thermometry_of(flake)
    out: dict[str, ThermometrySeries] = {}
    for s in series:
        if project.spectra_of_series(s):
            out[s.kind] = s
    return out


def series_points(
    project: Project, series: ThermometrySeries, spec, cancel=None
) -> tuple[list[dict], list[Spectrum]]:
    """The fitted mode centre of each spectrum of ``series``, in the order taken."""
    spectra = sorted(
        project.spectra_of_series(series), key=lambda s: (s.metadata.get("step", s.id), s.id)
    )
    points = []
    for k, rec in enumerate(spectra):
        check_cancel(cancel)
        x_value = rec.stage_temperature_k if series.kind == "temperature" else rec.power_mw
        if x_value is None:
            raise InputError(
                f"spectrum {rec.source_path or rec.id} of the {series.kind} series has no "
                f"{VALUE_COLUMN[series.kind]}; accepted: every spectrum with its value"
            )
        fit = fit_mode(_shift_axis(rec), rec.y, spec)
        points.append({"spectrum_id": rec.id, "x": float(x_value), "order": k, **fit})
    return points, spectra


def _fit_dict(fit) -> dict:
    d = asdict(fit)
    d["covariance"] = np.asarray(fit.covariance).tolist()
    d["warnings"] = list(fit.warnings)
    return d


def coefficients_fields(
    project: Project, flake, *, mode: str | None = None, max_power_mw: float | None = None,
    cancel: threading.Event | None = None,
) -> tuple[dict, list]:  # fmt: skip
    """The fields of a coefficients result of ``flake`` and its inputs (reads, stores nothing)."""
    from flakebook.thermal.series import combine_series, fit_series

    flake = project.get(Flake, flake.id if isinstance(flake, Flake) else int(flake))
    sample = project.get(Sample, flake.sample_id)
    by_kind = latest_series(project, flake)
    if not by_kind:
        raise InputError(
            f"flake {flake.label} has no thermometry series; import one with `flakebook series "
            "import`"
        )
    limit = DEFAULT_MAX_POWER_MW if max_power_mw is None else float(max_power_mw)
    details: dict = {"series": {}, "max_power_limit_mw": limit}
    fits, inputs, warnings = {}, [], []
    for kind, series in by_kind.items():
        m = mode or series.mode or thermometry_mode(sample.material)
        spec = mode_spec(sample.material, m, _layers_of(project, flake), series.laser_nm)
        points, spectra = series_points(project, series, spec, cancel)
        x = np.array([p["x"] for p in points])
        fit = fit_series(
            x,
            np.array([p["center_cm1"] for p in points]),
            np.array([p["center_err_cm1"] for p in points]),
            order=np.array([p["order"] for p in points]),
            kind=kind,
        )
        fits[kind] = fit
        inputs.extend([series, *spectra])
        details["series"][kind] = {
            "series_id": series.id,
            "mode": m,
            "expected_center_cm1": spec.center_cm1,
            "laser_nm": series.laser_nm,
            "points": points,
            "fit": _fit_dict(fit),
        }
        if kind != "temperature" and np.any(x > limit):
            warnings.append(
                f"{kind} series: {int(np.sum(x > limit))} point(s) above the power limit of "
                f"{limit:g} mW at the sample (highest {x.max():g} mW): such a power can destroy "
                "a membrane; check the flake"
            )
    fields: dict = {
        "method": SERIES_METHOD,
        "source": "weighted least squares; no Si-line calibration within a series",
        "parameters": {"mode": mode, "max_power_mw": limit},
    }
    t, p = fits.get("temperature"), fits.get("power")
    if t is not None and p is not None:
        co = combine_series(t, p)
        warnings = list(co.warnings) + warnings
        details["covariance"] = np.asarray(co.covariance).tolist()
        details["max_temperature_rise_k"] = co.max_temperature_rise_k
    else:
        for name, f in (("temperature", t), ("power", p)):
            if f is not None:
                warnings = [f"{name} series: {w}" for w in f.warnings] + warnings
        missing = "power" if p is None else "temperature"
        warnings.append(f"no {missing} series yet: kappa needs both")
        details["covariance"] = None
    sup = fits.get("supported-power")
    if sup is not None:
        details["supported"] = {
            "chi_p_cm1_per_mw": sup.slope,
            "chi_p_err_cm1_per_mw": sup.slope_err,
        }
        warnings = [f"supported-part power series: {w}" for w in sup.warnings] + warnings
    details["warnings"] = warnings
    fields.update(
        chi_t_cm1_per_k=None if t is None else t.slope,
        chi_t_err_cm1_per_k=None if t is None else t.slope_err,
        chi_p_cm1_per_mw=None if p is None else p.slope,
        chi_p_err_cm1_per_mw=None if p is None else p.slope_err,
        details=details,
    )
    return fields, inputs


def analyse_series(
    project: Project, flake, *, mode: str | None = None, max_power_mw: float | None = None,
    cancel: threading.Event | None = None,
) -> ThermometryResult:  # fmt: skip
    """Fit the flake's latest series and store chi_T and chi_P (a coefficients result)."""
    fields, inputs = coefficients_fields(
        project, flake, mode=mode, max_power_mw=max_power_mw, cancel=cancel
    )
    fid = flake.id if isinstance(flake, Flake) else int(flake)
    return project.add_thermometry_result(fid, inputs=inputs, **fields)


def import_series(
    project: Project,
    flake,
    kind: str,
    source: str | Path,
    *,
    mode: str | None = None,
    laser_nm: float | None = None,
    max_power_mw: float | None = None,
    progress: Callable[[float, str], None] | None = None,
    cancel: threading.Event | None = None,
) -> tuple[ThermometrySeries, ThermometryResult]:
    """Attach a series of spectra to ``flake`` and fit it (one transaction: a bad spectrum
    stores nothing). Returns the series and the flake's new coefficients result."""
    from flakebook.spectra.io import read_spectrum

    flake = project.find_flake(flake) if isinstance(flake, str) else flake
    files = series_files(source, kind)
    read = []
    for k, f in enumerate(files):
        check_cancel(cancel)
        if progress is not None:
            progress(0.6 * k / len(files), f"reading {f.path.name}")
        spec = read_spectrum(f.path, kind="raman", laser_nm=laser_nm)
        if spec.x_unit != "cm1":
            raise InputError(
                f"{f.path.name}: the x axis is in {spec.x_unit}; accepted: Raman shift in cm^-1 "
                "for a thermometry series"
            )
        read.append((f, spec))
    folder = project.path.parent
    with project.transaction():
        fields = {"laser_nm": laser_nm, "mode": mode or ""}
        series = project.add_thermometry_series(flake, kind, **fields)
        for f, spec in read:
            meta = {k: v for k, v in spec.metadata.items() if isinstance(v, str | int | float)}
            try:
                rel = str(f.path.resolve().relative_to(folder.resolve()))
            except ValueError:
                rel = str(f.path.resolve())
            project.add_spectrum(
                flake,
                np.asarray(spec.x),
                np.asarray(spec.y),
                kind="raman",
                x_unit="cm-1",
                laser_nm=laser_nm or meta.get("laser_nm"),
                series_id=series.id,
                power_mw=None if kind == "temperature" else f.value,
                stage_temperature_k=f.value if kind == "temperature" else None,
                source_path=rel,
                metadata={**meta, "step": f.order},
            )
        if progress is not None:
            progress(0.7, "fitting the series")
        result = analyse_series(project, flake, mode=mode, max_power_mw=max_power_mw, cancel=cancel)
    return series, result


# ---- kappa -------------------------------------------------------------------------------------


def check_signs(chi_t_cm1_per_k: float, chi_p_cm1_per_mw: float) -> None:
    """Refuse coefficients of the wrong sign: the thermometry modes soften on heating, so both
    chi_T and chi_P are negative (common practice, no source)."""
    import math as _m

    for name, v, unit in (("chi_T", chi_t_cm1_per_k, "K"), ("chi_P", chi_p_cm1_per_mw, "mW")):
        if not _m.isfinite(v) or v >= 0:
            raise InputError(
                f"{name} {v:+.4g} cm^-1/{unit} is not negative, but the A1g (and E2g) modes "
                "soften on heating; accepted: a negative coefficient (check the sign and the series)"
            )


@dataclass(frozen=True)
class ModelOptions:
    """The heat-model settings a user can change (the window's and the command line's)."""

    weighting: str = "intensity"
    interface_conductance_w_m2k: float | None = None
    interface_conductance_err_w_m2k: float = 0.0
    kappa_alpha: float = 0.0
    beam_offset_um: float = 0.0
    draws: int = 10_000
    na_objective: float | None = None
    hole_depth_err_nm: float | None = None
    conductance_from_series: bool = False

    def heat_model(self, powers_mw=None):
        from flakebook.thermal.inversion import HeatModel
        from flakebook.thermal.model import WEIGHTINGS

        if self.weighting not in WEIGHTINGS:
            raise InputError(
                f"weighting {self.weighting!r} is not known; accepted: {', '.join(WEIGHTINGS)}"
            )
        g = self.interface_conductance_w_m2k
        ge = self.interface_conductance_err_w_m2k
        if self.conductance_from_series and g is not None:
            raise InputError(
                "the interface conductance is both given and to be fitted from the "
                "supported-part series; accepted: one of the two"
            )
        if ge and g is None:
            raise InputError(
                "an interface conductance error was given without an interface conductance; "
                "accepted: --interface-conductance-err-w-m2k together with "
                "--interface-conductance-w-m2k"
            )
        if not (math.isfinite(ge) and ge >= 0):
            raise InputError(
                f"interface conductance error {ge!r} W/m^2/K is not usable; a standard "
                "deviation >= 0 is accepted"
            )
        if g is not None and not (math.isfinite(g) and g > 0):
            raise InputError(
                f"interface conductance {g!r} W/m^2/K is not usable; a positive value is accepted"
            )
        return HeatModel(
            weighting=self.weighting,
            interface_conductance_w_m2k=g,
            kappa_alpha=float(self.kappa_alpha),
            beam_offset_um=float(self.beam_offset_um),
            powers_mw=tuple(float(p) for p in powers_mw) if powers_mw is not None else None,
        )


def latest_coefficients(project: Project, flake) -> ThermometryResult | None:
    """The flake's latest coefficients result (None without one)."""
    _, results = project.thermometry_of(flake)
    rows = [r for r in results if r.method == SERIES_METHOD]
    return rows[-1] if rows else None


def latest_kappa(project: Project, flake) -> ThermometryResult | None:
    """The flake's latest kappa result (None without one)."""
    _, results = project.thermometry_of(flake)
    rows = [r for r in results if r.kappa_w_mk is not None]
    return rows[-1] if rows else None


def _hole_of(project: Project, flake: Flake, series: dict) -> Hole | None:
    for s in series.values():
        if s.hole_id is not None:
            return project.get(Hole, s.hole_id)
    covered = [(link, h) for link, h in project.holes_covered_by(flake) if link.fully_covered]
    if not covered:
        return None
    return max(covered, key=lambda lh: lh[0].margin_um or 0.0)[1]


def _beam_of(project: Project, series: dict, laser_nm: float, na: float | None):
    from flakebook.thermal.beam import diffraction_beam_radius

    for s in series.values():
        if s.beam_profile_id is not None:
            b = project.get(BeamProfile, s.beam_profile_id)
            return b.radius_um, float(b.radius_err_um or 0.0), f"measured ({b.method})", [b], []
    profiles = [b for b in project.records(BeamProfile) if abs(b.laser_nm - laser_nm) < 1.0]
    if profiles:
        b = profiles[-1]
        return b.radius_um, float(b.radius_err_um or 0.0), f"measured ({b.method})", [b], []
    if not na:
        raise InputError(
            "no beam radius: no beam profile at this laser line and no objective NA for a "
            "diffraction estimate; add a beam profile or give --na-objective"
        )
    est = diffraction_beam_radius(laser_nm, na)
    return est.radius_um, est.radius_err_um, est.method, [], list(est.warnings)


def kappa_inputs(
    project: Project, flake, options: ModelOptions = ModelOptions(),  # noqa: B008 (frozen)
    *, layers: int | None = None,
) -> dict:  # fmt: skip
    """Everything :func:`run_kappa` needs for ``flake``, as plain values, and the records they
    came from (``records``, for provenance). Reads the project; computes the absorptance."""
    from flakebook.optics.absorptance import absorptance, absorptance_spread
    from flakebook.optics.materials import get_material
    from flakebook.optics.substrate import parse_substrate
    from flakebook.pipeline import optics_hole
    from flakebook.substrate import format_substrate
    from flakebook.thermal.uncertainty import MORE_BIN_LIMIT

    flake = project.find_flake(flake) if isinstance(flake, str) else project.get(Flake, flake.id)
    sample = project.get(Sample, flake.sample_id)
    coeff = latest_coefficients(project, flake)
    if coeff is None or coeff.chi_t_cm1_per_k is None or coeff.chi_p_cm1_per_mw is None:
        raise InputError(
            f"flake {flake.label} lacks a fitted temperature or power series; import both with "
            "`flakebook series import` (kappa needs chi_T and chi_P)"
        )
    check_signs(coeff.chi_t_cm1_per_k, coeff.chi_p_cm1_per_mw)
    series = latest_series(project, flake)
    laser = next((s.laser_nm for s in series.values() if s.laser_nm), None) or 532.0
    hole = _hole_of(project, flake, series)
    if hole is None or hole.radius_um is None:
        raise InputError(
            f"flake {flake.label} covers no hole with a known radius; kappa is computed for a "
            "membrane over a hole (detect holes first)"
        )
    image = project.get(Image, hole.image_id)
    na = options.na_objective if options.na_objective is not None else image.na_objective
    w, w_err, w_method, beam_recs, warnings = _beam_of(project, series, laser, na)
    warnings = list(warnings) + list(coeff.details.get("warnings", []))
    asg = project.latest_assignment(flake)
    posterior = None
    layers_given = layers is not None
    if layers is None:
        if asg is None:
            raise InputError(f"flake {flake.label} has no layer number; give --layers N")
        if asg.manual or asg.posterior is None:
            layers = asg.layers
        else:
            posterior = np.asarray(asg.posterior, dtype=float)
            more = float(posterior[-1] / posterior.sum())
            if more > MORE_BIN_LIMIT:
                raise InputError(
                    f"flake {flake.label}: its layer evidence puts {more:.0%} on 'more than "
                    f"{posterior.size - 1} layers', which has no thickness; give --layers N"
                )
    n_central = layers if layers is not None else int(np.argmax(posterior[:-1])) + 1
    material = get_material(sample.material)
    substrate = parse_substrate(format_substrate(sample.substrate))
    ohole = optics_hole(sample)
    na_abs = float(na or 0.0)
    depth = None if ohole is None or ohole.bottom == "open" else ohole.depth_nm
    depth_err = options.hole_depth_err_nm
    pattern = sample.hole_pattern
    if depth is not None and depth_err is None and pattern is not None:
        if pattern.depth_err_nm is not None and pattern.depth_nm == depth:
            depth_err = float(pattern.depth_err_nm)
    if depth is not None and depth_err is None:
        depth_err = 0.05 * depth
        warnings.append(
            f"the hole depth's error is not recorded; taken as 5% of {depth:g} nm "
            "(record it with the sample's hole pattern, or give --hole-depth-err-nm)"
        )
    a0 = absorptance(material, int(n_central), laser, substrate, geometry="suspended",
                     hole=ohole, na_objective=na_abs)  # fmt: skip
    warnings.extend(a0.warnings)
    na_err = 0.05 if na_abs > 0 else 0.0
    a_err = 0.0
    if na_err:
        spread = absorptance_spread(material, int(n_central), laser, substrate,
                                    geometry="suspended", hole=ohole, na_objective=na_abs,
                                    na_objective_err=na_err, draws=300,
                                    rng=np.random.default_rng(0))  # fmt: skip
        a_err = spread.std
    table = None
    if depth is not None and depth_err:
        from flakebook.optics.substrate import Hole as OpticsHole

        depths = depth + depth_err * np.linspace(-4.0, 4.0, 17)
        depths = depths[depths > 0]
        values = [
            absorptance(material, int(n_central), laser, substrate, geometry="suspended",
                        hole=OpticsHole(bottom=ohole.bottom, depth_nm=float(d)),
                        na_objective=na_abs).absorptance_flake
            for d in depths
        ]  # fmt: skip
        table = (depths.tolist(), values)
    fitted = None
    if options.conductance_from_series:
        fitted = _fitted_conductance(project, flake, coeff, material, int(n_central), laser,
                                     substrate, na_abs, a0.absorptance_flake, float(hole.radius_um),
                                     float(w), float(w_err), options.weighting)  # fmt: skip
        warnings.append(fitted["note"])
    spectra_ids = [
        p["spectrum_id"] for s in coeff.details.get("series", {}).values() for p in s["points"]
    ]
    powers = [p["x"] for p in coeff.details.get("series", {}).get("power", {}).get("points", [])]
    cov = coeff.details.get("covariance")
    corr = 0.0
    if cov and coeff.chi_t_err_cm1_per_k and coeff.chi_p_err_cm1_per_mw:
        corr = cov[0][1] / (coeff.chi_t_err_cm1_per_k * coeff.chi_p_err_cm1_per_mw)
    return {
        "flake_id": flake.id,
        "label": flake.label,
        "material": sample.material,
        "chi_t_cm1_per_k": coeff.chi_t_cm1_per_k,
        "chi_t_err_cm1_per_k": coeff.chi_t_err_cm1_per_k or 0.0,
        "chi_p_cm1_per_mw": coeff.chi_p_cm1_per_mw,
        "chi_p_err_cm1_per_mw": coeff.chi_p_err_cm1_per_mw or 0.0,
        "chi_correlation": corr,
        "absorptance": a0.absorptance_flake,
        "absorptance_err": a_err,
        "absorptance_table": table,
        "hole_depth_nm": depth,
        "hole_depth_err_nm": depth_err or 0.0,
        "hole_bottom": None if ohole is None else ohole.bottom,
        "hole_radius_um": float(hole.radius_um),
        "hole_radius_err_um": float(hole.radius_err_um or 0.0),
        "beam_radius_um": float(w),
        "beam_radius_err_um": float(w_err),
        "beam_method": w_method,
        "laser_nm": float(laser),
        "na_objective": na_abs,
        "layers": layers,
        "layers_given": layers if layers_given else None,
        "layer_posterior": None if posterior is None else posterior.tolist(),
        "layer_spacing_nm": float(material.layer_spacing_nm),
        "powers_mw": powers,
        "max_power_mw": max(powers) if powers else None,
        "options": asdict(options),
        "fitted_conductance": fitted,
        "warnings": warnings,
        "absorptance_method": a0.provenance.get("method", ""),
        "records": {
            "coefficients": coeff,
            "hole": hole,
            "beam": beam_recs,
            "assignment": None if layers_given else asg,
            "sample": sample,
            "spectra": spectra_ids,
        },
    }


def _fitted_conductance(project, flake, coeff, material, n, laser, substrate, na, a_flake,
                        r_um, w_um, w_err, weighting) -> dict:  # fmt: skip
    """g from the flake's supported-part power series (see flakebook/thermal/conductance.py)."""
    from flakebook.optics.absorptance import absorptance, absorptance_spread
    from flakebook.thermal.conductance import conductance_from_series

    sup = coeff.details.get("supported")
    if not sup:
        raise InputError(
            f"flake {flake.label} has no supported-part power series to fit g from; import one "
            "with `flakebook series import --kind supported-power`, or give the conductance"
        )
    a_sup = absorptance(material, n, laser, substrate, geometry="supported", na_objective=na)
    a_sup_err = 0.0
    if na > 0:
        a_sup_err = absorptance_spread(material, n, laser, substrate, geometry="supported",
                                       na_objective=na, na_objective_err=0.05, draws=300,
                                       rng=np.random.default_rng(0)).std  # fmt: skip
    fit = conductance_from_series(
        coeff.chi_t_cm1_per_k, coeff.chi_p_cm1_per_mw, a_flake, sup["chi_p_cm1_per_mw"],
        a_sup.absorptance_flake, n * material.layer_spacing_nm, r_um, w_um,
        chi_t_err_cm1_per_k=coeff.chi_t_err_cm1_per_k or 0.0,
        chi_p_supported_err_cm1_per_mw=sup["chi_p_err_cm1_per_mw"] or 0.0,
        absorptance_supported_err=a_sup_err, beam_radius_err_um=w_err, weighting=weighting,
    )  # fmt: skip
    return {
        "conductance_w_m2k": fit.conductance_w_m2k,
        "conductance_err_w_m2k": fit.conductance_err_w_m2k,
        "absorptance_supported": a_sup.absorptance_flake,
        "absorptance_supported_err": a_sup_err,
        "note": fit.note,
    }


def run_kappa(
    inputs: dict,
    *,
    seed: int | None = 0,
    progress: Callable[[float, str], None] | None = None,
    cancel: threading.Event | None = None,
):
    """kappa with its Monte Carlo interval from :func:`kappa_inputs` (no project: a worker can
    run it). Returns a ``flakebook.thermal.uncertainty.KappaResult``."""
    from flakebook.thermal.uncertainty import kappa_with_uncertainty

    opts = ModelOptions(**inputs["options"])
    fitted = inputs.get("fitted_conductance")
    if opts.conductance_from_series and fitted:
        opts = replace(
            opts,
            conductance_from_series=False,
            interface_conductance_w_m2k=fitted["conductance_w_m2k"],
            interface_conductance_err_w_m2k=fitted["conductance_err_w_m2k"],
        )
    model = opts.heat_model(inputs["powers_mw"] or None)
    table = inputs.get("absorptance_table")
    a = (np.asarray(table[0]), np.asarray(table[1])) if table else inputs["absorptance"]
    post = inputs.get("layer_posterior")
    return kappa_with_uncertainty(
        inputs["chi_t_cm1_per_k"],
        inputs["chi_p_cm1_per_mw"],
        a,
        inputs["hole_radius_um"],
        inputs["beam_radius_um"],
        layer_spacing_nm=inputs["layer_spacing_nm"],
        layers=inputs.get("layers"),
        layer_posterior=None if post is None else np.asarray(post),
        chi_t_err_cm1_per_k=inputs["chi_t_err_cm1_per_k"],
        chi_p_err_cm1_per_mw=inputs["chi_p_err_cm1_per_mw"],
        chi_correlation=inputs["chi_correlation"],
        absorptance_err=inputs["absorptance_err"],
        hole_radius_err_um=inputs["hole_radius_err_um"],
        beam_radius_err_um=inputs["beam_radius_err_um"],
        hole_depth_nm=inputs["hole_depth_nm"] if table else None,
        hole_depth_err_nm=inputs["hole_depth_err_nm"] if table else 0.0,
        interface_conductance_err_w_m2k=float(opts.interface_conductance_err_w_m2k or 0.0),
        model=model,
        draws=int(opts.draws),
        seed=seed,
        max_power_mw=inputs.get("max_power_mw"),
        extra_warnings=tuple(inputs["warnings"]),
        progress=progress,
        cancel=cancel,
    )


def kappa_fields(inputs: dict, result) -> dict:
    """The fields of a kappa result record from :func:`kappa_inputs` and :func:`run_kappa`."""
    recs = inputs["records"]
    refs = [recs["coefficients"], recs["hole"], recs["sample"], *recs["beam"]]
    if recs.get("assignment") is not None:
        refs.append(recs["assignment"])
    plain = {k: v for k, v in inputs.items() if k != "records"}
    return {
        "layers": int(result.layers) if result.layers else inputs.get("layers"),
        "thickness_nm": result.thickness_nm,
        "layer_spacing_nm": inputs["layer_spacing_nm"],
        "kappa_w_mk": result.kappa_w_mk,
        "kappa_median_w_mk": result.kappa_median_w_mk,
        "kappa_p16_w_mk": result.kappa_p16_w_mk,
        "kappa_p84_w_mk": result.kappa_p84_w_mk,
        "chi_t_cm1_per_k": inputs["chi_t_cm1_per_k"],
        "chi_t_err_cm1_per_k": inputs["chi_t_err_cm1_per_k"],
        "chi_p_cm1_per_mw": inputs["chi_p_cm1_per_mw"],
        "chi_p_err_cm1_per_mw": inputs["chi_p_err_cm1_per_mw"],
        "absorptance": result.absorptance,
        "absorptance_err": inputs["absorptance_err"],
        "method": KAPPA_METHOD,
        "source": HEAT_MODEL_SOURCE,
        "parameters": {
            "options": inputs["options"],
            "layers_given": inputs.get("layers_given"),
        },
        "inputs": refs,
        "details": {
            "result": result.to_dict(),
            "heat_model_method": result.method,
            "geometry_factor": result.geometry_factor,
            "draws": result.draws,
            "valid_draws": result.valid_draws,
            "inputs": plain,
        },
    }


def store_kappa(project: Project, inputs: dict, result) -> ThermometryResult:
    """Record a kappa result computed by :func:`run_kappa` from :func:`kappa_inputs`."""
    return project.add_thermometry_result(inputs["flake_id"], **kappa_fields(inputs, result))


def flake_kappa(
    project: Project, flake, options: ModelOptions = ModelOptions(),  # noqa: B008 (frozen)
    *, layers: int | None = None, store: bool = True,
    progress: Callable[[float, str], None] | None = None, cancel: threading.Event | None = None,
):  # fmt: skip
    """kappa of a flake from its stored series: (KappaResult, stored record or None)."""
    inputs = kappa_inputs(project, flake, options, layers=layers)
    result = run_kappa(inputs, progress=progress, cancel=cancel)
    return result, (store_kappa(project, inputs, result) if store else None)


# ---- recomputing ------------------------------------------------------------------------------


def _recompute_coefficients(project: Project, rec: ThermometryResult):
    params = rec.parameters or {}
    fields, inputs = coefficients_fields(
        project, rec.flake_id, mode=params.get("mode"), max_power_mw=params.get("max_power_mw")
    )
    return {**fields, "inputs": tuple(inputs)}


def _recompute_kappa(project: Project, rec: ThermometryResult):
    params = rec.parameters or {}
    options = ModelOptions(**params.get("options", {}))
    inputs = kappa_inputs(
        project, project.get(Flake, rec.flake_id), options, layers=params.get("layers_given")
    )
    fields = kappa_fields(inputs, run_kappa(inputs))
    fields["inputs"] = tuple(fields["inputs"])
    return fields


register_recomputer(SERIES_METHOD, _recompute_coefficients)
register_recomputer(KAPPA_METHOD, _recompute_kappa)


def flake_of(project: Project, key) -> Flake:
    """A flake by label or id (a record passes through)."""
    if isinstance(key, Flake):
        return key
    return project.find_flake(str(key))


__all__ = [
    "SERIES_METHOD",
    "KAPPA_METHOD",
    "LASER_SAFETY",
    "ModelOptions",
    "import_series",
    "analyse_series",
    "kappa_inputs",
    "run_kappa",
    "store_kappa",
    "flake_kappa",
    "latest_coefficients",
    "latest_kappa",
    "Assignment",
]
