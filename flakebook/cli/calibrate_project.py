"""``flakebook calibrate PROJECT --sample NAME [--flakes ID,...]`` (INTERFACE.md).

Fits the sample's layer calibration from the stored contrasts of its flakes of known layer
number (set by hand or confirmed), stores it on the sample (flakebook.pipeline_calibration, the
same path the window takes) and re-reads the sample's contrast evidence with it, listing every
flake whose layer number changed and why.
"""

from __future__ import annotations

import argparse

from flakebook.cli import _common
from flakebook.errors import InputError

#: Options of the CSV form that the project form takes from the sample instead.
_CSV_ONLY = (
    "material",
    "oxide_nm",
    "substrate",
    "oxide_err_nm",
    "wavelength_nm",
    "channels",
    "csv",
    "out",
)


def cmd_calibrate_project(args: argparse.Namespace) -> int:
    from flakebook.pipeline_calibration import (
        calibration_job,
        calibration_summary,
        layer_changes,
        layer_numbers,
        store_layer_calibration,
    )
    from flakebook.store import Project
    from flakebook.store.recompute import load_recomputers

    given = [f"--{k.replace('_', '-')}" for k in _CSV_ONLY if getattr(args, k, None) is not None]
    if given:
        raise InputError(
            f"{', '.join(given)}: calibrate PROJECT takes the material, stack and light from the "
            "sample and its images; accepted: calibrate PROJECT --sample NAME [--flakes ID,...], "
            "or calibrate --material M ... --csv KNOWN.csv without a project"
        )
    if not args.sample:
        raise InputError("calibrate PROJECT needs --sample NAME (the sample to calibrate)")
    labels = None
    if args.flakes is not None:
        labels = [x.strip() for x in args.flakes.split(",") if x.strip()]
        if not labels:
            raise InputError("--flakes is empty; accepted: flake IDs separated by commas")
    load_recomputers()
    with Project.open(args.project) as project:
        for w in project.warnings:
            _common.message(f"flakebook: {w}")
        sample = project.sample_by_name(args.sample)
        if sample is None:
            names = ", ".join(s.name for s in project.samples()) or "(none)"
            raise InputError(
                f"--sample {args.sample!r} is not in {project.path.name}; accepted: {names}"
            )
        run, chosen = calibration_job(project, sample, labels)
        _common.message(
            "flakebook: calibrating on " + ", ".join(f"{k.text} ({k.how})" for k in chosen)
        )
        cal = run(progress=_common.Progress(), cancel=_common.cancel_event())
        before = layer_numbers(project, sample)
        rec, marked = store_layer_calibration(project, sample, cal)
        report = project.recompute_stale(progress=_common.Progress(), cancel=_common.cancel_event())
        changes = layer_changes(project, sample, before)
        summary = calibration_summary(rec)
    for w in cal.warnings:
        _common.message(f"warning: {w}")
    for kind, rid, reason in report.failed[:3]:
        _common.message(f"flakebook: {kind} {rid} stays stale: {reason}")
    payload = cal.to_dict()
    payload.update(
        {
            "sample": sample.name,
            "calibration_id": rec.id,
            "calibrated_at": rec.created_at,
            "evidence_reread": len(marked),
            "layer_changes": changes,
            "stale_left": len(report.unregistered) + len(report.failed),
        }
    )
    lines = [f"{sample.name}: {summary}"]
    for c in changes:
        moved = f"{c['from_layers']}L -> {c['to_layers']}L"
        lines.append(f"  {c['flake_id']}: {c['reason'] or moved}")
    if not changes:
        lines.append(f"  {len(marked)} contrast readings re-read; no layer number changed")
    _common.emit(args, payload, text="\n".join(lines))
    return _common.EXIT_OK
