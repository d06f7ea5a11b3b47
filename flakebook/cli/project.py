"""Project commands: new, info, export, pack, relink, recompute, assign, handoff.

Commands that only read open the project read-only, so they work while the desktop program holds
it open; the others take the writer's lock.
"""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path
from typing import TYPE_CHECKING

from flakebook.cli._common import (
    Progress,
    add_format_option,
    cancel_event,
    csv_text,
    dumps,
    emit,
    message,
    output_format,
    positive_float,
    table_text,
)
from flakebook.errors import InputError
from flakebook.substrate import format_substrate, oxide_stack, parse_substrate
from flakebook.wording import count_text, layers_text, probability_phrase, record_count_text

if TYPE_CHECKING:
    from flakebook.store import Project

# The store (and numpy under it) is imported by the commands that run, not by the parser, so
# ``flakebook --version`` and ``--help`` start quickly. The store's own default is
# flakebook.store.DEFAULT_MAX_LAYERS (tests/cli/test_startup.py checks that they agree).
DEFAULT_MAX_LAYERS = 15


def register(sub: argparse._SubParsersAction) -> None:
    """Add the project commands to the parser."""
    p = sub.add_parser("new", help="create a project with its first sample")
    p.add_argument("project", help="the new project file (.flakebook is added if missing)")
    p.add_argument("--sample", required=True, metavar="NAME", help="the chip's name")
    p.add_argument(
        "--material", required=True, metavar="M", help="the flakes' material, e.g. MoSe2"
    )
    g = p.add_mutually_exclusive_group(required=True)
    g.add_argument("--oxide-nm", type=float, metavar="D", help="SiO2 thickness on Si, in nm")
    g.add_argument(
        "--substrate", metavar="SPEC", help="layers from the top down, e.g. Au:100,Ti:5,SiO2:285,Si"
    )
    p.add_argument(
        "--max-layers",
        type=int,
        default=DEFAULT_MAX_LAYERS,
        help=f"N_max of the layer likelihoods (default {DEFAULT_MAX_LAYERS})",
    )
    add_format_option(p)
    p.set_defaults(func=_new)

    p = sub.add_parser("info", help="summarise a project")
    p.add_argument("project", help="the project file (.flakebook)")
    add_format_option(p)
    p.set_defaults(func=_info)

    p = sub.add_parser("export", help="the catalogue of flakes as JSON or CSV")
    p.add_argument("project", help="the project file (.flakebook)")
    add_format_option(p, csv_ok=True)
    p.add_argument("--out", metavar="FILE", help="write to FILE instead of stdout")
    p.set_defaults(func=_export)

    p = sub.add_parser("pack", help="embed every image so the project file stands alone")
    p.add_argument("project", help="the project file (.flakebook)")
    add_format_option(p)
    p.set_defaults(func=_pack)

    p = sub.add_parser("relink", help="find moved or changed images again by their hash")
    p.add_argument("project", help="the project file (.flakebook)")
    p.add_argument("--search", required=True, metavar="DIR", help="folder to search (recursively)")
    add_format_option(p)
    p.set_defaults(func=_relink)

    p = sub.add_parser("recompute", help="bring stale evidence and results up to date")
    p.add_argument("project", help="the project file (.flakebook)")
    add_format_option(p)
    p.set_defaults(func=_recompute)

    p = sub.add_parser(
        "assign", help="show a flake's layer evidence, or assign its layer number by hand"
    )
    p.add_argument("project", help="the project file (.flakebook)")
    p.add_argument("--flake", required=True, metavar="ID", help="the flake's ID")
    p.add_argument("--layers", metavar="N", help="the layer number to assign")
    p.add_argument("--reason", metavar="TEXT", help="why (required with --layers)")
    p.add_argument(
        "--afm-height-nm",
        type=float,
        metavar="H",
        help="record an AFM step height (nm) as evidence (with --afm-height-err-nm)",
    )
    p.add_argument("--afm-height-err-nm", type=float, metavar="E", help="its standard error (nm)")
    p.add_argument(
        "--si-ratio",
        type=float,
        metavar="R",
        help="record I_Si(under the flake) / I_Si(bare substrate) as evidence (with --si-ratio-err)",
    )
    p.add_argument("--si-ratio-err", type=float, metavar="E", help="its standard error")
    p.add_argument("--laser-nm", type=float, default=532.0, help="laser line of --si-ratio (532)")
    p.add_argument(
        "--si-from-spectra",
        nargs="?",
        const="",
        metavar="BARE",
        help="measure the Si-line ratio from the flake's Raman spectrum against a bare-substrate "
        "spectrum (BARE, a file, stored on the sample; without it, the sample's stored one)",
    )
    add_format_option(p)
    p.set_defaults(func=_assign)

    p = sub.add_parser("handoff", help="exchange flakes and results with an outside analysis")
    hsub = p.add_subparsers(dest="handoff_command", metavar="export|import", required=True)
    h = hsub.add_parser("export", help="write a JSON bundle of flakes")
    h.add_argument("project", help="the project file (.flakebook)")
    h.add_argument("--flakes", required=True, metavar="ID,...", help="flake IDs, comma-separated")
    h.add_argument("--out", required=True, metavar="FILE.json", help="the bundle to write (JSON)")
    h.set_defaults(func=_handoff_export)
    h = hsub.add_parser("import", help="import a CSV of results keyed by flake ID")
    h.add_argument("project", help="the project file (.flakebook)")
    h.add_argument(
        "csv",
        metavar="FILE.csv",
        help="columns flake_id, kappa_w_mk, kappa_p16_w_mk, kappa_p84_w_mk, method, note",
    )
    add_format_option(h)
    h.set_defaults(func=_handoff_import)


