"""``flakebook kappa`` and ``flakebook series import``: Raman thermometry on the command line.

Raman thermometry heats the sample with a laser. Follow your institution's laser-safety rules
and local regulations.
"""

from __future__ import annotations

import argparse

from flakebook.cli import _common
from flakebook.errors import InputError


def _add_model_options(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--weighting",
        choices=("intensity", "confocal"),
        default="intensity",
        help="how the Raman signal weights the temperature (default intensity)",
    )
    p.add_argument(
        "--interface-conductance-w-m2k",
        type=float,
        default=None,
        help="the flake goes on over the supported region with this conductance",
    )
    p.add_argument(
        "--interface-conductance-err-w-m2k",
        type=float,
        default=0.0,
        help="its s.d., W/m^2/K (drawn log-normal in the Monte Carlo)",
    )
    p.add_argument(
        "--interface-conductance-from-series",
        action="store_true",
        help="with --project: fit g from the flake's supported-power series (and draw its error)",
    )
    p.add_argument(
        "--kappa-alpha",
        type=float,
        default=0.0,
        help="kappa(T) = kappa_0 (T_0/T)^alpha (default 0: constant)",
    )
    p.add_argument(
        "--beam-offset-um",
        type=float,
        default=0.0,
        help="distance of the beam from the hole centre, um",
    )
    p.add_argument("--draws", type=int, default=10_000, help="Monte Carlo draws (default 10000)")
    p.add_argument(
        "--na-objective",
        type=float,
        default=None,
        help="the Raman objective's NA (absorptance over its cone)",
    )
    p.add_argument(
        "--hole-depth-err-nm",
        type=float,
        default=None,
        help="s.d. of the hole depth, nm (default 5%% of the depth, with a warning)",
    )
    _common.add_format_option(p)  # fmt: skip


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "kappa",
        help="thermal conductivity from Raman thermometry (values, or a flake's stored series)",
        description="kappa from chi_T, chi_P, absorptance, hole and beam radii. Raman "
        "thermometry heats the sample with a laser: follow your institution's laser-safety "
        "rules and local regulations.",
    )
    p.add_argument(
        "--project",
        default=None,
        metavar="P",
        help="a project: use the flake's stored series, hole and beam (with --flake)",
    )
    p.add_argument("--flake", default=None, metavar="ID", help="with --project: the flake")
    p.add_argument(
        "--material",
        default=None,
        metavar="M",
        help="the flake's material (its layer spacing gives the thickness)",
    )
    p.add_argument(
        "--layers",
        type=int,
        default=None,
        help="the layer number (with --project: overrides the posterior)",
    )
    p.add_argument(
        "--chi-t-cm1-per-k",
        type=float,
        default=None,
        help="temperature coefficient of the mode, cm^-1/K (negative: it softens)",
    )
    p.add_argument("--chi-t-err-cm1-per-k", type=float, default=0.0, help="its s.d., cm^-1/K")
    p.add_argument("--chi-p-cm1-per-mw", type=float, default=None,
                   help="shift per mW of incident power at the sample")  # fmt: skip
    p.add_argument("--chi-p-err-cm1-per-mw", type=float, default=0.0, help="its s.d., cm^-1/mW")
    p.add_argument(
        "--chi-correlation",
        type=float,
        default=0.0,
        help="correlation of chi_T and chi_P (default 0: separate series)",
    )
    p.add_argument(
        "--absorptance",
        type=float,
        default=None,
        help="fraction of the incident power absorbed in the flake (0-1)",
    )
    p.add_argument("--absorptance-err", type=float, default=0.0, help="its s.d.")
    p.add_argument(
        "--geometry",
        choices=("suspended",),
        default=None,
        help="compute the absorptance of the membrane over its hole from optics",
    )
    g = p.add_mutually_exclusive_group()
    g.add_argument("--oxide-nm", type=float, default=None, help="SiO2 thickness on Si, nm")
    g.add_argument(
        "--substrate",
        metavar="SPEC",
        default=None,
        help="the stack from the top down, e.g. SiO2:285,Si",
    )
    p.add_argument(
        "--hole-bottom",
        choices=("si", "au", "open"),
        default=None,
        help="etched to the Si, gold-bottomed, or a through-hole",
    )
    p.add_argument("--hole-depth-nm", type=float, default=None, help="hole depth, nm")
    p.add_argument("--hole-radius-um", type=float, default=None, help="hole radius R, um")
    p.add_argument("--hole-radius-err-um", type=float, default=0.0, help="its s.d., um")
    p.add_argument(
        "--beam-radius-um", type=float, default=None, help="laser beam 1/e^2 intensity radius W, um"
    )
    p.add_argument("--beam-radius-err-um", type=float, default=0.0, help="its s.d., um")
    p.add_argument("--laser-nm", type=float, default=532.0, help="laser line, nm (default 532)")
    _add_model_options(p)
    p.set_defaults(func=_kappa)

    s = sub.add_parser("series", help="thermometry series of a flake")
    ssub = s.add_subparsers(dest="series_command", metavar="SUBCOMMAND", required=True)
    i = ssub.add_parser(
        "import",
        help="attach a temperature or power series to a flake and fit it",
        description="A folder of spectra with a CSV (columns file and stage_temperature_k or "
        "power_mw at the sample), or the CSV itself. The mode is fitted in every spectrum (no "
        "Si-line calibration within a series). Raman thermometry heats the sample with a laser: "
        "follow your institution's laser-safety rules and local regulations.",
    )
    i.add_argument("project", help="the project file (.flakebook)")
    i.add_argument("--flake", required=True, metavar="ID", help="the flake the series belongs to")
    i.add_argument(
        "--kind",
        required=True,
        choices=("temperature", "power", "supported-power"),
        help="a stage-temperature series, a laser-power series on the membrane, or a "
        "laser-power series with the beam on the supported part of the same flake (to fit g)",
    )
    i.add_argument(
        "source",
        metavar="FOLDER_OR_CSV",
        help="a folder of spectra (with a CSV), or the CSV naming them",
    )
    i.add_argument("--mode", default=None, help="the Raman mode to follow (default: material's)")
    i.add_argument("--laser-nm", type=float, default=532.0, help="laser line, nm (default 532)")
    i.add_argument("--max-power-mw", type=float, default=None,
                   help="flag series points above this power at the sample (default 1 mW)")  # fmt: skip
    _common.add_format_option(i)
    i.set_defaults(func=_series_import)


