"""Core computations recorded in a project: the one place where a survey becomes records.

The desktop program, the command line and the demo all store a micrograph's survey through
:func:`store_survey` and recompute stale layer evidence through the recomputers registered here,
so a flake's evidence means the same whichever of them made it. Spectra (fits, Raman/PL/Si-line/AFM
evidence, the combined assignment of all of a flake's evidence) are recorded by
:mod:`flakebook.pipeline_spectra`, whose functions are re-exported here. No Qt here.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

from flakebook.errors import InputError
from flakebook.store import (
    Assignment,
    Evidence,
    Flake,
    Hole,
    Image,
    Project,
    Sample,
    register_recomputer,
)
from flakebook.substrate import format_substrate
from flakebook.wording import value_with_error

CONTRAST_METHOD = "optical contrast (thin-film model)"
COMBINED_METHOD = "combined evidence"
OPTICS_SOURCE = (
    "coherent transfer-matrix thin-film model with published optical constants (n,k) from the "
    "refractiveindex.info database; 'flakebook materials' names each material's source"
)


def optics_source(material) -> str:
    """The published source of a contrast likelihood, for its evidence record: the thin-film
    model and the n,k data of ``material`` (a ``flakebook.optics.materials.Material``) in the
    words of its references, e.g. "Hsu et al. 2019 layer-resolved n,k"."""
    note = material.note or ""
    data = note if " et al" in note else (material.reference or material.data_set_text)
    return f"coherent transfer-matrix thin-film model; n,k of {material.name}: {data}"


def optics_inputs(sample: Sample, image: Image):
    """(material, substrate, microscope) of the optics model for an image of a sample."""
    from flakebook.optics.materials import get_material
    from flakebook.optics.microscope import Illumination, Microscope
    from flakebook.optics.substrate import parse_substrate

    material = get_material(sample.material)
    substrate = parse_substrate(format_substrate(sample.substrate))
    illumination = (
        Illumination.parse(image.illumination) if image.illumination else Illumination.halogen()
    )
    microscope = Microscope(
        na_illumination=float(image.na_illumination or 0.0), illumination=illumination
    )
    return material, substrate, microscope


def optics_hole(sample: Sample):
    """The optics model's hole for a sample's hole pattern (None without one)."""
    if sample.hole_pattern is None:
        return None
    from flakebook.optics.substrate import Hole as OpticsHole

    hp = sample.hole_pattern
    return OpticsHole(bottom=hp.bottom, depth_nm=hp.depth_nm)


def calibration_values(project: Project, sample: Sample) -> dict | None:
    """The sample's latest optics calibration as plain values (None without one); a layer
    calibration (``flakebook calibrate PROJECT``) also gives its whole fit as
    ``"layer_calibration"`` (a ``LayerCalibration``, whose narrowed n,k model the likelihood
    uses)."""
    cal = calibration_record(project, sample)
    if cal is None:
        return None
    scale = list(cal.contrast_scale.values())
    scale_err = list(cal.contrast_scale_err.values())
    layer_cal = None
    if cal.model:
        from flakebook.optics.calibration import LayerCalibration

        layer_cal = LayerCalibration.from_dict(cal.model, source=f"calibration {cal.id}")
    return {
        "id": cal.id,
        "date": (cal.created_at or "")[:10] or f"#{cal.id}",
        "oxide_nm": float(cal.oxide_nm),
        "oxide_err_nm": float(cal.oxide_err_nm or 0.0),
        "contrast_scale": float(sum(scale) / len(scale)) if scale else 1.0,
        "contrast_scale_err": float(sum(scale_err) / len(scale_err)) if scale_err else 0.0,
        "dark_offset": dict(cal.dark_offset),
        "layer_calibration": layer_cal,
    }


def likelihood_options(cal: dict | None, substrate) -> tuple[dict, str]:
    """layer_likelihood keywords for a calibration (from :func:`calibration_values`), and a
    note saying which calibration was used."""
    if cal is None:
        return {"substrate": substrate}, ""
    note = (
        f"calibrated oxide {value_with_error(cal['oxide_nm'], cal['oxide_err_nm'], 'nm')} "
        f"(calibration of {cal.get('date') or cal['id']})"
    )
    if cal.get("layer_calibration") is not None:
        return {"substrate": substrate, "calibration": cal["layer_calibration"]}, note
    opts = {
        "substrate": substrate.with_oxide(cal["oxide_nm"]),
        "oxide_err_nm": cal["oxide_err_nm"],
        "contrast_scale": cal["contrast_scale"],
        "contrast_scale_err": cal["contrast_scale_err"],
    }
    return opts, note


def shared_oxide_grid(project: Project, sample: Sample):
    """The grid of the oxide thickness that the sample's oxide-dependent evidence (optical
    contrast, the Si-line attenuation) is computed on, so that flakebook.evidence.combine
    marginalises the oxide once for all of it instead of once per piece: 41 nodes over +-3 sigma
    of the calibrated oxide. None where the oxide is taken as exact (no calibration, or one with
    no oxide error): then the contrast does not marginalise it and nothing is counted twice."""
    from flakebook.evidence import parameter_grid

    cal = calibration_values(project, sample)
    if cal is None or not cal["oxide_err_nm"] > 0:
        return None
    return parameter_grid("oxide_nm", cal["oxide_nm"], cal["oxide_err_nm"], max_nodes=41)


def oxide_grid_name(sample: Sample) -> str:
    """The stored name of a sample's shared oxide grid (evidence of two samples never share)."""
    return f"oxide_nm@sample{sample.id}"