def _show_warnings(project: Project) -> None:
    for text in project.warnings:
        message(f"flakebook: {text}")


def _new(args: argparse.Namespace) -> int:
    from flakebook.store import Project

    if args.oxide_nm is not None:
        positive_float("--oxide-nm", args.oxide_nm)
        stack = oxide_stack(args.oxide_nm)
    else:
        stack = parse_substrate(args.substrate)
    if not args.sample.strip():
        raise InputError("--sample is empty; accepted: the chip's name, e.g. K7-north")
    material = _known_material(args.material)
    if args.max_layers < 1:
        raise InputError(f"--max-layers {args.max_layers} is not allowed; accepted: 1 or more")
    project = Project.create(args.project, max_layers=args.max_layers)
    path = project.path
    try:
        project.add_sample(args.sample, material, stack)
    except BaseException:
        project.close()
        path.unlink(missing_ok=True)  # the file this command made, and nothing else
        raise
    project.close()
    payload = {
        "project": str(path),
        "sample": args.sample,
        "material": material,
        "substrate": [layer.to_dict() for layer in stack],
    }
    emit(
        args, payload, text=f"created {path} with sample {args.sample} ({format_substrate(stack)})"
    )
    return 0


def _known_material(name: str) -> str:
    """The material's name as the library spells it; InputError listing the known ones."""
    from flakebook.optics.materials import get_material, list_materials

    if not name.strip():
        raise InputError("--material is empty; accepted: a material name, e.g. MoSe2")
    try:
        material = get_material(name)
    except InputError:
        known = ", ".join(m.name for m in list_materials() if m.layer_spacing_nm)
        raise InputError(
            f"--material {name!r} is not in the material library; accepted: {known}, or a .csv "
            "file of wavelength_nm,n,k ('flakebook materials' lists every material)"
        ) from None
    return name.strip() if name.strip().lower().endswith(".csv") else material.name


def _info(args: argparse.Namespace) -> int:
    from flakebook.store import Project

    with Project.open(args.project, read_only=True) as project:
        _show_warnings(project)
        info = project.info()
    for problem in info["unreadable"]:
        message(f"flakebook: warning: {problem}")
    for img in info["images_missing"]:
        serves = "; its embedded copy is used" if img["embedded"] else ""
        message(
            f"flakebook: warning: image {img['path']} is missing (looked at {img['looked_at']})"
            f"{serves}; find it with flakebook relink PROJECT --search DIR"
        )
    for img in info["images_changed"]:
        serves = "; its embedded copy is used" if img["embedded"] else ""
        message(
            f"flakebook: warning: image {img['path']} has changed since it was added (its "
            f"SHA-256 differs){serves}; relink it to the original file"
        )
    lines = [
        f"{info['path']}  (project format {info['project_format']}, N_max {info['max_layers']})",
        "  " + ", ".join(record_count_text(kind, n) for kind, n in info["counts"].items() if n),
        f"  {count_text(info['images_embedded'], 'image')} embedded; "
        f"{count_text(info['stale'], 'stale record')}",
    ]
    for s in info["samples"]:
        spec = format_substrate(s["substrate"])
        holes = ""
        if s["hole_pattern"]:
            hp = s["hole_pattern"]
            holes = f", holes {hp['diameter_um']:g} um ({hp['bottom']}, {hp['lattice']})"
        lines.append(
            f"  sample {s['name']}: {s['material']} on {spec}{holes}; "
            f"{count_text(s['images'], 'image')}, {count_text(s['flakes'], 'flake')}"
        )
    emit(args, info, text="\n".join(lines))
    return 0


