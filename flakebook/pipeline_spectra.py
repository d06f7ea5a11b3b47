"""Spectra recorded in a project: fits, Raman/PL/Si-line/AFM evidence and the flake's combined
assignment (one path for the window, the command line and the demo; re-exported by
:mod:`flakebook.pipeline`).

- :func:`attach_spectrum` stores a spectrum on a flake, its fit (:class:`~flakebook.store.
  SpectrumFit`, computed by :func:`flakebook.spectra.analyse.analyse_spectrum`), one Evidence
  record per rule of the rule table it informs, and the flake's combined assignment, in one
  transaction.
- :func:`assign_flake` combines ALL the evidence of the flake's primary terrace (contrast, Raman,
  PL, Si-line attenuation, AFM) with :func:`flakebook.evidence.combine_report`; evidence that
  depends on the spectrometer's offset is combined on its offset grid (kept in the record), so
  the offset is marginalised once per spectrum. A person's assignment (with its reason) stays in
  force and is shown beside the evidence.
- :func:`set_fit_settings` changes a fit's settings and marks it, its evidence and the
  assignment stale; ``recompute`` (the recomputers registered here) redoes them.
  :func:`refit` does the same at once (the window's refit).
- :func:`calibrate_rules` refits the rule table on a sample's flakes of known N and stores it on
  the sample; :func:`rule_table_for` returns it from then on (fits made earlier are marked
  stale so that recompute re-reads them with it).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from flakebook.errors import InputError
from flakebook.store import (
    Assignment,
    Evidence,
    Flake,
    Project,
    RuleCalibration,
    Sample,
    Spectrum,
    SpectrumFit,
    register_recomputer,
)
from flakebook.store.files import stored_path

SPECTRUM_FIT_METHOD = "spectrum fit (pybaselines baseline, lmfit line shapes)"
RAMAN_METHOD = "Raman (rule table)"
PL_METHOD = "photoluminescence (rule table)"
SI_METHOD = "Si-line attenuation (thin-film model)"
AFM_METHOD = "AFM step height"
SPECTRA_METHODS = (RAMAN_METHOD, PL_METHOD)

#: Display categories of evidence, by method (the inspector's and the assign command's).
CATEGORIES = {
    RAMAN_METHOD: "Raman",
    PL_METHOD: "PL",
    SI_METHOD: "Si attenuation",
    AFM_METHOD: "AFM",
}

UNIT_TO_STORE = {"cm1": "cm-1", "nm": "nm", "ev": "ev"}
UNIT_FROM_STORE = {"cm-1": "cm1", "nm": "nm", "ev": "ev"}


def category(rec: Evidence) -> str:
    """'contrast', 'Raman', 'PL', 'Si attenuation', 'AFM' or the method itself."""
    from flakebook.pipeline import CONTRAST_METHOD

    if rec.method == CONTRAST_METHOD or isinstance(rec.parameters.get("contrast"), dict):
        return "contrast"
    return CATEGORIES.get(rec.method, rec.method)


def evidence_name(rec: Evidence) -> str:
    """The evidence's short name: its category and, for rule-table evidence, the feature."""
    cat = category(rec)
    feature = rec.parameters.get("feature")
    name = f"{cat}: {feature}" if feature else cat
    sid = rec.parameters.get("spectrum_id")
    return f"{name} (spectrum {sid})" if sid is not None else name


# ---- the rule table a sample uses -----------------------------------------------------------


def rule_table_for(project: Project, sample: Sample, laser_nm: float):
    """(table, calibration record or None): the sample's latest calibrated rule table for the
    laser line, else the published table of its material."""
    from flakebook.spectra.rules import RuleTable, load_rule_table

    cals = [
        c for c in project.rule_calibrations_of(sample, laser_nm) if c.material == sample.material
    ]
    if cals:
        return RuleTable.from_dict(cals[-1].rule_table), cals[-1]
    return load_rule_table(sample.material, laser_nm), None