def grid_parameters(grid, name: str) -> dict:
    """A GridLikelihood as stored in an evidence record's ``parameters["grid"]`` (read back by
    flakebook.pipeline_spectra.evidence_item); -inf kept as -1e30 for JSON."""
    import numpy as np

    def finite(a):
        a = np.asarray(a, dtype=float)
        return np.where(np.isfinite(a), a, -1e30).tolist()

    return {
        "parameter": name,
        "nodes": finite(grid.grid.nodes),
        "weights": finite(grid.grid.weights),
        "log_likelihood": [finite(row) for row in grid.log_likelihood],
    }


def survey_options(project: Project, sample: Sample, image: Image) -> dict:
    """Keyword arguments for ``flakebook.imaging.survey.survey_image`` of an image of a sample:
    material, (calibrated) substrate, microscope, hole, dark offset and the calibrated
    uncertainties."""
    material, substrate, microscope = optics_inputs(sample, image)
    cal = calibration_values(project, sample)
    opts, _ = likelihood_options(cal, substrate)
    out = {
        "material": material,
        "microscope": microscope,
        "hole": optics_hole(sample),
        **opts,
    }
    if cal is not None and cal["dark_offset"]:
        out["dark_offset"] = dict(cal["dark_offset"])
    if image.pixel_size_um:
        out["scale_um_per_px"] = image_scale(image)
    if sample.hole_pattern is not None:
        out["hole_radius_um"] = sample.hole_pattern.diameter_um / 2.0
    else:
        out["find_holes"] = False
    return out


def image_scale(image: Image):
    """The image's scale (``flakebook.imaging.scale.Scale``) with its uncertainty: the one
    recorded with the image (``camera["pixel_size_err_um"]``), else the relative uncertainty of
    the objective preset of that name when the pixel size is the preset's, else none."""
    from flakebook.imaging.scale import given_scale, load_objectives

    um = float(image.pixel_size_um)
    err = (image.camera or {}).get("pixel_size_err_um")
    if err is None and image.objective:
        preset = load_objectives().get(image.objective)
        if preset is not None and math.isclose(preset.um_per_px, um, rel_tol=1e-6):
            err = preset.um_per_px_err
    return given_scale(um, float(err or 0.0))


def calibration_record(project: Project, sample: Sample):
    """The calibration :func:`calibration_values` uses (None without one)."""
    cals = [c for c in project.calibrations_of(sample) if c.oxide_nm is not None]
    return cals[-1] if cals else None


