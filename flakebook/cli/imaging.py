"""Imaging commands: ``flakebook survey`` (INTERFACE.md).

Surveys micrographs: finds flakes and their terraces (regions of uniform thickness; the JSON
lists them under "regions"), measures each terrace's optical contrast (C = (R_reference -
R_flake)/R_reference per channel after the dark offset is subtracted, the reference being the
bare substrate in the same image; positive when the flake is darker), gives its likelihood over
layer number from the thin-film model, finds the holes and ranks the terraces by the probability
of having a layer number in ``--target-layers``. A folder is surveyed with worker processes (both
cores); ``--watch`` surveys each new file once the camera has finished writing it.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

from flakebook.cli import _common
from flakebook.cli.optics import (
    CONTRAST_NOTE,
    MATERIAL_HELP,
    OXIDE_ERR_HELP,
    _add_light,
    _add_substrate,
    _material,
    _microscope,
    _substrate,
    add_hole_options,
)
from flakebook.errors import Cancelled, InputError
from flakebook.wording import count_text, layers_text

IMAGE_SUFFIXES = (".png", ".jpg", ".jpeg", ".tif", ".tiff", ".bmp")


def _hole(args):
    from flakebook.optics.substrate import Hole

    if args.hole_depth_nm is not None:
        _common.positive_float("--hole-depth-nm", args.hole_depth_nm, allow_zero=True)
    return Hole(args.hole_bottom or "si", args.hole_depth_nm)


def _scale(args):
    from flakebook.imaging.scale import given_scale, scale_from_objective

    if args.scale_um_per_px is not None:
        _common.positive_float("--scale-um-per-px", args.scale_um_per_px)
        return given_scale(args.scale_um_per_px)
    return scale_from_objective(args.objective)


# Per-process cache of the sample and microscope built from the options (the optics model's
# tables are cached with them, so a folder pays for the model once per worker).
_SETUP: dict = {}


def _setup(opts: dict):
    key = tuple(sorted((k, str(v)) for k, v in opts.items()))
    if key not in _SETUP:
        args = argparse.Namespace(**opts)
        _SETUP.clear()
        _SETUP[key] = {
            "material": _material(args),
            "substrate": _substrate(args),
            "microscope": _microscope(args),
            "scale": _scale(args),
            "hole": _hole(args),
            "calibration": _calibration(opts.get("calibration")),
        }
    return _SETUP[key]


def _calibration(data):
    if data is None:
        return None
    from flakebook.optics.calibration import LayerCalibration

    return LayerCalibration.from_dict(data, source="the calibration")


def survey_one(path: str, opts: dict, cancel=None, progress=None, keep: bool = False):
    """Survey one file with the command's options; returns the image's JSON object (with
    ``keep``: the JSON object and the ``SurveyResult``, for storing in a project)."""
    from flakebook.imaging.survey import survey_image

    s = _setup(opts)
    cal = s["calibration"]
    res = survey_image(
        path,
        material=s["material"],
        substrate=s["substrate"],
        microscope=s["microscope"],
        scale_um_per_px=s["scale"],
        min_area_um2=opts["min_area_um2"],
        target_layers=opts["target_layers"],
        max_layers=opts["max_layers"],
        dark_offset=opts["dark_offset"],
        oxide_err_nm=0.0 if cal is not None else opts["oxide_err_nm"] or 0.0,
        contrast_scale=opts.get("contrast_scale", 1.0),
        contrast_scale_err=opts.get("contrast_scale_err", 0.0),
        calibration=cal,
        hole_radius_um=opts["hole_radius_um"],
        find_holes=not opts["no_holes"],
        hole=s["hole"],
        progress=progress,
        cancel=cancel,
    )
    return (res.to_dict(), res) if keep else res.to_dict()


def _worker_init() -> None:  # pragma: no cover - runs in worker processes
    import signal
    import warnings

    import cv2
    import numpy as np

    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent handles Ctrl-C
    cv2.setNumThreads(1)
    _common.quiet_libraries()
    np.seterr(all="ignore")  # as in the parent's runner: results carry their own warnings
    warnings.simplefilter("ignore")


def _worker(path: str, opts: dict, keep: bool = False) -> dict:  # pragma: no cover - worker
    try:
        if keep:
            out, res = survey_one(path, opts, keep=True)
            return {"ok": out, "result": res}
        return {"ok": survey_one(path, opts)}
    except InputError as exc:
        return {"error": str(exc)}


def _expand(paths: list[str]) -> list[str]:
    out: list[str] = []
    for p in paths:
        q = Path(p)
        if q.is_dir():
            out.extend(str(f) for f in sorted(q.iterdir()) if f.suffix.lower() in IMAGE_SUFFIXES)
        else:
            out.append(str(q))
    return out


def _failed_image(path: str, message: str) -> dict:
    return {"path": path, "regions": [], "holes": [], "warnings": [f"not surveyed: {message}"]}


def _rows(images: list[dict], max_layers: int, table: bool = True) -> list[dict]:
    """One row a terrace (a "region" of the JSON); for a table with layer numbers as 3L/>15L."""
    rows = []
    for im in images:
        for r in im["regions"]:
            layers = r["layers"]
            rows.append(
                {
                    "path": Path(im["path"]).name if im["path"] else "-",
                    "terrace": r["id"],
                    "flake": r.get("flake_id"),
                    "layers": layers_text(layers, max_layers) if table else layers,
                    "probability": r["probability"],
                    "p_target": r["target_probability"],
                    "area_um2": r["area_um2"],
                    "centroid_px": [round(v, 1) for v in r["centroid_px"]],
                    "geometry": r["geometry"],
                }
            )
    return rows


def _options(args) -> dict:
    max_layers = args.max_layers
    if not (1 <= max_layers < 100):
        raise InputError(f"--max-layers {max_layers}: accepted a whole number from 1 to 99")
    targets = _common.parse_layer_range(args.target_layers, max_layers=max_layers)
    _common.positive_float("--min-area-um2", args.min_area_um2, allow_zero=True)
    if args.dark_offset is None:
        args.dark_offset = 0.0
    offsets = (
        args.dark_offset.values() if isinstance(args.dark_offset, dict) else [args.dark_offset]
    )
    if not all(0 <= v < 1 for v in offsets):
        raise InputError(
            f"--dark-offset {args.dark_offset!r}; accepted: a fraction of full scale from 0 to below 1"
        )
    if args.hole_radius_um is not None:
        _common.positive_float("--hole-radius-um", args.hole_radius_um)
    if args.workers is not None and args.workers < 1:
        raise InputError(
            f"--workers {args.workers} is not allowed; accepted: 1 or more worker processes "
            "(leave it out to use every core)"
        )
    if args.oxide_err_nm is not None:
        _common.positive_float("--oxide-err-nm", args.oxide_err_nm, allow_zero=True)
    opts = {
        k: getattr(args, k)
        for k in (
            "material",
            "oxide_nm",
            "substrate",
            "oxide_err_nm",
            "wavelength_nm",
            "channels",
            "na_illumination",
            "illumination",
            "scale_um_per_px",
            "objective",
            "min_area_um2",
            "max_layers",
            "dark_offset",
            "hole_radius_um",
            "hole_bottom",
            "hole_depth_nm",
            "no_holes",
        )
    }
    opts["calibration"] = getattr(args, "calibration_data", None)
    opts["contrast_scale"] = getattr(args, "contrast_scale", 1.0)
    opts["contrast_scale_err"] = getattr(args, "contrast_scale_err", 0.0)
    opts["target_layers"] = tuple(targets)
    _setup(opts)  # check every option once, before any file is read
    return opts


class _ProjectSink:
    """Stores each surveyed image in a project (``--project``), one transaction an image."""

    def __init__(self, args, opts: dict) -> None:
        from flakebook.store import Project

        self.opts = opts
        self.args = args
        self.stored = 0
        self.project = Project.open(args.project)
        for w in self.project.warnings:
            _common.message(f"flakebook: {w}")
        try:
            self.sample = self._sample(args)
        except BaseException:
            self.project.close()
            raise

    def _sample(self, args):
        from flakebook.substrate import format_substrate

        spec = _setup(self.opts)["substrate"].spec
        samples = self.project.samples()
        if args.sample is not None:
            found = self.project.sample_by_name(args.sample)
            if found is None:
                names = ", ".join(x.name for x in samples) or "(none)"
                raise InputError(
                    f"--sample {args.sample!r} is not in {self.project.path.name}; "
                    f"accepted: {names}"
                )
            return found
        fits = [
            x
            for x in samples
            if x.material == args.material and format_substrate(x.substrate) == spec
        ]
        if len(fits) != 1:
            names = ", ".join(x.name for x in samples) or "(none)"
            raise InputError(
                f"--project {self.project.path.name}: {len(fits)} samples are {args.material} on "
                f"{spec}; name one with --sample (samples: {names})"
            )
        return fits[0]

    def _label(self):
        taken = {f.label for f in self.project.records("flake")}
        n = 1
        while f"{self.sample.name}-{n:03d}" in taken:
            n += 1
        return f"{self.sample.name}-{n:03d}"

    def store(self, path: str, result) -> dict:
        """Add the image and its survey; returns a summary for the user."""
        import hashlib

        from flakebook.pipeline import link_by_stage, store_survey

        sha = hashlib.sha256(Path(path).read_bytes()).hexdigest()
        if any(i.sha256 == sha for i in self.project.records("image")):
            _common.message(
                f"flakebook: {path} is already in {self.project.path.name}; not stored again"
            )
            return {"path": path, "stored": False}
        s = _setup(self.opts)
        mic = s["microscope"]
        with self.project.transaction():
            image = self.project.add_image(
                self.sample,
                path,
                pixel_size_um=s["scale"].um_per_px,
                objective=self.args.objective or "",
                na_illumination=mic.na_illumination,
                illumination=self.args.illumination or "halogen",
                width_px=result.shape[1],
                height_px=result.shape[0],
                camera={"dark_offset": self.opts["dark_offset"]},
            )
            stored = store_survey(
                self.project,
                image,
                result,
                flake_for=link_by_stage(self.project, image),
                new_label=self._label,
            )
        self.stored += 1
        return {"path": path, "stored": True, "flakes": len(stored.flakes)}

    def close(self) -> None:
        self.project.close()


def _from_sample(args) -> None:
    """Fill the options left out from the project's sample (``--project P --sample NAME``): its
    material, stack, hole bottom, depth and radius, and its calibration; a warning names
    every setting taken from the sample."""
    from flakebook.pipeline import calibration_record
    from flakebook.store import Project
    from flakebook.substrate import format_substrate

    with Project.open(args.project, read_only=True) as project:
        sample = project.sample_by_name(args.sample)
        if sample is None:
            names = ", ".join(x.name for x in project.samples()) or "(none)"
            raise InputError(
                f"--sample {args.sample!r} is not in {project.path.name}; accepted: {names}"
            )
        cal = calibration_record(project, sample)
    taken = []
    if args.material is None:
        args.material = sample.material
        taken.append(f"material {sample.material}")
    if args.oxide_nm is None and args.substrate is None:
        args.substrate = format_substrate(sample.substrate)
        taken.append(f"substrate {args.substrate}")
    hp = sample.hole_pattern
    if hp is not None and not args.no_holes:
        if args.hole_bottom is None:
            args.hole_bottom = hp.bottom
            taken.append(f"hole bottom {hp.bottom}")
        if args.hole_depth_nm is None and hp.depth_nm is not None:
            args.hole_depth_nm = hp.depth_nm
            taken.append(f"hole depth {hp.depth_nm:g} nm")
        if args.hole_radius_um is None:
            args.hole_radius_um = hp.diameter_um / 2.0
            taken.append(f"hole radius {args.hole_radius_um:g} um")
    if args.calibration is None and cal is not None and args.oxide_nm is None:
        from flakebook.pipeline_calibration import calibration_summary

        if args.substrate != format_substrate(sample.substrate):
            pass  # a stack given on the command line: the sample's calibration does not apply
        elif cal.model:
            args.calibration_data = cal.model
            taken.append(f"calibration: {calibration_summary(cal)}")
        elif cal.oxide_nm is not None:
            from flakebook.substrate import parse_substrate

            stack = [
                {"material": lay.material, "thickness_nm": lay.thickness_nm}
                if lay.material != "SiO2"
                else {"material": "SiO2", "thickness_nm": cal.oxide_nm}
                for lay in parse_substrate(args.substrate)
            ]
            args.substrate = format_substrate(stack)
            if args.oxide_err_nm is None:
                args.oxide_err_nm = cal.oxide_err_nm
            if cal.contrast_scale:
                vals = list(cal.contrast_scale.values())
                errs = list(cal.contrast_scale_err.values()) or [0.0]
                args.contrast_scale = sum(vals) / len(vals)
                args.contrast_scale_err = sum(errs) / len(errs)
            taken.append(f"calibration: {calibration_summary(cal)}")
        if args.dark_offset is None and cal.dark_offset:
            args.dark_offset = dict(cal.dark_offset)
            taken.append(
                "dark offset " + ",".join(f"{k}={v:g}" for k, v in cal.dark_offset.items())
            )
    if taken:
        _common.message(
            f"flakebook: warning: from sample {sample.name} of {Path(args.project).name}: "
            + "; ".join(taken)
        )


def _cmd_survey(args) -> int:
    args.calibration_data = None
    args.contrast_scale, args.contrast_scale_err = 1.0, 0.0
    if args.project is not None and args.sample is not None:
        _from_sample(args)
    if args.calibration is not None:
        from flakebook.cli.optics import _read_calibration

        args.calibration_data = _read_calibration(args.calibration).to_dict()
        if args.oxide_err_nm is not None:
            raise InputError(
                "--oxide-err-nm given beside --calibration, which sets the oxide error; "
                "accepted: leave it out"
            )
    missing = [
        o
        for o, v in (
            ("--material M", args.material),
            ("--oxide-nm D or --substrate SPEC", args.oxide_nm or args.substrate),
        )
        if v is None
    ]
    if missing:
        raise InputError(
            f"survey needs {' and '.join(missing)}; or --project P --sample NAME to take them "
            "from a project's sample"
        )
    opts = _options(args)
    if args.project is not None:
        sink = _ProjectSink(args, opts)
        try:
            return _survey(args, opts, sink)
        finally:
            _common.message(
                f"flakebook: {count_text(sink.stored, 'image')} stored in {args.project}"
            )
            sink.close()
    return _survey(args, opts, None)


def _survey(args, opts: dict, sink) -> int:
    if args.watch:
        return _watch(args, opts, sink)
    files = _expand(args.paths)
    if not files:
        raise InputError(
            f"no image files in {', '.join(args.paths)}; accepted: {', '.join(IMAGE_SUFFIXES)}"
        )
    progress = _common.Progress()
    images: list[dict] = []
    failed = 0
    keep = sink is not None
    if len(files) == 1:
        cancel = _common.cancel_event()
        got = survey_one(files[0], opts, cancel=cancel, progress=progress, keep=keep)
        if keep:
            images.append(got[0])
            sink.store(files[0], got[1])
        else:
            images.append(got)
    else:
        results = _survey_many(files, opts, args.workers, progress, keep=keep)
        for path, res in zip(files, results):
            if "error" in res:
                failed += 1
                _common.message(f"flakebook: {_common.short(res['error'], 2)}")
                images.append(_failed_image(path, res["error"]))
            else:
                images.append(res["ok"])
                if keep:
                    sink.store(path, res["result"])
    fmt = _common.output_format(args)
    if fmt != "json":
        _common.message(
            f"flakebook: one row a terrace; {CONTRAST_NOTE} (after the dark offset); "
            f"p_target: the probability of {args.target_layers} layers"
        )
    _common.emit(args, {"images": images}, rows=_rows(images, opts["max_layers"], fmt == "table"))
    return _common.EXIT_INPUT if failed else _common.EXIT_OK


def _survey_many(
    files: list[str], opts: dict, workers: int | None, progress, keep: bool = False
) -> list[dict]:
    """Survey files in worker processes (spawned; Ctrl-C cancels what has not started)."""
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    n = workers or min(len(files), os.cpu_count() or 1, 8)
    if n <= 1:
        out = []
        for k, f in enumerate(files):
            try:
                out.append(_worker(f, opts, keep))
            except InputError as exc:
                out.append({"error": str(exc)})
            progress((k + 1) / len(files), Path(f).name)
        return out
    ctx = multiprocessing.get_context("spawn")
    pool = ProcessPoolExecutor(max_workers=n, mp_context=ctx, initializer=_worker_init)
    try:
        futures = [pool.submit(_worker, f, opts, keep) for f in files]
        done = 0
        for fut in futures:
            fut.result()
            done += 1
            progress(done / len(files), "")
        return [fut.result() for fut in futures]
    except KeyboardInterrupt:
        pool.shutdown(wait=False, cancel_futures=True)
        raise
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def _watch(args, opts: dict, sink=None) -> int:
    """Survey each new image file in the given folders as it is completed; Ctrl-C stops."""
    from flakebook.imaging.io import wait_until_readable

    folders = [Path(p) for p in args.paths]
    for d in folders:
        if not d.is_dir():
            raise InputError(f"--watch {d}: not a folder; accepted: the camera's output folder")
    seen = set(_expand([str(d) for d in folders]))
    _common.message(
        f"flakebook: watching {', '.join(map(str, folders))} ({len(seen)} files already there "
        "are left alone); Ctrl-C stops"
    )
    cancel = _common.cancel_event()
    try:
        while True:
            for f in _expand([str(d) for d in folders]):
                if f in seen:
                    continue
                seen.add(f)
                try:
                    wait_until_readable(
                        f, stable_s=args.stable_s, timeout_s=args.wait_timeout_s, cancel=cancel
                    )
                    if sink is not None:
                        image, result = survey_one(f, opts, cancel=cancel, keep=True)
                        sink.store(f, result)
                    else:
                        image = survey_one(f, opts, cancel=cancel)
                except InputError as exc:
                    _common.message(f"flakebook: {_common.short(str(exc), 2)}")
                    if not os.path.exists(f):
                        continue  # a temporary file the camera renamed or removed
                    image = _failed_image(f, str(exc))
                sys.stdout.write(_common.dumps(image) + "\n")
                sys.stdout.flush()
            if args.max_files is not None and len(seen) >= args.max_files:
                return _common.EXIT_OK
            time.sleep(args.poll_s)
    except (KeyboardInterrupt, Cancelled):
        _common.message("flakebook: watch stopped")
        return _common.EXIT_CANCELLED


def register(sub: argparse._SubParsersAction) -> None:
    """Add ``survey``."""
    p = sub.add_parser(
        "survey",
        help="find flakes, their terraces, layer numbers and holes in micrographs",
        description=__doc__.split("\n\n")[1].replace("\n", " "),
    )
    p.add_argument("paths", nargs="+", metavar="PATH", help="image files or folders")
    p.add_argument(
        "--material",
        default=None,
        metavar="M",
        help=MATERIAL_HELP + " (with --project --sample: the sample's by default)",
    )
    _add_substrate(p, required=False)
    p.add_argument("--oxide-err-nm", type=float, default=None, help=OXIDE_ERR_HELP)
    p.add_argument(
        "--calibration", default=None, metavar="CAL.json", help="a calibration from 'calibrate'"
    )
    g = p.add_mutually_exclusive_group(required=True)
    g.add_argument("--scale-um-per-px", type=float, default=None, help="image scale")
    g.add_argument("--objective", default=None, help="objective preset name (e.g. 50x)")
    _add_light(p)
    p.add_argument(
        "--min-area-um2",
        type=float,
        default=20.0,
        help="smallest flake reported, in square micrometres (default 20)",
    )
    p.add_argument(
        "--target-layers",
        default="1-3",
        help="layer numbers to rank the terraces by, a range or list (default 1-3)",
    )
    p.add_argument(
        "--max-layers",
        type=int,
        default=15,
        help="N_max: likelihoods run over 1..N_max plus one bin for more (default 15)",
    )
    p.add_argument(
        "--dark-offset",
        type=float,
        default=None,
        help="the camera's dark offset (its reading with no light), a fraction of full scale, "
        "subtracted once (default 0, or the sample's calibration with --project --sample)",
    )
    p.add_argument("--hole-radius-um", type=float, default=None, help="expected hole radius")
    p.add_argument("--no-holes", action="store_true", help="do not look for holes")
    add_hole_options(p)
    p.add_argument("--project", default=None, metavar="P", help="also store the results here")
    p.add_argument(
        "--sample", default=None, help="the project's sample the images are of (with --project)"
    )
    p.add_argument("--watch", action="store_true", help="survey new files as they appear")
    p.add_argument("--workers", type=int, default=None, help="worker processes for a folder")
    p.add_argument("--stable-s", type=float, default=1.0, help=argparse.SUPPRESS)
    p.add_argument("--wait-timeout-s", type=float, default=60.0, help=argparse.SUPPRESS)
    p.add_argument("--poll-s", type=float, default=0.5, help=argparse.SUPPRESS)
    p.add_argument("--max-files", type=int, default=None, help=argparse.SUPPRESS)
    _common.add_format_option(p, csv_ok=True)
    p.set_defaults(func=_cmd_survey)