# ---- stored spectra and the core ------------------------------------------------------------


def core_spectrum(rec: Spectrum):
    """A stored spectrum as a flakebook.spectra.io.Spectrum."""
    from flakebook.spectra.io import Spectrum as CoreSpectrum

    meta = dict(rec.metadata)
    if rec.laser_nm is not None:
        meta["laser_nm"] = rec.laser_nm
    return CoreSpectrum(
        x=np.array(rec.x),
        y=np.array(rec.y),
        x_unit=UNIT_FROM_STORE[rec.x_unit],
        kind=rec.kind,
        metadata=meta,
    )


DEFAULT_SETTINGS = {
    "baseline": "imodpoly",
    "peak_model": "lorentzian",
    "polarization": "parallel",
    "auto_calibrate": True,
}


def analyse_stored(project: Project, spec: Spectrum, settings: dict | None = None):
    """(analysis, rule calibration or None) of a stored spectrum with the given settings (the
    sample's rule table)."""
    from flakebook.spectra.analyse import analyse_spectrum

    s = {**DEFAULT_SETTINGS, **(settings or {})}
    sample = project.get(Sample, spec.sample_id)
    laser = spec.laser_nm or s.get("laser_nm") or 532.0
    table, cal = rule_table_for(project, sample, laser)
    analysis = analyse_spectrum(
        core_spectrum(spec),
        sample.material,
        laser_nm=laser,
        kind=spec.kind,
        baseline=s["baseline"],
        peak_model=s["peak_model"],
        polarization=s["polarization"],
        auto_calibrate=bool(s["auto_calibrate"]),
        table=table,
        max_layers=project.max_layers,
    )
    return analysis, cal


def _evidence_parameters(item, fit: SpectrumFit, spec: Spectrum) -> dict:
    feature = item.method.split(" (")[0]
    params = {
        "feature": feature,
        "label": item.method,
        "spectrum_id": spec.id,
        "spectrum_fit_id": fit.id,
        "kind": spec.kind,
        "warnings": list(item.warnings),
    }
    if item.grid is not None:
        from flakebook.pipeline import grid_parameters

        params["grid"] = grid_parameters(item.grid, f"{item.grid.grid.parameter}@spectrum{spec.id}")
    return params


def _source_of(item) -> str:
    text = item.method
    return text[text.find("(") + 1 : text.rfind(")")] if "(" in text else ""


def store_fit(project: Project, spec: Spectrum, analysis, calibration=None):
    """Store a spectrum's fit and its Raman/PL evidence (on the spectrum's terrace, else the
    flake's primary terrace); returns (fit, [evidence records])."""
    with project.transaction():
        fit = project.add_spectrum_fit(
            spec,
            settings=analysis.settings,
            peaks=analysis.peaks(),
            calibration=analysis.calibration or {},
            warnings=analysis.warnings,
            method=SPECTRUM_FIT_METHOD,
            inputs=[spec] + ([calibration] if calibration is not None else []),
        )
        recs = []
        if spec.flake_id is not None:
            terrace = spec.terrace_id or project.primary_terrace_id(spec.flake_id)
            for item in analysis.evidence:
                recs.append(
                    project.add_evidence(
                        spec.flake_id,
                        item.likelihood,
                        method=RAMAN_METHOD if spec.kind == "raman" else PL_METHOD,
                        terrace=terrace,
                        inputs=[fit],
                        parameters=_evidence_parameters(item, fit, spec),
                        source=_source_of(item),
                        reason=item.reason,
                    )
                )
    return fit, recs


@dataclass
class AttachedSpectrum:
    """What :func:`attach_spectrum` stored (ids, for undo) and the analysis it made."""

    spectrum: int
    fit: int
    evidence: list[int] = field(default_factory=list)
    assignments: list[int] = field(default_factory=list)
    analysis: object = None