def link_by_stage(project: Project, image: Image, *, min_score: float = 0.5):
    """A ``flake_for`` for :func:`store_survey`: the known flake of the same sample whose outline
    in another image best overlaps the new one on the chip (through both images' stage positions
    and pixel sizes), if the match scores at least ``min_score``; None otherwise, and always
    None for an image without a stage position or pixel size."""
    from flakebook.imaging.linking import suggest_links, to_chip_um

    def chip(img: Image, outline_px):
        return to_chip_um(
            outline_px,
            um_per_px=img.pixel_size_um,
            stage_um=(img.stage_x_um, img.stage_y_um),
            shape=(img.height_px, img.width_px),
        )

    def placed(img: Image) -> bool:
        return (
            img.pixel_size_um is not None
            and img.stage_x_um is not None
            and img.stage_y_um is not None
            and img.width_px is not None
            and img.height_px is not None
        )

    if not placed(image):
        return lambda survey_flake: None
    others = {o.id: o for o in project.images_of(image.sample_id) if o.id != image.id and placed(o)}
    candidates = [
        (flake.id, chip(others[app.image_id], app.outline_px))
        for flake in project.flakes_of(image.sample_id)
        for app in project.appearances_of(flake)
        if app.image_id in others
    ]

    def flake_for(survey_flake):
        got = suggest_links(chip(image, survey_flake.outline_px), candidates, min_score=min_score)
        return project.get(Flake, got[0].key) if got else None

    return flake_for


def _sample_optics_source(sample: Sample) -> str:
    from flakebook.errors import InputError
    from flakebook.optics.materials import get_material

    try:
        return optics_source(get_material(sample.material))
    except InputError:  # a material file no longer at hand: the general words
        return OPTICS_SOURCE


def contrast_reason(contrast: dict, contrast_err: dict, geometry: str, stack: str) -> str:
    """One line saying what a contrast likelihood was computed from."""
    parts = [
        f"{ch} {value_with_error(c, contrast_err.get(ch), signed=True)}"
        for ch, c in contrast.items()
    ]
    where = "over a hole (suspended model)" if geometry == "suspended" else "on the substrate"
    return f"contrast {', '.join(parts)} {where}, against the thin-film model of {stack}"


@dataclass
class StoredSurvey:
    """Records a survey added to a project (their ids), for undo and for reporting."""

    flakes: list[int] = field(default_factory=list)
    new_flakes: list[int] = field(default_factory=list)
    appearances: list[int] = field(default_factory=list)
    holes: list[int] = field(default_factory=list)
    assignments: list[int] = field(default_factory=list)


