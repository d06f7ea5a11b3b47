"""Raman maps recorded in a project: every spectrum of a map fitted
(:func:`flakebook.spectra.maps.analyse_map`), the fitted maps stored as a
:class:`~flakebook.store.RamanMap` on the sample and, optionally, on the micrograph the map was
taken over (one path for the command line, the window and the demo; no Qt).

Placement. A map's own coordinates are those of its file (``x_um``, ``y_um``, the stage
positions of its spectra). Laid on an image, the map origin (x_um = 0, y_um = 0) sits at
``(offset_x_um, offset_y_um)`` in um from the image's pixel origin (the centre of its top-left
pixel), along the image's axes (x to the right, y down): the map point (x, y) is at pixel
``((offset_x_um + x) / s, (offset_y_um + y) / s)`` for pixel size ``s``. Given no offset,
the map's coordinates are taken as chip coordinates, the frame of the images' stage positions
(an image's ``stage_x_um``/``stage_y_um`` is the chip coordinate of its centre,
:func:`flakebook.imaging.linking.to_chip_um`); then the offset is
``((cols - 1) / 2 * s - stage_x_um, (rows - 1) / 2 * s - stage_y_um)``.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from flakebook.errors import InputError
from flakebook.store import Image, Project, RamanMap, Sample, register_recomputer
from flakebook.store.files import stored_path

#: A pixel shows the flake when one of its first-order lines stands this far above the noise
#: (height / noise s.d.); below it the pixel is bare substrate and its map is left empty. Five
#: standard deviations: common practice for a detection among many (a map's thousand spectra
#: give a few noise lines at the fitter's own threshold of 3), no source.
FLAKE_LINE_SNR = 5.0
#: ... and is no broader than this (cm^-1): the first-order lines of these crystals at room
#: temperature are a few cm^-1 wide; a broad "line" is the background's curvature (common
#: practice, no source).
FLAKE_LINE_MAX_FWHM_CM1 = 15.0

MAP_METHOD = "Raman map fit (batched Levenberg-Marquardt, Lorentzian lines; rule table)"


# ---- what a stored quantity is -----------------------------------------------------------------


def quantity_unit(name: str) -> str:
    """The unit of a map quantity by its name: cm^-1, counts or '' (N, probability, S/N)."""
    if name.endswith("_cm1"):
        return "cm⁻¹"
    if name.endswith("_height"):
        return "counts"
    if name.endswith("_snr"):
        return ""
    return ""


def quantity_label(name: str) -> str:
    """A reader's name of a map quantity: 'A1g position', 'A1g - E2g separation', ..."""
    if name == "layers":
        return "most likely layer number N"
    if name == "probability":
        return "probability of the most likely N"
    if name.endswith("_separation_err_cm1"):
        b, _, a = name[: -len("_separation_err_cm1")].partition("-")
        return f"{b} − {a} separation, its error (1σ)"
    if name.endswith("_separation_cm1"):
        b, _, a = name[: -len("_separation_cm1")].partition("-")
        return f"{b} − {a} separation"
    for suffix, what in (
        ("_center_err_cm1", "position, its error (1σ)"),
        ("_center_cm1", "position"),
        ("_fwhm_cm1", "width (FWHM)"),
        ("_height", "height"),
        ("_snr", "signal-to-noise"),
    ):
        if name.endswith(suffix):
            return f"{name[: -len(suffix)]} {what}"
    return name


def error_of(name: str) -> str | None:
    """The name of the quantity that holds ``name``'s standard error, if there is one."""
    if name.endswith("_center_cm1"):
        return name[: -len("_center_cm1")] + "_center_err_cm1"
    if name.endswith("_separation_cm1"):
        return name[: -len("_separation_cm1")] + "_separation_err_cm1"
    return None


def shown_quantities(rec: RamanMap) -> list[str]:
    """The quantities a reader chooses among (errors are shown beside their value)."""
    return [q for q in rec.quantities if "_err_" not in q]


# ---- placement ------------------------------------------------------------------------------


def find_image(project: Project, key: str | int) -> Image:
    """An image by its id or its file name (with or without the suffix)."""
    text = str(key).strip()
    images = project.records(Image)
    if text.isdigit():
        for img in images:
            if img.id == int(text):
                return img
    hits = [i for i in images if text in (Path(i.path).name, Path(i.path).stem)]
    if len(hits) == 1:
        return hits[0]
    if len(hits) > 1:
        raise InputError(
            f"{len(hits)} images are named {text!r}; accepted: the image's id "
            f"({', '.join(str(i.id) for i in hits)})"
        )
    some = ", ".join(f"{i.id} ({Path(i.path).name})" for i in images[:6])
    raise InputError(
        f"{project.path.name} has no image {text!r}; accepted: an image id or file name"
        + (f", e.g. {some}" if some else " (the project holds no images)")
    )