def _export(args: argparse.Namespace) -> int:
    from flakebook.store import Project
    from flakebook.store.outfile import write_file
    from flakebook.store.project import EXPORT_COLUMNS

    with Project.open(args.project, read_only=True) as project:
        _show_warnings(project)
        rows = project.export_rows()
    for problem in rows.problems:
        message(f"flakebook: warning: {problem}")
    payload = {"flakes": rows, "warnings": list(rows.problems)}
    fmt = args.format
    if args.out:
        out = Path(args.out)
        if fmt is None:
            fmt = "csv" if out.suffix.lower() == ".csv" else "json"
        if fmt == "csv":
            text = csv_text(rows, EXPORT_COLUMNS)
        elif fmt == "json":
            text = dumps(payload) + "\n"
        else:
            text = table_text(rows, EXPORT_COLUMNS) + "\n"
        write_file(out, text)
        message(f"flakebook: wrote {len(rows)} flakes to {out}")
        return 0
    emit(args, payload, rows=rows, columns=EXPORT_COLUMNS)
    return 0


def _pack(args: argparse.Namespace) -> int:
    from flakebook.store import Project

    with Project.open(args.project) as project:
        _show_warnings(project)
        outside = project.images_outside_folder()
        added = project.pack(progress=Progress(), cancel=cancel_event())
        total = project.count("image")
    if outside:
        shown = ", ".join(c.path for c in outside[:3]) + (" ..." if len(outside) > 3 else "")
        message(
            f"flakebook: warning: {len(outside)} image(s) outside the project folder were read "
            f"and embedded after their SHA-256 matched: {shown}"
        )
    emit(
        args,
        {
            "embedded": added,
            "images": total,
            "outside_folder": [{"image_id": c.image_id, "path": c.path} for c in outside],
        },
        text=f"embedded {added} images; all {total} images are now in {args.project}",
    )
    return 0


def _relink(args: argparse.Namespace) -> int:
    from flakebook.store import Project

    with Project.open(args.project) as project:
        _show_warnings(project)
        result = project.relink(args.search, progress=Progress(), cancel=cancel_event())
        missing = [project.get("image", i).path for i in result["not_found"]]
    payload = {
        "relinked": [{"image_id": i, "path": p} for i, p in result["relinked"]],
        "not_found": [{"image_id": i, "path": p} for i, p in zip(result["not_found"], missing)],
    }
    if missing:
        message(
            f"flakebook: {len(missing)} images not found under {args.search}: "
            + ", ".join(missing[:5])
            + (" ..." if len(missing) > 5 else "")
        )
    lines = [f"relinked {i}: {p}" for i, p in result["relinked"]] or ["nothing to relink"]
    emit(args, payload, text="\n".join(lines))
    return 0


def _recompute(args: argparse.Namespace) -> int:
    from flakebook.store import Project
    from flakebook.store.recompute import load_recomputers

    load_recomputers()
    with Project.open(args.project) as project:
        _show_warnings(project)
        report = project.recompute_stale(progress=Progress(), cancel=cancel_event())
    payload = {
        "recomputed": [{"kind": k, "id": i} for k, i in report.recomputed],
        "unregistered": [{"kind": k, "id": i, "method": m} for k, i, m in report.unregistered],
        "failed": [{"kind": k, "id": i, "reason": r} for k, i, r in report.failed],
        "stale_left": len(report.unregistered) + len(report.failed),
    }
    if report.unregistered:
        methods = sorted({m for _, _, m in report.unregistered})
        message(
            f"flakebook: {len(report.unregistered)} records stay stale: this flakebook has no "
            f"recompute function for {', '.join(methods)}"
        )
    for kind, rid, reason in report.failed[:3]:
        message(f"flakebook: {kind} {rid} stays stale: {reason}")
    emit(
        args,
        payload,
        text=f"recomputed {len(report.recomputed)} records; {payload['stale_left']} stay stale",
    )
    return 0


def _parse_layers(text: str, max_layers: int) -> int:
    """``--layers`` of ``assign``: a whole number from 1 to the project's N_max."""
    try:
        value = int(text)
    except ValueError:
        value = 0
    if not 1 <= value <= max_layers:
        raise InputError(
            f"--layers {text} is not a layer number of this project; accepted: a whole number "
            f"from 1 to {max_layers} (the project's N_max)"
        )
    return value