def store_survey(
    project: Project,
    image: Image,
    result,
    *,
    flake_for: Callable[[object], Flake | None] | None = None,
    new_label: Callable[[], str] | None = None,
    assign: bool = True,
    parameters: dict | None = None,
) -> StoredSurvey:
    """Record a survey of ``image`` (a ``flakebook.imaging.survey.SurveyResult``), in one
    transaction.

    Each surveyed flake becomes an appearance of the flake ``flake_for(survey_flake)`` returns
    (an existing flake seen again), or of a new flake labelled ``new_label()``; flakes for which
    ``flake_for`` returns None and there is no ``new_label`` are skipped. Regions become terraces
    (a suspended region and the supported region around its hole are one terrace: same
    thickness), each region's likelihood a piece of contrast evidence on its terrace, and with
    ``assign`` each terrace gets an assignment combining its evidence (the flake's layer number
    is its primary terrace's: over a hole if any, else the largest). Holes and flake-hole
    coverage (with the terrace over each hole) are recorded.
    """
    from flakebook.imaging.terraces import terrace_groups
    from flakebook.pipeline_calibration import describe_change, model_used

    sample = project.get(Sample, image.sample_id)
    stack = format_substrate(sample.substrate)
    source = _sample_optics_source(sample)
    extra = dict(parameters or {})
    model = model_used(project, sample)
    calibration = calibration_record(project, sample)
    base_inputs = [sample, image] + ([calibration] if calibration is not None else [])
    out = StoredSurvey()
    with project.transaction():
        hole_ids: dict[int, int] = {}
        existing = project.holes_of(image)
        for i, h in enumerate(result.holes):
            rec, new = record_hole(project, image, h, existing)
            hole_ids[i] = rec.id
            if new:
                out.holes.append(rec.id)
        by_id = {r.region.id: r for r in result.regions}
        groups = terrace_groups(result)
        for sf in result.flakes:
            flake = flake_for(sf) if flake_for is not None else None
            before = None
            if flake is not None:
                before = project.latest_assignment(flake)
            if flake is None:
                if new_label is None:
                    continue
                flake = project.add_flake(sample, new_label())
                out.new_flakes.append(flake.id)
            out.flakes.append(flake.id)
            app = project.add_appearance(flake, image, sf.outline_px)
            out.appearances.append(app.id)
            terraces = []  # (terrace, evidence records)
            terrace_over: dict[int, int] = {}  # hole index -> terrace id
            for group in groups:
                regs = [by_id[i] for i in group if by_id[i].region.flake_id == sf.id]
                if not regs:
                    continue
                suspended = any(r.geometry == "suspended" for r in regs)
                head = regs[0]
                terrace = project.add_terrace(
                    app,
                    head.region.outline_px,
                    label=f"T{head.region.id}" + (" (over a hole)" if suspended else ""),
                )
                evidence = []
                for r in regs:
                    if r.geometry == "suspended" and r.hole_index is not None:
                        terrace_over[r.hole_index] = terrace.id
                    if r.likelihood is None:
                        continue
                    reg = r.region
                    evidence.append(
                        project.add_evidence(
                            flake,
                            r.likelihood,
                            method=CONTRAST_METHOD,
                            terrace=terrace,
                            inputs=[*base_inputs, app],
                            parameters={
                                "contrast": dict(reg.contrast),
                                "contrast_err": dict(reg.contrast_err),
                                "geometry": r.geometry,
                                "area_um2": reg.area_um2,
                                "image_id": image.id,
                                "decider": r.decider,
                                "target_probability": r.target_probability,
                                "substrate_level": {
                                    k: float(v) for k, v in result.segmentation.substrate.items()
                                },
                                "model": model,
                                # a thick or saturated piece's flags, kept with its evidence
                                **({"warnings": list(r.warnings)} if r.warnings else {}),
                                **extra,
                            },
                            source=source,
                            reason=contrast_reason(
                                reg.contrast, reg.contrast_err, r.geometry, stack
                            ),
                        )
                    )
                terraces.append((terrace, evidence))
            for link in result.coverage:
                if link.flake_id != sf.id or link.coverage.covered_fraction <= 0:
                    continue
                c = link.coverage
                project.link_flake_hole(
                    flake,
                    hole_ids[link.hole_index],
                    covered_fraction=c.covered_fraction,
                    fully_covered=c.fully_covered,
                    margin_um=c.margin_um,
                    terrace_id=terrace_over.get(link.hole_index),
                )
            if assign:
                # Every terrace gets the layer number its evidence gives; the flake's is that of
                # its primary terrace (DESIGN.md: over a hole if any, else the largest), which
                # the catalogue picks.
                for terrace, evidence in terraces:
                    if evidence:
                        out.assignments.append(add_combined(project, flake, terrace, evidence).id)
                after = project.latest_assignment(flake)
                if (
                    before is not None
                    and after is not None
                    and not before.manual
                    and not after.manual
                    and after.layers != before.layers
                ):
                    # A flake seen again reads differently: say why beside the new number.
                    old_model = next(
                        (
                            e.parameters.get("model")
                            for e in project.evidence_of(flake)
                            if any(r.kind == "evidence" and r.id == e.id for r in before.inputs)
                        ),
                        None,
                    )
                    why = describe_change(old_model, model).replace("re-read", "read", 1)
                    if why.startswith("read after"):
                        why = f"read again in {image.path}"
                    project.update(after, reason=f"{why}: {before.layers}L -> {after.layers}L")
    return out