def _options(args):
    from flakebook.pipeline_thermal import ModelOptions

    if args.draws < 100:
        raise InputError(f"--draws {args.draws} is too few; accepted: 100 or more")
    return ModelOptions(
        weighting=args.weighting,
        interface_conductance_w_m2k=args.interface_conductance_w_m2k,
        interface_conductance_err_w_m2k=args.interface_conductance_err_w_m2k,
        conductance_from_series=args.interface_conductance_from_series,
        kappa_alpha=args.kappa_alpha,
        beam_offset_um=args.beam_offset_um,
        draws=args.draws,
        na_objective=args.na_objective,
        hole_depth_err_nm=args.hole_depth_err_nm,
    )


def _emit(args, result) -> None:
    payload = result.to_dict()
    for w in payload["warnings"]:
        _common.message(f"warning: {w}")
    _common.emit(args, payload, rows=[payload])


def _kappa(args) -> int:
    from flakebook.pipeline_thermal import check_signs

    options = _options(args)
    if args.project is not None or args.flake is not None:
        if args.project is None or args.flake is None:
            raise InputError("--project and --flake go together; accepted: both, or neither")
        given = [n for n in ("chi_t_cm1_per_k", "chi_p_cm1_per_mw", "absorptance",
                             "hole_radius_um", "beam_radius_um") if getattr(args, n) is not None]  # fmt: skip
        if given:
            raise InputError(
                f"--{given[0].replace('_', '-')} is taken from the flake's stored records with "
                "--project; accepted there: the model options and --layers"
            )
        from flakebook.pipeline_thermal import flake_kappa
        from flakebook.store import Project

        with Project.open(args.project) as project:
            for w in project.warnings:
                _common.message(f"warning: {w}")
            result, _ = flake_kappa(
                project, args.flake, options, layers=args.layers, progress=_common.Progress()
            )
        _emit(args, result)
        return 0
    if options.conductance_from_series:
        raise InputError(
            "--interface-conductance-from-series reads the flake's stored supported-power "
            "series; accepted with --project P --flake ID (or give --interface-conductance-w-m2k)"
        )
    missing = [
        f"--{n.replace('_', '-')}"
        for n in ("material", "layers", "chi_t_cm1_per_k", "chi_p_cm1_per_mw", "hole_radius_um",
                  "beam_radius_um")
        if getattr(args, n) is None
    ]  # fmt: skip
    if missing:
        raise InputError(
            f"kappa needs {', '.join(missing)}; accepted: the values, or --project P --flake ID"
        )
    check_signs(args.chi_t_cm1_per_k, args.chi_p_cm1_per_mw)
    from flakebook.optics.materials import get_material
    from flakebook.thermal.uncertainty import kappa_with_uncertainty

    material = get_material(args.material)
    absorptance, depth, depth_err = _absorptance(args, material)
    result = kappa_with_uncertainty(
        args.chi_t_cm1_per_k,
        args.chi_p_cm1_per_mw,
        absorptance,
        args.hole_radius_um,
        args.beam_radius_um,
        layer_spacing_nm=material.layer_spacing_nm,
        layers=args.layers,
        chi_t_err_cm1_per_k=args.chi_t_err_cm1_per_k,
        chi_p_err_cm1_per_mw=args.chi_p_err_cm1_per_mw,
        chi_correlation=args.chi_correlation,
        absorptance_err=args.absorptance_err,
        hole_radius_err_um=args.hole_radius_err_um,
        beam_radius_err_um=args.beam_radius_err_um,
        hole_depth_nm=depth,
        hole_depth_err_nm=depth_err,
        interface_conductance_err_w_m2k=options.interface_conductance_err_w_m2k,
        model=options.heat_model(),
        draws=options.draws,
        progress=_common.Progress(),
        cancel=_common.cancel_event(),
    )
    _emit(args, result)
    return 0


