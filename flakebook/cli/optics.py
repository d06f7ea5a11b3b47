"""Optics commands: materials, contrast, layers, calibrate, absorptance (INTERFACE.md).

Optical contrast: :data:`flakebook.wording.CONTRAST_DEFINITION` (C = (R_reference -
R_flake)/R_reference per channel, positive when the flake is darker), integrated over a channel's
band.
"""

from __future__ import annotations

import argparse
import csv
from pathlib import Path

from flakebook.cli import _common
from flakebook.errors import InputError
from flakebook.specs import parse_channel_values
from flakebook.wording import (
    CONTRAST_BAND_NOTE,
    CONTRAST_DEFINITION,
    count_text,
    layers_text,
    value_with_error,
)

MATERIAL_HELP = "the flake's material, e.g. MoSe2 ('flakebook materials' lists them)"
OXIDE_ERR_HELP = "standard deviation of the oxide thickness in nm (default 0: exact)"

CONTRAST_NOTE = CONTRAST_DEFINITION
CONTRAST_HELP = f"The {CONTRAST_DEFINITION}; {CONTRAST_BAND_NOTE}."


# ---- shared options -------------------------------------------------------------------------


def _add_substrate(p: argparse.ArgumentParser, *, required: bool = True) -> None:
    g = p.add_mutually_exclusive_group(required=required)
    g.add_argument("--oxide-nm", type=float, metavar="D", help="SiO2 thickness on Si, in nm")
    g.add_argument("--substrate", metavar="SPEC", help="films top down, e.g. SiO2:285,Si")


def _add_geometry(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--geometry",
        choices=("supported", "suspended"),
        default="supported",
        help="supported: the flake lies on the substrate; suspended: over a hole "
        "(default supported)",
    )
    add_hole_options(p)


def add_hole_options(p: argparse.ArgumentParser) -> None:
    """``--hole-bottom`` and ``--hole-depth-nm`` (INTERFACE.md)."""
    p.add_argument(
        "--hole-bottom",
        choices=("si", "au", "open"),
        default=None,
        help="si: etched down to the Si; au: a gold layer at the bottom; open: a through-hole "
        "(default si)",
    )
    p.add_argument(
        "--hole-depth-nm",
        type=float,
        default=None,
        help="the hole's depth in nm (for si and au; default for si: the layers above the Si)",
    )


def _add_light(p: argparse.ArgumentParser, *, required: bool = True) -> None:
    g = p.add_mutually_exclusive_group(required=required)
    g.add_argument("--wavelength-nm", type=float, help="one illumination wavelength, nm")
    g.add_argument(
        "--channels", metavar="srgb|mono|FILE.csv", help="camera channels (broadband light)"
    )
    p.add_argument(
        "--na-illumination",
        type=float,
        default=0.3,
        help="NA of the illumination cone (default 0.3; 0 = normal incidence)",
    )
    p.add_argument(
        "--illumination",
        default="halogen",
        help="halogen (CIE illuminant A), blackbody:3200, band:450-650 or bandpass:550/10",
    )


def _substrate(args):
    from flakebook.optics.substrate import substrate_from_options

    if args.oxide_nm is not None:
        _common.positive_float("--oxide-nm", args.oxide_nm, allow_zero=True)
    return substrate_from_options(args.substrate, args.oxide_nm)


def _hole(args):
    from flakebook.optics.substrate import Hole

    if args.geometry != "suspended":
        if args.hole_bottom is not None or args.hole_depth_nm is not None:
            raise InputError(
                "--hole-bottom and --hole-depth-nm describe a hole; accepted only with "
                "--geometry suspended"
            )
        return None
    if args.hole_depth_nm is not None:
        _common.positive_float("--hole-depth-nm", args.hole_depth_nm, allow_zero=True)
    return Hole(args.hole_bottom or "si", args.hole_depth_nm)


def _microscope(args):
    from flakebook.optics.microscope import Channels, Illumination, Microscope

    _common.positive_float("--na-illumination", args.na_illumination, allow_zero=True)
    if args.wavelength_nm is not None:
        _common.positive_float("--wavelength-nm", args.wavelength_nm)
        illum = Illumination.monochromatic(args.wavelength_nm)
        return Microscope(args.na_illumination, illum, Channels.mono())
    illum = Illumination.parse(args.illumination)
    return Microscope(args.na_illumination, illum, Channels.parse(args.channels))


def _material(args):
    from flakebook.optics.materials import get_material

    return get_material(args.material)


# ---- materials --------------------------------------------------------------------------------


