"""Spectrum commands: ``spectrum`` (fit spectra, read their layer evidence, attach them to a
flake; ``--map`` for Raman maps) and ``calibrate-rules`` (refit a sample's Raman/PL rule table
on its flakes of known layer number).

Every file is read and fitted before the project is opened for writing, and what a command
stores goes in one transaction: a bad file or option leaves the project exactly as it was.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from flakebook.cli._common import Progress, add_format_option, cancel_event, emit, positive_float
from flakebook.errors import InputError

KINDS = ("raman", "pl")
X_UNITS = ("cm1", "nm", "ev", "wavenumber-cm1")
PEAK_MODELS = ("lorentzian", "gaussian", "voigt", "pseudo-voigt")
POLARIZATIONS = ("parallel", "crossed")


def register(sub: argparse._SubParsersAction) -> None:
    """Add the spectrum commands."""
    from flakebook.spectra import BASELINE_METHODS

    p = sub.add_parser(
        "spectrum",
        help="fit Raman or PL spectra and read their layer evidence",
        description="Fit each spectrum (spikes, Si-line calibration, baseline, peak fit) and read "
        "the layer evidence of the material's rule table. Laser safety: follow your "
        "institution's laser-safety rules and local regulations when you measure.",
    )
    p.add_argument("files", nargs="+", metavar="FILE", help="spectrum files (text or JCAMP-DX)")
    p.add_argument("--material", required=True, help="the flake material (MoS2, MoSe2, WS2, WSe2)")
    p.add_argument("--kind", choices=KINDS, default="raman", help="raman (default) or pl")
    p.add_argument(
        "--laser-nm",
        type=float,
        default=None,
        help="the excitation laser line in nm (default: the file's header, else 532)",
    )
    p.add_argument(
        "--x-unit",
        choices=X_UNITS,
        default=None,
        help="the unit of the file's x column (default: its label, else cm1 for Raman, nm for PL)",
    )
    p.add_argument(
        "--baseline",
        choices=BASELINE_METHODS,
        default="imodpoly",
        metavar="METHOD",
        help=f"baseline method: {', '.join(BASELINE_METHODS)} (default imodpoly)",
    )
    p.add_argument(
        "--peak-model", choices=PEAK_MODELS, default="lorentzian", help="line shape of the fit"
    )
    p.add_argument(
        "--polarization",
        choices=POLARIZATIONS,
        default="parallel",
        help="parallel (default) or crossed (breathing modes are forbidden in crossed)",
    )
    p.add_argument(
        "--no-calibrate",
        action="store_true",
        help="do not shift the axis onto the Si line at 520.7 cm^-1",
    )
    p.add_argument("--project", metavar="P", help="attach the spectra to a flake of this project")
    p.add_argument("--flake", metavar="ID", help="the flake's ID (with --project)")
    p.add_argument(
        "--map", action="store_true", help="the files are Raman maps (flakebook map text format)"
    )
    p.add_argument(
        "--out-dir",
        metavar="DIR",
        help="with --map: write each map as .npy, .csv and .png into DIR",
    )
    p.add_argument(
        "--image",
        metavar="ID",
        help="with --map --project: the micrograph the map was taken over (its id or file name); "
        "the map is stored on its sample",
    )
    p.add_argument(
        "--sample",
        metavar="NAME",
        help="with --map --project and no --image: the sample the map was taken on",
    )
    p.add_argument(
        "--offset-um",
        metavar="X,Y",
        help="with --image: where the map's origin (x_um = 0, y_um = 0) lies, in um from the "
        "image's top-left pixel centre, x right, y down (default: the map's positions are chip "
        "coordinates, placed by the image's stage position)",
    )
    p.add_argument("--max-layers", type=int, default=15, help="N_max of the likelihoods")
    add_format_option(p)
    p.set_defaults(func=_spectrum)

    p = sub.add_parser(
        "calibrate-rules",
        help="refit a sample's Raman/PL rule table on its flakes of known layer number",
    )
    p.add_argument("project", help="the project file")
    p.add_argument("--sample", required=True, metavar="NAME", help="the sample (chip)")
    p.add_argument("--laser-nm", type=float, default=532.0, help="the laser line (default 532)")
    p.add_argument(
        "--flakes", metavar="ID,...", help="only these flakes (default: all assigned by hand)"
    )
    add_format_option(p)
    p.set_defaults(func=_calibrate_rules)


def _read(path: str, args):
    from flakebook.spectra.io import read_spectrum

    return read_spectrum(path, kind=args.kind, x_unit=args.x_unit, laser_nm=args.laser_nm)


def _row(path: str, analysis, max_layers: int) -> dict:
    report = analysis.report()
    return {
        "path": path,
        "kind": analysis.kind,
        "laser_nm": analysis.laser_nm,
        "peaks": analysis.peaks(),
        "evidence": [e.to_dict() for e in analysis.evidence],
        "layers": report.posterior.layers if report else None,
        "probability": report.posterior.probability if report else None,
        "ambiguous_with": list(report.posterior.ambiguous_with) if report else [],
        "calibration": analysis.calibration,
        "settings": analysis.settings,
        "warnings": list(analysis.warnings),
    }


def _check_project_options(args) -> None:
    if args.map:
        if args.flake is not None:
            raise InputError(
                "--map stores a map on a sample and its image, not on a flake; accepted: "
                "--project P --image ID [--offset-um X,Y] (or --sample NAME)"
            )
        if args.project is not None and args.image is None and args.sample is None:
            raise InputError(
                "--map --project needs the micrograph the map was taken over (--image ID) or its "
                "sample (--sample NAME)"
            )
        if args.project is None and (args.image or args.sample or args.offset_um):
            raise InputError("--image, --sample and --offset-um go with --map --project P")
        if args.offset_um is not None and args.image is None:
            raise InputError("--offset-um places the map on an image; give --image ID with it")
    else:
        if args.image or args.sample or args.offset_um:
            raise InputError("--image, --sample and --offset-um go with --map (Raman maps)")
        if (args.project is None) != (args.flake is None):
            raise InputError(
                "--project and --flake go together: the flake the spectra were taken on"
            )
    if args.out_dir and not args.map:
        raise InputError("--out-dir goes with --map (the maps are written there)")
    if args.laser_nm is not None:
        positive_float("--laser-nm", args.laser_nm)
    if not 1 <= args.max_layers < 100:
        raise InputError(f"--max-layers {args.max_layers}; accepted: 1..99")


def _spectrum(args: argparse.Namespace) -> int:
    from flakebook.spectra.analyse import analyse_spectrum
    from flakebook.spectra.rules import load_rule_table

    _check_project_options(args)
    if args.map:
        return _spectrum_map(args)
    table = load_rule_table(args.material, args.laser_nm or 532.0)  # refuses unknown materials
    read = [(path, _read(path, args)) for path in args.files]
    settings = {
        "baseline": args.baseline,
        "peak_model": args.peak_model,
        "polarization": args.polarization,
        "auto_calibrate": not args.no_calibrate,
    }
    if args.project is None:
        rows = []
        for path, spec in read:
            a = analyse_spectrum(
                spec,
                args.material,
                laser_nm=args.laser_nm,
                kind=args.kind,
                table=table,
                max_layers=args.max_layers,
                **settings,
            )
            rows.append(_row(path, a, args.max_layers))
        payload = {"spectra": rows}
    else:
        payload = _attach(args, read, settings)
    emit(args, payload, text=_text(payload))
    return 0


def _attach(args, read, settings) -> dict:
    from flakebook import pipeline
    from flakebook.store import Project, Sample

    with Project.open(args.project) as project:
        flake = project.find_flake(args.flake)
        sample = project.get(Sample, flake.sample_id)
        if sample.material != args.material:
            raise InputError(
                f"flake {flake.label} is {sample.material}, not {args.material}; accepted: "
                f"--material {sample.material}"
            )
        rows = []
        with project.transaction():
            for path, spec in read:
                got = pipeline.attach_spectrum(
                    project,
                    flake,
                    spec,
                    source_path=path,
                    settings={**settings, "laser_nm": args.laser_nm},
                )
                row = _row(path, got.analysis, project.max_layers)
                row["spectrum_id"] = got.spectrum
                rows.append(row)
        report, _ = pipeline.flake_report(project, flake)
        latest = project.latest_assignment(flake)
    flake_row = {"flake_id": flake.label, "layers": None, "probability": None, "conflicts": []}
    if report is not None:
        flake_row.update(
            layers=report.layers,
            probability=report.posterior.probability,
            ambiguous_with=list(report.posterior.ambiguous_with),
            assigned_by=report.assigned_by,
            conflicts=[c.text for c in report.conflicts],
        )
    if latest is not None:
        flake_row["assignment_id"] = latest.id
    return {"spectra": rows, "flake": flake_row}


def _fmt(v, digits=2) -> str:
    return "-" if v is None else f"{v:.{digits}f}"


def _value_err(v, e, unit: str) -> str:
    """A value with its error, to the digits the error supports (two significant digits)."""
    if v is None:
        return "-"
    if e is None or not e > 0:
        return f"{v:.2f} {unit}"
    import math

    d = max(0, 1 - int(math.floor(math.log10(e))))
    return f"{v:.{d}f} ± {e:.{d}f} {unit}"


def _text(payload: dict) -> str:
    lines = []
    for s in payload["spectra"]:
        n = s["layers"]
        head = "no layer evidence" if n is None else f"{n}L, p = {s['probability']:.2f}"
        lines.append(f"{s['path']}: {head}")
        for p in s["peaks"]:
            if s["kind"] == "pl":
                where = _value_err(p["center_ev"], p["center_err_ev"], "eV")
            else:
                where = _value_err(p["center_cm1"], p["center_err_cm1"], "cm^-1")
            seen = where if p["found"] else "not found"
            lines.append(f"  {p['mode']}: {seen}")
        for e in s["evidence"]:
            lines.append(f"  evidence {e['method']}: {e['reason']}")
        for w in s["warnings"]:
            lines.append(f"  warning: {w}")
    if "flake" in payload:
        f = payload["flake"]
        lines.append(f"flake {f['flake_id']}: {f['layers']}L, p = {_fmt(f['probability'])}")
        for c in f.get("conflicts", []):
            lines.append(f"  conflict: {c}")
    return "\n".join(lines)


# ---- maps ---------------------------------------------------------------------------------


def _png(path: Path, values) -> None:
    import cv2
    import numpy as np

    v = np.asarray(values, float)
    finite = np.isfinite(v)
    img = np.zeros(v.shape, np.uint8)
    if finite.any():
        lo, hi = np.nanmin(v), np.nanmax(v)
        scale = 254.0 / (hi - lo) if hi > lo else 0.0
        img[finite] = (1 + (v[finite] - lo) * scale).astype(np.uint8)
    rgb = cv2.applyColorMap(img, cv2.COLORMAP_VIRIDIS)
    rgb[~finite] = 0
    k = max(1, 256 // max(v.shape))
    rgb = np.kron(rgb, np.ones((k, k, 1), np.uint8))
    if not cv2.imwrite(str(path), rgb):
        raise InputError(f"cannot write {path}; accepted: a writable folder")


def write_maps(result, out_dir: Path, stem: str) -> list[str]:
    """Each map as ``<stem>_<name>.npy``, ``.csv`` (rows along y, with x_um/y_um headers) and
    ``.png`` (viridis, NaN black); returns the file names."""
    import numpy as np

    out_dir.mkdir(parents=True, exist_ok=True)
    files = []
    for name, values in result.maps.items():
        base = out_dir / f"{stem}_{name}"
        np.save(base.with_suffix(".npy"), np.asarray(values))
        header = "y_um\\x_um," + ",".join(f"{x:g}" for x in result.x_um)
        lines = [header] + [
            f"{y:g}," + ",".join("" if not np.isfinite(v) else f"{v:.6g}" for v in row)
            for y, row in zip(result.y_um, values, strict=True)
        ]
        base.with_suffix(".csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
        _png(base.with_suffix(".png"), values)
        files += [f"{base.name}.npy", f"{base.name}.csv", f"{base.name}.png"]
    return files


def _spectrum_map(args) -> int:

    from flakebook.pipeline_maps import empty_pixels, layer_counts, with_snr
    from flakebook.spectra.io import read_map
    from flakebook.spectra.maps import analyse_map

    if args.kind != "raman":
        raise InputError("--map reads Raman maps; accepted: --kind raman")
    maps = [(path, read_map(path)) for path in args.files]
    for path, m in maps:
        if m.kind != "raman":
            raise InputError(
                f"{path}: a {m.kind.upper()} map (kind={m.kind}); layer maps are read from Raman "
                "maps; accepted: a map file whose '#flakebook-map' line says kind=raman"
            )
    progress, cancel = Progress(), cancel_event()
    if args.project is not None:
        return _store_maps(args, maps, progress, cancel)
    rows = []
    for path, m in maps:
        res = analyse_map(
            m,
            args.material,
            laser_nm=args.laser_nm or float(m.metadata.get("laser_nm", 532.0)),
            max_layers=args.max_layers,
            progress=progress,
            cancel=cancel,
        )
        files = write_maps(res, Path(args.out_dir), Path(path).stem) if args.out_dir else []
        layers = res.maps["layers"]
        empty = empty_pixels(with_snr(res))
        counts = layer_counts(layers, empty)
        rows.append(
            {
                "path": path,
                "shape": list(layers.shape),
                "x_um": res.x_um.tolist(),
                "y_um": res.y_um.tolist(),
                "modes": list(res.fit.modes),
                "maps": sorted(res.maps),
                "layer_counts": counts,
                "empty_pixels": int(empty.sum()),
                "files": files,
                "warnings": list(res.warnings),
            }
        )
    payload = {"maps": rows}
    text = "\n".join(
        f"{r['path']}: {r['shape'][0]} x {r['shape'][1]} spectra; layers {r['layer_counts']}"
        + (f"; {len(r['files'])} files in {args.out_dir}" if r["files"] else "")
        for r in rows
    )
    emit(args, payload, text=text)
    return 0


def _store_maps(args, maps, progress, cancel) -> int:
    """Fit each map with the sample's rule table and store it on the sample and image (all maps
    in one transaction: a failure stores none)."""
    from flakebook import pipeline_maps as pm
    from flakebook.store import Project, Sample

    offset = pm.parse_offset(args.offset_um) if args.offset_um is not None else None
    rows, texts = [], []
    with Project.open(args.project) as project:
        image = pm.find_image(project, args.image) if args.image is not None else None
        if image is not None:
            sample = project.get(Sample, image.sample_id)
            if args.sample is not None and args.sample != sample.name:
                raise InputError(
                    f"image {image.id} is of sample {sample.name}, not {args.sample}; accepted: "
                    f"--sample {sample.name} (or leave it out)"
                )
        else:
            sample = project.sample_by_name(args.sample)
            if sample is None:
                names = ", ".join(s.name for s in project.samples())
                raise InputError(f"no sample {args.sample!r} in {args.project}; accepted: {names}")
        if sample.material != args.material:
            raise InputError(
                f"sample {sample.name} is {sample.material}, not {args.material}; accepted: "
                f"--material {sample.material}"
            )
        with project.transaction():
            for path, m in maps:
                got = pm.store_map(
                    project, sample, m, image=image, offset_um=offset, source_path=path,
                    laser_nm=args.laser_nm, progress=progress, cancel=cancel,
                )  # fmt: skip
                files = []
                if args.out_dir:
                    files = write_maps(got.result, Path(args.out_dir), Path(path).stem)
                row = {"path": path, **pm.map_summary(got.record), "files": files}
                row["warnings"] = got.warnings
                rows.append(row)
    for r in rows:
        where = f"image {r['image_id']}" if r["image_id"] is not None else "no image"
        texts.append(
            f"{r['path']}: map {r['map_id']} stored ({r['shape'][0]} x {r['shape'][1]} spectra, "
            f"{where}); layers {r['layer_counts']}, {r['empty_pixels']} without flake lines"
        )
        texts += [f"  warning: {w}" for w in r["warnings"]]
    emit(args, {"maps": rows}, text="\n".join(texts))
    return 0


# ---- rule-table calibration ------------------------------------------------------------------


def _calibrate_rules(args: argparse.Namespace) -> int:
    import numpy as np

    from flakebook import pipeline
    from flakebook.spectra.rules import RuleTable, load_rule_table
    from flakebook.store import Project

    positive_float("--laser-nm", args.laser_nm)
    flakes = [f.strip() for f in args.flakes.split(",") if f.strip()] if args.flakes else None
    with Project.open(args.project) as project:
        sample = project.sample_by_name(args.sample)
        if sample is None:
            names = ", ".join(s.name for s in project.samples())
            raise InputError(f"no sample {args.sample!r} in {args.project}; accepted: {names}")
        rec = pipeline.calibrate_rules(project, sample, laser_nm=args.laser_nm, flakes=flakes)
    new = RuleTable.from_dict(rec.rule_table)
    old = load_rule_table(sample.material, args.laser_nm)
    changes = []
    ns = np.arange(1, 6)
    for rule in new.rules:
        before = old.rule(rule.feature)
        if rule.kind in ("position", "separation", "shear", "breathing", "pl_energy"):
            changes.append(
                {
                    "feature": rule.feature,
                    "published": [round(float(v), 4) for v in before.center(ns)],
                    "calibrated": [round(float(v), 4) for v in rule.center(ns)],
                    "spread": [round(float(v), 4) for v in rule.spread(ns)],
                }
            )
    payload = {
        "sample": sample.name,
        "laser_nm": rec.laser_nm,
        "flakes_used": list(rec.flakes_used),
        "calibration_id": rec.id,
        "rules": changes,
        "notes": rec.notes,
    }
    text = [f"{sample.name}: rule table calibrated on {', '.join(rec.flakes_used)} ({rec.notes})"]
    for c in changes:
        text.append(f"  {c['feature']} N=1..5: {c['published']} -> {c['calibrated']}")
    emit(args, payload, text="\n".join(text))
    return 0