def offset_from_stage(image: Image) -> tuple[float, float]:
    """The offset that places chip coordinates on ``image`` (module docstring)."""
    missing = [
        n
        for n in ("stage_x_um", "stage_y_um", "pixel_size_um", "width_px", "height_px")
        if getattr(image, n) is None
    ]
    if missing:
        raise InputError(
            f"image {image.id} ({Path(image.path).name}) has no {', '.join(missing)}, so the map "
            "cannot be placed by stage position; accepted: --offset-um X,Y (the map origin in um "
            "from the image's top-left pixel centre, x right, y down)"
        )
    s = image.pixel_size_um
    return (
        (image.width_px - 1) / 2 * s - image.stage_x_um,
        (image.height_px - 1) / 2 * s - image.stage_y_um,
    )


def parse_offset(text: str) -> tuple[float, float]:
    """``"X,Y"`` in um -> (x, y)."""
    parts = [p.strip() for p in str(text).split(",")]
    try:
        x, y = (float(p) for p in parts)
    except ValueError:
        raise InputError(
            f"--offset-um {text!r} is not two numbers; accepted: X,Y in um (e.g. 12.5,-3)"
        ) from None
    if not (math.isfinite(x) and math.isfinite(y)):
        raise InputError(f"--offset-um {text!r}: accepted: two finite numbers in um")
    return x, y


def pixel_extent(rec: RamanMap, image: Image) -> tuple[float, float, float, float]:
    """The map's frame on ``image`` in pixels (x0, x1, y0, y1): the outer edges of its first
    and last pixels (each map pixel is one grid step wide, centred on its point)."""
    s = image.pixel_size_um
    if s is None:
        raise InputError(
            f"image {image.id} has no pixel size, so a map cannot be laid on it; accepted: set "
            "its pixel size (a scale line) first"
        )
    x0, x1, y0, y1 = grid_edges(rec.x_um, rec.y_um)
    return (
        (rec.offset_x_um + x0) / s,
        (rec.offset_x_um + x1) / s,
        (rec.offset_y_um + y0) / s,
        (rec.offset_y_um + y1) / s,
    )


def grid_edges(x_um, y_um) -> tuple[float, float, float, float]:
    """Outer edges (x0, x1, y0, y1) in um of a grid of pixel centres ``x_um`` by ``y_um``."""

    def edges(v):
        v = np.asarray(v, float)
        step = float(np.median(np.diff(v))) if v.size > 1 else 1.0
        return float(v[0] - step / 2), float(v[-1] + step / 2)

    return (*edges(x_um), *edges(y_um))


def placement_warnings(rec: RamanMap, image: Image) -> list[str]:
    """A warning when the map lies outside the image, or partly outside."""
    if image.width_px is None or image.height_px is None or image.pixel_size_um is None:
        return []
    x0, x1, y0, y1 = pixel_extent(rec, image)
    w, h = image.width_px, image.height_px
    ix = max(0.0, min(x1, w - 0.5) - max(x0, -0.5))
    iy = max(0.0, min(y1, h - 0.5) - max(y0, -0.5))
    inside = ix * iy / max((x1 - x0) * (y1 - y0), 1e-12)
    name = Path(image.path).name
    if inside <= 0.0:
        return [
            f"the map lies outside image {image.id} ({name}): its frame is at x {x0:.0f} to "
            f"{x1:.0f}, y {y0:.0f} to {y1:.0f} px on a {w} x {h} px image; check the offset"
        ]
    if inside < 0.999:
        return [f"{100 * (1 - inside):.0f}% of the map lies outside image {image.id} ({name})"]
    return []


# ---- fitting and storing ------------------------------------------------------------------------


@dataclass
class StoredMap:
    """What :func:`store_map` made: the record, the analysis and the warnings."""

    record: RamanMap
    result: object  # flakebook.spectra.maps.MapLayers
    warnings: list[str] = field(default_factory=list)