def _record_measured_evidence(args: argparse.Namespace) -> bool:
    """Record --afm-height-nm / --si-ratio / --si-from-spectra as evidence and recombine; True
    if any was given."""
    from flakebook.store import Project

    afm = (args.afm_height_nm, args.afm_height_err_nm)
    si = (args.si_ratio, args.si_ratio_err)
    for (value, err), name in ((afm, "--afm-height-nm"), (si, "--si-ratio")):
        if (value is None) != (err is None):
            raise InputError(f"{name} needs its error too ({name.replace('-nm', '')}-err...)")
    for name in ("afm_height_nm", "afm_height_err_nm", "si_ratio", "si_ratio_err", "laser_nm"):
        if getattr(args, name) is not None:
            positive_float("--" + name.replace("_", "-"), getattr(args, name))
    spectra = getattr(args, "si_from_spectra", None)
    if spectra is not None and si[0] is not None:
        raise InputError(
            "--si-ratio and --si-from-spectra both give the Si-line ratio: one of them"
        )
    if afm[0] is None and si[0] is None and spectra is None:
        return False
    from flakebook import pipeline
    from flakebook.pipeline_si import add_si_from_spectra

    bare = None
    if spectra:  # read (and checked) before the project is opened for writing
        from flakebook.spectra.io import read_spectrum

        bare = read_spectrum(spectra, kind="raman")
    with Project.open(args.project) as project:
        _show_warnings(project)
        flake = project.find_flake(args.flake)
        with project.transaction():
            if afm[0] is not None:
                pipeline.add_afm_evidence(project, flake, *afm)
            if si[0] is not None:
                pipeline.add_si_evidence(project, flake, *si, laser_nm=args.laser_nm)
            if spectra is not None:
                _, result = add_si_from_spectra(
                    project, flake, bare=bare, bare_path=spectra or None,
                    bare_laser_nm=args.laser_nm,
                )  # fmt: skip
                message(
                    f"flakebook: Si line under {flake.label}: {result.ratio:.3f} +- "
                    f"{result.ratio_err:.3f} of the bare substrate ({result.dose_note})"
                )
                for text in result.warnings:
                    message(f"flakebook: warning: {text}")
            pipeline.assign_flake(project, flake)
    return True


def _assign(args: argparse.Namespace) -> int:
    from flakebook.store import Project

    # Every option is checked before anything is stored.
    if args.layers is None and args.reason is not None:
        raise InputError("--reason goes with --layers N (the layer number you assign)")
    if args.layers is not None:
        with Project.open(args.project, read_only=True) as project:
            max_layers = project.max_layers
    layers = None if args.layers is None else _parse_layers(args.layers, max_layers)
    if layers is not None and not (args.reason or "").strip():
        raise InputError("--layers needs --reason TEXT: a manual assignment keeps why it was made")
    _record_measured_evidence(args)
    if layers is None:
        return _show_evidence(args)
    with Project.open(args.project) as project:
        _show_warnings(project)
        layers = _parse_layers(args.layers, project.max_layers)
        flake = project.find_flake(args.flake)
        asg = project.assign(flake, layers, reason=args.reason)
    payload = {
        "flake_id": flake.label,
        "layers": asg.layers,
        "manual": True,
        "reason": asg.reason,
        "who": asg.who,
        "assigned_at": asg.assigned_at,
    }
    emit(args, payload, text=f"{flake.label}: {layers} layers (by {asg.who}: {asg.reason})")
    return 0


