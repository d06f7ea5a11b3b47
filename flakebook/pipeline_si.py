"""The Si-line attenuation measured from spectra recorded in a project.

A bare-substrate Raman spectrum is stored on its sample (no flake) as the sample's reference
(:func:`store_bare_reference`, metadata ``role: bare-substrate``); :func:`add_si_from_spectra`
takes a flake's Raman spectrum that covers the Si line and the sample's reference of the same
laser line, measures I_Si(flake) / I_Si(bare) with flakebook.spectra.si_ratio, and records it as
Si-line evidence (flakebook.pipeline_spectra.add_si_evidence) that depends on both spectra. No
Qt here.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from flakebook.errors import InputError
from flakebook.store import Flake, Project, Sample, Spectrum
from flakebook.store.files import stored_path

BARE_ROLE = "bare-substrate"


def is_bare_reference(spec: Spectrum) -> bool:
    return spec.flake_id is None and (spec.metadata or {}).get("role") == BARE_ROLE


def _dose(spec: Spectrum) -> tuple[float | None, float | None]:
    meta = spec.metadata or {}
    power = spec.power_mw if spec.power_mw is not None else meta.get("laser_power_mw")
    time = spec.integration_s if spec.integration_s is not None else meta.get("exposure_s")
    return (None if power is None else float(power), None if time is None else float(time))


def _shift_axis(spec: Spectrum) -> np.ndarray:
    from flakebook.pipeline_spectra import UNIT_FROM_STORE
    from flakebook.spectra.analyse import raman_axis

    unit = UNIT_FROM_STORE.get(spec.x_unit, spec.x_unit)
    return raman_axis(np.asarray(spec.x, float), unit, spec.laser_nm)


def store_bare_reference(
    project: Project,
    sample: Sample,
    spectrum,
    *,
    source_path: str | Path | None = None,
    laser_nm: float | None = None,
) -> Spectrum:
    """Store a Raman spectrum taken on the sample's bare substrate as its Si-line reference
    (its Si line is fitted first, so a spectrum without one is refused before anything is
    stored)."""
    from flakebook.spectra.analyse import raman_axis
    from flakebook.spectra.si_ratio import si_line

    if spectrum.kind != "raman":
        raise InputError(
            f"a bare-substrate reference is a Raman spectrum (got {spectrum.kind}); accepted: "
            "--kind raman"
        )
    laser = laser_nm or spectrum.metadata.get("laser_nm")
    if laser is None:
        raise InputError("the bare-substrate spectrum needs its laser line (--laser-nm)")
    x = raman_axis(np.asarray(spectrum.x, float), spectrum.x_unit, laser)
    si_line(x, spectrum.y, what="the bare-substrate spectrum")
    from flakebook.pipeline_spectra import plain_metadata

    meta = plain_metadata(spectrum.metadata)
    meta["role"] = BARE_ROLE
    fields = {}
    if source_path is not None:
        fields["source_path"] = stored_path(project.folder, Path(source_path))
    order = np.argsort(x, kind="stable")
    return project.add_spectrum(
        None,
        x[order],
        np.asarray(spectrum.y, float)[order],
        sample_id=sample.id,
        kind="raman",
        x_unit="cm-1",
        laser_nm=float(laser),
        metadata=meta,
        **fields,
    )


def bare_reference(project: Project, sample: Sample, laser_nm: float) -> Spectrum | None:
    """The sample's latest bare-substrate reference of this laser line (within 0.5 nm)."""
    refs = [
        s
        for s in project.spectra_of_sample(sample)
        if is_bare_reference(s) and s.laser_nm is not None and abs(s.laser_nm - laser_nm) <= 0.5
    ]
    return refs[-1] if refs else None


