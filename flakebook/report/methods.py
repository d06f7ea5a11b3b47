"""The methods section of a report, written from what the selected flakes' records actually
used: optical constants and their references, microscope settings and calibrations, peak models
and rule tables, the heat model and its options, the Monte Carlo settings, and the
laser-safety caution. No Qt.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

from flakebook import __version__
from flakebook.store import (
    Flake,
    Project,
    Sample,
    SpectrumFit,
    ThermometryResult,
)
from flakebook.substrate import format_substrate
from flakebook.wording import CONTRAST_BAND_NOTE, CONTRAST_DEFINITION, value_with_error

#: The caution every report carries (RULES: thermometry heats the sample with a laser).
LASER_SAFETY = (
    "Raman thermometry heats the sample with a laser. Follow your institution's laser-safety "
    "rules and local regulations."
)


@dataclass
class MethodsSection:
    """Headed paragraphs and bullet lists: ``parts`` of (heading, paragraphs, bullets)."""

    parts: list[tuple[str, list[str], list[str]]] = field(default_factory=list)
    caution: str = LASER_SAFETY

    def add(self, heading: str, paragraphs: Sequence[str], bullets: Sequence[str] = ()) -> None:
        self.parts.append((heading, list(paragraphs), list(bullets)))


def _optics(samples: list[Sample]) -> list[str]:
    from flakebook.optics.materials import get_material

    out: list[str] = []
    seen: set[str] = set()
    names: list[str] = []
    for s in samples:
        names.append(s.material)
        names.extend(layer.material for layer in s.substrate)
    for name in names:
        if name in seen:
            continue
        seen.add(name)
        try:
            m = get_material(name)
        except Exception as exc:  # an unknown material: say so, never fail the report
            out.append(f"{name}: optical constants not available ({exc})")
            continue
        ref = m.reference or "no reference recorded"
        note = f" ({m.note})" if m.note else ""
        out.append(f"{name}: {ref}{note}")
    return out


def _microscope(project: Project, samples: list[Sample]) -> list[str]:
    out = []
    for s in samples:
        images = project.images_of(s)
        seen = set()
        for im in images:
            key = (im.objective, im.pixel_size_um, im.na_objective, im.na_illumination,
                   im.illumination, tuple(sorted((im.camera or {}).items())))  # fmt: skip
            if key in seen:
                continue
            seen.add(key)
            cam = ", ".join(f"{k} {v}" for k, v in sorted((im.camera or {}).items()))
            out.append(
                f"{s.name}: objective {im.objective or '-'} (NA {im.na_objective or '-'}), "
                f"illumination {im.illumination or '-'} (NA {im.na_illumination or 0:g}), "
                f"{im.pixel_size_um or '-'} µm per pixel" + (f", camera: {cam}" if cam else "")
            )
        for cal in project.calibrations_of(s):
            ox = value_with_error(cal.oxide_nm, cal.oxide_err_nm, "nm")
            scale = ", ".join(
                f"{k} {value_with_error(v, cal.contrast_scale_err.get(k))}"
                for k, v in sorted(cal.contrast_scale.items())
            )
            out.append(
                f"{s.name}: calibration of {(cal.created_at or '')[:10] or 'unknown date'}: "
                f"{cal.method or 'method not recorded'}; oxide {ox}"
                + (f"; contrast scale {scale}" if scale else "")
                + (f"; dark offset {cal.dark_offset}" if cal.dark_offset else "")
            )
    return out


def methods_section(project: Project, flakes: Sequence[Flake]) -> MethodsSection:
    """The methods section for the report of ``flakes`` (what their records used)."""
    sec = MethodsSection()
    ids = {f.id for f in flakes}
    sample_ids = {f.sample_id for f in flakes}
    samples = [s for s in project.samples() if s.id in sample_ids]
    sec.add(
        "Optical contrast and layer number",
        [
            f"The {CONTRAST_DEFINITION}; {CONTRAST_BAND_NOTE}.",
            "Each measured contrast is compared with a coherent transfer-matrix thin-film model "
            "of the flake on its substrate, averaged over the illumination cone; the likelihood "
            f"over N = 1..{project.max_layers} and a 'more' bin is combined with the Raman and "
            "photoluminescence evidence into one posterior (flat prior). A layer number is that "
            "of the flake's primary terrace.",
        ],
        [
            f"{s.name}: {s.material} on {format_substrate(s.substrate)}"
            + (
                f"; holes {s.hole_pattern.diameter_um:g} µm across, {s.hole_pattern.lattice} "
                f"lattice, pitch {s.hole_pattern.pitch_um or '-'} µm, bottom "
                f"{s.hole_pattern.bottom}"
                + (f", depth {s.hole_pattern.depth_nm:g} nm" if s.hole_pattern.depth_nm else "")
                if s.hole_pattern
                else ""
            )
            for s in samples
        ],
    )
    sec.add("Optical constants (published sources)", [], _optics(samples))
    sec.add("Microscope settings and calibration", [], _microscope(project, samples))
    fits = [f for f in project.records(SpectrumFit) if f.flake_id in ids]
    models = sorted(
        {
            (f.settings.get("kind", "-"), f.settings.get("peak_model", "-"),
             f.settings.get("baseline", "-"), str(f.settings.get("laser_nm", "-")),
             f.method, f.flakebook_version)
            for f in fits
        }
    )  # fmt: skip
    sources = sorted(
        {
            e.source
            for fid in ids
            for e in project.evidence_of(fid)
            if e.source and e.parameters.get("spectrum_id") is not None
        }
    )
    sec.add(
        "Spectra: baselines, peak models and rule tables",
        [
            "Raman spectra are calibrated on the Si line at 520.7 cm⁻¹ where it is measured; "
            "cosmic-ray spikes are replaced; the baseline is subtracted and the lines fitted "
            "with the stated model. The rule tables turn positions, separations and ratios into "
            "layer likelihoods."
            if fits
            else "No spectrum of the selected flakes has been fitted."
        ],
        [
            f"{kind} spectra at {laser} nm: {model} lines, {base} baseline ({method}, "
            f"flakebook {ver})"
            for kind, model, base, laser, method, ver in models
        ]
        + [f"rule table: {src}" for src in sources],
    )
    results = [r for r in project.records(ThermometryResult) if r.flake_id in ids and r.kappa_w_mk]
    heat = []
    for r in results:
        opts = dict((r.parameters or {}).get("options", {}))
        d = r.details or {}
        label = project.get(Flake, r.flake_id).label
        opt_text = ", ".join(f"{k} {v}" for k, v in opts.items() if k != "draws")
        heat.append(
            f"{label}: {r.method}; {d.get('heat_model_method', '')}; options: {opt_text}; "
            f"Monte Carlo: {d.get('valid_draws', '-')} of {d.get('draws', opts.get('draws'))} "
            f"draws kept (16-84% interval); source: {r.source}; flakebook "
            f"{r.flakebook_version}"
        )
    sec.add(
        "Raman thermometry: heat model and uncertainty",
        [
            "The temperature coefficient chi_T and power coefficient chi_P of the A1g mode are "
            "weighted straight-line fits of its centre against stage temperature and laser "
            "power; the absorbed fraction comes from the thin-film model of the membrane over "
            "its hole; kappa inverts the heat model of a suspended disk heated by a Gaussian "
            "beam (1/e² intensity radius W), and its interval is the 16-84% range of a Monte "
            "Carlo over every input's uncertainty."
            if results
            else "No thermal-conductivity result among the selected flakes."
        ],
        heat,
    )
    sec.add(
        "Provenance",
        [
            f"Written by flakebook {__version__}. Every computed value in the project carries "
            "its method, inputs, settings, the flakebook version that made it and the published "
            "source of its constants; the flake cards quote them beside each number."
        ],
    )
    return sec