def plain_metadata(metadata) -> dict:
    """The entries of a read spectrum's metadata that a record keeps (plain JSON values)."""
    return {
        k: v
        for k, v in dict(metadata).items()
        if isinstance(v, str | int | float | bool) or v is None
    }


def attach_spectrum(
    project: Project,
    flake,
    spectrum,
    *,
    source_path: str | Path | None = None,
    settings: dict | None = None,
    terrace_id: int | None = None,
    spot: tuple[int, float, float] | None = None,
    assign: bool = True,
    fields: dict | None = None,
) -> AttachedSpectrum:
    """Store ``spectrum`` (a flakebook.spectra.io.Spectrum) on ``flake``, fit it, record its
    evidence and recombine the flake's assignment, in one transaction. A Raman spectrum on an
    axis other than cm^-1, nm or eV (absolute wavenumbers) is stored as Raman shift. ``spot``:
    (image id, x px, y px) where the spectrum was taken; ``fields`` more of the stored
    spectrum's settings (``power_mw``, ``integration_s``, ``stage_temperature_k``,
    ``metadata``, ...)."""
    from flakebook.spectra.analyse import raman_axis
    from flakebook.store._util import sha256_file

    flake = project.get(Flake, flake) if isinstance(flake, int) else flake
    s = {**DEFAULT_SETTINGS, **(settings or {})}
    laser = s.get("laser_nm") or spectrum.metadata.get("laser_nm")
    x, unit = np.array(spectrum.x), spectrum.x_unit
    if unit == "wavenumber-cm1":
        x, unit = raman_axis(x, unit, laser), "cm1"
    extra = dict(fields or {})
    fields = {}
    if source_path is not None:
        path = Path(source_path)
        fields["source_path"] = stored_path(project.folder, path)
        if path.is_file():
            fields["source_sha256"] = sha256_file(path)[0]
    if spot is not None:
        fields.update(spot_image_id=spot[0], spot_x_px=float(spot[1]), spot_y_px=float(spot[2]))
    meta = plain_metadata(spectrum.metadata)
    meta.update(extra.pop("metadata", {}) or {})
    fields.update(extra)
    order = np.argsort(x, kind="stable")
    with project.transaction():
        spec = project.add_spectrum(
            flake,
            x[order],
            np.asarray(spectrum.y, float)[order],
            kind=spectrum.kind,
            x_unit=UNIT_TO_STORE[unit],
            laser_nm=laser,
            polarization=s.get("polarization", ""),
            terrace_id=terrace_id,
            metadata=meta,
            **fields,
        )
        analysis, cal = analyse_stored(project, spec, s)
        fit, evidence = store_fit(project, spec, analysis, cal)
        out = AttachedSpectrum(spec.id, fit.id, [e.id for e in evidence], analysis=analysis)
        if assign and evidence:
            out.assignments = assign_flake(project, flake)
    return out


def detach_spectrum(project: Project, spectrum_id: int) -> None:
    """Delete a stored spectrum with its fits and their evidence, and recombine the flake."""
    with project.transaction():
        spec = project.get(Spectrum, spectrum_id)
        fit_ids = {f.id for f in project.fits_of(spec)}
        for e in project.evidence_of(spec.flake_id) if spec.flake_id else ():
            if e.parameters.get("spectrum_fit_id") in fit_ids:
                project.delete(e, undo=False)
        project.delete(spec, undo=False)
        if spec.flake_id is not None:
            assign_flake(project, spec.flake_id)


# ---- combining a flake's evidence ----------------------------------------------------------