def _cmd_materials(args) -> int:
    from flakebook.optics.materials import list_materials
    from flakebook.optics.nkmodel import nk_uncertainty

    rows = []
    for m in list_materials():
        lo, hi = m.wavelength_range_nm()
        unc = nk_uncertainty(m)
        rows.append(
            {
                "name": m.name,
                "data_set": m.data_set_text,
                "wavelength_range_nm": [lo, hi],
                "reference": m.reference,
                "layer_spacing_nm": m.layer_spacing_nm,
                "nk_uncertainty": None if unc is None else unc.description(),
            }
        )
    if _common.output_format(args) == "table":
        text = "\n\n".join(
            f"{r['name']}  ({r['wavelength_range_nm'][0]:g}-{r['wavelength_range_nm'][1]:g} nm"
            + (f", layer spacing {r['layer_spacing_nm']:g} nm" if r["layer_spacing_nm"] else "")
            + f")\n  data: {r['data_set']}\n  reference: {r['reference']}"
            + (f"\n  {r['nk_uncertainty']}" if r["nk_uncertainty"] else "")
            for r in rows
        )
        _common.emit(args, {"materials": rows}, text=text)
    else:
        _common.emit(args, {"materials": rows}, rows=rows)
    return 0


# ---- contrast ---------------------------------------------------------------------------------


def _cmd_contrast(args) -> int:
    from flakebook.optics.microscope import channel_contrast

    material = _material(args)
    substrate = _substrate(args)
    hole = _hole(args)
    mic = _microscope(args)
    layers = _common.parse_layer_range(args.layers)
    table = channel_contrast(material, layers, substrate, mic, args.geometry, hole)
    records = table.to_records()
    cols = [
        "layers",
        "channel",
        "wavelength_nm",
        "contrast",
        "reflectance_flake",
        "reflectance_reference",
    ]
    if _common.output_format(args) == "table":
        _common.message(CONTRAST_NOTE)
    _common.emit(args, {"records": records}, rows=records, columns=cols)
    return 0


# ---- layers -----------------------------------------------------------------------------------


def _read_layers_csv(path: str, channels: tuple[str, ...], single: bool, known: bool = False):
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{p}: cannot read the measurement file ({exc})") from None
    reader = csv.DictReader(line for line in text.splitlines() if line.strip())
    header = [h.strip() for h in (reader.fieldnames or [])]
    if "id" not in header:
        raise InputError(f"{p}: the header needs an id column; found {', '.join(header) or 'none'}")
    if known and "layers" not in header:
        raise InputError(
            f"{p}: the header needs a layers column (each flake's known N); found "
            f"{', '.join(header)}"
        )
    if single:
        wanted = {"mono": ("contrast", "contrast_err")}
    else:
        wanted = {c: (f"contrast_{c}", f"contrast_err_{c}") for c in channels}
    present = {c: cols for c, cols in wanted.items() if cols[0] in header}
    if not present:
        need = ", ".join(cols[0] for cols in wanted.values())
        raise InputError(f"{p}: no contrast column; accepted: id and {need}")
    rows = []
    for i, row in enumerate(reader, start=2):
        if None in row:  # DictReader keeps the cells beyond the header under the key None
            cells = len(header) + len(row[None])
            raise InputError(
                f"{p} line {i}: {cells} cells but the header has {len(header)} columns; "
                f"accepted: one cell a column ({', '.join(header)})"
            )
        row = {(k or "").strip(): (v or "").strip() for k, v in row.items()}
        c, e = {}, {}
        for ch, (ccol, ecol) in present.items():
            if row.get(ccol, "") == "":
                continue
            try:
                c[ch] = float(row[ccol])
                if row.get(ecol, "") != "":
                    e[ch] = float(row[ecol])
            except ValueError:
                raise InputError(f"{p} line {i}: {ccol} or {ecol} is not a number") from None
        if not c:
            raise InputError(f"{p} line {i}: no contrast value")
        if known:
            text = row.get("layers", "")
            try:
                n = int(text)
            except ValueError:
                n = 0
            if not 1 <= n <= 100 or str(n) != text.strip():
                raise InputError(
                    f"{p} line {i}: layers {text!r}; accepted: the flake's known layer number, "
                    "a whole number from 1 to 100"
                )
            rows.append((row.get("id") or None, c, e, n))
            continue
        rows.append((row.get("id") or None, c, e))
    if not rows:
        raise InputError(f"{p}: no measurement rows")
    return rows