def _show_evidence(args: argparse.Namespace) -> int:
    from flakebook.store import Project

    with Project.open(args.project, read_only=True) as project:
        _show_warnings(project)
        flake = project.find_flake(args.flake)
        evidence = project.evidence_of(flake)
        asg = project.latest_assignment(flake)
        primary = project.primary_terrace_id(flake)
        combined, contributions = _combined(project, flake)
    ev_rows = [
        {
            "method": e.method,
            "category": _category(e),
            "contribution": contributions.get(e.id),
            "terrace_id": e.terrace_id,
            "likelihood": e.likelihood.tolist(),
            "most_likely": _most_likely(e.likelihood),
            "reason": e.reason,
            "source": e.source,
            "stale": e.stale,
        }
        for e in evidence
    ]
    assignment = None
    if asg is not None:
        assignment = {
            "layers": asg.layers,
            "probability": asg.probability,
            "ambiguous_with": list(asg.ambiguous_with),
            "posterior": None if asg.posterior is None else asg.posterior.tolist(),
            "manual": asg.manual,
            "reason": asg.reason,
            "method": asg.method,
            "who": asg.who,
            "assigned_at": asg.assigned_at,
            "stale": asg.stale,
        }
    payload = {
        "flake_id": flake.label,
        "primary_terrace_id": primary,
        "evidence": ev_rows,
        "combined": combined,
        "assignment": assignment,
    }
    if output_format(args) == "table":
        lines = [f"{flake.label}: layer evidence ({len(ev_rows)})"]
        for e in ev_rows:
            mark = " (stale)" if e["stale"] else ""
            c = e["contribution"]
            adds = (
                f", adds {max(0.0, c['information_bits']):.2f} bits"
                if c and c["information_bits"] is not None
                else ""
            )
            name = c["name"] if c else e["category"]
            lines.append(f"  {name}: most likely {e['most_likely']}{adds}{mark}  {e['reason']}")
        combined = payload["combined"]
        if combined is not None:
            for text in combined["conflicts"]:
                lines.append(f"  CONFLICT: {text}")
            amb = combined["ambiguous_with"]
            n_max = len(combined["posterior"]) - 1 if combined.get("posterior") else 15
            also = (
                f", ambiguous with {', '.join(layers_text(n, n_max) for n in amb)}" if amb else ""
            )
            lines.append(
                f"  combined: {layers_text(combined['layers'], n_max)}, "
                f"{probability_phrase(combined['probability'])}{also}"
            )
        if assignment is None:
            lines.append("  no assignment yet")
        else:
            how = (
                f"by {assignment['who']}: {assignment['reason']}"
                if assignment["manual"]
                else (
                    probability_phrase(assignment["probability"])
                    if assignment["probability"] is not None
                    else ""
                )
            )
            lines.append(f"  assigned: {assignment['layers']} layers ({how})")
        emit(args, payload, text="\n".join(lines))
    else:
        emit(args, payload)
    return 0


def _category(rec) -> str:
    from flakebook.pipeline_spectra import category

    return category(rec)


def _combined(project: Project, flake) -> tuple[dict | None, dict]:
    """The combined posterior of all the primary terrace's evidence (flat prior; spectrometer
    offsets marginalised once per spectrum) with its conflicts, and each evidence's
    contribution by record id; (None, {}) without evidence."""
    from flakebook.pipeline_spectra import flake_report

    try:
        report, recs = flake_report(project, flake)
    except InputError as exc:
        message(f"flakebook: the evidence cannot be combined: {exc}")
        return None, {}
    if report is None:
        return None, {}
    out = report.posterior.to_dict()
    out["conflicts"] = [c.text for c in report.conflicts]
    out["warnings"] = list(report.warnings)
    contributions = {
        rec.id: {
            "name": c.method,
            "layers": c.posterior.layers,
            "probability": c.posterior.probability,
            "information_bits": c.information_bits,
        }
        for rec, c in zip(recs, report.contributions, strict=True)
    }
    return out, contributions


def _most_likely(likelihood) -> str:
    values = list(likelihood)
    if not values or not any(math.isfinite(v) and v > 0 for v in values):
        return "-"
    best = max(range(len(values)), key=lambda i: values[i])
    return layers_text(len(values), len(values) - 1) if best == len(values) - 1 else str(best + 1)


def _handoff_export(args: argparse.Namespace) -> int:
    from flakebook.store import Project
    from flakebook.store.outfile import write_file

    keys = [k.strip() for k in args.flakes.split(",") if k.strip()]
    if not keys:
        raise InputError("--flakes is empty; accepted: flake IDs separated by commas")
    with Project.open(args.project, read_only=True) as project:
        _show_warnings(project)
        bundle = project.handoff_bundle(keys)
    out = Path(args.out)
    write_file(out, json.dumps(bundle, ensure_ascii=False, indent=1) + "\n")
    message(f"flakebook: wrote {len(keys)} flakes to {out}")
    return 0


def _handoff_import(args: argparse.Namespace) -> int:
    from flakebook.store import Project

    with Project.open(args.project) as project:
        _show_warnings(project)
        added = project.import_external_results(args.csv)
        labels = {r.flake_id: project.get("flake", r.flake_id).label for r in added}
    rows = [{"flake_id": labels[r.flake_id], **_result_fields(r)} for r in added]
    emit(args, {"imported": rows}, text=f"imported {len(rows)} results from {args.csv}")
    return 0


def _result_fields(rec) -> dict:
    from flakebook.store import record_to_dict

    data = record_to_dict(rec)
    return {
        k: data[k] for k in ("kappa_w_mk", "kappa_p16_w_mk", "kappa_p84_w_mk", "method", "note")
    }