def evidence_item(rec: Evidence):
    """A stored Evidence record as a flakebook.evidence.Evidence (with its offset grid)."""
    from flakebook.evidence import Evidence as CoreEvidence
    from flakebook.evidence import GridLikelihood, ParameterGrid

    name = evidence_name(rec)
    g = rec.parameters.get("grid")
    if isinstance(g, dict):
        nodes = np.array(g["nodes"], float)
        weights = np.array(g["weights"], float)
        nodes.setflags(write=False)
        weights.setflags(write=False)
        ll = np.array(g["log_likelihood"], float)
        ll = np.where(ll <= -1e29, -np.inf, ll)
        grid = GridLikelihood(ParameterGrid(g["parameter"], nodes, weights), ll, method=name)
        return CoreEvidence.from_grid(name, grid, rec.reason)
    return CoreEvidence(name, np.array(rec.likelihood), rec.reason)


def terrace_evidence(project: Project, flake) -> list[Evidence]:
    """The evidence of the flake's primary terrace (and the flake's own, on no terrace)."""
    fid = flake if isinstance(flake, int) else flake.id
    tid = project.primary_terrace_id(fid)
    return [e for e in project.evidence_of(fid) if tid is None or e.terrace_id in (tid, None)]


def latest_manual(project: Project, flake) -> Assignment | None:
    """The flake's latest manual assignment when it is also its latest assignment."""
    latest = project.latest_assignment(flake)
    return latest if latest is not None and latest.manual else None


def flake_report(project: Project, flake, evidence: Sequence[Evidence] | None = None):
    """(CombinedReport or None, the evidence records): all the evidence of the flake's primary
    terrace combined, with the latest manual assignment as the override."""
    from flakebook.evidence import ManualAssignment, combine_report

    recs = list(terrace_evidence(project, flake) if evidence is None else evidence)
    manual = latest_manual(project, flake)
    if not recs:
        return None, recs
    m = ManualAssignment(manual.layers, manual.reason) if manual is not None else None
    try:
        report = combine_report([evidence_item(r) for r in recs], manual=m)
    except InputError:
        report = combine_report([evidence_item(r) for r in recs])
    return report, recs


def _report_fields(report) -> dict:
    post = report.posterior
    return {
        "layers": int(post.layers),
        "probability": float(post.probability),
        "ambiguous_with": tuple(int(n) for n in post.ambiguous_with),
        "posterior": post.posterior,
        "parameters": {
            "conflicts": [c.text for c in report.conflicts],
            "contributions": [
                {
                    "method": c.method,
                    "layers": c.posterior.layers,
                    "probability": c.posterior.probability,
                    "information_bits": c.information_bits,
                }
                for c in report.contributions
            ],
        },
    }


def assign_flake(project: Project, flake) -> list[int]:
    """Recombine the flake's assignment from all the evidence of its primary terrace: the
    latest computed assignment of the terrace is brought up to date (inputs and values), or a
    new one is added. Returns the ids of assignments added or changed (none without
    evidence)."""
    from flakebook.pipeline import COMBINED_METHOD

    fid = flake if isinstance(flake, int) else flake.id
    report, recs = flake_report(project, fid)
    if report is None:
        return []
    tid = project.primary_terrace_id(fid)
    values = _report_fields(report)
    computed = [
        a
        for a in project.assignments_of(fid)
        if not a.manual and a.method == COMBINED_METHOD and a.terrace_id in (tid, None)
    ]
    with project.transaction():
        if computed:
            old = computed[-1]
            new = dataclasses.replace(
                old, inputs=tuple(e.ref() for e in recs), stale=False, **values
            )
            rec = project.update(new)
        else:
            rec = project.add_assignment(
                fid, method=COMBINED_METHOD, terrace_id=tid, inputs=list(recs), **values
            )
    return [rec.id]


# ---- fit settings, refits and recompute -----------------------------------------------------