def _read_calibration(path: str):
    import json

    from flakebook.optics.calibration import LayerCalibration

    p = Path(path)
    try:
        data = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise InputError(
            f"{p}: cannot read the calibration ({exc}); accepted: the JSON of 'flakebook calibrate'"
        ) from None
    return LayerCalibration.from_dict(data, source=str(p))


def _light_text(mic) -> str:
    from flakebook.optics.calibration import _light

    return _light(mic)


def _check_against_calibration(args, cal, material, mic) -> None:
    """Refuse options that contradict the calibration (INTERFACE.md)."""
    model = cal.optical_model
    problems = []
    if material.name != cal.material:
        problems.append(f"--material {args.material} (calibrated: {cal.material})")
    if args.oxide_err_nm is not None:
        problems.append("--oxide-err-nm (the calibration sets the oxide error)")
    if args.oxide_nm is not None or args.substrate is not None:
        given = _substrate(args).spec
        if given != model.get("substrate_nominal"):
            problems.append(f"substrate {given} (calibrated: {model.get('substrate_nominal')})")
    if _light_text(mic) != model.get("light"):
        problems.append(f"light {_light_text(mic)} (calibrated: {model.get('light')})")
    if abs(mic.na_illumination - float(model.get("na_illumination", -1))) > 1e-9:
        problems.append(
            f"--na-illumination {mic.na_illumination:g} (calibrated: {model.get('na_illumination')})"
        )
    if model.get("illumination") and mic.wavelength_nm is None:
        if mic.illumination.label != model["illumination"]:
            problems.append(f"--illumination (calibrated: {model['illumination']})")
    if problems:
        raise InputError(
            f"{args.calibration}: options contradict the calibration: "
            + "; ".join(problems)
            + ". Accepted: leave them out or give the calibrated values"
        )


def _cmd_layers(args) -> int:
    from flakebook.optics.layers import layer_likelihoods
    from flakebook.optics.substrate import parse_substrate

    material = _material(args)
    hole = _hole(args)
    if args.wavelength_nm is None and args.channels is None:
        raise InputError("give --wavelength-nm L or --channels srgb|mono|FILE.csv")
    mic = _microscope(args)
    cal = None
    if args.calibration is not None:
        cal = _read_calibration(args.calibration)
        _check_against_calibration(args, cal, material, mic)
        substrate = parse_substrate(cal.optical_model["substrate_nominal"])
    elif args.oxide_nm is None and args.substrate is None:
        raise InputError("the substrate is missing; accepted: --oxide-nm D or --substrate SPEC")
    else:
        substrate = _substrate(args)
    channels = mic.channel_names
    single = args.wavelength_nm is not None
    if args.oxide_err_nm is not None:
        _common.positive_float("--oxide-err-nm", args.oxide_err_nm, allow_zero=True)
    if not (1 <= args.max_layers <= 99):
        raise InputError(f"--max-layers {args.max_layers}: accepted 1 to 99")
    if args.csv is not None:
        if args.contrast is not None or args.contrast_err is not None:
            raise InputError("give either --csv FILE or --contrast, not both")
        measurements = _read_layers_csv(args.csv, channels, single)
    else:
        if args.contrast is None:
            raise InputError("the measured contrast is missing: give --contrast or --csv FILE")
        if single:
            try:
                c = {"mono": float(args.contrast)}
                e = {"mono": float(args.contrast_err)} if args.contrast_err is not None else {}
            except ValueError:
                raise InputError(
                    "--contrast and --contrast-err take one number with --wavelength-nm"
                ) from None
        else:
            c = parse_channel_values(args.contrast, "--contrast", channels)
            e = (
                parse_channel_values(args.contrast_err, "--contrast-err", channels)
                if args.contrast_err
                else {}
            )
        measurements = [(None, c, e)]
    progress = _common.Progress()
    cancel = _common.cancel_event()
    # Every row at once (vectorised over the rows).
    likes = layer_likelihoods(
        [m[1] for m in measurements],
        [m[2] for m in measurements],
        material=material,
        substrate=substrate,
        microscope=mic,
        max_layers=args.max_layers,
        oxide_err_nm=args.oxide_err_nm or 0.0,
        geometry=args.geometry,
        hole=hole,
        calibration=cal,
        progress=progress,
        cancel=cancel,
    )
    results = []
    for (ident, _, _), like in zip(measurements, likes):
        post = like.posterior()
        for w in like.warnings:
            _common.message(f"{ident or 'measurement'}: {w}")
        results.append(
            {
                "id": ident,
                "layers": post.layers,
                "probability": post.probability,
                "ambiguous_with": list(post.ambiguous_with),
                "likelihood": like.likelihood.tolist(),
                "posterior": post.posterior.tolist(),
                "decider": like.decider or None,
                "warnings": list(like.warnings),
            }
        )
    fmt = _common.output_format(args)
    more = layers_text(args.max_layers + 1, args.max_layers)
    if fmt == "csv":
        rows = [
            {
                "id": r["id"],
                "layers": r["layers"],
                "probability": r["probability"],
                "ambiguous_with": r["ambiguous_with"],
                "decider": r["decider"],
                "posterior": r["posterior"],
            }
            for r in results
        ]
    else:
        rows = [
            {
                "id": r["id"] or "-",
                "layers": layers_text(r["layers"], args.max_layers),
                "probability": r["probability"],
                "ambiguous_with": ", ".join(
                    layers_text(n, args.max_layers) for n in r["ambiguous_with"]
                )
                or "-",
                "decider": r["decider"],
            }
            for r in results
        ]
    if fmt == "table":
        _common.message(
            f"{CONTRAST_NOTE}; {more}: more than {args.max_layers} layers "
            f"(in JSON and CSV: layer {args.max_layers + 1})"
        )
    _common.emit(args, {"results": results}, rows=rows)
    return 0


