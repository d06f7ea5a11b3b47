"""What a campaign report says: the selection of flakes, the summary in plain words, the
catalogue table (numbers rounded as the catalogue shows them), thermal conductivity versus layer
number, a chip map per sample, and one card per flake (layer evidence, spectra fits, holes,
thermometry). No Qt:
:mod:`flakebook.render.report` draws the figures and writes HTML or PDF from this.

The combined layer report of a flake (flakebook.pipeline_spectra.flake_report) is passed in by
the caller as ``combined`` so that this package stays below the pipeline.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from flakebook import __version__
from flakebook.errors import InputError, check_cancel
from flakebook.report.chipmap import ChipMap, chip_map
from flakebook.report.methods import MethodsSection, methods_section
from flakebook.store import (
    Appearance,
    Flake,
    HolePattern,
    Image,
    Project,
    Sample,
    ThermometryResult,
)
from flakebook.wording import (
    count_text,
    layers_text,
    number_text,
    probability_text,
    value_with_error,
)

#: What ``--select`` accepts.
SELECT_HELP = "all, sample:NAME, tag:TAG or thermal"

#: The catalogue table's columns: (key of flakebook export / the catalogue, header).
CATALOGUE_COLUMNS = (
    ("flake_id", "Flake"),
    ("sample", "Sample"),
    ("area_um2", "Area (µm²)"),
    ("layers", "Layers"),
    ("probability", "Probability"),
    ("holes_covered", "Holes covered"),
    ("margin_um", "Margin (µm)"),
    ("thickness_nm", "Thickness (nm)"),
    ("kappa_w_mk", "κ (W/mK)"),
    ("kappa_interval", "κ 16-84% (W/mK)"),
    ("tags", "Tags"),
)


def cell_text(key: str, value: Any, max_layers: int = 15) -> str:
    """A catalogue value as the report shows it (as the window's catalogue rounds it:
    areas, margins and thicknesses to 0.1, probabilities to 2 decimals, kappa to 3 figures)."""
    if value is None or value == "":
        return ""
    if key == "probability":
        return probability_text(value)
    if key in ("area_um2", "margin_um", "thickness_nm"):
        return f"{value:.1f}"
    if key == "kappa_w_mk":
        return f"{value:.3g}"
    if key == "kappa_interval":
        lo, hi = value
        return "" if lo is None or hi is None else f"{lo:.3g}-{hi:.3g}"
    if key == "layers":
        return layers_text(value, max_layers)
    if isinstance(value, list | tuple):
        return ", ".join(str(v) for v in value)
    return str(value)


@dataclass(frozen=True)
class Selection:
    """Which flakes a report covers: ``kind`` all|sample|tag|thermal and its ``value``, or
    ``flakes``: the flakes named in ``labels`` (chosen in the window; :meth:`of_flakes`)."""

    kind: str = "all"
    value: str = ""
    labels: tuple[str, ...] = ()

    @classmethod
    def of_flakes(cls, labels) -> Selection:
        """The flakes with these labels (in the catalogue's order when the report is built)."""
        return cls("flakes", labels=tuple(dict.fromkeys(str(x) for x in labels)))

    @classmethod
    def parse(cls, text: str | None) -> Selection:
        """``all``, ``sample:NAME``, ``tag:TAG`` or ``thermal``; InputError otherwise."""
        text = (text or "all").strip()
        if text in ("all", "thermal"):
            return cls(text)
        kind, sep, value = text.partition(":")
        if sep and kind in ("sample", "tag") and value.strip():
            return cls(kind, value.strip())
        raise InputError(f"--select {text!r} is not a selection; accepted: {SELECT_HELP}")

    def describe(self) -> str:
        if self.kind == "flakes":
            if not self.labels:
                return "no chosen flakes"
            if len(self.labels) == 1:
                return f"the chosen flake {self.labels[0]}"
            return f"{len(self.labels)} chosen flakes ({', '.join(self.labels)})"
        return {
            "all": "all flakes",
            "thermal": "flakes with a thermal-conductivity result",
            "sample": f"the flakes of sample {self.value}",
            "tag": f"the flakes tagged {self.value!r}",
        }[self.kind]

    def flakes(self, project: Project) -> list[Flake]:
        """The selected flakes, in the catalogue's order (by sample, then label)."""
        flakes = sorted(project.records(Flake), key=lambda f: (f.sample_id, f.label))
        if self.kind == "sample":
            sample = project.sample_by_name(self.value)
            if sample is None:
                names = ", ".join(s.name for s in project.samples()) or "none"
                raise InputError(
                    f"--select sample:{self.value}: the project has no such sample; "
                    f"accepted: one of {names}"
                )
            return [f for f in flakes if f.sample_id == sample.id]
        if self.kind == "tag":
            return [f for f in flakes if self.value in f.tags]
        if self.kind == "flakes":
            known = {f.label for f in flakes}
            gone = [x for x in self.labels if x not in known]
            if gone:
                raise InputError(
                    f"the chosen flakes {', '.join(gone)} are not in the project (deleted "
                    "meanwhile?); accepted: labels of flakes in the project"
                )
            wanted = set(self.labels)
            return [f for f in flakes if f.label in wanted]
        if self.kind == "thermal":
            with_kappa = {
                r.flake_id for r in project.records(ThermometryResult) if r.kappa_w_mk is not None
            }
            return [f for f in flakes if f.id in with_kappa]
        return flakes


@dataclass
class EvidenceRow:
    """One piece of layer evidence as the card lists it."""

    name: str
    method: str
    source: str
    reason: str
    alone: str  # what it says alone: "1L, p > 0.99"
    stale: bool = False


@dataclass
class SpectrumEntry:
    """A spectrum of a flake with its latest fit (raw data drawn by render/)."""

    spectrum_id: int
    name: str
    kind: str
    fit_id: int | None
    settings: dict
    peaks: list[dict]
    calibration: dict
    warnings: list[str]
    method: str
    version: str


@dataclass
class ThermalEntry:
    """A thermal-conductivity result and the coefficients it came from."""

    result_id: int
    kappa: str
    interval: str
    rows: list[tuple[str, str]]  # (what, value) of the inputs
    shares: list[tuple[str, str]]
    warnings: list[str]
    method: str
    source: str
    version: str
    series: dict  # details["series"] of the coefficients (points and fits) for omega(T), omega(P)


@dataclass
class FlakeEntry:
    """One flake's card."""

    flake_id: int
    label: str
    sample: str
    material: str
    tags: tuple
    layers: str
    probability: str
    assigned_by: str
    ambiguous: str
    manual_reason: str
    evidence: list[EvidenceRow]
    conflicts: list[str]
    contrast: dict | None  # the primary terrace's contrast evidence parameters, for the figure
    spectra: list[SpectrumEntry]
    holes: list[dict]
    thermal: list[ThermalEntry]
    external: list[str]
    problems: list[str]
    has_image: bool


@dataclass
class ReportContent:
    """Everything a report says, in order; numbers already worded."""

    title: str
    project_file: str
    selection: str
    generated_with: str
    summary: list[str]
    layer_counts: list[tuple[str, int]]
    catalogue_header: list[str]
    catalogue_rows: list[list[str]]
    kappa_rows: list[dict]
    cards: list[FlakeEntry]
    methods: MethodsSection
    problems: list[str] = field(default_factory=list)
    max_layers: int = 15
    #: One chip map per sample the selection touches: (map, the sample's hole pattern or None).
    chip_maps: list[tuple[ChipMap, HolePattern | None]] = field(default_factory=list)

    @property
    def empty(self) -> bool:
        return not self.cards


def _missing_images(project: Project) -> dict[int, str]:
    """image id -> why its pixels cannot be read (missing or changed file, not embedded)."""
    out = {}
    for check in project.check_images():
        if check.status != "ok" and not check.embedded:
            out[check.image_id] = f"{check.path}: the file is {check.status}"
    return out


def _alone(contribution, max_layers: int) -> str:
    post = contribution.posterior
    return f"{layers_text(post.layers, max_layers)}, p {_p_phrase(post.probability)}"


def _p_phrase(p: float) -> str:
    t = probability_text(p)
    return t if t[0] in "<>" else f"= {t}"


def _thermal_entry(rec: ThermometryResult, coeffs: ThermometryResult | None) -> ThermalEntry:
    d = rec.details or {}
    inputs = d.get("inputs", {}) or {}
    depth = value_with_error(inputs.get("hole_depth_nm"), inputs.get("hole_depth_err_nm"), "nm")
    half = None
    if rec.kappa_p16_w_mk is not None and rec.kappa_p84_w_mk is not None:
        half = 0.5 * (rec.kappa_p84_w_mk - rec.kappa_p16_w_mk)
    rows = [
        ("chi_T (A1g temperature coefficient)",
         value_with_error(rec.chi_t_cm1_per_k, rec.chi_t_err_cm1_per_k, "cm⁻¹/K")),
        ("chi_P (power coefficient)",
         value_with_error(rec.chi_p_cm1_per_mw, rec.chi_p_err_cm1_per_mw, "cm⁻¹/mW")),
        ("absorptance at the laser line",
         value_with_error(rec.absorptance, rec.absorptance_err)),
        ("absorptance method", str(inputs.get("absorptance_method", d.get("absorptance_method",
                                                                           "")))),
        ("hole radius", value_with_error(inputs.get("hole_radius_um"),
                                         inputs.get("hole_radius_err_um"), "µm")),
        ("hole depth and bottom", depth + f", {inputs.get('hole_bottom', '-')}"),
        ("beam radius W (1/e² intensity)", value_with_error(
            inputs.get("beam_radius_um"), inputs.get("beam_radius_err_um"), "µm")
         + (f" ({inputs['beam_method']})" if inputs.get("beam_method") else "")),
        ("laser line", number_text(inputs.get("laser_nm")) + " nm"),
        ("thickness", f"{number_text(rec.thickness_nm)} nm ({number_text(rec.layers)} layers x "
                      f"{number_text(rec.layer_spacing_nm)} nm)"),
        ("heat model", str(d.get("heat_model_method", ""))),
        ("Monte Carlo draws", f"{d.get('valid_draws', '-')} of {d.get('draws', '-')} kept"),
    ]  # fmt: skip
    result = d.get("result", {}) or {}
    shares = sorted((result.get("variance_share") or {}).items(), key=lambda kv: -kv[1])
    share_rows = [(k.replace("_", " "), f"{100 * v:.0f}%") for k, v in shares if v >= 0.005]
    warnings = list(result.get("warnings") or inputs.get("warnings") or [])
    series = (coeffs.details or {}).get("series", {}) if coeffs is not None else {}
    if not series:
        series = d.get("series", {}) or {}
    return ThermalEntry(
        result_id=int(rec.id),
        kappa=value_with_error(rec.kappa_w_mk, half, "W/mK"),
        interval=(
            f"{rec.kappa_p16_w_mk:.3g}-{rec.kappa_p84_w_mk:.3g} W/mK" if half is not None else "-"
        ),
        rows=rows,
        shares=share_rows,
        warnings=warnings,
        method=rec.method,
        source=rec.source,
        version=rec.flakebook_version,
        series=series,
    )


def _flake_entry(
    project: Project,
    flake: Flake,
    samples: dict[int, Sample],
    missing: dict[int, str],
    combined: Callable | None,
) -> FlakeEntry:
    nmax = project.max_layers
    sample = samples[flake.sample_id]
    latest = project.latest_assignment(flake)
    problems: list[str] = []
    apps = project.appearances_of(flake)
    image_ids = [a.image_id for a in apps]
    readable = [i for i in image_ids if i not in missing]
    if not apps:
        problems.append("the flake has no outline in any image: no micrograph to show")
    elif not readable:
        problems.extend(
            f"micrograph not shown: {missing[i]} (relink or pack the project)" for i in image_ids
        )
    report, recs = combined(project, flake) if combined is not None else (None, [])
    # combine_report keeps the order of its items: one contribution per evidence record.
    contributions = list(report.contributions) if report else []
    evidence = []
    contrast = None
    for i, rec in enumerate(recs):
        c = contributions[i] if i < len(contributions) else None
        name = c.method if c is not None else rec.method
        evidence.append(
            EvidenceRow(
                name=name,
                method=rec.method,
                source=rec.source,
                reason=rec.reason,
                alone=_alone(c, nmax) if c is not None else "-",
                stale=rec.stale,
            )
        )
        if contrast is None and isinstance(rec.parameters.get("contrast"), dict):
            contrast = dict(rec.parameters)
    if latest is None:
        layers, prob, by, amb = "not assigned", "-", "-", ""
    else:
        layers = layers_text(latest.layers, nmax)
        prob = probability_text(latest.probability) if latest.probability is not None else "-"
        by = "by hand" if latest.manual else "from the evidence"
        amb = ", ".join(layers_text(n, nmax) for n in latest.ambiguous_with)
    spectra = []
    for spec in project.spectra_of(flake):
        if spec.series_id is not None:
            continue
        fits = project.fits_of(spec)
        fit = fits[-1] if fits else None
        spectra.append(
            SpectrumEntry(
                spectrum_id=int(spec.id),
                name=Path(spec.source_path).name if spec.source_path else f"spectrum {spec.id}",
                kind=spec.kind,
                fit_id=None if fit is None else int(fit.id),
                settings=dict(fit.settings) if fit else {},
                peaks=list(fit.peaks) if fit else [],
                calibration=dict(fit.calibration) if fit else {},
                warnings=list(fit.warnings) if fit else [],
                method=fit.method if fit else "",
                version=fit.flakebook_version if fit else "",
            )
        )
    holes = []
    for link, hole in project.holes_covered_by(flake):
        holes.append(
            {
                "hole_id": int(hole.id),
                "index": "-" if hole.lattice_i is None else f"({hole.lattice_i}, {hole.lattice_j})",
                "radius": value_with_error(hole.radius_um, hole.radius_err_um, "µm"),
                "source": hole.source,
                "covered": f"{100 * link.covered_fraction:.0f}%",
                "fully": "yes" if link.fully_covered else "no",
                "margin": "-" if link.margin_um is None else f"{link.margin_um:.1f} µm",
            }
        )
    _series, results = project.thermometry_of(flake)
    coeffs = [r for r in results if r.kappa_w_mk is None]
    thermal = [
        _thermal_entry(r, coeffs[-1] if coeffs else None)
        for r in results
        if r.kappa_w_mk is not None
    ]
    external = [
        f"{number_text(e.kappa_w_mk, 3)} W/mK (16-84%: {number_text(e.kappa_p16_w_mk, 3)}-"
        f"{number_text(e.kappa_p84_w_mk, 3)}), {e.method}; imported from {e.source_file}"
        for e in project.external_results_of(flake)
    ]
    return FlakeEntry(
        flake_id=int(flake.id),
        label=flake.label,
        sample=sample.name,
        material=sample.material,
        tags=flake.tags,
        layers=layers,
        probability=prob,
        assigned_by=by,
        ambiguous=amb,
        manual_reason=latest.reason if latest is not None and latest.manual else "",
        evidence=evidence,
        conflicts=[c.text for c in report.conflicts] if report else [],
        contrast=contrast,
        spectra=spectra,
        holes=holes,
        thermal=thermal,
        external=external,
        problems=problems,
        has_image=bool(readable),
    )


def build_report(
    project: Project,
    selection: Selection | str | None = None,
    *,
    combined: Callable | None = None,
    progress: Callable[[float, str], None] | None = None,
    cancel: threading.Event | None = None,
) -> ReportContent:
    """The content of the campaign report of ``project`` for ``selection``.

    ``combined(project, flake) -> (CombinedReport | None, evidence records)`` gives a flake's
    combined layer report (flakebook.pipeline_spectra.flake_report). ``progress(fraction,
    text)`` hears of each flake gathered; a set ``cancel`` raises Cancelled between flakes
    (INTERFACE.md, "Inside the core")."""
    if not isinstance(selection, Selection):
        selection = Selection.parse(selection)
    nmax = project.max_layers
    samples = {s.id: s for s in project.samples()}
    flakes = selection.flakes(project)
    missing = _missing_images(project)
    problems = [f"image not readable: {why}" for why in missing.values()]
    catalogue = project.export_rows()
    problems.extend(catalogue.problems)
    margins = {r.label: r.margin_um for r in project.catalogue()}
    labels = {f.label for f in flakes}
    rows = [r for r in catalogue if r["flake_id"] in labels]
    cat_rows = []
    for r in rows:
        values = dict(r)
        values["margin_um"] = margins.get(r["flake_id"])
        values["kappa_interval"] = (r.get("kappa_p16_w_mk"), r.get("kappa_p84_w_mk"))
        values["tags"] = list(project.flake_by_label(r["flake_id"]).tags)
        cat_rows.append([cell_text(k, values.get(k), nmax) for k, _h in CATALOGUE_COLUMNS])
    counts: dict[str, int] = {}
    order: dict[str, int] = {}
    for r in rows:
        key = layers_text(r["layers"], nmax) if r["layers"] is not None else "not assigned"
        counts[key] = counts.get(key, 0) + 1
        order[key] = r["layers"] if r["layers"] is not None else 10**6
    layer_counts = sorted(counts.items(), key=lambda kv: order[kv[0]])
    kappa_rows = [
        {
            "flake_id": r["flake_id"],
            "layers": r["layers"],
            "thickness_nm": r["thickness_nm"],
            "kappa_w_mk": r["kappa_w_mk"],
            "kappa_p16_w_mk": r["kappa_p16_w_mk"],
            "kappa_p84_w_mk": r["kappa_p84_w_mk"],
        }
        for r in rows
        if r["kappa_w_mk"] is not None
    ]
    n_images = sum(1 for im in project.records(Image))
    summary = [
        f"{count_text(len(samples), 'sample')} ({', '.join(s.name for s in samples.values())})"
        if samples
        else "The project has no samples yet.",
        f"{count_text(n_images, 'image')}, {count_text(project.count(Flake), 'flake')} in the "
        f"project; this report covers {selection.describe()}: {count_text(len(flakes), 'flake')}.",
    ]
    if layer_counts:
        summary.append(
            "Flakes per layer number: " + ", ".join(f"{k}: {v}" for k, v in layer_counts) + "."
        )
    membranes = sum(1 for r in rows if r["holes_covered"])
    summary.append(
        f"{count_text(membranes, 'flake')} fully {'covers' if membranes == 1 else 'cover'} a "
        f"hole; {count_text(len(kappa_rows), 'flake')} with a thermal conductivity."
    )
    if not flakes:
        summary.append(
            "The selection holds no flakes: there is no catalogue and no flake card to show."
            if project.count(Flake)
            else "The project holds no flakes yet: there is no catalogue and no flake card to show."
        )
    cards = []
    for i, f in enumerate(flakes):
        check_cancel(cancel)
        cards.append(_flake_entry(project, f, samples, missing, combined))
        if progress is not None:
            progress((i + 1) / len(flakes), f"flake {f.label} gathered ({i + 1} of {len(flakes)})")
    check_cancel(cancel)
    chip_maps = [
        (chip_map(project, s), s.hole_pattern) for s in _map_samples(project, selection, flakes)
    ]
    return ReportContent(
        title=f"Campaign report: {project.path.stem}",
        project_file=project.path.name,
        selection=selection.describe(),
        generated_with=f"flakebook {__version__}",
        summary=summary,
        layer_counts=layer_counts,
        catalogue_header=[h for _k, h in CATALOGUE_COLUMNS],
        catalogue_rows=cat_rows,
        kappa_rows=kappa_rows,
        cards=cards,
        methods=methods_section(project, flakes),
        problems=problems,
        max_layers=nmax,
        chip_maps=chip_maps,
    )


def _map_samples(project: Project, selection: Selection, flakes: list[Flake]) -> list[Sample]:
    """The samples whose chip maps the report shows: every sample for ``all``, the named one
    for ``sample:NAME``, else those the selected flakes lie on."""
    samples = project.samples()
    if selection.kind == "all":
        return samples
    if selection.kind == "sample":
        return [s for s in samples if s.name == selection.value]
    on = {f.sample_id for f in flakes}
    return [s for s in samples if s.id in on]


def appearance_for_card(project: Project, flake: Flake, missing: set[int]) -> Appearance | None:
    """The appearance a card shows: the finest pixel size among readable images."""
    best = None
    for a in project.appearances_of(flake):
        if a.image_id in missing:
            continue
        img = project.get(Image, a.image_id)
        key = img.pixel_size_um or float("inf")
        if best is None or key < best[0]:
            best = (key, a)
    return None if best is None else best[1]