def record_hole(project: Project, image: Image, hole, existing=()) -> tuple[Hole, bool]:
    """Record a hole found in ``image`` (a ``flakebook.imaging.holes.Hole``), unless one of
    ``existing`` (the image's hole records) lies within half its radius: the image surveyed
    again. Returns the record and whether it is new."""
    cx, cy = hole.center_px
    for e in existing:
        if math.hypot(e.center_x_px - cx, e.center_y_px - cy) < 0.5 * hole.radius_px:
            return e, False
    rec = project.add_hole(
        image,
        hole.center_px,
        hole.radius_px,
        radius_um=hole.radius_um,
        radius_err_um=hole.radius_err_um,
        source="detected" if hole.detected else "lattice",
    )
    return rec, True


def contrast_likelihood(
    sample: Sample,
    image: Image,
    calibration: dict | None,
    contrast: dict,
    contrast_err: dict | None,
    *,
    geometry: str = "supported",
    max_layers: int = 15,
    explain: bool = True,
    oxide_grid=None,
):
    """The layer likelihood (``flakebook.optics.layers.layer_likelihood``) of a contrast
    measured in ``image`` of ``sample``, with the calibration values of
    :func:`calibration_values` (or None); returns it and the calibration note. With
    ``oxide_grid`` (:func:`shared_oxide_grid`) the result's ``grid`` holds it per oxide node.
    Reads no project, so it can run in a worker thread."""
    from flakebook.optics.layers import layer_likelihood

    material, substrate, microscope = optics_inputs(sample, image)
    kw = {"geometry": "suspended", "hole": optics_hole(sample)} if geometry == "suspended" else {}
    opts, note = likelihood_options(calibration, substrate)
    lk = layer_likelihood(
        dict(contrast),
        dict(contrast_err or {}) or None,
        material=material,
        microscope=microscope,
        max_layers=max_layers,
        explain=explain,
        oxide_grid=oxide_grid,
        **opts,
        **kw,
    )
    return lk, note


def add_combined(project: Project, flake, terrace, evidence: list[Evidence]) -> Assignment:
    """A computed assignment of a terrace from its evidence (flat prior)."""
    from flakebook.evidence import combine

    post = combine([e.likelihood for e in evidence])
    return project.add_assignment(
        flake,
        int(post.layers),
        terrace_id=terrace.id if terrace is not None else None,
        probability=float(post.probability),
        ambiguous_with=tuple(int(n) for n in post.ambiguous_with),
        posterior=post.posterior,
        method=COMBINED_METHOD,
        inputs=list(evidence),
    )


# ---- recomputing stale records ------------------------------------------------------------


def _recompute_contrast(project: Project, rec: Evidence):
    sample = project.get(Sample, project.get(Flake, rec.flake_id).sample_id)
    image_id = rec.parameters.get("image_id")
    if image_id is None:
        raise InputError("the evidence does not name the image its contrast was measured in")
    img = project.get(Image, image_id)
    grid = shared_oxide_grid(project, sample) if shares_oxide(project, rec) else None
    lk, note = contrast_likelihood(
        sample,
        img,
        calibration_values(project, sample),
        rec.parameters["contrast"],
        rec.parameters.get("contrast_err"),
        geometry=rec.parameters.get("geometry", "supported"),
        max_layers=rec.max_layers,
        oxide_grid=grid,
    )
    from flakebook.pipeline_calibration import model_used

    params = dict(rec.parameters)
    params.pop("grid", None)
    if grid is not None:
        params["grid"] = grid_parameters(lk.grid, oxide_grid_name(sample))
    params["decider"] = lk.decider
    params["calibration"] = note or "none (nominal oxide)"
    params["previous_model"] = rec.parameters.get("model")
    params["model"] = model_used(project, sample)
    # The evidence now depends on the calibration it was read with (and on no other).
    current = calibration_record(project, sample)
    inputs = [r for r in rec.inputs if r.kind != "calibration"]
    if current is not None:
        inputs.append(current)
    return {
        "likelihood": lk.likelihood,
        "inputs": tuple(inputs),
        "parameters": params,
        "reason": contrast_reason(
            params["contrast"],
            params.get("contrast_err") or {},
            params.get("geometry", "supported"),
            format_substrate(sample.substrate),
        ),
    }