# ---- calibrate --------------------------------------------------------------------------------


def _cmd_calibrate(args) -> int:
    from flakebook.optics.calibration import KnownFlake, calibrate_layers

    if args.project is not None:
        from flakebook.cli.calibrate_project import cmd_calibrate_project

        return cmd_calibrate_project(args)
    missing = [
        o
        for o, v in (
            ("--material M", args.material),
            ("--oxide-nm D or --substrate SPEC", args.oxide_nm or args.substrate),
            ("--wavelength-nm L or --channels srgb|mono", args.wavelength_nm or args.channels),
            ("--csv KNOWN.csv", args.csv),
        )
        if v is None
    ]
    if missing:
        raise InputError(
            f"calibrate needs {', '.join(missing)}; or calibrate PROJECT --sample NAME to "
            "calibrate from a project's flakes of known layer number"
        )
    if args.sample is not None or args.flakes is not None:
        raise InputError("--sample and --flakes go with calibrate PROJECT (a project file)")

    material = _material(args)
    substrate = _substrate(args)
    mic = _microscope(args)
    if args.oxide_err_nm is not None:
        _common.positive_float("--oxide-err-nm", args.oxide_err_nm, allow_zero=True)
    rows = _read_layers_csv(args.csv, mic.channel_names, args.wavelength_nm is not None, known=True)
    flakes = [KnownFlake(n, c, e, ident) for ident, c, e, n in rows]
    cal = calibrate_layers(
        flakes,
        material=material,
        substrate=substrate,
        microscope=mic,
        oxide_err_nm=args.oxide_err_nm or 0.0,
    )
    for w in cal.warnings:
        _common.message(f"warning: {w}")
    payload = cal.to_dict()
    if args.out is not None:
        out = Path(args.out)
        tmp = out.with_name(out.name + ".part")
        try:
            tmp.write_text(_common.dumps(payload) + "\n", encoding="utf-8")
            tmp.replace(out)
        except OSError as exc:
            tmp.unlink(missing_ok=True)
            raise InputError(f"{out}: cannot write the calibration ({exc})") from None
        _common.message(f"calibration written to {out}")
    if _common.output_format(args) == "table":
        text = (
            f"oxide {value_with_error(cal.oxide_nm, cal.oxide_err_nm, 'nm')}; contrast scale "
            f"{value_with_error(cal.contrast_scale, cal.contrast_scale_err)}; "
            f"{count_text(len(cal.flakes_used), 'known flake')}\n"
            f"{cal.optical_model.get('description', '')}"
        )
        _common.emit(args, payload, text=text)
    else:
        _common.emit(args, payload)
    return 0


# ---- absorptance ------------------------------------------------------------------------------


