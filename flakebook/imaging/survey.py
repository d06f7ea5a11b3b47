"""Survey of a micrograph: flakes, terraces, their layer evidence, holes and coverage.

One call does the whole path for one image: read it (linear intensity), subtract the dark offset
and flatten the illumination, find the holes, find the bare substrate, the flakes and their
terraces, measure each terrace's contrast (C = 1 - I / I_substrate per channel, DESIGN.md), turn it
into a likelihood over layer number with the thin-film model of the sample and the microscope
(flakebook.optics.layers.layer_likelihood; a terrace over a hole uses the suspended model with the
bare supported substrate as reference), and rank the terraces by their probability of having a
layer number in ``target_layers``. The results are frozen dataclasses with ``to_dict()`` giving
INTERFACE.md's survey JSON.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from flakebook import evidence
from flakebook.errors import InputError, check_cancel
from flakebook.imaging import _grid
from flakebook.imaging.background import Background, fit_background
from flakebook.imaging.holes import (
    Coverage,
    Hole,
    Lattice,
    coverage_pairs,
    detect_holes,
    fit_lattice,
    lattice_refusal,
    predict_hidden_holes,
)
from flakebook.imaging.io import Micrograph, from_array, read_image, with_intensity
from flakebook.imaging.scale import Scale, given_scale
from flakebook.imaging.segment import Flake, Region, Segmentation, segment


@dataclass(frozen=True, eq=False)
class SurveyRegion:
    """A terrace with its contrast and layer evidence."""

    region: Region
    geometry: str  # "supported" or "suspended"
    hole_index: int | None  # index into SurveyResult.holes for a suspended terrace
    layers: int | None
    probability: float | None
    ambiguous_with: tuple[int, ...]
    likelihood: np.ndarray | None
    posterior: np.ndarray | None
    target_probability: float
    decider: str = ""
    warnings: tuple[str, ...] = ()

    @property
    def id(self) -> int:
        return self.region.id

    def to_dict(self) -> dict:
        r = self.region
        return {
            "id": r.id,
            "flake_id": r.flake_id,
            "centroid_px": list(r.centroid_px),
            "area_um2": r.area_um2,
            "bbox_px": list(r.bbox_px),
            "outline_px": r.outline_px.tolist(),
            "contrast": dict(r.contrast),
            "contrast_err": dict(r.contrast_err),
            "geometry": self.geometry,
            "hole_index": self.hole_index,
            "layers": self.layers,
            "probability": self.probability,
            "ambiguous_with": list(self.ambiguous_with),
            "likelihood": None if self.likelihood is None else self.likelihood.tolist(),
            "target_probability": self.target_probability,
            "decider": self.decider,
            "warnings": list(self.warnings),
        }


@dataclass(frozen=True, eq=False)
class FlakeHole:
    """Coverage of one hole by one flake."""

    flake_id: int
    hole_index: int
    coverage: Coverage

    def to_dict(self) -> dict:
        return {"flake_id": self.flake_id, "hole_index": self.hole_index, **self.coverage.to_dict()}


@dataclass(frozen=True, eq=False)
class SurveyResult:
    """Everything a survey of one image found.

    ``regions`` are ranked by ``target_probability`` (most promising first).
    """

    path: str | None
    shape: tuple[int, int]
    channels: tuple[str, ...]
    scale: Scale
    background: Background
    segmentation: Segmentation
    regions: tuple[SurveyRegion, ...]
    flakes: tuple[Flake, ...]
    holes: tuple[Hole, ...]
    lattice: Lattice | None
    coverage: tuple[FlakeHole, ...]
    target_layers: tuple[int, ...]
    warnings: tuple[str, ...] = ()
    provenance: dict = field(default_factory=dict)

    def primary_region_id(self, flake_id: int) -> int | None:
        """The flake's primary terrace (DESIGN.md): the largest one over a hole if any, else the
        largest."""
        own = [r for r in self.regions if r.region.flake_id == flake_id]
        if not own:
            return None
        over = [r for r in own if r.geometry == "suspended"]
        pick = max(over or own, key=lambda r: r.region.area_um2)
        return pick.id

    def to_dict(self) -> dict:
        return {
            "path": self.path,
            "width_px": self.shape[1],
            "height_px": self.shape[0],
            "um_per_px": self.scale.um_per_px,
            "scale": self.scale.to_dict(),
            "target_layers": list(self.target_layers),
            "substrate": dict(self.segmentation.substrate),
            "background": self.background.to_dict(),
            "regions": [r.to_dict() for r in self.regions],
            "flakes": [
                {**f.to_dict(), "primary_region_id": self.primary_region_id(f.id)}
                for f in self.flakes
            ],
            "holes": [h.to_dict() for h in self.holes],
            "lattice": None if self.lattice is None else self.lattice.to_dict(),
            "coverage": [c.to_dict() for c in self.coverage],
            "warnings": list(self.warnings),
            "provenance": self.provenance,
        }


def _as_image(source, transfer: str) -> Micrograph:
    if isinstance(source, Micrograph):
        return source
    if isinstance(source, str | os.PathLike):
        return read_image(source, transfer=transfer)
    if isinstance(source, np.ndarray):
        return from_array(source, transfer=transfer)
    raise InputError(
        f"cannot survey a {type(source).__name__}; accepted: a file path, a Micrograph or an array"
    )


def _mono(image: Micrograph) -> Micrograph:
    """A colour image as one channel (mean of the channels) for monochromatic illumination."""
    if image.channels == ("mono",):
        return image
    lin = image.intensity.mean(axis=2, keepdims=True, dtype=np.float32)
    return with_intensity(image, lin, channels=("mono",))


def _region_window(seg: Segmentation, reg: Region) -> tuple[np.ndarray, int, int]:
    """The region's pixels in its bounding box on the working grid, and the box's origin."""
    f = seg.factor
    x0, y0, x1, y1 = reg.bbox_px
    wx0, wy0 = int(x0 // f), int(y0 // f)
    wx1, wy1 = int(x1 // f) + 1, int(y1 // f) + 1
    return seg.labels[wy0:wy1, wx0:wx1] == reg.id, wx0, wy0


def _saturated_share(seg: Segmentation, reg: Region, saturated: np.ndarray) -> float:
    """Fraction of a region's pixels saturated in some channel (working grid)."""
    lab, wx0, wy0 = _region_window(seg, reg)
    n = int(np.count_nonzero(lab))
    if n == 0:
        return 0.0
    sat = saturated[wy0 : wy0 + lab.shape[0], wx0 : wx0 + lab.shape[1]]
    return float(np.count_nonzero(lab & sat)) / n


