"""What the views read from the project: browser tree, catalogue rows, overlays, inspector."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np

from flakebook.errors import InputError
from flakebook.store import Appearance, Assignment, Flake, Image, Sample, Terrace
from flakebook.substrate import format_substrate


class Reads:
    """Reads for the browser, the catalogue, the canvas, the inspector and the candidates."""

    def first_image(self, sample_id: int | None = None) -> int | None:
        p = self.project
        samples = [self._get(Sample, sample_id)] if sample_id is not None else p.samples()
        for s in samples:
            images = p.images_of(s)
            if images:
                return images[0].id
        return None

    def has_image(self, image_id: int) -> bool:
        return bool(self.project.records(Image, id=self._r("image", image_id)))

    def has_flake(self, flake_id: int) -> bool:
        return bool(self.project.records(Flake, id=self._r("flake", flake_id)))

    def current_sample(self, image_id: int | None) -> int:
        if image_id is not None and self.has_image(image_id):
            return self._get(Image, image_id).sample_id
        samples = self.project.samples()
        if not samples:
            raise InputError("The project has no sample yet; add one (Edit > New sample).")
        return samples[0].id

    def browser_tree(self) -> list[dict]:
        p = self.project
        cat = {r.flake_id: r for r in p.catalogue()}
        apps_of: dict[int, list] = {}
        for a in p.records(Appearance):
            apps_of.setdefault(a.flake_id, []).append(a)
        out = []
        for s in p.samples():
            images = p.images_of(s)
            names = {im.id: Path(im.path).name for im in images}
            flakes = []
            for f in p.flakes_of(s):
                row = cat.get(f.id)
                flakes.append(
                    {
                        "id": f.id,
                        "label": f.label,
                        "layers": row.layers if row else None,
                        "probability": row.probability if row else None,
                        "stale": row.stale if row else False,
                        "appearances": [
                            (a.image_id, names.get(a.image_id, "?")) for a in apps_of.get(f.id, ())
                        ],
                    }
                )
            out.append(
                {
                    "id": s.id,
                    "name": s.name,
                    "material": s.material,
                    "summary": f"{s.material} on {format_substrate(s.substrate)}"
                    + (f"; holes {s.hole_pattern.diameter_um:g} µm" if s.hole_pattern else ""),
                    "images": [
                        {
                            "id": im.id,
                            "name": names[im.id],
                            "um_per_px": im.pixel_size_um,
                            "path": im.path,
                        }
                        for im in images
                    ],
                    "flakes": flakes,
                }
            )
        return out

    def catalogue_rows(self) -> list[dict]:
        p = self.project
        rows = []
        export = {e["flake_id"]: e for e in p.export_rows()}  # thickness and kappa (INTERFACE.md)
        for r in p.catalogue():
            amb: tuple = ()
            latest = p.latest_assignment(r.flake_id)
            if latest is not None:
                amb = latest.ambiguous_with
            flake = p.get(Flake, r.flake_id)
            ex = export.get(r.label, {})
            rows.append(
                {
                    "id": r.flake_id,
                    "flake_id": r.label,
                    "sample": r.sample,
                    "area_um2": r.area_um2,
                    "layers": r.layers,
                    "probability": r.probability,
                    "ambiguous_with": list(amb),
                    "manual": r.manual,
                    "holes_covered": r.holes_covered,
                    "margin_um": r.margin_um,
                    "thickness_nm": ex.get("thickness_nm"),
                    "kappa_w_mk": ex.get("kappa_w_mk"),
                    "kappa_p16_w_mk": ex.get("kappa_p16_w_mk"),
                    "kappa_p84_w_mk": ex.get("kappa_p84_w_mk"),
                    "tags": list(r.tags),
                    "stale": r.stale,
                    "notes": flake.notes,
                }
            )
        return rows

    def image_info(self, image_id: int) -> dict:
        img = self._get(Image, image_id)
        sample = self.project.get(Sample, img.sample_id)
        r_px = None
        if sample.hole_pattern is not None and img.pixel_size_um:
            r_px = 0.5 * sample.hole_pattern.diameter_um / img.pixel_size_um
        return {
            "name": Path(img.path).name,
            "um_per_px": img.pixel_size_um,
            "default_hole_radius_px": r_px,
            "sample_id": img.sample_id,
        }

    def images_of_flake(self, flake_id: int) -> list[int]:
        return [a.image_id for a in self.project.appearances_of(self._r("flake", flake_id))]

    def flake_label(self, flake_id: int) -> str:
        return self._get(Flake, flake_id).label

    def overlays(self, image_id: int):
        """(outlines, holes) of an image as the canvas draws them (a few queries in all)."""
        from flakebook.gui.canvas import OutlineShape

        p = self.project
        iid = self._r("image", image_id)
        apps = p.records(Appearance, image_id=iid)
        layers_of = {r.flake_id: r.layers for r in p.catalogue()}
        labels = {f.id: f.label for f in p.records(Flake)}
        app_ids = {a.id for a in apps}
        flake_ids = {a.flake_id for a in apps}
        terraces: dict[int, list] = {}
        for t in p.records(Terrace):
            if t.appearance_id in app_ids and len(t.outline_px) >= 3:
                terraces.setdefault(t.appearance_id, []).append(t)
        terrace_layers: dict[int, int] = {}
        for asg in p.records(Assignment):  # id order: later ones win
            if asg.flake_id in flake_ids and asg.terrace_id is not None:
                terrace_layers[asg.terrace_id] = asg.layers
        outlines = [
            OutlineShape(
                a.id,
                a.flake_id,
                labels.get(a.flake_id, "?"),
                a.outline_px,
                layers_of.get(a.flake_id),
                tuple((t.outline_px, terrace_layers.get(t.id)) for t in terraces.get(a.id, ())),
            )
            for a in apps
        ]
        return outlines, self.hole_shapes(iid)

    def hole_shapes(self, image_id: int):
        """The holes of an image as the canvas draws them."""
        from flakebook.gui.canvas import HoleShape

        return [
            HoleShape(h.id, h.center_x_px, h.center_y_px, h.radius_px, h.source != "manual")
            for h in self.project.holes_of(self._r("image", image_id))
        ]

    def flake_details(self, flake_id: int) -> dict:
        """Everything the inspector shows about a flake."""
        p = self.project
        fid = self._r("flake", flake_id)
        flake = p.get(Flake, fid)
        sample = p.get(Sample, flake.sample_id)
        row = next((r for r in p.catalogue(sample) if r.flake_id == fid), None)
        latest = p.latest_assignment(fid)
        tid = p.primary_terrace_id(fid)
        evidence = [e for e in p.evidence_of(fid) if tid is None or e.terrace_id in (tid, None)]
        computed = [
            a for a in p.assignments_of(fid) if not a.manual and a.terrace_id in (tid, None)
        ]
        comp = computed[-1] if computed else None
        report = self._flake_report(fid, evidence)
        contrast, contrast_err, geometry, image_id = {}, {}, "supported", None
        for e in evidence:
            if isinstance(e.parameters.get("contrast"), dict):  # contrast evidence of any source
                contrast = dict(e.parameters.get("contrast") or {})
                contrast_err = dict(e.parameters.get("contrast_err") or {})
                geometry = e.parameters.get("geometry", "supported")
                image_id = e.parameters.get("image_id")
        posterior = None
        if latest is not None and latest.posterior is not None:
            posterior = latest.posterior.tolist()
        elif comp is not None and comp.posterior is not None:
            posterior = comp.posterior.tolist()
        holes = []
        for link, hole in p.holes_covered_by(fid):
            holes.append(
                {
                    "hole_id": hole.id,
                    "label": f"#{hole.id} ({hole.radius_um or 0:.2f} µm)"
                    if hole.radius_um
                    else f"#{hole.id}",
                    "covered_fraction": link.covered_fraction,
                    "fully_covered": link.fully_covered,
                    "margin_um": link.margin_um,
                }
            )
        images = {im.id: Path(im.path).name for im in p.images_of(sample)}
        oxide_err = None
        cals = p.calibrations_of(sample)
        if cals and cals[-1].oxide_err_nm is not None:
            oxide_err = cals[-1].oxide_err_nm
        if image_id is None:
            apps = p.appearances_of(fid)
            image_id = apps[0].image_id if apps else None
        model_key = None
        if contrast and image_id is not None and p.records(Image, id=image_id):
            img = p.get(Image, image_id)
            model_key = (
                sample.id,
                sample.revision,
                img.id,
                img.revision,
                geometry,
                tuple(sorted(contrast.items())),
                tuple(sorted(contrast_err.items())),
                cals[-1].id if cals else None,
            )
        return {
            "id": fid,
            "label": flake.label,
            "sample": sample.name,
            "material": sample.material,
            "sample_id": sample.id,
            "image_id": image_id,
            "geometry": geometry,
            "area_um2": row.area_um2 if row else None,
            "stale": row.stale if row else False,
            "tags": list(flake.tags),
            "notes": flake.notes,
            "status": flake.status,
            "layers": latest.layers if latest else None,
            "probability": latest.probability if latest else None,
            "ambiguous_with": list(latest.ambiguous_with)
            if latest and not latest.manual
            else (list(comp.ambiguous_with) if comp else []),
            "manual": bool(latest and latest.manual),
            "manual_reason": latest.reason if latest and latest.manual else "",
            "evidence_layers": comp.layers if comp else None,
            "evidence_probability": comp.probability if comp else None,
            "posterior": posterior,
            "max_layers": p.max_layers,
            "evidence": self._evidence_rows(evidence, report, sample)
            + (
                [
                    {
                        "method": "manual",
                        "reason": f"{latest.layers}L by {latest.who}: {latest.reason}",
                        "source": "",
                    }
                ]
                if latest is not None and latest.manual
                else []
            )
            + (
                [{"method": "re-read", "reason": comp.reason, "source": ""}]
                if comp is not None and comp.reason
                else []
            ),
            "combined": None
            if report is None
            else {
                "layers": report.posterior.layers,
                "probability": report.posterior.probability,
                "conflicts": [c.text for c in report.conflicts],
            },
            "contrast": contrast,
            "contrast_err": contrast_err,
            "calibration": _calibration_text(p, sample),
            "holes": holes,
            "appearances": [
                (a.image_id, images.get(a.image_id, "?")) for a in p.appearances_of(fid)
            ],
            "oxide_err_nm": oxide_err,
            "model_key": model_key,
            "primary_terrace_id": tid,
            "primary_chosen": flake.primary_terrace_id is not None,
            "terraces": self._terrace_choices(fid),
        }

    def _flake_report(self, fid: int, evidence):
        """The combined report of the evidence shown (flakebook.pipeline_spectra), or None."""
        from flakebook.errors import InputError
        from flakebook.pipeline_spectra import flake_report

        try:
            return flake_report(self.project, fid, evidence)[0]
        except InputError:
            return None

    @staticmethod
    def _evidence_rows(evidence, report, sample) -> list[dict]:
        """Each evidence: its kind (contrast, Raman, PL, Si attenuation, AFM), what it alone
        says, and whether it is part of a conflict."""
        from flakebook.pipeline_spectra import category, evidence_name

        conflicted = set()
        if report is not None:
            for c in report.conflicts:
                conflicted.update((c.a, c.b))
        rows = []
        for i, e in enumerate(evidence):
            contrib = report.contributions[i] if report is not None else None
            name = evidence_name(e)
            rows.append(
                {
                    "method": e.method,
                    "category": category(e),
                    "name": name,
                    "reason": evidence_reason(e, sample),
                    "source": evidence_source(e.source, sample),
                    "stale": e.stale,
                    "layers": contrib.posterior.layers if contrib else None,
                    "probability": contrib.posterior.probability if contrib else None,
                    "conflict": name in conflicted,
                }
            )
        return rows

    def _terrace_choices(self, fid: int) -> list[tuple[int, str]]:
        """(terrace id, text) for each terrace of a flake: label, latest layer number, area."""
        p = self.project
        layers: dict[int, int] = {}
        for a in p.assignments_of(fid):
            if a.terrace_id is not None:
                layers[a.terrace_id] = a.layers
        out = []
        for t in p.terraces_of(fid):
            n = layers.get(t.id)
            area = f", {t.area_um2:.0f} µm²" if t.area_um2 is not None else ""
            lab = t.label or f"terrace {t.id}"
            out.append((t.id, f"{lab} ({'?' if n is None else n}L{area})"))
        return out

    def candidates(self, target_layers: Sequence[int]) -> list[dict]:
        """Flakes ranked by the probability that their layer number is in ``target_layers``."""
        p = self.project
        target = {int(n) for n in target_layers}
        out = []
        for r in p.catalogue():
            latest = p.latest_assignment(r.flake_id)
            if latest is None:
                continue
            if latest.posterior is not None:
                post = np.asarray(latest.posterior, float)
                score = float(sum(post[n - 1] for n in target if 1 <= n <= len(post)))
            else:
                score = 1.0 if latest.layers in target else 0.0
            out.append(
                {
                    "id": r.flake_id,
                    "label": r.label,
                    "layers": latest.layers,
                    "probability": latest.probability,
                    "ambiguous_with": list(latest.ambiguous_with),
                    "score": score,
                    "manual": latest.manual,
                }
            )
        out.sort(key=lambda d: -d["score"])
        return out


def _calibration_text(project, sample) -> str:
    """The sample's calibration in use, in words (oxide ± error, contrast scale, date)."""
    from flakebook.pipeline import calibration_record
    from flakebook.pipeline_calibration import calibration_summary

    return calibration_summary(calibration_record(project, sample))