def set_fit_settings(project: Project, fit: SpectrumFit, **changes) -> SpectrumFit:
    """Change a fit's settings (baseline, peak_model, polarization, auto_calibrate); the fit,
    its evidence and the flake's assignment are marked stale until recompute."""
    from flakebook.spectra.analyse import POLARIZATIONS
    from flakebook.spectra.peaks import PEAK_MODELS
    from flakebook.spectra.processing import BASELINE_METHODS

    allowed = {
        "baseline": BASELINE_METHODS,
        "peak_model": PEAK_MODELS,
        "polarization": POLARIZATIONS,
        "auto_calibrate": (True, False),
    }
    for k, v in changes.items():
        if k not in allowed:
            raise InputError(f"fit setting {k!r} is not known; accepted: {', '.join(allowed)}")
        if v not in allowed[k]:
            raise InputError(
                f"{k} {v!r} is not known; accepted: {', '.join(str(a) for a in allowed[k])}"
            )
    settings = {**fit.settings, **changes}
    return project.update(fit, settings=settings, stale=True)


def refit(project: Project, fit: SpectrumFit | int, **changes) -> SpectrumFit:
    """Change a fit's settings and redo the fit, its evidence and the assignment at once."""
    with project.transaction():
        fit = project.get(SpectrumFit, fit) if isinstance(fit, int) else fit
        fit = set_fit_settings(project, fit, **changes)
        fit = project.update(fit, **_recompute_fit(project, fit), stale=False)
        for e in project.evidence_of(fit.flake_id) if fit.flake_id else ():
            if e.parameters.get("spectrum_fit_id") == fit.id:
                project.update(e, **_recompute_spectrum_evidence(project, e), stale=False)
        if fit.flake_id is not None:
            assign_flake(project, fit.flake_id)
    return project.get(SpectrumFit, fit.id)


def _recompute_fit(project: Project, rec: SpectrumFit) -> dict:
    spec = project.get(Spectrum, rec.spectrum_id)
    analysis, cal = analyse_stored(project, spec, rec.settings)
    inputs = [spec.ref()] + ([cal.ref()] if cal is not None else [])
    return {
        "settings": analysis.settings,
        "peaks": analysis.peaks(),
        "calibration": analysis.calibration or {},
        "warnings": analysis.warnings,
        "inputs": tuple(inputs),
    }


def evidence_from_fit(project: Project, fit: SpectrumFit) -> tuple:
    """The Raman/PL evidence items of a stored fit, from its stored peaks (the analysis's
    features again), with the sample's rule table."""
    from flakebook.spectra.layer_evidence import (
        DEFAULT_FILTER_EDGE_CM1,
        Feature,
        PLFeature,
        pl_evidence,
        raman_evidence,
        raman_offset_grid,
    )

    spec = project.get(Spectrum, fit.spectrum_id)
    sample = project.get(Sample, spec.sample_id)
    table, _ = rule_table_for(project, sample, fit.settings.get("laser_nm") or 532.0)
    err_key = "center_err_cm1" if spec.kind == "raman" else "center_err_ev"
    rows = [
        p
        for p in fit.peaks
        if ("(" not in p["mode"] or p["mode"].endswith("(1)"))
        and not (p["found"] and not (p.get(err_key) or 0) > 0)
    ]
    if spec.kind == "raman":
        feats = [
            Feature(
                mode=p["mode"].split("(")[0],
                center_cm1=p["center_cm1"] if p["found"] else None,
                center_err_cm1=p["center_err_cm1"] if p["found"] else None,
                found=bool(p["found"]),
                snr=p.get("snr"),
            )
            for p in rows
        ]
        if not feats:
            return ()
        x_min = float(np.min(spec.x)) if spec.x_unit == "cm-1" else DEFAULT_FILTER_EDGE_CM1
        return raman_evidence(
            feats,
            table,
            max_layers=project.max_layers,
            offset_grid=raman_offset_grid(fit.settings.get("calibration_err_cm1") or 0.5),
            polarization=fit.settings.get("polarization", "parallel"),
            filter_edge_cm1=max(DEFAULT_FILTER_EDGE_CM1, x_min),
        )
    if not rows:
        return ()
    p = rows[0]
    if p["found"]:
        pl = PLFeature(True, p["center_ev"], max(p["center_err_ev"] or 1e-4, 1e-4))
    else:
        pl = PLFeature(found=False)
    return pl_evidence(pl, table, max_layers=project.max_layers)