def _thick_or_saturated(
    reg: SurveyRegion, seg: Segmentation, saturated: np.ndarray, max_layers: int
) -> SurveyRegion:
    """A bulk piece is a flake too: say so where the region is most likely thicker than N_max,
    and where its pixels reach the camera's full scale (left out of its contrast, which then
    reads low)."""
    extra = []
    share = _saturated_share(seg, reg.region, saturated)
    if share > 0.02:
        extra.append(
            f"saturated in a channel on {100 * share:.0f}% of its pixels (left out of its "
            "contrast): expose shorter to measure it"
        )
    if reg.layers is not None and reg.layers > max_layers:
        extra.append(
            f"thick: most likely more than {max_layers} layers (bulk-like); contrast does not "
            "resolve its layer number"
        )
    if not extra:
        return reg
    return replace(reg, warnings=(*extra, *reg.warnings))


def _share_over_hole(seg: Segmentation, reg: Region, hole: Hole) -> float:
    """Fraction of a region's pixels that lie over a hole (working grid)."""
    f = seg.factor
    x0, y0, x1, y1 = reg.bbox_px
    cx, cy, r = hole.center_px[0], hole.center_px[1], hole.radius_px
    if cx + r < x0 or cx - r > x1 or cy + r < y0 or cy - r > y1:
        return 0.0
    lab, wx0, wy0 = _region_window(seg, reg)
    n = int(np.count_nonzero(lab))
    if n == 0:
        return 0.0
    yy, xx = _grid.nonzero(lab)
    d = np.hypot(_grid.to_full(xx + wx0, f) - cx, _grid.to_full(yy + wy0, f) - cy)
    return float(np.count_nonzero(d <= r)) / n