def shares_oxide(project: Project, rec: Evidence) -> bool:
    """Whether a contrast evidence record has to be kept on the shared oxide grid: it is kept
    there already, or its terrace also has Si-line evidence (which depends on the same oxide)."""
    from flakebook.pipeline_spectra import SI_METHOD

    if "grid" in rec.parameters:
        return True
    return any(
        e.method == SI_METHOD and e.terrace_id in (rec.terrace_id, None)
        for e in project.evidence_of(rec.flake_id)
    )


def put_contrast_on_oxide_grid(project: Project, flake, terrace_id) -> list[int]:
    """Recompute the terrace's contrast evidence on the sample's shared oxide grid (once Si-line
    evidence joins it), so the two are combined with the oxide marginalised once. Returns the
    ids of the records changed (none where the oxide is taken as exact)."""
    import dataclasses

    fid = flake if isinstance(flake, int) else flake.id
    changed = []
    for rec in project.evidence_of(fid):
        if rec.method != CONTRAST_METHOD or "grid" in rec.parameters:
            continue
        if rec.terrace_id not in (terrace_id, None) or rec.parameters.get("image_id") is None:
            continue
        sample = project.get(Sample, project.get(Flake, fid).sample_id)
        if shared_oxide_grid(project, sample) is None:
            return []
        fields = _recompute_contrast(project, rec)
        project.update(dataclasses.replace(rec, stale=False, **fields))
        changed.append(rec.id)
    return changed


def _recompute_combined(project: Project, rec: Assignment):
    """Combine all the current evidence of the terrace again (contrast, Raman, PL, Si line,
    AFM; the spectrometer offsets marginalised once, flakebook.pipeline_spectra). When the layer
    number changes and this assignment is the one in force, the new number is a new assignment
    saying why ("re-read with the calibration of <date>: 3L -> 4L") and this one stays as
    history, marked ``superseded_by``; otherwise it is brought up to date in place."""
    from flakebook.pipeline_calibration import describe_change
    from flakebook.pipeline_spectra import recompute_combined

    fields = recompute_combined(project, rec)
    if fields["layers"] == rec.layers:
        return fields
    evidence = [project.get(Evidence, ref.id) for ref in fields["inputs"] if ref.kind == "evidence"]
    contrast = [e for e in evidence if "previous_model" in e.parameters or "model" in e.parameters]
    prm = (contrast or evidence)[0].parameters if evidence else {}
    why = describe_change(prm.get("previous_model"), prm.get("model"))
    reason = f"{why}: {rec.layers}L -> {fields['layers']}L"
    later = [
        a
        for a in project.assignments_of(rec.flake_id)
        if a.id > rec.id and a.terrace_id in (rec.terrace_id, None)
    ]
    if later:  # not the assignment in force (a later one, e.g. set by hand, wins)
        return {**fields, "reason": reason}
    new = project.add_assignment(
        rec.flake_id,
        fields["layers"],
        terrace_id=rec.terrace_id,
        probability=fields["probability"],
        ambiguous_with=fields["ambiguous_with"],
        posterior=fields["posterior"],
        method=COMBINED_METHOD,
        inputs=list(evidence),
        reason=reason,
        parameters={**fields.get("parameters", {}), "replaces_assignment": rec.id},
    )
    return {"parameters": {**rec.parameters, "superseded_by": new.id}}


register_recomputer(CONTRAST_METHOD, _recompute_contrast)
register_recomputer(COMBINED_METHOD, _recompute_combined)


# Spectra: fits, their evidence and the combined assignment (their recomputers register on import).
from flakebook.pipeline_spectra import (  # noqa: E402, F401
    AttachedSpectrum,
    add_afm_evidence,
    add_si_evidence,
    assign_flake,
    attach_spectrum,
    calibrate_rules,
    detach_spectrum,
    flake_report,
    refit,
    rule_table_for,
    set_fit_settings,
)