def _recompute_spectrum_evidence(project: Project, rec: Evidence) -> dict:
    fit_id = rec.parameters.get("spectrum_fit_id")
    if fit_id is None:
        raise InputError("the evidence does not name the spectrum fit it was read from")
    fit = project.get(SpectrumFit, fit_id)
    spec = project.get(Spectrum, fit.spectrum_id)
    feature = rec.parameters.get("feature")
    for item in evidence_from_fit(project, fit):
        if item.method.split(" (")[0] == feature:
            return {
                "likelihood": item.likelihood,
                "reason": item.reason,
                "parameters": _evidence_parameters(item, fit, spec),
                "source": _source_of(item),
                "inputs": (fit.ref(),),
            }
    raise InputError(f"the refitted spectrum no longer gives evidence from {feature!r}")


def recompute_combined(project: Project, rec: Assignment) -> dict:
    """The combined assignment again, from all the current evidence of its terrace."""
    recs = [
        e
        for e in project.evidence_of(rec.flake_id)
        if rec.terrace_id is None or e.terrace_id in (rec.terrace_id, None)
    ]
    if not recs:
        raise InputError("the assignment's terrace has no evidence left to combine")
    report, recs = flake_report(project, rec.flake_id, recs)
    return {**_report_fields(report), "inputs": tuple(e.ref() for e in recs)}


# ---- Si-line attenuation and AFM evidence -------------------------------------------------


def add_afm_evidence(
    project: Project, flake, height_nm: float, height_err_nm: float, *, note: str = ""
) -> Evidence:
    """Record an AFM step height entered by hand as evidence on the flake's primary terrace."""
    from flakebook.spectra.layer_evidence import afm_evidence

    flake = project.get(Flake, flake) if isinstance(flake, int) else flake
    sample = project.get(Sample, flake.sample_id)
    ev = afm_evidence(
        float(height_nm),
        float(height_err_nm),
        material=sample.material,
        max_layers=project.max_layers,
    )
    return project.add_evidence(
        flake,
        ev.likelihood,
        method=AFM_METHOD,
        terrace=project.primary_terrace_id(flake),
        inputs=[sample],
        parameters={
            "height_nm": float(height_nm),
            "height_err_nm": float(height_err_nm),
            "note": note,
        },
        source="layer spacing c/2 of the bulk cell (value from memory)",
        reason=ev.reason,
    )


def _recompute_afm(project: Project, rec: Evidence) -> dict:
    from flakebook.spectra.layer_evidence import afm_evidence

    sample = project.get(Sample, project.get(Flake, rec.flake_id).sample_id)
    p = rec.parameters
    ev = afm_evidence(
        p["height_nm"], p["height_err_nm"], material=sample.material, max_layers=rec.max_layers
    )
    return {"likelihood": ev.likelihood, "reason": ev.reason}


def _si_item(
    project: Project,
    sample: Sample,
    ratio: float,
    ratio_err: float,
    laser_nm: float,
    max_layers: int,
):
    from flakebook.evidence import parameter_grid
    from flakebook.optics.substrate import parse_substrate
    from flakebook.pipeline import calibration_values, shared_oxide_grid
    from flakebook.spectra.layer_evidence import si_attenuation_evidence
    from flakebook.substrate import format_substrate

    substrate = parse_substrate(format_substrate(sample.substrate))
    oxide = next(
        (layer.thickness_nm for layer in sample.substrate if layer.material == "SiO2"), None
    )
    if oxide is None:
        raise InputError(f"sample {sample.name} has no SiO2 layer: the Si-line ratio needs one")
    # On the sample's shared oxide grid where the contrast marginalises the oxide too (a
    # calibration with an oxide error): the two are then combined with the oxide integrated
    # once. Without one the contrast takes the nominal oxide as exact, and the Si line, far
    # more sensitive to the oxide than to N, gets a 5 nm uncertainty of its own (common
    # practice, no source: a thermal oxide's thickness is known to a few per cent).
    shared = shared_oxide_grid(project, sample)
    grid = shared
    if grid is None:
        cal = calibration_values(project, sample)
        grid = parameter_grid("oxide_nm", cal["oxide_nm"] if cal else oxide, 5.0, max_nodes=41)
    ev = si_attenuation_evidence(
        ratio, ratio_err, sample.material, substrate, grid, max_layers=max_layers, laser_nm=laser_nm
    )
    return ev, shared is not None