def survey_image(
    source,
    *,
    material,
    substrate,
    microscope,
    scale_um_per_px: float | Scale,
    min_area_um2: float = 20.0,
    target_layers: Sequence[int] = (1, 2, 3),
    max_layers: int = 15,
    dark_offset: float | dict[str, float] = 0.0,
    oxide_err_nm: float = 0.0,
    contrast_scale: float = 1.0,
    contrast_scale_err: float = 0.0,
    calibration=None,
    background: str = "polynomial",
    reference: Micrograph | None = None,
    find_holes: bool = True,
    hole_radius_um: float | None = None,
    hole=None,
    transfer: str = "auto",
    progress: Callable[[float, str], None] | None = None,
    cancel=None,
) -> SurveyResult:
    """Survey one micrograph.

    Args:
        source: an image file path, a :class:`Micrograph`, or an array (see ``from_array``).
        material: a material name (``"MoSe2"``) or a ``flakebook.optics.materials.Material``.
        substrate: a substrate spec (``"SiO2:285,Si"``) or a ``Substrate``.
        microscope: a ``flakebook.optics.microscope.Microscope`` (its channels must match the
            image's: ``r, g, b`` for colour, ``mono`` for a single channel; a colour image under
            monochromatic illumination is averaged to one channel).
        scale_um_per_px: micrometres per pixel, or a :class:`Scale`.
        min_area_um2: smallest flake and terrace reported (terraces over a hole are kept).
        target_layers: the layer numbers a candidate should have; regions are ranked by their
            posterior probability of lying in this set.
        max_layers: N_max of the likelihoods.
        dark_offset: the camera's dark offset (fraction of full scale), subtracted once.
        oxide_err_nm, contrast_scale, contrast_scale_err: passed to the layer likelihood.
        calibration: a ``flakebook.optics.calibration.LayerCalibration`` (its oxide, error,
            contrast scale and narrowed n,k model; the three above are then left at 0, 1, 0).
        background: ``"polynomial"``, ``"reference"`` (with ``reference``) or ``"none"``.
        find_holes: look for holes; ``hole_radius_um`` narrows the search to 0.6x-1.6x of it.
        hole: a ``flakebook.optics.substrate.Hole`` (bottom and depth) for suspended terraces.
        progress, cancel: INTERFACE.md's progress callback and cancel event.

    Returns:
        A :class:`SurveyResult`.
    """
    from flakebook.optics.layers import layer_likelihood, layer_likelihoods
    from flakebook.optics.materials import Material, get_material
    from flakebook.optics.substrate import Hole as OpticsHole
    from flakebook.optics.substrate import Substrate, parse_substrate

    def report(frac: float, text: str) -> None:
        if progress is not None:
            progress(frac, text)

    check_cancel(cancel)
    mat = material if isinstance(material, Material) else get_material(str(material))
    sub = substrate if isinstance(substrate, Substrate) else parse_substrate(str(substrate))
    scale = scale_um_per_px if isinstance(scale_um_per_px, Scale) else given_scale(scale_um_per_px)
    targets = tuple(sorted({int(n) for n in target_layers}))
    if not targets or min(targets) < 1 or max(targets) > max_layers:
        raise InputError(
            f"target layers {list(target_layers)}; accepted: layer numbers from 1 to {max_layers}"
        )
    report(0.0, "reading")
    image = _as_image(source, transfer)
    names = tuple(microscope.channel_names)
    if names == ("mono",) and image.channels != ("mono",):
        image = _mono(image)
    if image.channels != names:
        raise InputError(
            f"{image.path or 'image'} has channels {', '.join(image.channels)} but the microscope "
            f"gives {', '.join(names)}; accepted: a colour image with --channels srgb, a mono "
            "image with --channels mono or --wavelength-nm"
        )
    check_cancel(cancel)
    warnings = list(image.warnings)
    f = _grid.choose_factor(image.shape)
    work = image.working(f)
    sat_frac = float(np.mean(image.saturated_working(f)))
    if sat_frac > 0.01:
        warnings.append(
            f"about {100 * sat_frac:.1f}% of the image has saturated pixels, which are left out"
        )
    report(0.1, "background")
    bg = fit_background(
        image, dark_offset=dark_offset, method=background, reference=reference, work=work, factor=f
    )
    warnings.extend(bg.warnings)
    check_cancel(cancel)

    holes: tuple[Hole, ...] = ()
    if find_holes:
        report(0.25, "holes")
        holes = detect_holes(
            image,
            um_per_px=scale.um_per_px,
            um_per_px_err=scale.um_per_px_err,
            radius_um=hole_radius_um,
            work=work,
            factor=f,
            cancel=cancel,
        )
    report(0.4, "flakes")
    seg = segment(
        image,
        um_per_px=scale.um_per_px,
        min_area_um2=min_area_um2,
        background=bg,
        holes=[(h.center_px[0], h.center_px[1], h.radius_px) for h in holes],
        work=work,
        factor=f,
        cancel=cancel,
    )
    warnings.extend(w for w in seg.warnings if w not in warnings)
    bg = seg.background or bg
    check_cancel(cancel)

    lattice = None
    if len(holes) >= 2:
        centres = np.array([h.center_px for h in holes])
        lattice = fit_lattice(centres)
        if lattice is None:
            warnings.append(lattice_refusal(centres) or "no hole lattice fitted")
        else:
            hidden = predict_hidden_holes(
                holes, lattice, image.shape, [fl.outline_px for fl in seg.flakes]
            )
            holes = holes + hidden

    coverage = [
        FlakeHole(fid, k, cov)
        for fid, k, cov in coverage_pairs(
            {fl.id: fl.outline_px for fl in seg.flakes}, holes, scale.um_per_px
        )
    ]

    report(0.7, "layer evidence")
    ohole = hole if hole is not None else OpticsHole()
    sat_channels = ()
    # Each terrace's geometry, then the layer evidence of all terraces of one geometry at once
    # (layer_likelihoods is vectorised over measurements; the rows are independent).
    placed: list[tuple[Region, str, int | None]] = []
    for reg in seg.regions:
        check_cancel(cancel)
        geometry, hidx = "supported", None
        for k, h in enumerate(holes):
            if _share_over_hole(seg, reg, h) >= 0.5:
                geometry, hidx = "suspended", k
                break
        placed.append((reg, geometry, hidx))
    likes: list = [None] * len(placed)
    for geometry in ("supported", "suspended"):
        rows = [i for i, (_, g, _) in enumerate(placed) if g == geometry]
        if not rows:
            continue
        opts = dict(
            material=mat,
            substrate=sub,
            microscope=microscope,
            max_layers=max_layers,
            oxide_err_nm=oxide_err_nm,
            contrast_scale=contrast_scale,
            contrast_scale_err=contrast_scale_err,
            calibration=calibration,
            geometry=geometry,
            hole=ohole if geometry == "suspended" else None,
            saturated=sat_channels,
            cancel=cancel,
        )
        try:
            got = layer_likelihoods(
                [placed[i][0].contrast for i in rows],
                [placed[i][0].contrast_err for i in rows],
                **opts,
            )
        except InputError:
            # One bad row refuses the whole batch: take them one by one to name it.
            got = []
            for i in rows:
                try:
                    got.append(
                        layer_likelihood(placed[i][0].contrast, placed[i][0].contrast_err, **opts)
                    )
                except InputError as exc:
                    got.append(exc)
        for i, g in zip(rows, got):
            likes[i] = g
    out_regions: list[SurveyRegion] = []
    for (reg, geometry, hidx), like in zip(placed, likes):
        rwarn: list[str] = []
        if isinstance(like, InputError):
            rwarn.append(f"no layer evidence: {like}")
            out_regions.append(
                SurveyRegion(reg, geometry, hidx, None, None, (), None, None, 0.0, "", tuple(rwarn))
            )
            continue
        post = evidence.combine([like.likelihood])
        tp = float(sum(post.posterior[n - 1] for n in targets))
        rwarn.extend(like.warnings)
        out_regions.append(
            SurveyRegion(
                reg,
                geometry,
                hidx,
                post.layers,
                post.probability,
                post.ambiguous_with,
                like.likelihood,
                post.posterior,
                tp,
                like.decider,
                tuple(rwarn),
            )
        )
    sat_work = image.saturated_working(f)
    out_regions = [_thick_or_saturated(r, seg, sat_work, max_layers) for r in out_regions]
    out_regions.sort(key=lambda r: (-r.target_probability, -r.region.area_um2))
    misfit = sum(any("explains" in w for w in r.warnings) for r in out_regions)
    if out_regions and misfit >= max(2, 0.3 * len(out_regions)):
        warnings.append(
            f"{misfit} of {len(out_regions)} regions fit no layer number within their errors: "
            "the oxide thickness, material or dark offset may be off; give --oxide-err-nm or "
            "calibrate the sample before trusting these layer numbers"
        )
    exact_oxide = sum(any("taken as exactly" in w for w in r.warnings) for r in out_regions)
    if exact_oxide and not any("fit no layer number" in w for w in warnings):
        warnings.append(
            f"the oxide thickness is taken as exact, and {exact_oxide} of {len(out_regions)} "
            "regions' layer numbers hang on it more than their errors allow: give --oxide-err-nm "
            "or calibrate the sample before trusting these layer numbers"
        )
    report(1.0, "done")
    from flakebook import __version__

    return SurveyResult(
        path=image.path,
        shape=image.shape,
        channels=image.channels,
        scale=scale,
        background=bg,
        segmentation=seg,
        regions=tuple(out_regions),
        flakes=seg.flakes,
        holes=holes,
        lattice=lattice,
        coverage=tuple(coverage),
        target_layers=targets,
        warnings=tuple(warnings),
        provenance={
            "method": "flakebook survey: polynomial or reference flat field, dominant-colour "
            "substrate, mean-shift terraces, robust mean contrast with correlated-noise error, "
            "thin-film layer likelihood",
            "version": __version__,
            "material": mat.name,
            "substrate": sub.spec,
            "microscope": {
                "na_illumination": microscope.na_illumination,
                "illumination": microscope.illumination.label,
                "channels": list(names),
            },
            "min_area_um2": min_area_um2,
            "dark_offset": list(bg.dark_offset),
            "background": bg.describe(),
            "working_factor": f,
        },
    )