def _cmd_absorptance(args) -> int:
    from flakebook.optics.absorptance import absorptance

    material = _material(args)
    hole = _hole(args)
    open_hole = args.geometry == "suspended" and hole is not None and hole.bottom == "open"
    if args.oxide_nm is None and args.substrate is None:
        if not open_hole:
            raise InputError(
                "the substrate is missing; accepted: --oxide-nm D or --substrate SPEC "
                "(only an open through-hole needs none)"
            )
        substrate = None
    else:
        substrate = _substrate(args)
    if args.layers < 1:
        raise InputError(f"--layers {args.layers}: accepted one whole number >= 1")
    _common.positive_float("--laser-nm", args.laser_nm)
    _common.positive_float("--na-objective", args.na_objective, allow_zero=True)
    res = absorptance(
        material,
        args.layers,
        args.laser_nm,
        substrate,
        geometry=args.geometry,
        hole=hole,
        na_objective=args.na_objective,
    )
    for w in res.warnings:
        _common.message(f"warning: {w}")
    payload = res.to_dict()
    _common.emit(args, payload, rows=[payload])
    return 0


def register(sub: argparse._SubParsersAction) -> None:
    """Add the optics commands."""
    p = sub.add_parser("materials", help="list the material library with references")
    _common.add_format_option(p, csv_ok=True)
    p.set_defaults(func=_cmd_materials)

    p = sub.add_parser(
        "contrast", help="model optical contrast versus layer number", description=CONTRAST_HELP
    )
    p.add_argument("--material", required=True, metavar="M", help=MATERIAL_HELP)
    _add_substrate(p)
    p.add_argument("--layers", required=True, help="range 1-10 or list 1,2,5")
    _add_light(p)
    _add_geometry(p)
    _common.add_format_option(p, csv_ok=True)
    p.set_defaults(func=_cmd_contrast)

    p = sub.add_parser(
        "layers", help="layer number from measured contrast", description=CONTRAST_HELP
    )
    p.add_argument("--material", required=True, metavar="M", help=MATERIAL_HELP)
    _add_substrate(p, required=False)
    p.add_argument(
        "--calibration", default=None, metavar="CAL.json", help="a calibration from 'calibrate'"
    )
    p.add_argument("--oxide-err-nm", type=float, default=None, help=OXIDE_ERR_HELP)
    _add_light(p, required=False)
    p.add_argument("--contrast", default=None, help="C, or r=C1,g=C2,b=C3 for channels")
    p.add_argument("--contrast-err", default=None, help="E, or r=E1,g=E2,b=E3")
    p.add_argument("--csv", default=None, metavar="FILE", help="one measurement a row")
    p.add_argument(
        "--max-layers",
        type=int,
        default=15,
        help="N_max: likelihoods run over 1..N_max plus one bin for more (default 15)",
    )
    _add_geometry(p)
    _common.add_format_option(p, csv_ok=True)
    p.set_defaults(func=_cmd_layers)

    p = sub.add_parser(
        "calibrate",
        help="fit oxide, contrast scale and n,k model to flakes of known layer number",
        description=CONTRAST_HELP,
    )
    p.add_argument(
        "project",
        nargs="?",
        default=None,
        metavar="PROJECT",
        help="a project: calibrate its sample from its flakes of known layer number",
    )
    p.add_argument("--sample", default=None, help="with PROJECT: the sample to calibrate")
    p.add_argument(
        "--flakes", default=None, metavar="ID,...", help="with PROJECT: the known flakes to use"
    )
    p.add_argument("--material", default=None, metavar="M", help=MATERIAL_HELP)
    _add_substrate(p, required=False)
    p.add_argument("--oxide-err-nm", type=float, default=None, help=OXIDE_ERR_HELP)
    _add_light(p, required=False)
    p.add_argument(
        "--csv",
        default=None,
        metavar="KNOWN.csv",
        help="a layers --csv table plus a layers column",
    )
    p.add_argument(
        "--out", default=None, metavar="CAL.json", help="also write the calibration to this file"
    )
    _common.add_format_option(p)
    p.set_defaults(func=_cmd_calibrate)

    p = sub.add_parser(
        "absorptance",
        help="fraction of the laser absorbed in a flake",
        description="Fraction of the incident laser power absorbed in the flake. Follow your "
        "institution's laser-safety rules and local regulations.",
    )
    p.add_argument("--material", required=True, metavar="M", help=MATERIAL_HELP)
    p.add_argument(
        "--layers", type=int, required=True, metavar="N", help="the flake's layer number"
    )
    p.add_argument(
        "--laser-nm", type=float, required=True, help="the laser line's wavelength in nm, e.g. 532"
    )
    _add_substrate(p, required=False)
    _add_geometry(p)
    p.add_argument(
        "--na-objective",
        type=float,
        default=0.0,
        help="NA of the objective focusing the laser (default 0: a plane wave at normal incidence)",
    )
    _common.add_format_option(p)
    p.set_defaults(func=_cmd_absorptance)