def add_si_evidence(
    project: Project,
    flake,
    ratio: float,
    ratio_err: float,
    *,
    laser_nm: float = 532.0,
    spectra: Sequence[Spectrum] = (),
    details: dict | None = None,
) -> Evidence:
    """Record I_Si(under the flake) / I_Si(bare substrate) as evidence (the thin-film model on
    the sample's oxide, its uncertainty marginalised). ``spectra``: the two stored spectra the
    ratio was measured from (flakebook.pipeline_si), so that the evidence depends on them;
    ``details``: how (kept in its parameters)."""
    from flakebook.pipeline import put_contrast_on_oxide_grid

    flake = project.get(Flake, flake) if isinstance(flake, int) else flake
    sample = project.get(Sample, flake.sample_id)
    ev, shared = _si_item(
        project, sample, float(ratio), float(ratio_err), laser_nm, project.max_layers
    )
    params = {"ratio": float(ratio), "ratio_err": float(ratio_err), "laser_nm": laser_nm}
    params.update(details or {})
    if spectra:
        params["spectrum_ids"] = [int(x.id) for x in spectra]
    terrace = project.primary_terrace_id(flake)
    with project.transaction():
        rec = project.add_evidence(
            flake,
            ev.likelihood,
            method=SI_METHOD,
            terrace=terrace,
            inputs=[*_si_inputs(project, sample), *spectra],
            parameters={**params, **_si_grid(sample, ev, shared)},
            source="optical constants of flakebook.optics.materials (see flakebook materials)",
            reason=ev.reason,
        )
        put_contrast_on_oxide_grid(project, flake, terrace)
    return rec


def _si_inputs(project: Project, sample: Sample) -> list:
    """The sample, and its calibration where there is one (a new one makes the evidence stale)."""
    from flakebook.pipeline import calibration_record

    cal = calibration_record(project, sample)
    return [sample] if cal is None else [sample, cal]


def _si_grid(sample: Sample, ev, shared: bool) -> dict:
    """``{"grid": ...}`` when the evidence is on the sample's shared oxide grid, else {}."""
    from flakebook.pipeline import grid_parameters, oxide_grid_name

    if not shared or ev.grid is None:
        return {}
    return {"grid": grid_parameters(ev.grid, oxide_grid_name(sample))}


def _recompute_si(project: Project, rec: Evidence) -> dict:
    sample = project.get(Sample, project.get(Flake, rec.flake_id).sample_id)
    p = dict(rec.parameters)
    if p.get("measured_from") == "spectra":  # measured again from its two spectra
        from flakebook.pipeline_si import details_of, measure

        flake_spec, bare_spec = (project.get(Spectrum, i) for i in p["spectrum_ids"])
        result = measure(flake_spec, bare_spec)
        p.update(ratio=result.ratio, ratio_err=result.ratio_err, **details_of(result))
    ev, shared = _si_item(
        project, sample, p["ratio"], p["ratio_err"], p.get("laser_nm", 532.0), rec.max_layers
    )
    params = {k: v for k, v in p.items() if k != "grid"}
    return {
        "likelihood": ev.likelihood,
        "reason": ev.reason,
        "parameters": {**params, **_si_grid(sample, ev, shared)},
        "inputs": tuple(
            [*_si_inputs(project, sample), *(x for x in rec.inputs if x.kind == "spectrum")]
        ),
    }