# ---- evidence in words (DESIGN.md: methods named with their published source, numbers to the
# digits their uncertainty supports) -------------------------------------------------------------


def _short_reference(ident: str, reference: str) -> str:
    """``"Hsu 2019"`` from a data set's identifier (book/material/Author-...) and reference."""
    import re

    author = ident.rsplit("/", 1)[-1].split("-")[0]
    ref = reference or ""
    year = re.search(r"\(((?:18|19|20)\d\d)\)", ref)  # the first reference's year
    head = ref[: year.start()] if year else ref
    # several authors: their names are comma-separated before the title (the journal's
    # volume and pages add one comma more)
    many = head.count(", ") >= 2
    name = f"{author} et al." if many else author
    return f"{name} {year.group(1)}" if year else name


def material_sources(names: Sequence[str]) -> str:
    """The optical-constant data behind a model, short: ``"MoSe2: Hsu 2019, Munkhbat 2022;
    SiO2: Malitson 1965; Si: Green 2008"``."""
    try:
        from flakebook.optics.materials import list_materials

        known = {m.name: m for m in list_materials()}
    except Exception:  # noqa: BLE001 - words only: the window still shows the evidence
        known = {}
    parts = []
    for name in dict.fromkeys(names):
        m = known.get(name)
        if m is None:
            continue
        refs = list(dict.fromkeys(_short_reference(d.ident, d.reference) for d in m.data_sets))
        parts.append(f"{name}: {', '.join(refs)}")
    return "; ".join(parts)


def evidence_source(source: str, sample: Sample) -> str:
    """The published source of a piece of evidence, for people: the contrast model's n,k data
    by author and year instead of the program's internal name for them."""
    from flakebook.pipeline import OPTICS_SOURCE

    if source != OPTICS_SOURCE:
        return source
    layers = [sample.material] + [getattr(layer, "material", "") for layer in sample.substrate]
    data = material_sources([n for n in layers if n])
    return f"thin-film model with the n,k data of {data}" if data else "thin-film model"


def evidence_reason(e, sample: Sample) -> str:
    """The reason of a piece of evidence; a contrast's numbers rounded to their uncertainty."""
    from flakebook.gui.words import value_error
    from flakebook.pipeline import CONTRAST_METHOD

    par = e.parameters or {}
    contrast, err = par.get("contrast"), par.get("contrast_err") or {}
    if e.method != CONTRAST_METHOD or not contrast:
        return e.reason
    parts = [f"{ch} {value_error(float(c), err.get(ch))}" for ch, c in contrast.items()]
    where = "over a hole" if par.get("geometry") == "suspended" else "on the substrate"
    return (
        f"contrast {', '.join(parts)} {where}, against the model of "
        f"{format_substrate(sample.substrate)}"
    )