def analyse(
    spectrum_map,
    material: str,
    *,
    laser_nm: float | None = None,
    table=None,
    max_layers: int = 15,
    progress: Callable[[float, str], None] | None = None,
    cancel=None,
):
    """The map's fits (refusing a PL map with a clear message)."""
    from flakebook.spectra.maps import analyse_map

    if spectrum_map.kind != "raman":
        raise InputError(
            f"{spectrum_map.metadata.get('source', 'the map')}: a {spectrum_map.kind.upper()} map; "
            "layer maps are read from Raman maps; accepted: a map file with kind=raman"
        )
    laser = laser_nm or float(spectrum_map.metadata.get("laser_nm", 532.0))
    return analyse_map(
        spectrum_map,
        material,
        laser_nm=laser,
        table=table,
        max_layers=max_layers,
        progress=progress,
        cancel=cancel,
    ), laser


def store_map(
    project: Project,
    sample: Sample | int,
    spectrum_map,
    *,
    image: Image | int | None = None,
    offset_um: tuple[float, float] | None = None,
    source_path: str | Path | None = None,
    laser_nm: float | None = None,
    name: str = "",
    notes: str = "",
    progress: Callable[[float, str], None] | None = None,
    cancel=None,
    analysed=None,
) -> StoredMap:
    """Fit ``spectrum_map`` with the sample's rule table and store its maps (one transaction).

    ``image`` places it on a micrograph of the sample, at ``offset_um`` (module docstring; by
    the stage positions when None). A map lying outside the image is stored with a warning.
    ``analysed``: the (result, laser_nm) of :func:`analyse` with the sample's rule table, made
    beforehand (e.g. in a worker thread), so the fits are not made twice."""
    from flakebook.pipeline_spectra import rule_table_for
    from flakebook.store._util import sha256_file

    sample = project.get(Sample, sample) if isinstance(sample, int) else sample
    img = project.get(Image, image) if isinstance(image, int) else image
    if img is not None and img.sample_id != sample.id:
        raise InputError(
            f"image {img.id} is of another sample than {sample.name}; accepted: an image of the "
            "sample the map was taken on"
        )
    if img is not None and img.pixel_size_um is None:
        raise InputError(
            f"image {img.id} ({Path(img.path).name}) has no pixel size, so the map cannot be laid "
            "on it; accepted: an image with its pixel size (set it with a scale line first)"
        )
    if img is not None and offset_um is None:
        offset_um = offset_from_stage(img)
    laser = laser_nm or float(spectrum_map.metadata.get("laser_nm", 532.0))
    table, calibration = rule_table_for(project, sample, laser)
    if analysed is not None:
        result, laser = analysed
    else:
        result, laser = analyse(
            spectrum_map,
            sample.material,
            laser_nm=laser,
            table=table,
            max_layers=project.max_layers,
            progress=progress,
            cancel=cancel,
        )
    fields = _fields(result, laser, calibration)
    if source_path is not None:
        path = Path(source_path)
        fields["source_path"] = stored_path(project.folder, path)
        if path.is_file():
            fields["source_sha256"] = sha256_file(path)[0]
        name = name or path.stem
    placed = {}
    if img is not None:
        placed = {"image_id": img.id, "offset_x_um": offset_um[0], "offset_y_um": offset_um[1]}
    with project.transaction():
        rec = project.add_raman_map(
            sample,
            name=name,
            material=sample.material,
            notes=notes,
            inputs=[calibration] if calibration is not None else [],
            **placed,
            **fields,
        )
    warnings = list(result.warnings)
    if img is not None:
        warnings += placement_warnings(rec, img)
    return StoredMap(rec, result, warnings)


def _fields(result, laser_nm: float, calibration) -> dict:
    maps = with_snr(result)
    names = list(maps)
    settings = {
        "laser_nm": laser_nm,
        "shift_cm1": 0.0,
        "calibration_err_cm1": 0.5,
        "max_layers": result.max_layers,
        "peak_model": "lorentzian",
        "baseline": result.fit.baseline,
        "modes": list(result.fit.modes),
        "rule_table": "calibrated on the sample" if calibration is not None else "published",
    }
    return {
        "laser_nm": laser_nm,
        "max_layers": result.max_layers,
        "x_um": result.x_um,
        "y_um": result.y_um,
        "quantities": tuple(names),
        "maps": np.stack([np.asarray(maps[n], float) for n in names]),
        "settings": settings,
        "warnings": tuple(result.warnings),
        "method": MAP_METHOD,
        "parameters": {"laser_nm": laser_nm},
        "source": "rule table of the material (resources/, each value with its source)",
    }