def flake_si_spectrum(project: Project, flake: Flake) -> Spectrum:
    """The flake's latest Raman spectrum that covers the Si line (outside any series)."""
    from flakebook.spectra.si_ratio import SI_LINE_CM1

    for spec in reversed(project.spectra_of(flake)):
        if spec.kind != "raman" or spec.series_id is not None:
            continue
        x = _shift_axis(spec)
        if x.size and x.min() < SI_LINE_CM1 - 20 and x.max() > SI_LINE_CM1 + 20:
            return spec
    raise InputError(
        f"flake {flake.label} has no Raman spectrum that covers the Si line at 520.7 cm^-1 "
        "(outside a thermometry series): attach one first"
    )


def measure(flake_spec: Spectrum, bare_spec: Spectrum):
    """The SiRatio of two stored spectra (flakebook.spectra.si_ratio)."""
    from flakebook.spectra.si_ratio import si_ratio

    if flake_spec.laser_nm is None or bare_spec.laser_nm is None:
        raise InputError("both spectra need their laser line for the Si-line ratio")
    if abs(flake_spec.laser_nm - bare_spec.laser_nm) > 0.5:
        raise InputError(
            f"the flake's spectrum was taken at {flake_spec.laser_nm:g} nm and the bare-substrate "
            f"reference at {bare_spec.laser_nm:g} nm: accepted: a reference of the same laser line"
        )
    out = si_ratio(
        (_shift_axis(flake_spec), flake_spec.y),
        (_shift_axis(bare_spec), bare_spec.y),
        flake_dose=_dose(flake_spec),
        bare_dose=_dose(bare_spec),
    )
    acc_f = (flake_spec.metadata or {}).get("accumulations")
    acc_b = (bare_spec.metadata or {}).get("accumulations")
    if acc_f is not None and acc_b is not None and float(acc_f) != float(acc_b):
        raise InputError(
            f"the two spectra have different numbers of accumulations ({acc_f:g} and {acc_b:g}); "
            "accepted: spectra taken with the same accumulations (whether counts are summed or "
            "averaged over them is not recorded)"
        )
    return out


def details_of(result) -> dict:
    """What the evidence keeps of a SiRatio."""
    return {
        "measured_from": "spectra",
        "flake_si_area": result.flake_line.area,
        "bare_si_area": result.bare_line.area,
        "dose": result.dose_note,
        "measurement_warnings": list(result.warnings),
    }


def add_si_from_spectra(
    project: Project,
    flake,
    *,
    reference: Spectrum | None = None,
    spectrum: Spectrum | None = None,
    bare=None,
    bare_path: str | Path | None = None,
    bare_laser_nm: float = 532.0,
):
    """Measure the Si-line ratio of the flake's spectrum (default: its latest covering the Si
    line) against the bare-substrate ``reference`` (default: the sample's latest of the same
    laser line) and record it as evidence; returns (Evidence, SiRatio). ``bare``: a spectrum
    read from ``bare_path`` (flakebook.spectra.io), stored first as the sample's reference and
    used (its laser line from the file, else ``bare_laser_nm``)."""
    from flakebook.pipeline_spectra import add_si_evidence

    flake = project.get(Flake, flake) if isinstance(flake, int) else flake
    sample = project.get(Sample, flake.sample_id)
    if bare is not None:  # a bare-substrate spectrum just read: the sample's reference now
        ref_laser = None if bare.metadata.get("laser_nm") else bare_laser_nm
        reference = store_bare_reference(
            project, project.get(Sample, flake.sample_id), bare, source_path=bare_path,
            laser_nm=ref_laser,
        )  # fmt: skip
    spec = spectrum or flake_si_spectrum(project, flake)
    ref = reference or bare_reference(project, sample, spec.laser_nm or 532.0)
    if ref is None:
        raise InputError(
            f"sample {sample.name} has no bare-substrate Raman spectrum at {spec.laser_nm:g} nm: "
            "give one (flakebook assign ... --si-from-spectra BARE.txt)"
        )
    result = measure(spec, ref)
    ev = add_si_evidence(
        project,
        flake,
        result.ratio,
        result.ratio_err,
        laser_nm=float(spec.laser_nm),
        spectra=[spec, ref],
        details=details_of(result),
    )
    return ev, result