def _absorptance(args, material):
    """The absorptance (a number, or a table over the hole depth), the depth and its error."""
    if args.absorptance is not None:
        if args.geometry is not None or args.hole_bottom is not None:
            raise InputError(
                "--absorptance is given and --geometry/--hole-bottom would compute it; "
                "accepted: one of the two"
            )
        a = args.absorptance
        if not 0 < a < 1:
            raise InputError(
                f"--absorptance {a!r} is outside (0, 1); accepted: the fraction of the incident "
                "power absorbed in the flake, strictly between 0 and 1"
            )
        return a, None, 0.0
    if args.geometry != "suspended" or args.hole_bottom is None:
        raise InputError(
            "the absorptance is missing; accepted: --absorptance A, or --geometry suspended "
            "--hole-bottom si|au|open [--hole-depth-nm H] with --oxide-nm or --substrate"
        )
    import numpy as np

    from flakebook.optics.absorptance import absorptance
    from flakebook.optics.substrate import Hole, substrate_from_options

    substrate = None
    if args.oxide_nm is not None or args.substrate is not None:
        substrate = substrate_from_options(args.substrate, args.oxide_nm)
    elif args.hole_bottom != "open":
        raise InputError(
            "the substrate is missing; accepted: --oxide-nm D or --substrate SPEC (only an open "
            "through-hole needs none)"
        )
    na = float(args.na_objective or 0.0)

    def a_at(depth):
        hole = Hole(args.hole_bottom, depth)
        return absorptance(material, args.layers, args.laser_nm, substrate, geometry="suspended",
                           hole=hole, na_objective=na)  # fmt: skip

    central = a_at(args.hole_depth_nm)
    for w in central.warnings:
        _common.message(f"warning: {w}")
    err = args.hole_depth_err_nm or 0.0
    if args.hole_bottom == "open" or err <= 0:
        return central.absorptance_flake, None, 0.0
    depth = args.hole_depth_nm
    if depth is None:
        depth = central.provenance["hole"]["depth_nm"]
    depths = depth + err * np.linspace(-4.0, 4.0, 17)
    depths = depths[depths > 0]
    values = np.array([a_at(float(d)).absorptance_flake for d in depths])
    return (depths, values), float(depth), float(err)


def _series_import(args) -> int:
    from flakebook.pipeline_thermal import import_series
    from flakebook.store import Project

    if args.max_power_mw is not None:
        _common.positive_float("--max-power-mw", args.max_power_mw)
    with Project.open(args.project) as project:
        for w in project.warnings:
            _common.message(f"warning: {w}")
        series, result = import_series(
            project,
            args.flake,
            args.kind,
            args.source,
            mode=args.mode,
            laser_nm=args.laser_nm,
            max_power_mw=args.max_power_mw,
            progress=_common.Progress(),
            cancel=_common.cancel_event(),
        )
        n = len(project.spectra_of_series(series))
        label = project.find_flake(args.flake).label
    d = result.details
    fit = d["series"][args.kind]["fit"]
    payload = {
        "flake_id": label,
        "series_id": series.id,
        "kind": args.kind,
        "spectra": n,
        "mode": d["series"][args.kind]["mode"],
        "chi_t_cm1_per_k": result.chi_t_cm1_per_k,
        "chi_t_err_cm1_per_k": result.chi_t_err_cm1_per_k,
        "chi_p_cm1_per_mw": result.chi_p_cm1_per_mw,
        "chi_p_err_cm1_per_mw": result.chi_p_err_cm1_per_mw,
        "covariance": d.get("covariance"),
        "reduced_chi2": fit["reduced_chi2"],
        "points": [
            {k: p[k] for k in ("x", "center_cm1", "center_err_cm1", "fwhm_cm1")}
            for p in d["series"][args.kind]["points"]
        ],
        "warnings": d["warnings"],
    }
    for w in payload["warnings"]:
        _common.message(f"warning: {w}")
    row = {k: v for k, v in payload.items() if k not in ("points", "covariance", "warnings")}
    _common.emit(args, payload, rows=[row])
    return 0