# ---- calibrating the rule table on known flakes --------------------------------------------


def known_flakes(project: Project, sample: Sample, laser_nm: float, flakes=None):
    """(KnownFlake list, labels used): the stored fits of the sample's flakes whose layer number
    was set by hand, as observations of each rule's feature."""
    from flakebook.spectra.rules import KnownFlake

    table, _ = rule_table_for(project, sample, laser_nm)
    chosen = None if flakes is None else {project.find_flake(f).id for f in flakes}
    out, used = [], []
    for flake in project.flakes_of(sample):
        if chosen is not None and flake.id not in chosen:
            continue
        manual = [a for a in project.assignments_of(flake) if a.manual]
        if not manual:
            continue
        n = manual[-1].layers
        peaks = {}
        for fit in project.spectrum_fits_of_flake(flake):
            for p in fit.peaks:
                if p.get("found"):
                    peaks[p["mode"]] = p
        obs = []
        for rule in table.rules:
            vals = [peaks.get(m) for m in rule.modes]
            if any(v is None for v in vals):
                continue
            if rule.kind in ("position", "shear", "breathing"):
                obs.append(
                    KnownFlake(n, rule.feature, vals[0]["center_cm1"], vals[0]["center_err_cm1"])
                )
            elif rule.kind == "separation":
                v = vals[1]["center_cm1"] - vals[0]["center_cm1"]
                e = math.hypot(vals[0]["center_err_cm1"], vals[1]["center_err_cm1"])
                obs.append(KnownFlake(n, rule.feature, v, e))
            elif rule.kind == "pl_energy":
                obs.append(
                    KnownFlake(n, rule.feature, vals[0]["center_ev"], vals[0]["center_err_ev"])
                )
        if obs:
            out.extend(obs)
            used.append(flake.label)
    return out, used


def calibrate_rules(
    project: Project, sample: Sample, *, laser_nm: float = 532.0, flakes=None
) -> RuleCalibration:
    """Refit the sample's rule table (flakebook.spectra.rules.calibrate_table) on its flakes of
    known N and store it on the sample; the fits (and Raman maps) made before are marked
    stale."""
    from flakebook.spectra.rules import calibrate_table

    obs, used = known_flakes(project, sample, laser_nm, flakes)
    if not obs:
        raise InputError(
            f"sample {sample.name} has no flake with a manual layer number and a fitted spectrum; "
            "accepted: flakes assigned by hand (flakebook assign --layers N --reason ...) with "
            "spectra attached"
        )
    table, _ = rule_table_for(project, sample, laser_nm)
    new = calibrate_table(table, obs)
    with project.transaction():
        rec = project.add_rule_calibration(
            sample,
            sample.material,
            float(laser_nm),
            new.to_dict(),
            flakes_used=tuple(used),
            method="Gaussian update of the rule table on flakes of known N",
            notes=f"{len(obs)} observation(s) on {len(used)} flake(s)",
        )
        for flake in project.flakes_of(sample):
            for fit in project.spectrum_fits_of_flake(flake):
                if not fit.stale:
                    project.update(fit, stale=True)
        for rmap in project.raman_maps_of(sample):  # refitted from their files by recompute
            if not rmap.stale and abs(rmap.laser_nm - float(laser_nm)) <= 5.0:
                project.update(rmap, stale=True)
    return rec


def _recompute_fit_record(project: Project, rec: SpectrumFit) -> dict:
    return _recompute_fit(project, rec)


register_recomputer(SPECTRUM_FIT_METHOD, _recompute_fit_record)
register_recomputer(RAMAN_METHOD, _recompute_spectrum_evidence)
register_recomputer(PL_METHOD, _recompute_spectrum_evidence)
register_recomputer(AFM_METHOD, _recompute_afm)
register_recomputer(SI_METHOD, _recompute_si)