def _recompute_map(project: Project, rec: RamanMap) -> dict:
    """Refit a stale map from its file (the one it was read from, unchanged)."""
    from flakebook.pipeline_spectra import rule_table_for
    from flakebook.spectra.io import read_map
    from flakebook.store._util import sha256_file

    path = Path(rec.source_path)
    if not path.is_absolute():
        path = project.folder / path
    if not path.is_file():
        raise InputError(f"the map file {rec.source_path} is not found; relink or re-import it")
    if rec.source_sha256 and sha256_file(path)[0] != rec.source_sha256:
        raise InputError(f"the map file {rec.source_path} has changed since it was fitted")
    sample = project.get(Sample, rec.sample_id)
    table, calibration = rule_table_for(project, sample, rec.laser_nm)
    result, laser = analyse(
        read_map(path), sample.material, laser_nm=rec.laser_nm, table=table,
        max_layers=rec.max_layers,
    )  # fmt: skip
    fields = _fields(result, laser, calibration)
    fields["inputs"] = [calibration] if calibration is not None else []
    return fields


register_recomputer(MAP_METHOD, _recompute_map)


# ---- what a reader sees -----------------------------------------------------------------------


def find_map(project: Project, key: str | int) -> RamanMap:
    """A stored Raman map by its id or its name."""
    text = str(key).strip()
    maps = project.raman_maps_of()
    for m in maps:
        if text.isdigit() and m.id == int(text):
            return m
    hits = [m for m in maps if m.name == text]
    if len(hits) == 1:
        return hits[0]
    listed = ", ".join(f"{m.id} ({m.name})" for m in maps[:8]) or "none stored"
    raise InputError(f"{project.path.name} has no Raman map {text!r}; accepted: {listed}")


def empty_mask(rec: RamanMap) -> np.ndarray:
    """Map pixels with no flake line (bare substrate, or nothing fitted), shown empty and never
    as a layer number (:func:`empty_pixels` of the stored quantities)."""
    return empty_pixels({q: rec.maps[k] for k, q in enumerate(rec.quantities)})


def empty_pixels(maps) -> np.ndarray:
    """True where no first-order line of the material stands :data:`FLAKE_LINE_SNR` above the
    noise with a width of at most :data:`FLAKE_LINE_MAX_FWHM_CM1`, or where no layer number
    could be read; ``maps`` names the quantities (``<mode>_snr``, ``<mode>_fwhm_cm1``,
    ``layers``; without ``_snr`` maps any line found counts)."""
    layers = np.asarray(maps["layers"])
    found = np.zeros(layers.shape, bool)
    snrs = [q for q in maps if q.endswith("_snr")]
    for q in snrs:
        line = np.nan_to_num(maps[q], nan=0.0) >= FLAKE_LINE_SNR
        width = q[: -len("_snr")] + "_fwhm_cm1"
        if width in maps:
            line &= np.nan_to_num(maps[width], nan=np.inf) <= FLAKE_LINE_MAX_FWHM_CM1
        found |= line
    if not snrs:
        for q in maps:
            if q.endswith("_center_cm1"):
                found |= np.isfinite(maps[q])
    return ~found | ~np.isfinite(layers)


def with_snr(result) -> dict:
    """The maps of an analysis (flakebook.spectra.maps.MapLayers) with each mode's
    signal-to-noise (``<mode>_snr``, NaN where the line was not found)."""
    maps = dict(result.maps)
    for i, mode in enumerate(result.fit.modes):
        maps[f"{mode}_snr"] = np.where(result.fit.found[..., i], result.fit.snr[..., i], np.nan)
    return maps


def layer_counts(layers: np.ndarray, empty: np.ndarray) -> dict[str, int]:
    """How many pixels with flake lines read each layer number (``{"1": count, ...}``)."""
    ok = np.isfinite(layers) & ~empty
    return {str(int(n)): int(np.sum(ok & (layers == n))) for n in np.unique(layers[ok])}


def map_summary(rec: RamanMap) -> dict:
    """The JSON of a stored map (``flakebook spectrum --map --project``)."""
    empty = empty_mask(rec)
    counts = layer_counts(rec.quantity("layers"), empty)
    return {
        "map_id": rec.id,
        "name": rec.name,
        "sample_id": rec.sample_id,
        "image_id": rec.image_id,
        "offset_um": None if rec.offset_x_um is None else [rec.offset_x_um, rec.offset_y_um],
        "shape": list(rec.shape),
        "maps": list(rec.quantities),
        "layer_counts": counts,
        "empty_pixels": int(np.sum(empty)),
        "flakebook_version": rec.flakebook_version,
    }
